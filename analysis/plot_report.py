#!/usr/bin/env python3
"""Figures of a freegap report directory, drawn from its CSV tables with matplotlib.

Usage: plot_report.py REPORT_DIR      (run by `freegap report`; Debian's /usr/bin/python3)

Writes REPORT_DIR/figures/ as PNG and SVG:
  spectrum_run<r>_N<n>  histogram of the pooled spectrum (as a density) against the limit density
  errors_run<r>         log-log errors against N, each with its fitted line C*N^-alpha and the band
                        of the fit's 95% interval for alpha
  extremes_run<r>       mean largest / smallest value and operator norm against N (± 1 SE) with
                        the limit's edges and norm
  sweep_errors          (several runs) the Kolmogorov distance of every run against N
"""
import csv
import math
import os
import sys

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402


def read(directory, name):
    with open(os.path.join(directory, name + ".csv"), newline="") as f:
        rows = list(csv.DictReader(f))
    out = []
    for row in rows:
        parsed = {}
        for key, value in row.items():
            try:
                parsed[key] = float(value)
            except ValueError:
                parsed[key] = value
        out.append(parsed)
    return out


def finite(x):
    return isinstance(x, float) and math.isfinite(x)


def save(fig, directory, name):
    for ext in ("png", "svg"):
        fig.savefig(os.path.join(directory, "figures", name + "." + ext), dpi=110, bbox_inches="tight")
    plt.close(fig)


def spectrum_figures(d, runs, sizes, hist, dens, atoms):
    for run in runs:
        r = run["run"]
        label = run["file"]
        for size in [s for s in sizes if s["run"] == r and s["status"] != "no data"]:
            n = size["n"]
            bins = [h for h in hist if h["run"] == r and h["n"] == n]
            if not bins:
                continue
            fig, ax = plt.subplots(figsize=(6.4, 4.2))
            lefts = [b["bin_low"] for b in bins]
            widths = [b["bin_high"] - b["bin_low"] for b in bins]
            ax.bar(lefts, [b["density"] for b in bins], width=widths, align="edge", color="#9ecae1",
                   edgecolor="#6baed6", linewidth=0.3,
                   label="N = %d, %d trials" % (n, size["trials_used"]))
            curve = [p for p in dens if p["run"] == r]
            if curve:
                ax.plot([p["x"] for p in curve], [p["density"] for p in curve], color="#d62728",
                        linewidth=1.4, label="limit density")
            for a in [a for a in atoms if a["run"] == r]:
                ax.axvline(a["value"], color="#d62728", linestyle=":", linewidth=1.0)
                ax.annotate("atom %.3g" % a["mass"], (a["value"], 0), xytext=(3, 6),
                            textcoords="offset points", fontsize=7, color="#d62728")
            status = "" if size["status"] == "complete" else " (%s)" % size["status"]
            ax.set_title("%s: spectrum at N = %d%s\n%s" % (label, n, status, run["expression"]))
            ax.set_xlabel("eigenvalue / singular value x (dimensionless)")
            ax.set_ylabel("density (per unit x)")
            ax.legend(fontsize=8)
            save(fig, d, "spectrum_run%d_N%d" % (r, n))


def errors_figure(d, run, sizes, moments, extremes, fits):
    r = run["run"]
    series = {}
    # Each point: (N, |error|, standard error, resolved).
    for s in [s for s in sizes if s["run"] == r]:
        for key, col in (("kolmogorov", "kolmogorov"), ("wasserstein1", "wasserstein1")):
            if finite(s[col]) and s[col] > 0:
                series.setdefault(key, []).append((s["n"], s[col], s[col + "_se"], s[col + "_resolved"] == 1.0))
        for key, col in (("kolmogorov_per_trial", "per_trial_kolmogorov"),
                         ("wasserstein1_per_trial", "per_trial_wasserstein1")):
            mean, se = s.get(col + "_mean"), s.get(col + "_se")
            if finite(mean) and mean > 0:
                series.setdefault(key, []).append((s["n"], mean, se, finite(se) and mean >= 2 * se))
    for m in [m for m in moments if m["run"] == r]:
        key = "moment_%d" % m["k"]
        if finite(m["error"]) and m["error"] != 0:
            series.setdefault(key, []).append((m["n"], abs(m["error"]), m["standard_error"], m["resolved"] == 1.0))
    for e in [e for e in extremes if e["run"] == r]:
        if finite(e["error"]) and e["error"] != 0:
            series.setdefault(e["quantity"], []).append((e["n"], abs(e["error"]), e["standard_error"],
                                                         e["resolved"] == 1.0))
    run_fits = {f["key"]: f for f in fits if f["run"] == r}
    keys = [k for k in series if k in run_fits and run_fits[k]["ok"] == 1.0]
    if not keys:
        return False
    fig, ax = plt.subplots(figsize=(6.8, 4.6))
    colors = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    markers = "osD^vP*Xh<>"
    any_unresolved = False
    for i, key in enumerate(keys):
        pts = sorted(series[key])
        f = run_fits[key]
        c = colors[i % len(colors)]
        mk = markers[i % len(markers)]
        ns = [p[0] for p in pts]
        # Resolved points filled, unresolved ones hollow (they are not in the fit); a marker of its
        # own per quantity keeps coinciding series visible.
        for resolved in (True, False):
            sel = [p for p in pts if p[3] == resolved]
            if not sel:
                continue
            any_unresolved |= not resolved
            ax.errorbar([p[0] for p in sel], [p[1] for p in sel],
                        yerr=[p[2] if finite(p[2]) else 0 for p in sel], fmt=mk, color=c,
                        markersize=5 if resolved else 6, capsize=2,
                        markerfacecolor=c if resolved else "none",
                        label=("%s: α = %.2f [%.2f, %.2f]" % (f["quantity"], f["alpha"], f["ci_low"], f["ci_high"]))
                        if resolved else None)
        lo, hi = min(ns), max(ns)
        grid = [lo * (hi / lo) ** (j / 40) for j in range(41)]
        ax.plot(grid, [f["constant"] * x ** (-f["alpha"]) for x in grid], color=c, linewidth=1.0)
        # band: exponents at the ends of the 95% interval, pivoted at the geometric mean of N
        pivot = math.sqrt(lo * hi)
        mid = f["constant"] * pivot ** (-f["alpha"])
        low = [mid * (x / pivot) ** (-f["ci_low"]) for x in grid]
        high = [mid * (x / pivot) ** (-f["ci_high"]) for x in grid]
        ax.fill_between(grid, [min(a, b) for a, b in zip(low, high)], [max(a, b) for a, b in zip(low, high)],
                        color=c, alpha=0.15, linewidth=0)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_title("%s: errors against N (fits C·N^-α with 95%% bands)%s" %
                 (run["file"], "\nhollow: unresolved, left out of the fit" if any_unresolved else ""))
    ax.set_xlabel("matrix size N")
    ax.set_ylabel("|error| (units of the quantity)")
    ax.legend(fontsize=7)
    save(fig, d, "errors_run%d" % r)
    return True


