#!/usr/bin/env python3
"""Estimators ride along with a run (docs/plugins.md).

Usage: check_estimators.py BUILD_DIR

One job with six estimators — the built-in operator norm, the test plug-in library
(tests/estimate/plugin.c, ABI version 1), the same estimates through the test command
(estimate_command.c), a plug-in that segfaults and a command that sleeps past its timeout on
trials ≡ 1 (mod 3), and a version-2 plug-in that reads each trial's matrix
(tests/estimate/matrix_plugin.c) — run
as a plain process and under mpirun with 1 and 2 ranks, and once stopped by SIGUSR1 and resumed.
Checks:
  - every run exits 0 (faults never take the run down);
  - /estimators and every size's estimates and estimate_failure are identical in all files
    (NaN where a value failed), and the files are identical outside /provenance (h5diff);
  - the library's and the command's estimates equal numpy's max and mean of squares of the kept
    spectra (every trial keeps its spectrum), to the last bit for the library (binary transport)
    and to %.17g round trip for the command (text transport);
  - the faulty estimators record exactly the documented reasons on exactly trials ≡ 1 (mod 3),
    and `freegap inspect` counts them per size and estimator;
  - the matrix reader received N × N real symmetric matrices agreeing with the kept spectra
    (trace, Frobenius norm; their checksums are among the values identical in every file);
  - a missing library, a library without the entry point and one with the wrong ABI version are
    refused before the run: exit 2, the documented message, no run file.
"""
import os
import signal
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

import h5py  # noqa: E402
import numpy as np  # noqa: E402

# A scenario of our own: a two-level population of receiver gains T observed through a real
# sample covariance W of twice as many snapshots as channels, S = T W T.
JOB = """\
name = "receiver gains"
seed = 77
sizes = [16, 32]
trials = 6
expression = "T W T"

[matrices.T]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [2.0, 0.5]]

[matrices.W]
ensemble = "wishart_real"
ratio = 0.5

[observe]
bins = 20
keep_spectra = 6

[run]
trials_per_unit = 2

[[estimator]]
name = "norm"
builtin = "operator_norm"
[estimator.truth]
norm = "limit_norm"

[[estimator]]
name = "lib"
library = "{plugins}/libtest_plugin_ok.so"
[estimator.parameters]
note = "test"
[estimator.truth]
top = "limit_norm"
mean_square = "limit_moment:2"

[[estimator]]
name = "cmd"
command = ["{plugins}/estimate_command", "ok"]
[estimator.truth]
top = "limit_norm"
mean_square = "limit_moment:2"

[[estimator]]
name = "crashy"
library = "{plugins}/libtest_plugin_{crash}.so"
timeout = 5
[estimator.truth]
top = "none"
mean_square = "none"

[[estimator]]
name = "slow"
command = ["{plugins}/estimate_command", "sleep"]
timeout = {slow_timeout}
[estimator.truth]
top = "none"
mean_square = "none"

[[estimator]]
name = "probe"
library = "{plugins}/libtest_plugin_matrix.so"
[estimator.truth]
abi_seen = "none"
checksum = "none"
cols = "none"
entry_01_im = "none"
entry_01_re = "none"
entry_10_im = "none"
entry_10_re = "none"
frobenius_square = "none"
is_complex = "none"
rows = "none"
trace = "none"
"""

# The probe's columns (sorted estimate names) after the first nine.
PROBE = {name: 9 + k for k, name in enumerate(
    ["abi_seen", "checksum", "cols", "entry_01_im", "entry_01_re", "entry_10_im", "entry_10_re",
     "frobenius_square", "is_complex", "rows", "trace"])}

CRASH = "plug-in crashed: signal 11 (SIGSEGV)"
# The slow command sleeps 30 s on trials ≡ 1 (mod 3) and answers at once on the others; its
# timeout is 0.5 s, times FREEGAP_TEST_TIME_SCALE when that is set (tests/run_sanitized.sh sets
# 10: under the sanitizers an instrumented command takes longer than 0.5 s just to start).
TIME_SCALE = float(os.environ.get("FREEGAP_TEST_TIME_SCALE", "1"))
SLOW_TIMEOUT = "%g" % (0.5 * TIME_SCALE)
SLOW = "command did not finish within the timeout of %s s; it was killed" % SLOW_TIMEOUT


def read(path):
    with h5py.File(path, "r") as f:
        head = {k: [x.decode() for x in f["estimators/" + k][:]]
                for k in ("estimator", "estimate", "truth")}
        sizes = []
        for i in range(int(f.attrs["size_count"])):
            g = f["sizes/%d" % i]
            sizes.append({
                "estimates": g["estimates"][:],
                "failure": [[x.decode() for x in row] for row in g["estimate_failure"][:]],
                "spectra": g["spectra"][:],
                "committed": g["unit_committed"][:],
            })
        return head, sizes, list(f.attrs["format_version"])


