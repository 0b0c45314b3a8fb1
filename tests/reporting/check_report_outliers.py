#!/usr/bin/env python3
"""End to end: a GUE with a rank-three spike, run on 2 ranks and reported against the predicted
outliers.

Usage: check_report_outliers.py BUILD_DIR

Model: X + S, X a GUE (semicircle on [−2, 2]), S = diag(3, 2, −1.5, 0.6, 0, …, 0). Predicted
(Péché 2006; Féral & Péché 2007; docs/check-values.md §1.11): outliers at θ + 1/θ for |θ| > 1,
so 3.33333 and 2.5 above the bulk, −2.16667 below it, and none for 0.6. What must hold:
1. `freegap limit` prints the three outliers and the threshold the fourth misses.
2. The report's outlier table follows each outlier: the k-th largest (smallest) eigenvalue of
   every trial (kept spectra), its mean per N within 4 standard errors plus 2/N (an allowance for
   the mean's O(1/N) bias, recalled from memory) of the prediction at every size; 30 trials
   (seed 5), sizes 100 and 300: the standard error is about 0.9/√(N·30), 0.01 at N = 300.
3. The extremes table compares the largest and smallest values with the outermost outliers, and
   the fits table has the second outlier above as its own quantity.
"""
import csv
import math
import os
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

JOB = """\
name = "three planted signals"
seed = 5
sizes = [100, 300]
trials = 30
expression = "X + S"
[matrices.X]
ensemble = "gue"
[matrices.S]
ensemble = "diagonal"
law = "spiked"
spikes = [3.0, 2.0, -1.5, 0.6]
[observe]
bins = 60
max_moment = 4
keep_spectra = "all"
"""
PREDICTED = {("above", 1): 3.0 + 1 / 3.0, ("above", 2): 2.5, ("below", 1): -1.5 - 1 / 1.5}


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("outliers of a spiked GUE: limit, run and report")
    with rh.WorkDir("outliers") as d:
        r = rh.run([exe, "limit", "-m", "X=gue", "-m", "S=diagonal:law=spiked:spikes=3,2,-1.5,0.6",
                    "-e", "X + S"], d)
        if c.check(r.returncode == 0, "limit runs", r.stderr):
            out = r.stdout
            c.check("spike 3 (θ = 3): outlier at 3.3333333333" in out, "outlier of 3 at 10/3")
            c.check("spike 2 (θ = 2): outlier at 2.5000000000" in out, "outlier of 2 at 5/2")
            c.check("spike -1.5 (θ = -1.5): outlier at -2.1666666667" in out, "outlier of −1.5 below")
            c.check("spike 0.6 (θ = 0.6): no outlier (it needs |θ| > 1.000000)" in out,
                    "no outlier for 0.6, and the threshold 1")
        job = rh.write(os.path.join(d, "spiked.toml"), JOB)
        h5 = os.path.join(d, "spiked.h5")
        r = rh.run(rh.command(exe, ["run", job, "-o", h5, "--quiet"], 2), d)
        if not c.check(r.returncode == 0, "the job runs on 2 ranks", r.stderr):
            c.finish()
        r = rh.run([exe, "report", h5, "-o", "rep", "--no-figures"], d)
        if not c.check(r.returncode == 0, "report runs", r.stderr):
            c.finish()
        with open(os.path.join(d, "rep", "report.md")) as f:
            md = f.read()
        c.check("### Outliers against their predicted limits" in md, "the report has the outlier table")
        c.check("| − outlier 3.33333 | smallest | − outlier -2.16667 |" in md,
                "the extremes table aims at the outermost outliers")

        # The same numbers from the run file, against the predictions.
        import h5py
        spectra = {}
        with h5py.File(h5, "r") as f:
            def visit(name, obj):
                if isinstance(obj, h5py.Dataset) and name.endswith("spectra"):
                    spectra[name] = np.asarray(obj)
            f.visititems(visit)
        by_n = {}
        for name, values in spectra.items():
            values = np.asarray(values)
            rows = values.reshape(-1, values.shape[-1]) if values.ndim > 1 else None
            if rows is None:
                continue
            by_n.setdefault(rows.shape[1], []).extend(rows)
        c.check(sorted(by_n) == [100, 300], "kept spectra for both sizes (%s)" % sorted(by_n))
        for n, rows in sorted(by_n.items()):
            rows = np.sort(np.asarray(rows), axis=1)
            c.check(len(rows) == 30, "N = %d: 30 trials kept" % n)
            for (side, k), want in PREDICTED.items():
                v = rows[:, -k] if side == "above" else rows[:, k - 1]
                mean, se = v.mean(), v.std(ddof=1) / math.sqrt(len(v))
                c.check(abs(mean - want) <= 4 * se + 2.0 / n,
                        "N = %d, outlier %d %s: %.4f ± %.4f against %.4f" % (n, k, side, mean, se, want))
                c.check(("%.6g" % mean) in md, "N = %d, outlier %d %s: the report shows %.6g"
                        % (n, k, side, mean))
        with open(os.path.join(d, "rep", "fits.csv")) as f:
            keys = [row["key"] for row in csv.DictReader(f)]
        c.check("outlier_above_2" in keys, "the second outlier above has its own fit row")
    c.finish()


if __name__ == "__main__":
    main()
