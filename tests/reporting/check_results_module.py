#!/usr/bin/env python3
"""The Python reader (analysis/freegap_results.py) agrees with `freegap inspect` on every example
job's run file, and reads a report's tables (issue 21, item 5).

Usage: check_results_module.py BUILD_DIR

Every jobs/*.toml is run as written except for its size ladder and trial counts, cut to the two
smallest sizes and at most 8 trials (12 for one job run on 2 ranks), so the whole check stays
within a minute; the model, observations, kept spectra and estimators are the job's own. Then for
each run file the module's numbers are compared with what `freegap inspect --moments` prints:
  - job hash, expression and spectrum kind;
  - per size: N, committed units / units, committed trials / trials, failed trials, kept spectra;
  - per size: the mean of every moment m_k and its standard error, the mean smallest and largest
    value and the mean operator norm with its standard error, to the 6 decimals inspect prints;
  - the number of writer sessions.
The report tables are checked against the CSV files of the same report (same numbers, same
columns).
"""
import csv
import glob
import math
import os
import re
import shutil
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "support"))
sys.path.insert(0, os.path.join(HERE, "..", "..", "analysis"))
import runhelp as rh  # noqa: E402

import freegap_results as fr  # noqa: E402

JOBS = os.path.abspath(os.path.join(HERE, "..", "..", "jobs"))


def cut(text):
    """The job with its two smallest sizes and at most 8 trials (per-size lists cut alike)."""
    def sizes(m):
        values = [int(v) for v in re.findall(r"\d+", m.group(1))]
        return "sizes = [%s]" % ", ".join(str(v) for v in values[:2])

    def trials(m):
        values = [min(8, int(v)) for v in re.findall(r"\d+", m.group(1))]
        if m.group(1).strip().startswith("["):
            return "trials = [%s]" % ", ".join(str(v) for v in values[:2])
        return "trials = %d" % values[0]

    text = re.sub(r"^sizes\s*=\s*(\[[^\]]*\])", sizes, text, count=1, flags=re.M)
    text = re.sub(r"^trials\s*=\s*(\[[^\]]*\]|\d+)", trials, text, count=1, flags=re.M)
    return text


def parse_inspect(out):
    """What `freegap inspect --moments` prints, as numbers."""
    info = {"sizes": {}, "moments": {}}
    info["hash"] = re.search(r"^job hash:\s+(\S+)", out, re.M).group(1)
    m = re.search(r"^expression: (.*) \((self-adjoint|not self-adjoint); (\S+)\)", out, re.M)
    info["expression"], info["spectrum"] = m.group(1), m.group(3)
    for m in re.finditer(r"^\s+(\d+)\s+(\d+)/(\d+)\s+(\d+)/(\d+)\s+(\d+)\s+(\d+)", out, re.M):
        info["sizes"][int(m.group(1))] = tuple(int(m.group(i)) for i in range(2, 8))
    info["sessions"] = len(re.findall(r"^session \d+:", out, re.M))
    for block in re.finditer(r"^N = (\d+) \((\d+) trials\):\n((?:  .*\n)+)", out, re.M):
        n = int(block.group(1))
        moments = {int(k): (float(a), float(b)) for k, a, b in
                   re.findall(r"m_(\d+)\s+(\S+) \+- (\S+)", block.group(3))}
        e = re.search(r"smallest\s+(\S+), largest\s+(\S+), operator norm (\S+) \+- (\S+)", block.group(3))
        info["moments"][n] = (int(block.group(2)), moments, tuple(float(v) for v in e.groups()))
    return info


def close(a, b, what, c):
    """Equal to the 6 decimals inspect prints (NaN matches NaN)."""
    if math.isnan(a) and math.isnan(b):
        return c.check(True, what)
    return c.check(abs(a - b) <= 5.1e-7 + 1e-9 * abs(b), what, "module %r, inspect %r" % (a, b))


