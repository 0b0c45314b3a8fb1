#!/usr/bin/env python3
"""End to end: resolved rates of both mean-spectrum distances for a Haar-rotated sum A + O B Oᵀ.

Usage: check_report_free_sum_rate.py BUILD_DIR

The model: A = diag of the uniform law on [−1, 1] (entries −1 + 2(k + ½)/N), B = diag(0, 1) with
half its entries each, O Haar orthogonal. Its limit μ_A ⊞ μ_B (Voiculescu 1986; Pastur &
Vasilchuk 2000 for the convergence, from memory) has a continuous density on about
[−0.98, 1.98]. 2000 trials per size at N = 50, 100, 200, 400 on 2 ranks (about 30 s).

What must hold (fixed seeds):
1. Both distances of the mean spectral distribution, Kolmogorov and Wasserstein-1, come from
   the kept spectra and are resolved at every size; both get a fit over all four sizes whose
   95% interval is narrower than ± 0.35 (the O(N) expansion is in powers of 1/N, Collins &
   Śniady 2006, from memory, so the exponents sit near 1; this run measures about 0.8–1.1).
2. The limit CDF freegap measures against agrees within 2e-5 with one computed here
   independently: the subordination equation z = ω + R_A(G_B(ω)) with R_A(g) = coth g − 1/g
   (the R-transform of the uniform law on [−1, 1]; Voiculescu 1986, from memory)
   and G_B(ω) = ½/ω + ½/(ω − 1), solved by Newton's method along z = x + iη with η falling from
   10 to 1e-12, density −Im G/π, CDF by the trapezoid rule on 40001 points.
3. The distances themselves agree with numpy's own Monte Carlo of the same model (Haar O from
   the QR of a real Gaussian matrix with the signs of R's diagonal taken out, Mezzadri 2007;
   numpy.linalg.eigvalsh), 2000 trials at N = 50 and 100, measured against that independent CDF:
   the plug-in values (same trial count, so the same upward bias) differ by at most
   4·√2·SE, with SE freegap's bootstrap standard error.
"""
import csv
import math
import os
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

SIZES = [50, 100, 200, 400]
TRIALS = 2000
NUMPY_SIZES = [50, 100]
JOB = """\
name = "uniform spectrum plus a rotated half-rank projection"
seed = 6
sizes = [%s]
trials = %d
expression = "A + O B O^*"

[matrices.A]
ensemble = "diagonal"
law = "uniform"
low = -1.0
high = 1.0

[matrices.B]
ensemble = "diagonal"
atoms = [[0.0, 0.5], [1.0, 0.5]]

[matrices.O]
ensemble = "haar_orthogonal"

[observe]
bins = 100
range = "auto"
max_moment = 4

[run]
trials_per_unit = 50
""" % (", ".join(map(str, SIZES)), TRIALS)


def limit_cdf():
    """(x, F(x)) of μ_A ⊞ μ_B on a fine grid, by subordination (see the module's text)."""
    x = np.linspace(-1.2, 2.2, 40001)
    s = x + 10j
    for eta in np.geomspace(10.0, 1e-12, 120):
        z = x + 1j * eta
        for _ in range(30):
            g = 0.5 / s + 0.5 / (s - 1.0)
            dg = -0.5 / s ** 2 - 0.5 / (s - 1.0) ** 2
            f = s + 1.0 / np.tanh(g) - 1.0 / g - z
            df = 1.0 + (-1.0 / np.sinh(g) ** 2 + 1.0 / g ** 2) * dg
            step = f / df
            s = s - step
            s = np.where(s.imag < 0, s.real + 1e-300j, s)  # stay in the upper half-plane
            if np.max(np.abs(step)) < 1e-14:
                break
    g = 0.5 / s + 0.5 / (s - 1.0)
    density = np.maximum(-g.imag / math.pi, 0.0)
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (density[1:] + density[:-1]) * np.diff(x))])
    return x, cdf


def haar_orthogonal(rng, n):
    q, r = np.linalg.qr(rng.standard_normal((n, n)))
    return q * np.sign(np.diag(r))


