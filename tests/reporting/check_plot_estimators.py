#!/usr/bin/env python3
"""The estimator figure: run a small job with two estimators of the same truth, score it
(tests/tools/estimator_scores_table.cpp → CSV and Markdown), draw it with
analysis/plot_estimators.py, and check the files.

Usage: check_plot_estimators.py BUILD_DIR

Checks: the run and the scoring exit 0; the Markdown has one table for the truth `limit_norm`
holding both estimators side by side for each N; the CSV has one row per estimate and size and
its truth value is the Marchenko–Pastur edge (1 + √c)² (Marchenko & Pastur 1967); the plot
script writes a PNG (by its signature) and an SVG naming both estimators in the legend.
"""
import csv
import math
import os
import subprocess
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "support"))
import runhelp as rh  # noqa: E402

# A scenario of our own: the strongest mode of a noise-only array of 2N snapshots of N sensors.
JOB = """\
seed = 9
sizes = [20, 40, 80]
trials = 12
expression = "W"

[matrices.W]
ensemble = "wishart_real"
ratio = 0.5

[[estimator]]
name = "edge"
builtin = "operator_norm"
[estimator.truth]
norm = "limit_norm"

[[estimator]]
name = "lib"
library = "{plugins}/libtest_plugin_ok.so"
[estimator.truth]
top = "limit_norm"
mean_square = "limit_moment:2"
"""


def main():
    build = os.path.abspath(sys.argv[1])
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("estimator scores: Markdown, CSV and figure")
    with rh.WorkDir("plot-estimators") as d:
        job = rh.write(os.path.join(d, "job.toml"),
                       JOB.format(plugins=os.path.join(build, "tests", "estimate")))
        r = rh.run([exe, "run", job, "-q"], d)
        c.equal(r.returncode, 0, "run exits 0")
        table = os.path.join(build, "tests", "estimator_scores_table")
        if not os.path.exists(table):
            table = os.path.join(build, "estimator_scores_table")
        out_csv = os.path.join(d, "scores.csv")
        r = subprocess.run([table, os.path.join(d, "job.h5"), out_csv], stdout=subprocess.PIPE,
                           stderr=subprocess.PIPE, text=True, timeout=120)
        c.equal(r.returncode, 0, "scoring exits 0")
        md = r.stdout
        c.check("### Truth `limit_norm` = " in md, "Markdown: a table for the truth limit_norm", md)
        for n in (20, 40, 80):
            a = md.find("| %d | edge.norm |" % n)
            b = md.find("| %d | lib.top |" % n)
            c.check(a >= 0 and b >= 0 and abs(md[:b].count("\n") - md[:a].count("\n")) == 1,
                    "Markdown: N = %d has both estimators side by side" % n)
        with open(out_csv, newline="") as f:
            rows = list(csv.DictReader(f))
        c.equal(len(rows), 3 * 3, "CSV: one row per estimate and size")
        edge = (1 + math.sqrt(0.5)) ** 2
        c.check(all(abs(float(r["truth_value"]) - edge) < 1e-12 for r in rows
                    if r["truth"] == "limit_norm"), "CSV: truth value (1 + √0.5)²")
        stem = os.path.join(d, "estimators")
        script = os.path.join(HERE, "..", "..", "analysis", "plot_estimators.py")
        r = subprocess.run([sys.executable, script, out_csv, stem], stdout=subprocess.PIPE,
                           stderr=subprocess.PIPE, text=True, timeout=300)
        c.equal(r.returncode, 0, "plot script exits 0")
        if r.returncode != 0:
            print(r.stderr)
        png = stem + ".png"
        with open(png, "rb") as f:
            c.check(f.read(8) == b"\x89PNG\r\n\x1a\n", "PNG written")
        with open(stem + ".svg") as f:
            svg = f.read()
        c.check("edge.norm" in svg and "lib.top" in svg, "SVG legend names both estimators")
    c.finish()


if __name__ == "__main__":
    main()
