#!/usr/bin/env python3
"""Reads run files made by freegap with Debian's h5py, by the names docs/run-file.md documents.

Usage: check_run_file.py BUILD_DIR

Runs BUILD_DIR/tests/write_sample_run (the sample run of tests/support/store_sample.hpp) twice:
  1. to the end, then checks every root attribute and every dataset of every size by name and
     shape, and recomputes the values from the sample's formula with numpy;
  2. paused after 3 units with the writer still holding the file open, then reads the live
     file with HDF5_USE_FILE_LOCKING=FALSE (and checks that without it the open is refused).
Exit status 0 when every check passes.
"""
import os

# Must be set before h5py loads HDF5: the library reads it once. It lets this process read the
# live file of check 2 (docs/run-file.md, "Reading a file while it is written").
os.environ["HDF5_USE_FILE_LOCKING"] = "FALSE"

import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402

import hashlib  # noqa: E402
import struct  # noqa: E402

import h5py  # noqa: E402
import numpy as np  # noqa: E402

FAILURES = []


def check(condition, what):
    if not condition:
        FAILURES.append(what)
        print("FAIL:", what)


# The sample run (tests/support/store_sample.hpp): per size N, T, B, K, bins, half width, kept trials.
SIZES = [
    dict(n=6, trials=23, per_unit=4, max_moment=4, bins=10, half=1.02, keep=[0, 3, 5, 9, 22]),
    dict(n=11, trials=10, per_unit=3, max_moment=6, bins=7, half=1.2, keep=[]),
]


def sample_spectrum(n, t):
    """x_i = sin(1 + 0.37 i + 1.3 t) (1 + 0.01 (t mod 7)); a NaN when t mod 17 = 3."""
    i = np.arange(n, dtype=np.float64)
    x = np.sin(1.0 + 0.37 * i + 1.3 * float(t)) * (1.0 + 0.01 * float(t % 7))
    if t % 17 == 3:
        x[t % n] = np.nan
    return x


def fails_without_spectrum(t):
    return t % 13 == 5


def unit_sha256(g, u, B, T, keep):
    """SHA-256 of unit u's content, built from docs/run-file.md ("Checksums") alone."""
    begin, end = u * B, min((u + 1) * B, T)
    out = bytearray()

    def count(k):
        out.extend(struct.pack("<Q", k))

    def text(b):
        count(len(b))
        out.extend(b)

    def numbers(a, dtype):
        a = np.ascontiguousarray(a, dtype=dtype).ravel()
        count(a.size)
        out.extend(a.tobytes())

    text(b"freegap unit, format 1.2")
    numbers(g["moments"][begin:end], "<f8")
    for name in ("min", "max", "norm"):
        numbers(g[name][begin:end], "<f8")
    numbers(g["failed"][begin:end], "<i1")
    reasons = g["failure_reason"][begin:end]
    count(len(reasons))
    for r in reasons:
        text(r if isinstance(r, bytes) else (r or "").encode())
    numbers(g["unit_histograms"][u], "<i8")
    count(int(g["unit_below"][u]))
    count(int(g["unit_above"][u]))
    rows = [j for j, t in enumerate(keep) if begin <= t < end]
    numbers(g["spectra"][rows[0]:rows[-1] + 1] if rows else np.zeros(0), "<f8")
    numbers(g["spectrum_length"][rows[0]:rows[-1] + 1] if rows else np.zeros(0), "<i8")
    numbers(np.zeros(0), "<f8")  # no estimates in the sample run
    count(0)
    return hashlib.sha256(bytes(out)).digest()