def compare(c, exe, name, path, d):
    r = rh.run([exe, "inspect", path, "--moments"], d)
    if not c.check(r.returncode == 0, "%s: inspect runs" % name, r.stderr):
        return
    want = parse_inspect(r.stdout)
    run = fr.open_run(path)
    c.equal(run.job_hash, want["hash"], "%s: job hash" % name)
    c.equal((run.expression, run.spectrum), (want["expression"], want["spectrum"]),
            "%s: expression and spectrum" % name)
    c.equal(len(run.sessions), want["sessions"], "%s: sessions" % name)
    for s in run.sizes:
        got = (int(s.committed_units.sum()), s.units, len(s.trial_index), s.trials, s.failed_count,
               len(s.spectra))
        c.equal(got, want["sizes"].get(s.n), "%s N=%d: units, trials, failed, kept spectra" % (name, s.n))
        count, moments, extremes = want["moments"][s.n]
        c.equal(len(s.moments), count, "%s N=%d: non-failed trials" % (name, s.n))
        for k, (mean, se) in moments.items():
            m, e = s.mean_moment(k)
            close(m, mean, "%s N=%d: mean m_%d" % (name, s.n, k), c)
            close(e, se, "%s N=%d: standard error of m_%d" % (name, s.n, k), c)
        norm_se = s.norm.std(ddof=1) / math.sqrt(len(s.norm)) if len(s.norm) > 1 else float("nan")
        for got_v, want_v, what in zip((s.smallest.mean(), s.largest.mean(), s.norm.mean(), norm_se),
                                       extremes, ("smallest", "largest", "norm", "norm's SE")):
            close(float(got_v), want_v, "%s N=%d: mean %s" % (name, s.n, what), c)
        if s.spectra:
            ok = all(len(v) in (0, s.n) for v in s.spectra)
            c.check(ok, "%s N=%d: kept spectra have N values" % (name, s.n))


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("Python reader against freegap inspect")
    with rh.WorkDir("pyreader") as d:
        shutil.copytree(os.path.join(JOBS, "estimators"), os.path.join(d, "estimators"))
        shutil.copytree(os.path.join(JOBS, "data"), os.path.join(d, "data"))  # matrix files
        jobs = sorted(glob.glob(os.path.join(JOBS, "*.toml")))
        c.check(len(jobs) >= 5, "the example jobs are found (%d)" % len(jobs))
        files = {}
        for i, job in enumerate(jobs):
            name = os.path.basename(job)
            with open(job) as f:
                text = cut(f.read())
            local = rh.write(os.path.join(d, name), text)
            out = os.path.join(d, name.replace(".toml", ".h5"))
            ranks = 2 if i == 0 else None
            r = rh.run(rh.command(exe, ["run", local, "-o", out, "--quiet"], ranks), d)
            if c.check(r.returncode == 0, "%s: runs" % name, r.stderr):
                files[name] = out
        for name, out in files.items():
            compare(c, exe, name, out, d)

        # A report's tables read through the module equal its CSV files.
        first = next(iter(files.values()))
        r = rh.run([exe, "report", first, "-o", "rep", "--no-figures"], d)
        if c.check(r.returncode == 0, "report runs", r.stderr):
            tables = fr.read_report_tables(os.path.join(d, "rep"))
            c.check("sizes" in tables, "the report's tables include sizes")
            for name, columns in tables.items():
                path = os.path.join(d, "rep", name + ".csv")
                if not os.path.exists(path):
                    continue
                with open(path) as f:
                    rows = list(csv.DictReader(f))
                c.equal(sorted(columns), sorted(rows[0].keys()) if rows else sorted(columns),
                        "table %s: the same columns as %s.csv" % (name, name))
                for col, values in columns.items():
                    if values.dtype == object or not rows:
                        continue
                    csv_values = [float(row[col]) if row[col] not in ("", "nan") else math.nan
                                  for row in rows]
                    same = all((math.isnan(a) and math.isnan(b)) or abs(a - b) <= 1e-9 * max(1, abs(b))
                               for a, b in zip(values, csv_values))
                    c.check(same and len(values) == len(csv_values),
                            "table %s column %s equals the CSV" % (name, col))
        try:
            fr.open_run(os.path.join(d, "estimators", "second_moment.py"))
            c.check(False, "a file that is not a run file is refused")
        except (OSError, ValueError):
            c.check(True, "a file that is not a run file is refused")
    c.finish()


if __name__ == "__main__":
    main()
