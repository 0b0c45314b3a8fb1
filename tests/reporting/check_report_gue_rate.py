#!/usr/bin/env python3
"""End to end: a GUE size ladder whose trial count comes from `freegap plan --rate-halfwidth`.

Usage: check_report_gue_rate.py BUILD_DIR

The flow a user follows: a pilot run (8000 trials per size, seed 7), `freegap plan JOB
--rate-halfwidth 0.15 --pilot PILOT --rate-quantity kolmogorov` for the number of trials that
gives the Kolmogorov exponent a 95% interval of ± 0.15, then the run with that number (an
independent seed) and its report. What must hold (fixed seeds, so the numbers never change):
1. Every trial keeps its eigenvalues (keep_spectra's default) and the Kolmogorov distance of
   the mean spectral distribution is computed from them, without bins, and resolved at every
   size (above its noise floor after the bootstrap bias correction).
2. Its values match the exact distance sup_x |E F_N(x) − F_sc(x)| of the GUE's finite-N mean
   spectral distribution, computed here independently with numpy from the Hermite kernel
   K_N(x, x) = Σ_{k<N} ψ_k(x)² (ψ_k the Hermite functions orthonormal for e^{−x²/2}; Mehta 2004,
   from memory) on a grid of 260001 points: |measured − exact| ≤ 4 SE of the measurement.
   (The exact values are about 0.031/N: 6.2e-4 at N = 50.)
3. The fitted exponent's 95% interval contains 1 (Götze & Tikhomirov 2005, rate 1/N for the
   GUE, from memory; docs/check-values.md §3.3), and so does the bootstrap interval.
4. The interval's half-width is within ± 30 % of the 0.15 asked of plan.
5. The mean largest eigenvalue approaches the edge 2 from below (E λ_max ≈ 2 + E[TW₂] N^{−2/3},
   E[TW₂] ≈ −1.77, Tracy & Widom 1994, from memory): below 2 by more than 3 SE at every size, and
   closer to 2 at every larger size; its fitted exponent is consistent with 2/3.
Sample and time: the pilot's 8000 trials leave the exponent at about ± 0.18; plan asks for about
1.4 × as many. About 70 s on 2 cores for both runs, plan and both reports. Fewer pilot trials
leave sizes unresolved, and a pilot with unresolved sizes only tells how many trials resolve them.
"""
import csv
import math
import os
import re
import sys

import numpy as np
from scipy.integrate import cumulative_trapezoid

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

SIZES = [50, 100, 200, 400]
BINS, LOW, HIGH = 400, -2.5, 2.5
HALFWIDTH = 0.15
JOB = rh.fixture_job("gue", """\
name = "GUE ladder for the rate of the mean spectrum"
seed = %d
sizes = [%s]
trials = %d
""", """\

[observe]
bins = %d
range = [%g, %g]
max_moment = 4

[run]
trials_per_unit = 200
""")


def job(seed, trials):
    return JOB % (seed, ", ".join(map(str, SIZES)), trials, BINS, LOW, HIGH)


def exact_kolmogorov(n):
    """sup_y |E F_N(y) − F_sc(y)| for the GUE normalised as X = H/√N, on a fine grid."""
    y = np.linspace(-2.6, 2.6, 260001)
    x = math.sqrt(n) * y
    psi_prev = np.zeros_like(x)
    psi = (2 * math.pi) ** -0.25 * np.exp(-x * x / 4)
    k_diag = psi * psi
    for k in range(n - 1):
        psi_prev, psi = psi, (x * psi - math.sqrt(k) * psi_prev) / math.sqrt(k + 1)
        k_diag += psi * psi
    density = k_diag / math.sqrt(n)  # of y = x/√N, averaged over the N eigenvalues
    f_n = cumulative_trapezoid(density, y, initial=0.0)
    yc = np.clip(y, -2, 2)
    f_sc = 0.5 + yc * np.sqrt(4 - yc * yc) / (4 * math.pi) + np.arcsin(yc / 2) / math.pi
    return float(np.max(np.abs(f_n - f_sc)))


