#!/usr/bin/env python3
"""`freegap report` on a killed run, with figures, and its refusals of bad input.

Usage: check_report_partial.py BUILD_DIR

1. A run of B + U B U^* (a ±1 spectrum and its Haar-rotated copy; limit: the arcsine law) is
   SIGKILLed once a few work units are committed. Units run biggest size first, so the smaller
   sizes are incomplete or empty. `freegap report` on the killed file exits 0, prints and writes
   which sizes are incomplete (matching the file's own unit_committed flags, read with h5py),
   draws PNG and SVG figures (non-empty files), and its CSV tables list every size with its
   status. The HDF5 copy of the tables holds the same sizes.
2. Two run files (a sweep) are reported together: a collated table saying what differs, one
   section per run, and a figure of all runs' distances.
3. Bad input: a missing file, a file that is not a run file, an output directory holding
   something else — each exits 2 with a message naming the place, and leaves nothing behind.
"""
import csv
import os
import re
import signal
import sys

import h5py

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

JOB = rh.fixture_job("rotated-two-level", """\
name = "two rotated two-level spectra"
seed = 31
sizes = [40, 80, 320]
trials = 64
""", """\

[observe]
bins = 60
range = [-2.4, 2.4]
max_moment = 4

[run]
trials_per_unit = 4
""")


def rows(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def committed_per_size(path):
    with h5py.File(path, "r") as f:
        return [(int(f["sizes/%d" % i].attrs["n"]), int((f["sizes/%d/unit_committed" % i][:] == 1).sum()),
                 int(f["sizes/%d/unit_committed" % i].size)) for i in range(int(f.attrs["size_count"]))]


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("report: killed run, figures, bad input")
    with rh.WorkDir("report-partial") as d:
        rh.write(os.path.join(d, "job.toml"), JOB)
        proc = rh.start(rh.command(exe, ["run", "job.toml", "-o", "killed.h5", "--quiet"]), d)
        hit = rh.wait_until(lambda: (lambda s: s and s[0] >= 3 and s[0] < s[1])(rh.committed_state(os.path.join(d, "killed.h5"))), 120, 0.005)
        rh.kill_group(proc, signal.SIGKILL)
        rh.reap(proc)
        if not c.check(hit, "the run was killed with some units committed and some not",
                       rh.committed_state(os.path.join(d, "killed.h5"))):
            c.finish()
        state = committed_per_size(os.path.join(d, "killed.h5"))
        expected_incomplete = [(n, done, total) for n, done, total in state if done < total]
        c.check(expected_incomplete, "the file has incomplete sizes: %s" % state)

        r = rh.run([exe, "report", "killed.h5", "-o", "rep"], d)
        c.equal(r.returncode, 0, "report on the killed file exits 0")
        printed = re.findall(r"^incomplete: killed\.h5: N = (\d+) \((\d+) of (\d+) units\)$", r.stdout, re.M)
        c.equal([tuple(map(int, p)) for p in printed], expected_incomplete,
                "stdout names each incomplete size with its committed units")
        md = open(os.path.join(d, "rep", "report.md")).read() if os.path.exists(os.path.join(d, "rep", "report.md")) else ""
        c.check("status: **incomplete**" in md, "report.md says the run is incomplete")
        for n, done, total in expected_incomplete:
            c.check("N = %d (%d of %d units" % (n, done, total) in md, "report.md names N = %d as incomplete" % n)
        sizes = rows(os.path.join(d, "rep", "sizes.csv"))
        status = {int(float(s["n"])): s["status"] for s in sizes}
        want = {n: ("complete" if done == total else "no data" if done == 0 else "incomplete") for n, done, total in state}
        c.equal(status, want, "sizes.csv gives every size its status")
        c.check("arcsine" in md or " ⊞ " in md, "the limit (free sum of the two ±1 laws) is named")
        figures = os.path.join(d, "rep", "figures")
        names = sorted(os.listdir(figures)) if os.path.isdir(figures) else []
        with_data = [n for n, done, total in state if done > 0]
        for n in with_data:
            for ext in ("png", "svg"):
                p = os.path.join(figures, "spectrum_run1_N%d.%s" % (n, ext))
                c.check(os.path.exists(p) and os.path.getsize(p) > 1000, "figure spectrum_run1_N%d.%s drawn" % (n, ext))
        for n in [n for n, done, total in state if done == 0]:
            c.check("spectrum_run1_N%d.png" % n not in names, "no spectrum figure for N = %d (no data)" % n)
        c.check("extremes_run1.png" in names and "extremes_run1.svg" in names, "extremes figure drawn")
        with h5py.File(os.path.join(d, "rep", "report.h5"), "r") as f:
            c.equal(sorted(int(x) for x in f["tables/sizes/n"][:]), sorted(n for n, _, _ in state),
                    "report.h5 /tables/sizes/n lists every size")
            c.equal(f.attrs["kind"], "freegap report", "report.h5 says what it is")

        # ---- two runs of a sweep (here: the killed one and a complete one with another seed and
        # a smaller ladder) reported together
        rh.write(os.path.join(d, "other.toml"), JOB.replace("seed = 31", "seed = 32").replace("[40, 80, 320]", "[40, 80]"))
        r = rh.run([exe, "run", "other.toml", "-o", "other.h5", "--quiet"], d)
        c.equal(r.returncode, 0, "a second, complete run")
        r = rh.run([exe, "report", "killed.h5", "other.h5", "-o", "sweep"], d)
        c.equal(r.returncode, 0, "report on two run files exits 0")
        md = open(os.path.join(d, "sweep", "report.md")).read() if r.returncode == 0 else ""
        c.check("## Runs collated" in md and "| 1 | killed.h5 |" in md and "| 2 | other.h5 |" in md,
                "report.md opens with a table collating both runs")
        c.check("seed = 31" in md and "seed = 32" in md, "the table says what sets each run apart (the seed)")
        c.check("## 1. killed.h5" in md and "## 2. other.h5" in md, "each run has its own section")
        c.check(os.path.exists(os.path.join(d, "sweep", "figures", "sweep_errors.png")), "the sweep figure is drawn")

        # ---- bad input: exit 2, a message naming the place, nothing written
        rh.write(os.path.join(d, "notes.txt"), "not a run file\n")
        os.mkdir(os.path.join(d, "busy"))
        rh.write(os.path.join(d, "busy", "thesis.tex"), "\\documentclass{article}\n")
        cases = [
            (["report", "absent.h5", "-o", "out1"], "absent.h5", "out1"),
            (["report", "notes.txt", "-o", "out2"], "notes.txt", "out2"),
            (["report", "killed.h5", "-o", "busy"], "busy", None),
        ]
        for args, named, out in cases:
            before = rh.snapshot(d)
            r = rh.run([exe] + args, d)
            c.equal(r.returncode, 2, "%s: exit 2" % " ".join(args))
            c.check(named in r.stderr, "%s: the message names %s" % (" ".join(args), named), r.stderr)
            c.equal(rh.snapshot(d), before, "%s: nothing written" % " ".join(args))
    c.finish()


if __name__ == "__main__":
    main()
