"""Toeplitz matrices against their Szegő limit, and the free sum with a GUE, computed here
independently of freegap's free convolution.

1. `freegap limit` of a Toeplitz matrix with the symbol 2 cos θ (coefficients [0, 1]) gives the
   arcsine law on [−2, 2] (Szegő 1920; Grenander & Szegő 1958): its CDF against the closed form
   1/2 + asin(x/2)/π.
2. X + T with X a GUE: the limit is the free additive convolution of T's Szegő law with the
   semicircle (Voiculescu 1991, asymptotic freeness of a GUE and deterministic matrices). Here it
   is computed by the subordination equation of a semicircular summand, G(z) = G_ν(ω),
   ω = z − G(z) (Biane 1997), iterated as ω ← z − G_ν(ω) from ω = z, with
   G_ν(w) = (1/2π) ∫ dθ / (w − f(θ)) by the trapezoid rule in θ (exponentially accurate for a
   periodic integrand off the real axis: Trefethen & Weideman 2014), and for f = 2 cos θ also by
   the closed form G_ν(w) = 1/√(w² − 4). Densities −Im G/π at interior points must agree with
   freegap's `limit.csv` to 1e-7 (absolute): the iteration is run to 1e-14 here
   (tests/support/subordination.py), freegap's law to about 1e-9 (docs/check-values.md).
3. Sampled: eigenvalues of X + T at N = 500, 20 trials (seed 11), pooled: Kolmogorov distance to
   the limit CDF below 1.63/√(10 000) = 0.0163 (the 1 % point of the one-sample test for
   independent values, Massey 1951; eigenvalues are more regular than independent values, so it
   is conservative) plus 2/N for the finite-N bias of the mean spectral distribution (its O(1/N)
   size: Götze & Tikhomirov 2005 for a GUE, recalled from memory).

Run: /usr/bin/python3 check_toeplitz_free_sum.py <build_dir>.
"""
import csv
import math
import os
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402
from spectra import kept_spectra, kolmogorov_bound, pooled_kolmogorov  # noqa: E402
from subordination import semicircle_free_sum_density  # noqa: E402


def symbol(coefficients, theta):
    f = np.full_like(theta, coefficients[0])
    for j, c in enumerate(coefficients[1:], start=1):
        f += 2.0 * c * np.cos(j * theta)
    return f


def cauchy_trapezoid(coefficients, w, points=40000):
    theta = 2.0 * math.pi * np.arange(points) / points
    return complex(np.mean(1.0 / (w - symbol(coefficients, theta))))


def cauchy_arcsine(w):
    s = np.sqrt(w - 2.0) * np.sqrt(w + 2.0)  # the branch ~ w at infinity
    return 1.0 / s


def read_csv(path):
    with open(path) as f:
        rows = list(csv.DictReader(f))
    return [(float(r["x"]), float(r["density"]), float(r["cdf"])) for r in rows]


def limit_table(exe, d, declarations, expression, tag):
    out = os.path.join(d, tag)
    args = [exe, "limit", "-e", expression, "-o", out, "--points", "81"]
    for m in declarations:
        args += ["-m", m]
    r = rh.run(args, d)
    return r, (read_csv(os.path.join(out, "limit.csv")) if r.returncode == 0 else [])


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("Toeplitz matrices: Szegő limit and free sum with a GUE")
    with rh.WorkDir("toeplitz") as d:
        r, table = limit_table(exe, d, ["T=toeplitz:coefficients=0,1"], "T", "arcsine")
        if c.check(r.returncode == 0, "limit of the symbol 2 cos θ", r.stderr):
            worst = max(abs(cdf - (0.5 + math.asin(max(-1.0, min(1.0, x / 2))) / math.pi))
                        for x, _, cdf in table)
            c.check(worst < 1e-9, "its CDF is the arcsine law's to %.1e" % worst)

        for coefficients, closed in (([0.0, 1.0], True), ([0.5, 1.0, 0.3], False)):
            text = ",".join(repr(v) for v in coefficients)
            r, table = limit_table(exe, d, ["X=gue", "T=toeplitz:coefficients=" + text], "X + T",
                                   "sum" + text.replace(",", "_"))
            if not c.check(r.returncode == 0, "limit of X + T, coefficients %s" % text, r.stderr):
                continue
            g_nu = cauchy_arcsine if closed else (lambda w, cc=coefficients: cauchy_trapezoid(cc, w))
            worst, compared = 0.0, 0
            for x, density, _ in table:
                if density < 0.02:  # near an edge both sides resolve the square root less well
                    continue
                worst = max(worst, abs(semicircle_free_sum_density(g_nu, x) - density))
                compared += 1
            c.check(compared >= 40 and worst < 1e-7,
                    "X + T (%s): density at %d interior points equal to %.1e (%s)"
                    % (text, compared, worst, "closed-form arcsine G" if closed else "trapezoid G"))

        # Sampled spectra against the limit.
        job = rh.write(os.path.join(d, "toeplitz-gue.toml"), """\
name = "toeplitz plus gue"
seed = 11
sizes = [500]
trials = 20
expression = "X + T"
[matrices.X]
ensemble = "gue"
[matrices.T]
ensemble = "toeplitz"
coefficients = [0.5, 1.0, 0.3]
[observe]
keep_spectra = "all"
max_moment = 4
""")
        out = os.path.join(d, "toeplitz-gue.h5")
        r = rh.run(rh.command(exe, ["run", job, "-o", out, "--quiet"], 2), d)
        if c.check(r.returncode == 0, "X + T runs on 2 ranks", r.stderr):
            rep = rh.run([exe, "report", out, "-o", "rep", "--no-figures"], d)
            if c.check(rep.returncode == 0, "and is reported", rep.stderr):
                with open(os.path.join(d, "rep", "report.md")) as f:
                    md = f.read()
                c.check("law of its symbol f(θ)" in md, "the report names Szegő's law for T")
                _, table = limit_table(exe, d, ["X=gue", "T=toeplitz:coefficients=0.5,1.0,0.3"],
                                       "X + T", "sampled")
                values = np.sort(np.concatenate([s.ravel() for s in kept_spectra(out)]))
                xs = np.array([t[0] for t in table])
                cdf = np.array([t[2] for t in table])
                if c.check(values.size == 500 * 20, "%d kept eigenvalues" % values.size):
                    ks = pooled_kolmogorov(values, xs, cdf)
                    bound = kolmogorov_bound(values.size, 500)
                    c.check(ks < bound,
                            "Kolmogorov distance of the pooled spectra to the limit %.4f < %.4f"
                            % (ks, bound))
    c.finish()


if __name__ == "__main__":
    main()