def numpy_distances(n, trials, grid_x, grid_f, rng):
    """Plug-in Kolmogorov and W1 of the pooled spectra of `trials` samples against the CDF."""
    a = -1.0 + 2.0 * (np.arange(n) + 0.5) / n
    b = np.zeros(n)
    b[n // 2:] = 1.0  # the diagonal's order does not matter: O is Haar
    pooled = []
    for _ in range(trials):
        o = haar_orthogonal(rng, n)
        m = np.diag(a) + (o * b) @ o.T
        pooled.append(np.linalg.eigvalsh(0.5 * (m + m.T)))
    v = np.sort(np.concatenate(pooled))
    count = len(v)
    f = np.interp(v, grid_x, grid_f)
    ks = max(np.max(np.arange(1, count + 1) / count - f), np.max(f - np.arange(count) / count))
    # W1 = ∫|F_n − F| on the fine grid joined with the sample points.
    xs = np.union1d(grid_x, v)
    fn = np.searchsorted(v, xs, side="right") / count
    diff = np.abs(fn - np.interp(xs, grid_x, grid_f))
    w1 = float(np.sum(0.5 * (diff[1:] + diff[:-1]) * np.diff(xs)))
    return float(ks), w1


def rows(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("report: resolved rates of A + O B Oᵀ")
    grid_x, grid_f = limit_cdf()
    c.check(abs(grid_f[-1] - 1.0) < 1e-5, "the independent limit has mass %.7f" % grid_f[-1])
    with rh.WorkDir("free-sum-rate") as d:
        rh.write(os.path.join(d, "sum.toml"), JOB)
        r = rh.run(rh.command(exe, ["run", "sum.toml", "-o", "sum.h5", "--quiet"], ranks=2), d)
        if not c.equal(r.returncode, 0, "the run finishes"):
            print(r.stderr)
            c.finish()
        r = rh.run([exe, "report", "sum.h5", "-o", "rep", "--no-figures"], d)
        if not c.equal(r.returncode, 0, "report exits 0"):
            print(r.stderr)
            c.finish()
        r = rh.run([exe, "limit", "-m", "A=diagonal:law=uniform:low=-1:high=1",
                    "-m", "B=diagonal:atoms=0@0.5,1@0.5", "-m", "O=haar_orthogonal",
                    "-e", "A + O B O^*", "-o", "lim", "--points", "2000"], d)
        if c.equal(r.returncode, 0, "freegap limit exits 0"):
            lim = rows(os.path.join(d, "lim", "limit.csv"))
            xs = np.array([float(p["x"]) for p in lim])
            fs = np.array([float(p["cdf"]) for p in lim])
            err = float(np.max(np.abs(fs - np.interp(xs, grid_x, grid_f))))
            c.check(err <= 2e-5, "freegap's limit CDF is within %.1e of the independent one" % err)
        fits = {f["key"]: f for f in rows(os.path.join(d, "rep", "fits.csv"))}
        sizes = {int(float(s["n"])): s for s in rows(os.path.join(d, "rep", "sizes.csv"))}
        for key in ("kolmogorov", "wasserstein1"):
            for n in SIZES:
                s = sizes[n]
                c.check(s["distances_from_spectra"] == "1" and s[key + "_resolved"] == "1",
                        "N = %d: %s %.4g ± %.2g (noise floor %.2g) resolved" %
                        (n, key, float(s[key]), float(s[key + "_se"]), float(s[key + "_noise_floor"])))
            f = fits.get(key)
            if c.check(f is not None and f["ok"] == "1" and f["points"] == str(len(SIZES)),
                       "%s is fitted on every size" % key):
                lo, hi = float(f["ci_low"]), float(f["ci_high"])
                c.check(hi - lo < 0.7, "α(%s) = %.3f, 95%% CI [%.3f, %.3f] narrower than ± 0.35; "
                        "bootstrap [%.3f, %.3f]" % (key, float(f["alpha"]), lo, hi,
                                                   float(f["bootstrap_low"]), float(f["bootstrap_high"])))
        rng = np.random.default_rng(20261203)
        for n in NUMPY_SIZES:
            ks, w1 = numpy_distances(n, TRIALS, grid_x, grid_f, rng)
            s = sizes[n]
            for key, mine in (("kolmogorov", ks), ("wasserstein1", w1)):
                theirs, se = float(s[key + "_plugin"]), float(s[key + "_se"])
                c.check(abs(theirs - mine) <= 4 * math.sqrt(2) * se,
                        "N = %d: %s plug-in %.4g, numpy's own sample %.4g (4·√2·SE = %.2g)" %
                        (n, key, theirs, mine, 4 * math.sqrt(2) * se))
    c.finish()


if __name__ == "__main__":
    main()