def rows(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("report: GUE rates end to end")
    with rh.WorkDir("gue-rate") as d:
        rh.write(os.path.join(d, "pilot.toml"), job(7, 8000))
        r = rh.run(rh.command(exe, ["run", "pilot.toml", "-o", "pilot.h5", "--quiet"], ranks=2), d)
        if not c.equal(r.returncode, 0, "the pilot run finishes"):
            print(r.stderr)
            c.finish()
        r = rh.run([exe, "plan", "pilot.toml", "--rate-halfwidth", str(HALFWIDTH), "--pilot", "pilot.h5",
                    "--rate-quantity", "kolmogorov"], d)
        if not c.equal(r.returncode, 0, "plan --rate-halfwidth exits 0"):
            print(r.stderr)
            c.finish()
        match = re.search(r"^recommended:\s+trials per size (\d+)", r.stdout, re.M)
        if not c.check(match is not None, "plan recommends a number of trials"):
            print(r.stdout)
            c.finish()
        trials = int(match.group(1))
        print(r.stdout.splitlines()[0])
        c.check(8000 < trials < 40000, "it asks for more than the pilot's 8000: %d" % trials)
        rh.write(os.path.join(d, "gue.toml"), job(8, trials))
        r = rh.run(rh.command(exe, ["run", "gue.toml", "-o", "gue.h5", "--quiet"], ranks=2), d)
        if not c.equal(r.returncode, 0, "the run with plan's trials finishes"):
            print(r.stderr)
            c.finish()
        r = rh.run([exe, "report", "gue.h5", "-o", "rep", "--no-figures"], d)
        if not c.equal(r.returncode, 0, "report exits 0"):
            print(r.stderr)
            c.finish()
        fits = {f["key"]: f for f in rows(os.path.join(d, "rep", "fits.csv"))}
        sizes = {int(float(s["n"])): s for s in rows(os.path.join(d, "rep", "sizes.csv"))}
        ext = [e for e in rows(os.path.join(d, "rep", "extremes.csv")) if e["quantity"] == "largest"]

        ks = fits.get("kolmogorov")
        c.check(ks is not None and ks["ok"] == "1" and ks["points"] == str(len(SIZES)),
                "the Kolmogorov distance is fitted on every size", ks and ks["warnings"])
        if ks is not None and ks["ok"] == "1":
            lo, hi, alpha = float(ks["ci_low"]), float(ks["ci_high"]), float(ks["alpha"])
            c.check(lo <= 1.0 <= hi, "α(Kolmogorov) = %.3f, 95%% CI [%.3f, %.3f] contains 1" % (alpha, lo, hi))
            half = 0.5 * (hi - lo)
            c.check(0.7 * HALFWIDTH <= half <= 1.3 * HALFWIDTH,
                    "its half-width %.3f is within ± 30%% of the %.2f asked of plan" % (half, HALFWIDTH))
            blo, bhi = float(ks["bootstrap_low"]), float(ks["bootstrap_high"])
            c.check(blo <= 1.0 <= bhi, "its bootstrap interval [%.3f, %.3f] contains 1" % (blo, bhi))
            c.check(float(ks["published_alpha"]) == 1.0 and "Götze" in ks["published_source"],
                    "the published exponent 1 (Götze & Tikhomirov) is printed beside it")
        for n in SIZES:  # the plain Hermite recurrence in doubles is reliable up to N = 400 here
            s = sizes[n]
            measured, se = float(s["kolmogorov"]), float(s["kolmogorov_se"])
            exact = exact_kolmogorov(n)
            c.check(s["distances_from_spectra"] == "1", "N = %d: the distance comes from the kept spectra" % n)
            c.check(abs(measured - exact) <= 4 * se and s["kolmogorov_resolved"] == "1",
                    "N = %d: Kolmogorov %.4g ± %.2g (resolved: %s) against the exact %.4g (Hermite kernel)"
                    % (n, measured, se, s["kolmogorov_resolved"], exact))

        ext.sort(key=lambda e: float(e["n"]))
        gaps = []
        for e in ext:
            mean, se = float(e["mean"]), float(e["standard_error"])
            gaps.append(2.0 - mean)
            c.check(2.0 - mean > 3 * se, "N = %s: mean largest %.5f is below 2 by more than 3 SE (%.1g)"
                    % (e["n"], mean, se))
        c.check(all(a > b for a, b in zip(gaps, gaps[1:])), "the gap to 2 shrinks with N: %s"
                % ", ".join("%.4g" % g for g in gaps))
        lg = fits.get("largest")
        if c.check(lg is not None and lg["ok"] == "1", "the largest eigenvalue's gap is fitted"):
            c.check(float(lg["ci_low"]) <= 2 / 3 <= float(lg["ci_high"]),
                    "α(largest) = %s, 95%% CI [%s, %s] contains 2/3 (Tracy–Widom scaling)"
                    % (lg["alpha"][:6], lg["ci_low"][:6], lg["ci_high"][:6]))
    c.finish()


if __name__ == "__main__":
    main()