def check_size(f, index, size, units_expected_committed):
    """Checks /sizes/<index>; only the first `units_expected_committed` units (all if None)."""
    g = f["sizes/%d" % index]
    n, T, B, K, b = size["n"], size["trials"], size["per_unit"], size["max_moment"], size["bins"]
    U = -(-T // B)
    S = len(size["keep"])
    where = "/sizes/%d" % index
    for name, value in [("n", n), ("trials", T), ("trials_per_unit", B), ("units", U),
                        ("max_moment", K), ("keep_count", S), ("bins", b)]:
        check(int(g.attrs[name]) == value, "%s attribute %s = %r" % (where, name, g.attrs[name]))
    shapes = {
        "bin_edges": (b + 1,), "kept_trials": (S,), "moments": (T, K + 1), "min": (T,),
        "max": (T,), "norm": (T,), "failed": (T,), "failure_reason": (T,),
        "unit_histograms": (U, b), "unit_below": (U,), "unit_above": (U,),
        "unit_committed": (U,), "spectra": (S, n), "spectrum_length": (S,),
        "unit_sha256": (U, 32),
    }
    for name, shape in shapes.items():
        check(name in g and g[name].shape == shape,
              "%s/%s has shape %s" % (where, name, g[name].shape if name in g else None))
    # Chunks never straddle two units (docs/run-file.md, "Why the file survives a kill").
    check(g["moments"].chunks == (min(B, T), K + 1), "%s/moments chunks" % where)
    check(g["unit_histograms"].chunks == (1, b), "%s/unit_histograms chunks" % where)
    # Format 1.2: Fletcher-32 on every chunked dataset except the variable-length strings (and
    # the header's bin_edges and kept_trials, which header_sha256 covers).
    for name in shapes:
        if g[name].chunks is not None and name not in ("failure_reason", "bin_edges",
                                                       "kept_trials"):
            check(g[name].fletcher32, "%s/%s has Fletcher-32" % (where, name))

    edges = g["bin_edges"][:]
    check(edges[0] == -size["half"] and edges[-1] == size["half"], where + " bin_edges ends")
    check(list(g["kept_trials"][:]) == size["keep"], where + " kept_trials")

    committed = g["unit_committed"][:]
    done = U if units_expected_committed is None else units_expected_committed
    check(list(committed) == [1] * done + [0] * (U - done),
          "%s unit_committed = %s" % (where, list(committed)))
    trials = min(done * B, T)  # committed units are a prefix here (written in order)
    for u in range(done):
        check(bytes(g["unit_sha256"][u]) == unit_sha256(g, u, B, T, size["keep"]),
              "%s unit %d: unit_sha256 is the SHA-256 docs/run-file.md describes" % (where, u))

    moments = g["moments"][:trials]
    mins, maxs, norms = g["min"][:trials], g["max"][:trials], g["norm"][:trials]
    failed = g["failed"][:trials]
    reasons = g["failure_reason"].asstr()[:trials] if trials > 0 else []
    counts = np.zeros(b, dtype=np.int64)
    below = above = 0
    for t in range(trials):
        if fails_without_spectrum(t):
            check(failed[t] == 1, "%s trial %d failed" % (where, t))
            check(reasons[t] == "solver stopped after %d sweeps" % (30 + t % 5),
                  "%s trial %d reason %r" % (where, t, reasons[t]))
            continue
        x = sample_spectrum(n, t)
        if np.isnan(x).any():
            check(failed[t] == 1 and reasons[t] != "", "%s trial %d (NaN) failed" % (where, t))
            continue
        check(failed[t] == 0 and reasons[t] == "", "%s trial %d did not fail" % (where, t))
        want = np.array([np.mean(x ** k) for k in range(K + 1)])
        check(np.allclose(moments[t], want, rtol=1e-12, atol=1e-15),
              "%s trial %d moments %s vs %s" % (where, t, moments[t], want))
        check(np.isclose(mins[t], x.min(), rtol=1e-14, atol=0), "%s trial %d min" % (where, t))
        check(np.isclose(maxs[t], x.max(), rtol=1e-14, atol=0), "%s trial %d max" % (where, t))
        check(np.isclose(norms[t], np.abs(x).max(), rtol=1e-14, atol=0),
              "%s trial %d norm" % (where, t))
        # Bin rule (observe.hpp): bin i counts e_i <= x < e_{i+1}; below x < e_0; above x >= e_b.
        slot = np.searchsorted(edges, x, side="right") - 1
        below += int(np.sum(slot < 0))
        above += int(np.sum(slot >= b))
        inside = slot[(slot >= 0) & (slot < b)]
        counts += np.bincount(inside, minlength=b)
    done_units = slice(0, done)
    check(np.array_equal(g["unit_histograms"][done_units].sum(axis=0), counts),
          "%s histogram %s vs %s" % (where, g["unit_histograms"][done_units].sum(axis=0), counts))
    check(int(g["unit_below"][done_units].sum()) == below, where + " below")
    check(int(g["unit_above"][done_units].sum()) == above, where + " above")

    lengths = g["spectrum_length"][:]
    for j, t in enumerate(size["keep"]):
        if t >= trials:
            continue
        if fails_without_spectrum(t):
            check(lengths[j] == 0, "%s kept trial %d has no spectrum" % (where, t))
            continue
        row = g["spectra"][j, : lengths[j]]
        check(lengths[j] == n and np.allclose(row, sample_spectrum(n, t), rtol=1e-14, atol=0,
                                              equal_nan=True),
              "%s kept spectrum of trial %d" % (where, t))


def check_root(f):
    a = f.attrs
    check(a["file_kind"] == "freegap run", "file_kind = %r" % a["file_kind"])
    check(list(a["format_version"]) == [1, 5], "format_version = %r" % a["format_version"])
    check(len(a["header_sha256"]) == 64 and all(c in "0123456789abcdef" for c in a["header_sha256"]),
          "header_sha256 = %r" % a["header_sha256"])
    check(isinstance(a["tool_version"], str) and a["tool_version"] != "", "tool_version")
    check(isinstance(a["git_revision"], str) and a["git_revision"] != "", "git_revision")
    # The revision is looked up at every build (src/revision.cmake), so a run file written by a
    # fresh build names the checkout's HEAD (with "-modified" if tracked files were changed).
    source = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    head = subprocess.run(["git", "rev-parse", "--short=12", "HEAD"], cwd=source,
                          capture_output=True, text=True)
    if head.returncode == 0:
        check(a["git_revision"].split("-")[0] == head.stdout.strip(),
              "git_revision %r is the source's HEAD %s (rebuild if you committed since)"
              % (a["git_revision"], head.stdout.strip()))
    check(a["job_text"].startswith("# sample job"), "job_text")
    check(a["job_canonical"] == "seed=7\nsample\n", "job_canonical")
    check(len(a["job_hash"]) == 64, "job_hash")
    check(a["expression"] == "A + B", "expression")
    check(a["spectrum"] == "eigenvalues", "spectrum")
    check(int(a["self_adjoint"]) == 1, "self_adjoint")
    check(int(a["size_count"]) == 2, "size_count")
    check(dict(f["metadata"].attrs) == {"seed": "7", "job_name": "sample"}, "metadata")
    check(isinstance(f["provenance"].attrs["created"], str), "provenance created")


def check_finished(path):
    with h5py.File(path, "r") as f:
        check_root(f)
        for index, size in enumerate(SIZES):
            check_size(f, index, size, None)
        sessions = f["provenance/sessions"][:]
        check(len(sessions) == 1, "one session")
        check(sessions["status"][0] == b"finished", "session status %r" % sessions["status"][0])
        check(sessions["hosts"][0] == b"sample-host", "session hosts")
        check(int(sessions["ranks"][0]) == 1, "session ranks")
        units = f["provenance/units"][:]
        check(len(units) == 6 + 4, "unit records: %d" % len(units))
        check(list(units["size_index"]) == [0] * 6 + [1] * 4, "unit records size_index")
        check(list(units["unit"]) == list(range(6)) + list(range(4)), "unit records unit")


def check_live(path, tool):
    # The writer and a plain reader run with HDF5's default (locking on); only this process,
    # a monitoring reader, turned it off.
    env = dict(os.environ)
    env.pop("HDF5_USE_FILE_LOCKING", None)
    writer = subprocess.Popen([tool, "--out", path, "--stop-after", "3"],
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True, env=env)
    try:
        line = writer.stdout.readline().strip()
        check(line == "ready", "writer said %r" % line)
        # The writer's lock refuses a reader that keeps locking on.
        locked = subprocess.run(
            [sys.executable, "-c", "import h5py, sys; h5py.File(sys.argv[1], 'r')", path],
            env=env, capture_output=True, text=True)
        check(locked.returncode != 0 and "unable to lock file" in locked.stderr,
              "a locking reader of the live file was refused (rc %d)" % locked.returncode)
        with h5py.File(path, "r") as f:
            check_root(f)
            check_size(f, 0, SIZES[0], 3)
            check_size(f, 1, SIZES[1], 0)
            sessions = f["provenance/sessions"][:]
            check(len(sessions) == 1 and sessions["status"][0] == b"running",
                  "live session is running")
    finally:
        out, _ = writer.communicate(input="go\n", timeout=120)  # let it finish
    check(writer.returncode == 0 and out.strip() == "done", "writer finished: %r" % out)
    check_finished(path)


def main():
    build = sys.argv[1]
    tool = os.path.join(build, "tests", "write_sample_run")
    with tempfile.TemporaryDirectory() as tmp:
        finished = os.path.join(tmp, "finished.h5")
        subprocess.run([tool, "--out", finished], check=True, stdout=subprocess.DEVNULL)
        check_finished(finished)
        check_live(os.path.join(tmp, "live.h5"), tool)
    if FAILURES:
        print("%d check(s) failed" % len(FAILURES))
        return 1
    print("all run file checks passed")
    return 0


if __name__ == "__main__":
    sys.exit(main())
