"""Read freegap's run files and report tables into numpy arrays.

Needs only numpy and h5py (Debian: python3-numpy, python3-h5py); nothing to build. Installed with
freegap under ``<prefix>/share/freegap/python`` (the environment module puts that folder on
``PYTHONPATH``). The formats themselves are documented for readers in any language in
``docs/run-file.md`` (run file) and ``docs/install.md`` (this module).

Example::

    import freegap_results as fr

    run = fr.open_run("study.h5")
    for size in run.sizes:
        m2 = size.moments[:, 2]                     # one row per committed, non-failed trial
        print(size.n, m2.mean(), m2.std(ddof=1) / len(m2) ** 0.5)
    tables = fr.read_report_tables("study-report")  # {table: {column: array}}

Only rows of *committed* units are returned (a killed run's other rows are meaningless), and
failed trials are left out of ``moments``, ``smallest``, ``largest`` and ``norm`` but counted in
``failed_count`` with their reasons in ``failure_reasons``, as ``freegap inspect`` does.
"""

import os

import h5py
import numpy as np

__all__ = ["RunFile", "Size", "open_run", "read_report_tables", "FORMAT_MAJOR"]

FORMAT_MAJOR = 1  # the run-file major version this module reads (docs/run-file.md)
RUN_FILE_KIND = "freegap run"
REPORT_FILE_KIND = "freegap report"


def _text(value):
    """An HDF5 string (attribute or element) as str."""
    if isinstance(value, bytes):
        return value.decode("utf-8")
    return str(value)


class Size:
    """One size N of a run: its layout and its committed trials.

    Attributes (numpy arrays are indexed by committed trial in trial order unless stated):
      n, trials, trials_per_unit, units, max_moment, bins -- the layout (ints)
      committed_units  -- bool [units]: which units are committed
      trial_index      -- int [T_c]: trial numbers of the committed trials
      failed           -- bool [T_c]: the trial failed (solver, NaN, overflow)
      failed_count     -- number of committed trials that failed
      failure_reasons  -- {reason: count} over committed failed trials
      moments          -- float [T_ok, K+1]: m_k = (1/N) sum x^k of each non-failed trial
      smallest, largest, norm -- float [T_ok]: extremes and operator norm of non-failed trials
      bin_edges        -- float [bins+1]
      histogram        -- int [bins]: counts summed over committed units
      below, above     -- ints: values below the first edge / at or above the last
      spectra          -- list of float arrays: the kept spectra of committed trials
      spectra_trials   -- int [len(spectra)]: their trial numbers
      estimates        -- float [T_c, E] or None: per-trial estimates (columns: RunFile.estimate_columns)
      estimate_failures -- str [T_c, P] or None
      extremes_only    -- bool: only the extremes and the norm were observed (format 1.5; bins 0)
      certificate      -- float [T_c, 5] or None (extremes_only sizes): Lanczos steps, the
                          residuals of the smallest and largest Ritz pair, their error estimates;
                          NaN for trials of the dense path (docs/run-file.md)
    """

    def __init__(self, group):
        a = group.attrs
        self.n = int(a["n"])
        self.trials = int(a["trials"])
        self.trials_per_unit = int(a["trials_per_unit"])
        self.units = int(a["units"])
        self.max_moment = int(a["max_moment"])
        self.bins = int(a["bins"])
        self.committed_units = np.asarray(group["unit_committed"][...]) == 1
        unit_of_trial = np.arange(self.trials) // self.trials_per_unit
        committed_trial = self.committed_units[unit_of_trial]
        self.trial_index = np.nonzero(committed_trial)[0]
        failed_all = np.asarray(group["failed"][...]) != 0
        self.failed = failed_all[committed_trial]
        self.failed_count = int(self.failed.sum())
        reasons = group["failure_reason"][...]
        self.failure_reasons = {}
        for t in self.trial_index[self.failed]:
            r = _text(reasons[t])
            self.failure_reasons[r] = self.failure_reasons.get(r, 0) + 1
        ok = committed_trial & ~failed_all
        self.moments = np.asarray(group["moments"][...])[ok]
        self.smallest = np.asarray(group["min"][...])[ok]
        self.largest = np.asarray(group["max"][...])[ok]
        self.norm = np.asarray(group["norm"][...])[ok]
        self.bin_edges = np.asarray(group["bin_edges"][...])
        unit_hist = np.asarray(group["unit_histograms"][...])
        self.histogram = unit_hist[self.committed_units].sum(axis=0).astype(np.int64)
        self.below = int(np.asarray(group["unit_below"][...])[self.committed_units].sum())
        self.above = int(np.asarray(group["unit_above"][...])[self.committed_units].sum())
        kept = np.asarray(group["kept_trials"][...]).astype(np.int64)
        lengths = np.asarray(group["spectrum_length"][...])
        spectra = group["spectra"]
        self.spectra, trials = [], []
        for j, t in enumerate(kept):
            if committed_trial[t]:
                self.spectra.append(np.asarray(spectra[j, : int(lengths[j])]))
                trials.append(int(t))
        self.spectra_trials = np.asarray(trials, dtype=np.int64)
        self.extremes_only = int(a.get("extremes_only", 0)) == 1
        self.certificate = None
        if "certificate" in group:
            self.certificate = np.asarray(group["certificate"][...])[committed_trial]
        self.estimates = None
        self.estimate_failures = None
        if "estimates" in group:
            self.estimates = np.asarray(group["estimates"][...])[committed_trial]
            failures = group["estimate_failure"][...]
            self.estimate_failures = np.vectorize(_text, otypes=[object])(failures)[committed_trial]

    @property
    def complete(self):
        """True when every unit of this size is committed."""
        return bool(self.committed_units.all())

    def mean_moment(self, k):
        """(mean, standard error) of m_k over the non-failed committed trials."""
        x = self.moments[:, k]
        if len(x) < 2:
            return float(x.mean()) if len(x) else float("nan"), float("nan")
        return float(x.mean()), float(x.std(ddof=1) / np.sqrt(len(x)))


