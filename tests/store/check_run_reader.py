#!/usr/bin/env python3
"""A run file can be read while `freegap run` writes it (docs/run-file.md, "Reading a file while it is written").

Usage: check_run_reader.py BUILD_DIR

Starts a run in the background, waits until its file exists with at least one committed unit,
and while the writer is still running:
  - opens it with h5py under HDF5_USE_FILE_LOCKING=FALSE and reads the documented root
    attributes, /metadata, and per size the documented attributes and datasets by name: shapes,
    and for committed units only, moments (m_0 = 1), min ≤ max, norm = max(|min|, |max|),
    unit histogram totals (= N × trials of the unit), kept spectra (ascending; their ends are
    min and max; their moments are the stored moments);
  - runs `freegap inspect` with HDF5_USE_FILE_LOCKING=FALSE (exit 0, "incomplete"), and without
    it (refused while the writer holds the lock, with the documented message, exit 2);
then lets the run finish and checks the rows read live are unchanged in the finished file.
"""
import os
import signal
import re
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402  (sets HDF5_USE_FILE_LOCKING=FALSE for this process)

import h5py  # noqa: E402
import numpy as np  # noqa: E402

# A scenario of our own: a crystal's two-band hopping (a real ±1 sign matrix R, scaled) on top
# of a uniform band of on-site energies D.
JOB = """\
name = "banded crystal with sign disorder"
seed = 2718
sizes = [90, 180]
trials = {trials}
expression = "D + 0.5 R"

[matrices.D]
ensemble = "diagonal"
law = "uniform"
low = -1.0
high = 3.0

[matrices.R]
ensemble = "wigner_rademacher"

[observe]
bins = 64
range = [-3.0, 5.0]
max_moment = 5
keep_spectra = 6

[run]
trials_per_unit = 4
"""
SIZES = [90, 180]
BINS, MAX_MOMENT, KEEP = 64, 5, 6


