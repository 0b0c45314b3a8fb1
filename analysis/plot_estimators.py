#!/usr/bin/env python3
"""Error against N for every estimator of a run: one figure, one panel per truth.

Usage: /usr/bin/python3 plot_estimators.py SCORES.csv OUTPUT_STEM

SCORES.csv is what freegap::analysis::write_estimator_scores_csv writes
(include/freegap/analysis/reporting/estimator_scores.hpp). Writes OUTPUT_STEM.png and OUTPUT_STEM.svg.
Each panel shows, on log-log axes, |bias| (filled markers, solid lines) and RMSE (open markers,
dashed lines) of every estimate of that truth against the matrix size N, with the bootstrap
intervals as error bars, so estimators of the same truth are compared side by side. Estimates
without a known truth show their standard deviation instead. Errors are in the units of the
estimate (the spectrum's units: eigenvalues or singular values of the job's expression, or
their powers for moment estimates).
"""
import csv
import math
import sys


def number(text):
    return float(text) if text not in ("", None) else math.nan


def load(path):
    rows = []
    with open(path, newline="") as f:
        for r in csv.DictReader(f):
            rows.append(r)
    if not rows:
        sys.exit("plot_estimators.py: %s holds no estimates" % path)
    return rows


def main():
    if len(sys.argv) != 3:
        sys.exit(__doc__)
    rows = load(sys.argv[1])
    stem = sys.argv[2]
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        sys.exit("plot_estimators.py: matplotlib is not installed; install python3-matplotlib "
                 "(Debian) to draw the figure; the CSV and the Markdown tables are complete "
                 "without it")

    truths = []
    for r in rows:
        if r["truth"] not in truths:
            truths.append(r["truth"])
    fig, axes = plt.subplots(1, len(truths), figsize=(5.2 * len(truths), 4.2), squeeze=False)
    for ax, truth in zip(axes[0], truths):
        group = [r for r in rows if r["truth"] == truth]
        names = []
        for r in group:
            key = r["estimator"] + "." + r["estimate"]
            if key not in names:
                names.append(key)
        known = group[0]["truth_value"] != ""
        for i, key in enumerate(names):
            pts = sorted((r for r in group if r["estimator"] + "." + r["estimate"] == key),
                         key=lambda r: int(r["n"]))
            n = [int(r["n"]) for r in pts]
            color = "C%d" % (i % 10)
            if known:
                bias = [abs(number(r["bias"])) for r in pts]
                lo = [abs(number(r["bias"])) - min(abs(number(r["bias_low"])),
                                                   abs(number(r["bias_high"])))
                      if number(r["bias_low"]) * number(r["bias_high"]) > 0
                      else abs(number(r["bias"])) * 0.999 for r in pts]
                hi = [max(abs(number(r["bias_low"])), abs(number(r["bias_high"])))
                      - abs(number(r["bias"])) for r in pts]
                alpha = pts[0]["bias_alpha"]
                label = "%s |bias|" % key + (" (α = %.2f)" % float(alpha) if alpha else "")
                ax.errorbar(n, bias, yerr=[lo, hi], color=color, marker="o", linestyle="-",
                            capsize=3, label=label)
                rmse = [number(r["rmse"]) for r in pts]
                rlo = [number(r["rmse"]) - number(r["rmse_low"]) for r in pts]
                rhi = [number(r["rmse_high"]) - number(r["rmse"]) for r in pts]
                alpha = pts[0]["rmse_alpha"]
                label = "%s RMSE" % key + (" (α = %.2f)" % float(alpha) if alpha else "")
                ax.errorbar(n, rmse, yerr=[rlo, rhi], color=color, marker="o",
                            markerfacecolor="none", linestyle="--", capsize=3, label=label)
            else:
                sd = [number(r["sd"]) for r in pts]
                slo = [number(r["sd"]) - number(r["sd_low"]) for r in pts]
                shi = [number(r["sd_high"]) - number(r["sd"]) for r in pts]
                ax.errorbar(n, sd, yerr=[slo, shi], color=color, marker="s", linestyle=":",
                            capsize=3, label="%s sd" % key)
        ax.set_xscale("log")
        ax.set_yscale("log")
        title = "truth %s" % truth
        if known:
            title += " = %.6g" % float(group[0]["truth_value"])
        ax.set_title(title)
        ax.set_xlabel("matrix size N")
        ax.set_ylabel("error (units of the estimate)" if known
                      else "standard deviation (units of the estimate)")
        ax.grid(True, which="both", alpha=0.3)
        ax.legend(fontsize=7)
    fig.suptitle("Estimator error against N (bars: 95% bootstrap intervals)")
    fig.tight_layout()
    fig.savefig(stem + ".png", dpi=120)
    fig.savefig(stem + ".svg")
    print("wrote %s.png and %s.svg" % (stem, stem))


if __name__ == "__main__":
    main()