class RunFile:
    """A freegap run file, read whole into memory.

    Attributes:
      path, tool_version, git_revision, format_version (tuple), job_text, job_hash, expression,
      spectrum ("eigenvalues" or "singular_values"), self_adjoint (bool),
      metadata (dict of str), sizes (list of Size, in the job's order),
      estimate_columns (list of (estimator, estimate, truth); empty without estimators),
      created (str), sessions (list of dicts: started, ended, ranks, hosts, status, ...),
      unit_records (list of dicts: size_index, unit, rank, host, seconds, session, committed_at).
    """

    def __init__(self, path):
        self.path = path
        with h5py.File(path, "r") as f:
            a = f.attrs
            kind = _text(a.get("file_kind", ""))
            if kind != RUN_FILE_KIND:
                raise ValueError("%s is not a freegap run file (file_kind %r)" % (path, kind))
            version = tuple(int(v) for v in a["format_version"])
            if version[0] != FORMAT_MAJOR:
                raise ValueError("%s has run-file format %d.%d; this module reads %d.x"
                                 % (path, version[0], version[1], FORMAT_MAJOR))
            self.format_version = version
            self.tool_version = _text(a["tool_version"])
            self.git_revision = _text(a["git_revision"])
            self.job_text = _text(a["job_text"])
            self.job_hash = _text(a["job_hash"])
            self.expression = _text(a["expression"])
            self.spectrum = _text(a["spectrum"])
            self.self_adjoint = bool(int(a["self_adjoint"]))
            self.metadata = {k: _text(v) for k, v in f["metadata"].attrs.items()} \
                if "metadata" in f else {}
            self.sizes = [Size(f["sizes/%d" % i]) for i in range(int(a["size_count"]))]
            self.estimate_columns = []
            if "estimators" in f:
                g = f["estimators"]
                self.estimate_columns = [
                    (_text(e), _text(s), _text(t))
                    for e, s, t in zip(g["estimator"][...], g["estimate"][...], g["truth"][...])]
            p = f["provenance"]
            self.created = _text(p.attrs.get("created", ""))
            self.sessions = _records(p["sessions"]) if "sessions" in p else []
            self.unit_records = _records(p["units"]) if "units" in p else []

    @property
    def complete(self):
        return all(s.complete for s in self.sizes)


def _records(dataset):
    """A compound dataset as a list of dicts of plain Python values."""
    rows = []
    for row in dataset[...]:
        rows.append({name: (_text(row[name]) if isinstance(row[name], (bytes, str))
                            else row[name].item()) for name in dataset.dtype.names})
    return rows


def open_run(path):
    """Reads a run file (complete, partial or killed) into a RunFile."""
    return RunFile(path)


def read_report_tables(report):
    """The tables of a freegap report: {table name: {column name: numpy array}}.

    `report` is a report directory (its report.h5 is read) or the path of a report.h5. Numeric
    columns are float64 arrays, text columns arrays of str.
    """
    path = os.path.join(report, "report.h5") if os.path.isdir(report) else report
    tables = {}
    with h5py.File(path, "r") as f:
        kind = _text(f.attrs.get("kind", ""))
        if kind != REPORT_FILE_KIND:
            raise ValueError("%s is not a freegap report (kind %r)" % (path, kind))
        for name, group in f["tables"].items():
            columns = {}
            for column, data in group.items():
                values = data[...]
                if data.dtype.kind in ("O", "S"):
                    values = np.array([_text(v) for v in values], dtype=object)
                columns[column] = values
            tables[name] = columns
    return tables
