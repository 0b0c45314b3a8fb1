"""A polynomial in one matrix gets the image of that matrix's law: `freegap limit`'s density and
CDF against an independent computation in numpy/scipy, with no mass lost where the density is
infinite.

Models (scenarios of our own):
1. X³ − 2X for a GUE X: the image of the semicircle under p(x) = x³ − 2x. Its density is infinite
   at the critical values ±(4/3)√(2/3); the polynomial solver that took it before lost 8.7 % of
   the mass there.
2. W² − W for a complex Wishart W of ratio 2: Marchenko–Pastur(2) has an atom ½ at 0, which p
   keeps at p(0) = 0; the continuous part folds at the minimum −¼ of p.

Outside references (independent of freegap's code):
- the change of variables for the image law: f_Y(y) = Σ f_X(x)/|p′(x)| over the real roots x of
  p(x) = y, and P(Y ≤ y) = P(X ∈ {p ≤ y}) (common practice);
- the real roots by numpy.roots (companion eigenvalues), where freegap bisects on monotone pieces;
- the semicircle's CDF by scipy.stats.semicircular (scale 2), Marchenko–Pastur's by scipy's quad
  of its density √((b − x)(x − a))/(2π c x) (Marchenko & Pastur 1967);
- the exact moments printed by `limit` (free cumulants, Nica & Speicher 2006) against the law's.

Usage: /usr/bin/python3 check_polynomial_image.py <build_dir>
"""

import csv
import os
import re
import sys

import numpy as np
from scipy import integrate, stats

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

exe = rh.freegap_exe(sys.argv)
checks = rh.Checks("a polynomial in one matrix: the image of its law")
check = checks.check


def semicircle_density(x):
    return np.where(np.abs(x) < 2.0, np.sqrt(np.maximum(4.0 - x * x, 0.0)) / (2.0 * np.pi), 0.0)


def semicircle_cdf(x):
    return stats.semicircular(scale=2.0).cdf(x)


MP_RATIO = 2.0
MP_A, MP_B = (1.0 - np.sqrt(MP_RATIO)) ** 2, (1.0 + np.sqrt(MP_RATIO)) ** 2


def mp_density(x):
    x = np.asarray(x, dtype=float)
    inside = (x > MP_A) & (x < MP_B)
    safe = np.where(inside, x, 1.0)
    return np.where(inside, np.sqrt(np.abs((MP_B - safe) * (safe - MP_A))) / (2.0 * np.pi * MP_RATIO * safe), 0.0)


def mp_continuous_cdf(x):
    """The continuous part's mass on (−∞, x] (the atom ½ at 0 left out)."""
    if x <= MP_A:
        return 0.0
    x = min(x, MP_B)
    # θ-substitution x = a + (b − a)(1 − cos θ)/2 removes the square-root edges.
    theta_x = np.arccos(1.0 - 2.0 * (x - MP_A) / (MP_B - MP_A))
    value, _ = integrate.quad(
        lambda t: mp_density(MP_A + 0.5 * (MP_B - MP_A) * (1.0 - np.cos(t))) * 0.5 * (MP_B - MP_A) * np.sin(t),
        0.0, theta_x, epsabs=1e-14, epsrel=1e-13, limit=200)
    return value


def real_roots(coefficients, y, lo, hi):
    """Real roots of p(x) = y in (lo, hi), numpy.roots (coefficients highest first)."""
    c = np.array(coefficients, dtype=float)
    c[-1] -= y
    r = np.roots(c)
    real = r[np.abs(r.imag) <= 1e-7 * max(1.0, np.max(np.abs(r)))].real
    # Polish (a near-double root from the companion matrix is accurate only to √ε).
    dc = np.polyder(c)
    for _ in range(3):
        d = np.polyval(dc, real)
        step = np.where(d != 0.0, np.polyval(c, real) / np.where(d != 0.0, d, 1.0), 0.0)
        real = real - step
    return np.sort(real[(real > lo) & (real < hi)])


def reference(coefficients, y, lo, hi, density, continuous_cdf):
    """Density and continuous CDF of p(X) at y, X's continuous part on [lo, hi]."""
    dc = np.polyder(np.array(coefficients, dtype=float))
    roots = real_roots(coefficients, y, lo, hi)
    f = float(np.sum(density(roots) / np.abs(np.polyval(dc, roots)))) if len(roots) else 0.0
    # {x ∈ [lo, hi] : p(x) ≤ y} is a union of intervals between consecutive cut points.
    cuts = np.concatenate(([lo], roots, [hi]))
    total = 0.0
    for a, b in zip(cuts[:-1], cuts[1:]):
        if np.polyval(coefficients, 0.5 * (a + b)) <= y:
            total += continuous_cdf(b) - continuous_cdf(a)
    return f, total


def worst_errors(rows, expected):
    """Largest density error (relative to max(1, f)) and CDF error of `limit`'s rows against
    expected(x) = (density, cdf)."""
    worst_f = worst_cdf = 0.0
    for x, f, F in rows:
        g, G = expected(x)
        worst_f = max(worst_f, abs(f - g) / max(1.0, g))
        worst_cdf = max(worst_cdf, abs(F - G))
    return worst_f, worst_cdf


