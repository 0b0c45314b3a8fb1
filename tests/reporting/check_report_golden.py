#!/usr/bin/env python3
"""Golden output: report.md of a fixed small run must equal tests/reporting/golden/report-gue-small.md.

Usage: check_report_golden.py BUILD_DIR
       FREEGAP_UPDATE_GOLDEN=1 check_report_golden.py BUILD_DIR   (rewrite the golden file; review
                                                                   the diff before committing it)

The run is a GUE ladder on the tridiagonal path (Dumitriu & Edelman 2002): plain C++ arithmetic
without BLAS, so its numbers are the same bits on every machine that builds freegap the same
way, and with a fixed seed and fixed bootstrap seeds the report is the same text. A difference
means the report's numbers, wording or layout changed: if on purpose, update the golden file
with the switch above and say why in the commit.
"""
import difflib
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

GOLDEN = os.path.join(os.path.dirname(os.path.abspath(__file__)), "golden", "report-gue-small.md")
JOB = rh.fixture_job("gue", """\
name = "golden GUE ladder"
seed = 2718
sizes = [50, 100, 200]
trials = 64
""", """\

[observe]
bins = 40
range = [-2.4, 2.4]
max_moment = 4

[run]
trials_per_unit = 8
""")


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("report: golden report.md")
    with rh.WorkDir("report-golden") as d:
        rh.write(os.path.join(d, "golden.toml"), JOB)
        r = rh.run([exe, "run", "golden.toml", "-o", "golden.h5", "--quiet"], d)
        c.equal(r.returncode, 0, "the run finishes")
        r = rh.run([exe, "report", "golden.h5", "-o", "rep", "--no-figures"], d)
        c.equal(r.returncode, 0, "report exits 0")
        got = open(os.path.join(d, "rep", "report.md")).read()
        if os.environ.get("FREEGAP_UPDATE_GOLDEN") == "1":
            with open(GOLDEN, "w") as f:
                f.write(got)
            print("  updated %s" % GOLDEN)
        want = open(GOLDEN).read() if os.path.exists(GOLDEN) else ""
        diff = "".join(difflib.unified_diff(want.splitlines(True), got.splitlines(True), "golden", "now"))
        c.check(got == want, "report.md equals the golden file", diff[:6000])
    c.finish()


if __name__ == "__main__":
    main()