def main():
    exe = rh.freegap_exe(sys.argv)
    plugins = os.path.join(os.path.abspath(sys.argv[1]), "tests", "estimate")
    c = rh.Checks("estimators ride along: ranks, resume, faults, refusals")
    with rh.WorkDir("estimators") as d:
        job = rh.write(os.path.join(d, "job.toml"), JOB.format(plugins=plugins, crash="segfault",
                                                               slow_timeout=SLOW_TIMEOUT))
        files = {}
        for way, ranks in [("plain", None), ("np1", 1), ("np2", 2)]:
            out = os.path.join(d, way + ".h5")
            r = rh.run(rh.command(exe, ["run", job, "-q", "-o", out], ranks), d)
            c.equal(r.returncode, 0, "%s: exit 0 despite the faulty estimators" % way)
            if r.returncode != 0:
                print(r.stderr)
            files[way] = out

        # Stopped by SIGUSR1 after the first committed unit, then resumed.
        resumed = os.path.join(d, "resumed.h5")
        p = rh.start(rh.command(exe, ["run", job, "-q", "-o", resumed]), d)
        deadline = time.time() + 60
        while time.time() < deadline:
            st = rh.committed_state(resumed) if os.path.exists(resumed) else None
            if st and st[0] >= 1:
                break
            time.sleep(0.05)
        os.kill(p.pid, signal.SIGUSR1)
        rc, _, err = rh.reap(p)
        st = rh.committed_state(resumed)
        c.check(rc == rh.EXIT_RESUMABLE and st is not None and st[0] < st[1],
                "stopped part-way by SIGUSR1 (exit 3, %s units committed)" % (st,), err)
        r = rh.run(rh.command(exe, ["run", job, "-q", "-o", resumed]), d)
        c.equal(r.returncode, 0, "resume: exit 0")
        files["resumed"] = resumed

        ref_head, ref_sizes, version = read(files["plain"])
        c.equal(version, [1, 5], "format_version [1, 5] (estimates, checksums, path and samplers compared on resume, extremes-only runs)")
        c.equal(ref_head["estimator"],
                ["norm", "lib", "lib", "cmd", "cmd", "crashy", "crashy", "slow", "slow"] +
                ["probe"] * 11,
                "/estimators/estimator: the estimators' columns in job order")
        c.equal(ref_head["estimate"][:5], ["norm", "mean_square", "top", "mean_square", "top"],
                "/estimators/estimate: each estimator's estimates sorted by name")
        c.equal(ref_head["truth"][:3], ["limit_norm", "limit_moment:2", "limit_norm"],
                "/estimators/truth as written")
        for way in ("np1", "np2", "resumed"):
            head, sizes, _ = read(files[way])
            same = head == ref_head and all(
                np.array_equal(a["estimates"], b["estimates"], equal_nan=True)
                and a["failure"] == b["failure"] for a, b in zip(sizes, ref_sizes))
            c.check(same, "%s: estimates and failure reasons identical to the plain run" % way)
            status, text = rh.h5diff(files["plain"], files[way])
            c.equal(status, 0, "%s: h5diff outside /provenance finds no difference" % way)

        for i, s in enumerate(ref_sizes):
            e, spectra, fail = s["estimates"], s["spectra"], s["failure"]
            top = spectra.max(axis=1)
            mean_square = np.array([np.sum(x * x) / x.size for x in spectra])
            c.check(np.array_equal(e[:, 0], np.abs(spectra).max(axis=1)),
                    "size %d: built-in norm = max |eigenvalue| of the kept spectra" % i)
            c.check(np.array_equal(e[:, 2], top) and np.allclose(e[:, 1], mean_square, rtol=1e-14,
                                                                  atol=0),
                    "size %d: plug-in top and mean_square match numpy" % i)
            c.check(np.array_equal(e[:, 3:5], e[:, 1:3]),
                    "size %d: the command gives the plug-in's values bit for bit" % i)
            faulty = [t for t in range(len(fail)) if t % 3 == 1]
            c.equal([t for t in range(len(fail)) if fail[t][3] == CRASH], faulty,
                    "size %d: segfault recorded on trials ≡ 1 (mod 3) only" % i)
            c.equal([t for t in range(len(fail)) if fail[t][4] == SLOW], faulty,
                    "size %d: timeout recorded on trials ≡ 1 (mod 3) only" % i)
            c.check(all(fail[t][:3] == ["", "", ""] and fail[t][5] == "" for t in range(len(fail))),
                    "size %d: the well-behaved estimators never fail" % i)
            c.check(np.isnan(e[faulty][:, 5:9]).all() and not np.isnan(e[:, :5]).any() and
                    not np.isnan(e[:, 9:]).any() and not np.isnan(np.delete(e, faulty, axis=0)).any(),
                    "size %d: NaN exactly where an estimator failed" % i)
            # The matrix reader (ABI version 2) got each trial's N × N real symmetric matrix:
            # Σ a_ii = Σ λ and Σ a_ij² = Σ λ² to rounding, the exact mirror a_01 = a_10.
            n = spectra.shape[1]
            p = {k: e[:, j] for k, j in PROBE.items()}
            c.check((p["rows"] == n).all() and (p["cols"] == n).all() and
                    (p["is_complex"] == 0).all() and (p["abi_seen"] == 2).all(),
                    "size %d: the plug-in received an N x N real matrix through ABI version 2" % i)
            sq = (spectra ** 2).sum(axis=1)
            c.check(np.allclose(p["trace"], spectra.sum(axis=1), rtol=0, atol=1e-12 * sq.max()) and
                    np.allclose(p["frobenius_square"], sq, rtol=1e-12, atol=0),
                    "size %d: the matrix's trace and Frobenius norm match the kept spectra" % i)
            c.check(np.array_equal(p["entry_01_re"], p["entry_10_re"]) and
                    (p["entry_01_im"] == 0).all() and (p["entry_10_im"] == 0).all(),
                    "size %d: the matrix is the exact symmetric mirror of its lower triangle" % i)
            c.check(len(set(p["checksum"])) == len(p["checksum"]),
                    "size %d: every trial's matrix has its own checksum" % i)

        # inspect lists the estimate columns and, per size, each estimator's failed trials.
        r = rh.run([exe, "inspect", files["plain"]], d)
        lines = r.stdout.splitlines()
        want = ["estimate failure: N = %d: %s: 2 trial(s): %s" % (n, who, why)
                for n in (16, 32) for who, why in (("crashy", CRASH), ("slow", SLOW))]
        c.check(r.returncode == 0 and [l for l in lines if l.startswith("estimate failure:")] == want,
                "inspect: the failed trials of each estimator per size, with the reason", r.stdout)
        c.check(any(l.startswith("estimates:  norm.norm (truth limit_norm), lib.mean_square "
                                 "(truth limit_moment:2)") for l in lines),
                "inspect: the estimate columns with their truths", r.stdout)

        # The report scores every estimator against its truth, several of one truth side by side
        # (the plug-in's and the command's estimates are the same numbers, so their rows agree).
        r = rh.run([exe, "report", files["plain"], "-o", os.path.join(d, "rep")], d)
        c.equal(r.returncode, 0, "report on a run with estimators: exit 0")
        md = open(os.path.join(d, "rep", "report.md")).read() if r.returncode == 0 else ""
        c.check("### Estimators" in md and "lib.mean_square" in md and "cmd.mean_square" in md,
                "report.md has the estimators' section with the library's and the command's rows")
        c.check(os.path.exists(os.path.join(d, "rep", "estimators_run1.csv")), "estimators_run1.csv written")
        c.check(os.path.exists(os.path.join(d, "rep", "figures", "estimators_run1.png")) and
                os.path.exists(os.path.join(d, "rep", "figures", "estimators_run1.svg")),
                "the estimators' figure is drawn (PNG and SVG)")

        # Refused before the run: exit 2, the message, nothing written.
        cases = [
            ("nothere", "cannot read '{p}/libtest_plugin_nothere.so': No such file or directory; "
                        "give the path of the plug-in's shared library (relative to the job file)"),
            ("noentry", "'{p}/libtest_plugin_noentry.so' does not export freegap_estimator_estimate;"
                        " define it with C linkage as declared in include/freegap/estimator_abi.h"),
            ("abi", "'{p}/libtest_plugin_abi.so' was built for plug-in ABI version 3, this freegap "
                    "loads versions 1 to 2; rebuild it against this freegap's "
                    "include/freegap/estimator_abi.h"),
        ]
        line = JOB.splitlines().index('library = "{plugins}/libtest_plugin_{crash}.so"') + 1
        for crash, message in cases:
            bad = rh.write(os.path.join(d, "bad-%s.toml" % crash), JOB.format(plugins=plugins,
                                                                                crash=crash,
                                                                                slow_timeout=SLOW_TIMEOUT))
            out = os.path.join(d, "bad-%s.h5" % crash)
            for ranks in (None, 2):
                r = rh.run(rh.command(exe, ["run", bad, "-q", "-o", out], ranks), d)
                expected = "freegap: %s:%d: estimator.crashy.library: %s\n" % (
                    bad, line, message.format(p=plugins))
                # Under mpirun, mpirun's own notice of the non-zero exit follows the message.
                ok = r.stderr == expected if ranks is None else r.stderr.startswith(expected)
                c.check(r.returncode == rh.EXIT_BAD_INPUT and ok,
                        "%s (%s): exit 2 with the message" % (crash, ranks or "plain"),
                        "exit %s\nexpected: %s\n     got: %s" % (r.returncode, expected, r.stderr))
                c.check(not os.path.exists(out), "%s: no run file written" % crash)
    c.finish()


if __name__ == "__main__":
    main()
