#!/usr/bin/env python3
"""Sweeps over several keys (issue 21, item 4).

Usage: check_sweep_grid.py BUILD_DIR

  - a 2 × 3 grid (two strengths of a two-level signal × three trial counts; both limits have a
    connected support) gives six job files, in grid
    order (the last key fastest), six run files, and one collated report with six rows whose
    varied keys are columns — in report.md, runs.csv and report.h5;
  - the same keys with combine = "zip" give one task per position;
  - the single-key form (vary = "KEY", values = [...]) still works;
  - bad sweeps are refused with exit 2, the file and line, and nothing written: lists of
    different lengths under zip, an unknown combine, an empty list, `values` beside a [vary] table.
"""
import csv
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

import h5py  # noqa: E402

# A scenario of our own: a sensor's background (GUE noise) plus a two-level calibration signal.
BASE = """\
name = "calibration signal in noise"
seed = 9
sizes = [16, 24]
trials = 8
expression = "X + D"

[matrices.X]
ensemble = "gue"

[matrices.D]
ensemble = "diagonal"
atoms = [[-0.5, 0.5], [0.5, 0.5]]

[observe]
bins = 16
range = [-5.0, 5.0]

[run]
trials_per_unit = 4
"""

GRID = """\
base = "base.toml"
directory = "grid"
[vary]
"matrices.D.atoms" = [[[-0.5, 0.5], [0.5, 0.5]], [[-0.8, 0.5], [0.8, 0.5]]]
trials = [4, 8, 12]
"""

ZIP = """\
base = "base.toml"
directory = "zipped"
combine = "zip"
[vary]
seed = [1, 2, 3]
trials = [4, 8, 12]
"""

SINGLE = 'base = "base.toml"\ndirectory = "single"\nvary = "seed"\nvalues = [5, 6]\n'


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("sweeps over several keys")
    with rh.WorkDir("sweepgrid") as d:
        rh.write(os.path.join(d, "base.toml"), BASE)
        rh.write(os.path.join(d, "grid.toml"), GRID)
        r = rh.run([exe, "sweep", "grid.toml"], d)
        c.check(r.returncode == 0, "a 2 × 3 grid sweep: exit 0", r.stderr)
        with open(os.path.join(d, "grid", "jobs.txt")) as f:
            jobs = f.read().split()
        c.equal(len(jobs), 6, "  ... six job files listed")
        lines = r.stdout.splitlines()
        c.check(len(lines) >= 6 and "-0.5" in lines[0] and lines[0].endswith("trials = 4)")
                and lines[1].endswith("trials = 8)") and "-0.8" in lines[3]
                and lines[3].endswith("trials = 4)"),
                "  ... in grid order, the last key fastest", r.stdout)
        outputs = []
        for i, job in enumerate(jobs):
            r = rh.run([exe, "run", job, "--quiet"], d)
            c.check(r.returncode == 0, "  ... task %d runs" % i, r.stderr)
            outputs.append(os.path.join(d, "grid", "grid-%d.h5" % i))
        with h5py.File(outputs[5], "r") as f:
            c.equal(int(f["sizes/0"].attrs["trials"]), 12, "  ... task 5 has the last trial count")
        r = rh.run([exe, "report"] + outputs + ["-o", "grid-report", "--no-figures"], d)
        c.check(r.returncode == 0, "one collated report of the six runs: exit 0", r.stderr)
        rep = os.path.join(d, "grid-report")
        with open(os.path.join(rep, "runs.csv")) as f:
            rows = list(csv.DictReader(f))
        c.equal(len(rows), 6, "  ... runs.csv has six rows")
        c.check(rows and "sweep.matrices.D.atoms" in rows[0] and "sweep.trials" in rows[0],
                "  ... with the varied keys as columns", rows[0] if rows else None)
        c.equal([row.get("sweep.trials") for row in rows], ["4", "8", "12", "4", "8", "12"],
                "  ... each row's trial count")
        with h5py.File(os.path.join(rep, "report.h5"), "r") as f:
            col = [v.decode() if isinstance(v, bytes) else v for v in f["tables/runs/sweep.trials"][...]]
        c.equal(col, ["4", "8", "12", "4", "8", "12"], "  ... and in report.h5")
        md = open(os.path.join(rep, "report.md")).read()
        head = [l for l in md.splitlines() if l.startswith("| # | file | job |")]
        c.check(head and " matrices.D.atoms | trials |" in head[0], "  ... and in report.md's collation",
                head)
        body = md.split("## Runs collated", 1)[-1].split("\n## ", 1)[0]
        c.equal(len([l for l in body.splitlines() if l.startswith("| ") and l[2].isdigit()]), 6,
                "  ... which has six rows")

        rh.write(os.path.join(d, "zipped.toml"), ZIP)
        r = rh.run([exe, "sweep", "zipped.toml"], d)
        c.check(r.returncode == 0, "a zipped sweep: exit 0", r.stderr)
        c.equal(len(open(os.path.join(d, "zipped", "jobs.txt")).read().split()), 3,
                "  ... one task per position")
        rh.write(os.path.join(d, "single.toml"), SINGLE)
        r = rh.run([exe, "sweep", "single.toml"], d)
        c.check(r.returncode == 0 and len(open(os.path.join(d, "single", "jobs.txt")).read().split()) == 2,
                "the single-key form still works", r.stderr)

        bad = {
            "uneven.toml": (ZIP.replace("trials = [4, 8, 12]", "trials = [4, 8]").replace("zipped", "u"),
                            "uneven.toml:6: vary.trials: has 2 values and seed has 3; combine = \"zip\" "
                            "needs lists of one length (or use \"grid\")"),
            "combine.toml": (ZIP.replace('"zip"', '"cross"').replace("zipped", "c"),
                             "combine.toml:3: combine: must be \"grid\" (every combination) or \"zip\" "
                             "(the i-th values of every key together)"),
            "empty.toml": (GRID.replace("trials = [4, 8, 12]", "trials = []").replace("grid", "e"),
                           "empty.toml:5: vary.trials: must be a non-empty list of values, e.g. "
                           "trials = [1, 2, 3]"),
            "both.toml": (GRID.replace('directory = "grid"', 'directory = "b"\nvalues = [1]'),
                          "both.toml:3: values: goes with vary = \"KEY\"; with a [vary] table each key "
                          "has its own list"),
        }
        for name, (text, message) in bad.items():
            rh.write(os.path.join(d, name), text)
            before = rh.snapshot(d)
            r = rh.run([exe, "sweep", name], d)
            c.equal(r.returncode, rh.EXIT_BAD_INPUT, "%s: exit 2" % name)
            c.equal(r.stderr, "freegap: " + message + "\n", "%s: the message" % name)
            c.equal(rh.snapshot(d), before, "%s: nothing written" % name)
    c.finish()


if __name__ == "__main__":
    main()