def extremes_figure(d, run, extremes):
    r = run["run"]
    rows = [e for e in extremes if e["run"] == r]
    if not rows:
        return
    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    styles = {"largest": ("#1f77b4", "largest value"), "smallest": ("#2ca02c", "smallest value"),
              "norm": ("#ff7f0e", "operator norm")}
    for q, (c, name) in styles.items():
        pts = sorted((e["n"], e["mean"], e["standard_error"], e["limit"]) for e in rows if e["quantity"] == q)
        pts = [p for p in pts if finite(p[1])]
        if not pts:
            continue
        ax.errorbar([p[0] for p in pts], [p[1] for p in pts], yerr=[p[2] if finite(p[2]) else 0 for p in pts],
                    fmt="o-", color=c, markersize=4, capsize=2, label=name + " (mean ± SE)")
        if finite(pts[0][3]):
            ax.axhline(pts[0][3], color=c, linestyle="--", linewidth=1.0, label="limit %s %.6g" % (q, pts[0][3]))
    ax.set_xscale("log")
    ax.set_title("%s: extremes and norm against N" % run["file"])
    ax.set_xlabel("matrix size N")
    ax.set_ylabel("value (same units as the spectrum)")
    ax.legend(fontsize=7)
    save(fig, d, "extremes_run%d" % r)


def sweep_figure(d, runs, sizes):
    fig, ax = plt.subplots(figsize=(6.8, 4.6))
    drawn = False
    for run in runs:
        pts = sorted((s["n"], s["kolmogorov"], s["kolmogorov_se"], s["kolmogorov_resolved"] == 1.0)
                     for s in sizes
                     if s["run"] == run["run"] and finite(s["kolmogorov"]) and s["kolmogorov"] > 0)
        if not pts:
            continue
        drawn = True
        line = ax.plot([p[0] for p in pts], [p[1] for p in pts], "-", linewidth=0.8,
                       label="%d: %s" % (run["run"], run["file"]))[0]
        for resolved in (True, False):
            sel = [p for p in pts if p[3] == resolved]
            if sel:
                ax.errorbar([p[0] for p in sel], [p[1] for p in sel],
                            yerr=[p[2] if finite(p[2]) else 0 for p in sel], fmt="o", markersize=5,
                            capsize=2, color=line.get_color(),
                            markerfacecolor=line.get_color() if resolved else "none")
    if drawn:
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_title("Sweep: Kolmogorov distance of the mean spectrum to each limit\n"
                     "(hollow: unresolved)")
        ax.set_xlabel("matrix size N")
        ax.set_ylabel("Kolmogorov distance (probability)")
        ax.legend(fontsize=7)
        save(fig, d, "sweep_errors")
    else:
        plt.close(fig)


def main():
    if len(sys.argv) != 2:
        sys.exit("usage: plot_report.py REPORT_DIR")
    d = sys.argv[1]
    os.makedirs(os.path.join(d, "figures"), exist_ok=True)
    runs = read(d, "runs")
    sizes = read(d, "sizes")
    moments = read(d, "moments")
    extremes = read(d, "extremes")
    fits = read(d, "fits")
    spectrum_figures(d, runs, sizes, read(d, "histograms"), read(d, "limit_density"), read(d, "limit_atoms"))
    for run in runs:
        errors_figure(d, run, sizes, moments, extremes, fits)
        extremes_figure(d, run, extremes)
    if len(runs) > 1:
        sweep_figure(d, runs, sizes)


if __name__ == "__main__":
    main()