def read_live(c, path):
    """Reads every documented object; returns {(size, unit): rows} of the committed units."""
    seen = {}
    with h5py.File(path, "r") as f:
        c.equal(f.attrs["file_kind"], "freegap run", "root file_kind")
        c.equal(list(f.attrs["format_version"]), [1, 5], "root format_version [1, 5] (docs/run-file.md)")
        for name in ("tool_version", "git_revision", "job_text", "job_canonical"):
            c.check(isinstance(f.attrs[name], str) and f.attrs[name] != "", "root %s is a non-empty string" % name)
        c.check(re.fullmatch(r"[0-9a-f]{64}", f.attrs["job_hash"]) is not None, "root job_hash is 64 hex digits")
        c.equal(f.attrs["expression"], "D + 0.5 R", "root expression")
        c.equal(f.attrs["spectrum"], "eigenvalues", "root spectrum")
        c.equal(int(f.attrs["self_adjoint"]), 1, "root self_adjoint")
        c.equal(int(f.attrs["size_count"]), 2, "root size_count")
        c.check("banded crystal" in f.attrs["job_text"], "root job_text is the job file")
        c.equal(f["metadata"].attrs["seed"], "2718", "/metadata seed")
        c.equal(f["metadata"].attrs["job_name"], "banded crystal with sign disorder", "/metadata job_name")
        c.check("created" in f["provenance"].attrs, "/provenance has the created attribute")
        c.check(len(f["provenance/sessions"]) >= 1, "/provenance/sessions has the live session")
        committed_total = 0
        for i, n in enumerate(SIZES):
            g = f["sizes/%d" % i]
            T, B = int(g.attrs["trials"]), int(g.attrs["trials_per_unit"])
            U = int(g.attrs["units"])
            c.equal((int(g.attrs["n"]), B, U, int(g.attrs["max_moment"]), int(g.attrs["keep_count"]), int(g.attrs["bins"])),
                    (n, 4, -(-T // B), MAX_MOMENT, KEEP, BINS), "/sizes/%d attributes n, trials_per_unit, units, max_moment, keep_count, bins" % i)
            shapes = {"bin_edges": (BINS + 1,), "kept_trials": (KEEP,), "moments": (T, MAX_MOMENT + 1),
                      "min": (T,), "max": (T,), "norm": (T,), "failed": (T,), "failure_reason": (T,),
                      "unit_histograms": (U, BINS), "unit_below": (U,), "unit_above": (U,),
                      "unit_committed": (U,), "spectra": (KEEP, n), "spectrum_length": (KEEP,)}
            c.check(all(g[k].shape == s for k, s in shapes.items()), "/sizes/%d: every documented dataset with its shape" % i,
                    {k: g[k].shape for k in shapes if k in g})
            edges = g["bin_edges"][:]
            c.check(np.allclose(edges, np.linspace(-3.0, 5.0, BINS + 1), rtol=0, atol=1e-12),
                    "/sizes/%d bin_edges: 64 bins over [-3, 5]" % i)
            kept = [int(t) for t in g["kept_trials"][:]]
            c.equal(kept, list(range(KEEP)), "/sizes/%d kept_trials are the first 6 trials" % i)
            committed = np.nonzero(g["unit_committed"][:] == 1)[0]
            committed_total += committed.size
            for u in committed:
                rows = slice(u * B, min((u + 1) * B, T))
                m = g["moments"][rows]
                lo, hi, nm = g["min"][rows], g["max"][rows], g["norm"][rows]
                failed = g["failed"][rows]
                reasons = g["failure_reason"].asstr()[rows]
                hist = g["unit_histograms"][u]
                total = int(hist.sum() + g["unit_below"][u] + g["unit_above"][u])
                ok = (np.all(failed == 0) and all(r == "" for r in reasons) and np.all(m[:, 0] == 1.0)
                      and np.all(np.isfinite(m)) and np.all(lo <= hi)
                      and np.allclose(nm, np.maximum(np.abs(lo), np.abs(hi)), rtol=1e-15, atol=0)
                      and total == n * (rows.stop - rows.start))
                c.check(ok, "/sizes/%d unit %d (committed): rows consistent, histogram holds N x trials values" % (i, u))
                seen[(i, int(u))] = (m.copy(), lo.copy(), hi.copy(), hist.copy())
            # Kept spectra of committed units: ascending, full length, ends = min/max, moments match.
            length = g["spectrum_length"][:]
            for j, t in enumerate(kept):
                if g["unit_committed"][t // B] != 1:
                    continue
                x = g["spectra"][j]
                mom = np.array([np.mean(x ** k) for k in range(MAX_MOMENT + 1)])
                c.check(length[j] == n and np.all(np.diff(x) >= 0) and x[0] == g["min"][t] and x[-1] == g["max"][t]
                        and np.allclose(mom, g["moments"][t], rtol=1e-10, atol=1e-12),
                        "/sizes/%d kept spectrum of trial %d: ascending, ends = min/max, moments = stored" % (i, t))
        c.check(committed_total >= 1, "the live file has %d committed unit(s)" % committed_total)
    return seen


def attempt(c, exe, d, trials):
    rh.write(os.path.join(d, "crystal.toml"), JOB.format(trials=trials))
    out = os.path.join(d, "crystal.h5")
    if os.path.exists(out):
        os.remove(out)
    proc = rh.start(rh.command(exe, ["run", "crystal.toml", "--quiet"]), d)
    state = rh.wait_until(lambda: (lambda s: s if s and s[0] >= 1 else None)(rh.committed_state(out)),
                          timeout=rh.RUN_TIMEOUT, interval=0.01)
    print("  -- run in progress: %s units committed" % (state,))
    live = proc.poll() is None and state is not None and state[0] < state[1]
    if not live:
        rh.reap(proc)
        return None
    # Freeze the writer (SIGSTOP) so it stays live, holding its file open and its lock, for
    # every read below; it continues (SIGCONT) after them. Without this the run could finish
    # between a read and the next, and the checks would race it.
    os.kill(proc.pid, signal.SIGSTOP)
    state = rh.committed_state(out)
    if proc.poll() is not None or state is None or state[0] >= state[1]:
        os.kill(proc.pid, signal.SIGCONT)
        rh.reap(proc)
        return None
    # docs/run-file.md: a reader of a live file sees it "as of some earlier flush; that is consistent
    # for committed units but not guaranteed in general". An HDF5 error from a read that raced a
    # flush is therefore retried (and printed); the checks themselves are never retried.
    seen = None
    for tries in range(3):
        try:
            seen = read_live(c, out)
            break
        except Exception as e:  # noqa: BLE001
            # Frozen inside a flush: let the writer finish it, freeze it again, read again.
            print("  -- live read raced a flush (%s: %s); reading again" % (type(e).__name__, e))
            os.kill(proc.pid, signal.SIGCONT)
            time.sleep(0.02)
            os.kill(proc.pid, signal.SIGSTOP)
    c.check(seen is not None, "the live file could be read (3 tries)")
    seen = seen or {}
    p_open = rh.run([exe, "inspect", out], d, env=rh.child_env(file_locking=False))
    p_locked = rh.run([exe, "inspect", out], d, env=rh.child_env())
    os.kill(proc.pid, signal.SIGCONT)
    c.equal(p_open.returncode, 0, "inspect of the live file with HDF5_USE_FILE_LOCKING=FALSE exits 0")
    c.check(re.search(r"^status:\s+incomplete", p_open.stdout, re.M) is not None,
            "inspect of the live file says incomplete", p_open.stdout + p_open.stderr)
    c.check(re.search(r"^session 0:\s+\S+ \.\. \?, 1 rank\(s\), running$", p_open.stdout, re.M) is not None,
            "inspect shows the live session as running", p_open.stdout)
    c.equal(p_locked.returncode, rh.EXIT_BAD_INPUT, "inspect of the live file with locking (default) exits 2")
    c.equal(p_locked.stderr,
            "freegap: run file '%s' is open in another process (HDF5 could not lock it); wait for that run "
            "to finish, or set HDF5_USE_FILE_LOCKING=FALSE to read it while it is written\n" % out,
            "inspect with locking says the file is open in another process")
    rc, _, err = rh.reap(proc)
    c.equal(rc, 0, "the run finishes with exit 0 after being read")
    return seen, out


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("reading a run file while it is written")
    with rh.WorkDir("reader") as d:
        result = None
        for trials in (48, 96, 192):  # longer if a loaded machine finished before the reads
            result = attempt(c, exe, d, trials)
            if result is not None:
                break
            print("  -- the run ended before the live reads finished; again with %d trials" % (trials * 2))
        if not c.check(result is not None, "the run was still live while read"):
            c.finish()
        seen, out = result
        with h5py.File(out, "r") as f:
            same = True
            for (i, u), (m, lo, hi, hist) in seen.items():
                g = f["sizes/%d" % i]
                B, T = int(g.attrs["trials_per_unit"]), int(g.attrs["trials"])
                rows = slice(u * B, min((u + 1) * B, T))
                same &= (np.array_equal(g["moments"][rows], m) and np.array_equal(g["min"][rows], lo)
                         and np.array_equal(g["max"][rows], hi) and np.array_equal(g["unit_histograms"][u], hist))
            c.check(same and len(seen) >= 1, "the %d unit(s) read live are unchanged in the finished file" % len(seen))
            c.check(all(bool(np.all(f["sizes/%d/unit_committed" % i][:] == 1)) for i in range(2)),
                    "the finished file has every unit committed")
        p = rh.run([exe, "inspect", out], d)
        c.check(p.returncode == 0 and re.search(r"^status:\s+complete$", p.stdout, re.M) is not None,
                "inspect of the finished file (default locking): complete", p.stdout + p.stderr)
    c.finish()


if __name__ == "__main__":
    main()
