#!/usr/bin/env python3
"""Bands, densities and band masses of MP(c) ⊠ H with gaps, checked against the sample-covariance
equations, computed here in numpy/scipy with no code shared with freegap.

MP(c) ⊠ H is the limit spectrum of T^{1/2} (X X^*/M) T^{1/2} with X of size N × M, c = N/M, and T's
spectrum H = Σ w_i δ_{t_i}. Its companion Stieltjes transform m̲ = −(1 − c)/z + c·m solves
    z = x(m̲) = −1/m̲ + c Σ w_i t_i/(1 + t_i m̲)
(Silverstein & Bai 1995, from memory), and on the real line x(m̲) is increasing exactly on the
images of the gaps of the support (Silverstein & Choi 1995, from memory): every edge is x(r) at a
real root r of x'(m̲) = 1/m̲² − c Σ w_i t_i²/(1 + t_i m̲)², found here with scipy's brentq between
the poles m̲ = 0, −1/t_i. The density at x > 0 is Im m̲/(cπ), m̲ the root with Im m̲ > 0 of
x(m̲) = x, solved by complex Newton with continuation from far above the axis. When the bands
separate, the mass of each band is the weight of the population values it comes from (the exact
separation of Bai & Silverstein 1999, from memory): checked on the CDF in every gap.

Models (fixed): c = 0.1 with H = ½δ₁ + ½δ₁₀ (2 bands); c = 0.05 with H = 0.3δ₁ + 0.5δ₄ + 0.2δ₁₂
(3 bands); c = 0.01 with 8 population values from numpy's default_rng(7) in [1, 30], weights
from the same generator (as many bands as separate).
Tolerances: edges to 1e-9 relative (critical values: both sides precise); densities to 1e-7 of
the peak; the CDF in a gap to 1e-7 of the band masses.
Run: /usr/bin/python3 check_law_bands_multiplicative.py <build_dir>.
"""
import os
import sys
from pathlib import Path

import numpy as np
from scipy.optimize import brentq

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import check_law_bands  # noqa: E402  (its runner of the law_bands tool)

failures = []


def check(ok, what):
    print(("  ok    " if ok else "  FAIL  ") + what)
    if not ok:
        failures.append(what)


def run_tool(build, c, atoms, xs):
    """The law_bands tool on MP(c) ⊠ atoms: (bands, points)."""
    atoms = [(float(t), float(w)) for t, w in atoms]  # plain floats print as plain numbers
    bands, points, _ = check_law_bands.run_tool(build, ("mp", repr(float(c))), atoms, [float(x) for x in xs])
    return bands, points


def critical_values(c, t, w):
    """x(r) at every real root r of x'(m) = 0, m ≠ 0, −1/t_i."""
    def dx(m):
        return 1.0 / m ** 2 - c * np.sum(w * t ** 2 / (1.0 + t * m) ** 2)

    def x_of(m):
        return -1.0 / m + c * np.sum(w * t / (1.0 + t * m))

    poles = np.sort(np.concatenate([[0.0], -1.0 / t]))
    big = 1e4 * (1.0 + 1.0 / t.min())
    bounds = [-big] + list(poles) + [big]
    values = []
    for a, b in zip(bounds[:-1], bounds[1:]):
        width = b - a
        # Grid graded towards both ends (the poles), where x' changes fastest.
        s = np.linspace(0.0, 1.0, 40001)[1:-1]
        grid = a + width * (0.5 - 0.5 * np.cos(np.pi * s)) ** 1.0
        grid = grid[(grid > a) & (grid < b)]
        d = np.array([dx(m) for m in grid])
        for i in np.nonzero(np.sign(d[:-1]) != np.sign(d[1:]))[0]:
            r = brentq(dx, grid[i], grid[i + 1], xtol=1e-15, rtol=1e-15)
            values.append(x_of(r))
    return sorted(v for v in values if v > 0.0)


def density(c, t, w, x):
    m = complex(-1.0 / (x + 10j))
    for eta in np.geomspace(10.0, 1e-13, 90):
        z = complex(x, eta)
        for _ in range(60):
            f = -1.0 / m + c * np.sum(w * t / (1.0 + t * m)) - z
            df = 1.0 / m ** 2 - c * np.sum(w * t ** 2 / (1.0 + t * m) ** 2)
            step = f / df
            new = m - step
            while new.imag <= 0:  # stay in the upper half-plane
                step *= 0.5
                new = m - step
            m = new
            if abs(step) < 1e-15 * (1 + abs(m)):
                break
    return m.imag / (c * np.pi)


def check_model(build, name, c, t, w):
    t = np.asarray(t, float)
    w = np.asarray(w, float)
    edges = critical_values(c, t, w)
    want = [(edges[i], edges[i + 1]) for i in range(0, len(edges) - 1, 2)]
    gaps = [0.5 * (want[i][1] + want[i + 1][0]) for i in range(len(want) - 1)]
    xs = gaps + [lo + f * (hi - lo) for lo, hi in want for f in (0.1, 0.37, 0.5, 0.81)]
    bands, points = run_tool(build, c, list(zip(t, w)), xs)
    print(f"{name}: {len(want)} bands expected, {len(bands)} found")
    check(len(edges) % 2 == 0 and len(bands) == len(want), f"{name}: band count {len(bands)} vs {len(want)}")
    if len(bands) == len(want):
        err = max(max(abs(a - b) / b, abs(c2 - d) / d) for (a, c2), (b, d) in zip(bands, want))
        check(err <= 1e-9, f"{name}: edges within {err:.1e} (relative) of the critical values")
    # Band masses: the population weights of the values each band holds, in order.
    order = np.argsort(t)
    cum = np.cumsum(w[order])
    for i, g in enumerate(gaps):
        cdf = points[i][2]
        # The gap after band i holds the mass of the population values below it: some prefix sum.
        near = float(cum[np.argmin(np.abs(cum - cdf))])
        check(abs(cdf - near) <= 1e-7 and points[i][1] == 0.0,
              f"{name}: gap at {g:.6g}: density {points[i][1]}, CDF {cdf:.12f} = a population prefix {near:.12f}")
    peak = 0.0
    rows = []
    for x, dens, _ in points[len(gaps):]:
        ref = density(c, t, w, x)
        peak = max(peak, ref)
        rows.append((x, dens, ref))
    err = max(abs(d - r) for _, d, r in rows) / peak
    check(err <= 1e-7, f"{name}: {len(rows)} densities within {err:.1e} of the peak")


def main():
    if len(sys.argv) != 2:
        sys.exit(__doc__)
    build = Path(sys.argv[1]).resolve()
    check_model(build, "MP(0.1) ⊠ (½δ1 + ½δ10)", 0.1, [1.0, 10.0], [0.5, 0.5])
    check_model(build, "MP(0.05) ⊠ (0.3δ1 + 0.5δ4 + 0.2δ12)", 0.05, [1.0, 4.0, 12.0], [0.3, 0.5, 0.2])
    rng = np.random.default_rng(7)
    t = np.sort(rng.uniform(1.0, 30.0, 8))
    w = rng.uniform(0.5, 1.5, 8)
    check_model(build, "MP(0.01) ⊠ 8 random values", 0.01, t, w / w.sum())
    print(f"{len(failures)} failures")
    sys.exit(1 if failures else 0)


if __name__ == "__main__":
    main()