def limit_table(workdir, tag, declarations, expression, window, points):
    out = os.path.join(workdir, tag)
    args = ["limit", "-e", expression, "-o", out, "--window", "%r,%r" % window, "--points", str(points)]
    for d in declarations:
        args += ["-m", d]
    r = rh.run(rh.command(exe, args), workdir)
    check(r.returncode == 0, "%s: limit exits 0" % expression, r.stderr)
    rows = []
    if r.returncode == 0:
        with open(os.path.join(out, "limit.csv")) as f:
            rows = [(float(row["x"]), float(row["density"]), float(row["cdf"])) for row in csv.DictReader(f)]
    return r.stdout, rows


def moments_agree(stdout, expression):
    pairs = re.findall(r"^\s+m(\d+)\s+(\S+)\s+(\S+)\s*$", stdout, re.M)
    check(len(pairs) >= 4, "%s: limit prints the law's moments beside the exact ones" % expression, stdout)
    worst = max((abs(float(a) - float(b)) / max(1.0, abs(float(b))) for _, a, b in pairs), default=1.0)
    check(worst <= 1e-9, "%s: the law's moments equal the exact ones to 1e-9 (worst %.2e)" % (expression, worst))


with rh.WorkDir("polyimage") as work:
    # 1. X³ − 2X, X a GUE.
    cubic = [1.0, 0.0, -2.0, 0.0]
    stdout, rows = limit_table(work, "cubic", ["X=gue"], "X^3 - 2 X", (-4.2, 4.2), 841)
    check("note:" not in stdout, "X^3 - 2 X: no note of missing mass", stdout)
    check(re.search(r"^support: \[-4\.0000000000, 4\.0000000000\]$", stdout, re.M) is not None,
          "X^3 - 2 X: the support is p([−2, 2]) = [−4, 4]", stdout)
    moments_agree(stdout, "X^3 - 2 X")
    worst_f, worst_cdf = worst_errors(rows, lambda x: reference(cubic, x, -2.0, 2.0, semicircle_density,
                                                                 semicircle_cdf))
    check(len(rows) == 841 and worst_f <= 1e-9,
          "X^3 - 2 X: density equals the change of variables over numpy's roots to 1e-9 (worst %.2e)" % worst_f)
    check(len(rows) == 841 and worst_cdf <= 1e-10,
          "X^3 - 2 X: CDF equals scipy's semicircle CDF over {p ≤ y} to 1e-10 (worst %.2e)" % worst_cdf)
    # Right at and beside the critical values the CDF loses nothing: the mass below −v is the
    # semicircle's mass on [−2, −2√(2/3)] (x³ − 2x + v = (x − √(2/3))²(x + 2√(2/3))).
    v = 4.0 / 3.0 * np.sqrt(2.0 / 3.0)
    _, rows_v = limit_table(work, "critical", ["X=gue"], "X^3 - 2 X", (-v - 1e-6, v + 1e-6), 11)
    if rows_v:
        expected = float(semicircle_cdf(-2.0 * np.sqrt(2.0 / 3.0)))
        # At a distance δ from a critical value the CDF moves by about √δ: 1e-6 away, ~1e-4.
        got = rows_v[0][2]
        g, G = reference(cubic, rows_v[0][0], -2.0, 2.0, semicircle_density, semicircle_cdf)
        check(abs(got - G) <= 1e-10, "X^3 - 2 X: CDF 1e-6 below the critical value −v equals the "
              "reference to 1e-10 (%.3e vs %.3e; P(Y ≤ −v) = %.6f)" % (got, G, expected))

    # 2. W² − W, W complex Wishart of ratio 2 (MP(2): atom ½ at 0).
    quadratic = [1.0, -1.0, 0.0]
    stdout, rows = limit_table(work, "wishart", ["W=wishart_complex:ratio=2"], "W W - W", (-0.3, 28.5), 600)
    check(re.search(r"^point mass: 0\.500000 at x = 0$", stdout, re.M) is not None,
          "W W - W: the atom ½ of MP(2) at 0 stays at p(0) = 0", stdout)
    moments_agree(stdout, "W W - W")
    def with_atom(x):
        g, G = reference(quadratic, x, MP_A, MP_B, mp_density, mp_continuous_cdf)
        return g, G + (0.5 if x >= 0.0 else 0.0)

    worst_f, worst_cdf = worst_errors(rows, with_atom)
    check(len(rows) == 600 and worst_f <= 1e-9,
          "W W - W: density equals the change of variables over numpy's roots to 1e-9 (worst %.2e)" % worst_f)
    check(len(rows) == 600 and worst_cdf <= 1e-10,
          "W W - W: CDF equals scipy's quad of the MP density over {p ≤ y} to 1e-10 (worst %.2e)" % worst_cdf)
    check(rows and rows[-1][2] == 1.0, "W W - W: the CDF reaches 1 above the support")

checks.finish()
