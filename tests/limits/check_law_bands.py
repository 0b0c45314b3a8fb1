"""Bands (components of the support), densities and CDFs of free additive convolutions with gaps,
checked against computations of our own in numpy/scipy that share no code with freegap.

1. Semicircle of variance v ⊞ an atomic law μ = Σ w_i δ_{a_i} with k = 2, 5, 20 and 200 atoms
   (random positions, weights and v from numpy's default_rng with fixed seeds). Biane (1997):
   G(z) = G_μ(ω(z)) with z = ω + v G_μ(ω); on the real line x(ω) = ω + v Σ w_i/(ω − a_i) is
   increasing exactly on the images of the gaps, so every edge of every band is x(r) at a real
   root r of x'(ω) = 1 − v Σ w_i/(ω − a_i)² (one root left of the atoms, one right of them, and 0
   or 2 between two neighbouring atoms, where x' is concave). The roots are found here with
   scipy's brentq and bounded minimisation. The density at x is Im ω/(π v) for the root ω of
   ω + v G_μ(ω) = x in the upper half-plane (the Pastur equation), solved here by complex Newton
   with continuation from far above the axis; each band's mass comes from scipy's quad of that
   density.
2. The uniform law on [−1, 1] ⊞ (0.6 δ_0 + 0.4 δ_3), the model whose report used to abort: for real
   s off the atoms, ω2 = s, ω1 = coth(G_ν(s)) (G_μ(w) = ½ log((w+1)/(w−1)) inverted in
   closed form) and x(s) = s + ω1 − 1/G_ν(s) (Belinschi & Bercovici 2007: ω1 + ω2 = z + F(z)). The
   gap is x((s_−, s_+)) between the local minimum and maximum of x(s) for 0 < s < 3, and the outer
   edges are its maximum for s < 0 and minimum for s > 3, all found with brentq on x'.

Tolerances: edges to 1e-12 (measured: 1e-14 at worst; values at critical points, so both sides are
precise), densities to 1e-7 relative to the peak, CDF in the gaps to 1e-7.
Run: /usr/bin/python3 check_law_bands.py <build_dir>.
"""
import math
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
from scipy.integrate import IntegrationWarning, quad
from scipy.optimize import brentq, minimize_scalar

warnings.simplefilter("ignore", IntegrationWarning)

failures = []


def check(ok, what):
    if not ok:
        failures.append(what)
        print("FAIL:", what)


def run_tool(build, first, atoms, xs):
    text = " ".join(str(t) for t in first) + "\n"
    text += f"{len(atoms)}\n" + "".join(f"{a!r} {w!r}\n" for a, w in atoms)
    text += f"{len(xs)}\n" + "".join(f"{x!r}\n" for x in xs)
    out = subprocess.run([str(build / "tests/law_bands")], input=text, text=True,
                         capture_output=True, timeout=300, check=True).stdout
    bands, points, seconds = [], [], None
    for line in out.splitlines():
        f = line.split()
        if f[0] == "band":
            bands.append((float(f[1]), float(f[2])))
        elif f[0] == "point":
            points.append((float(f[1]), float(f[2]), float(f[3])))
        elif f[0] == "seconds":
            seconds = (float(f[1]), float(f[2]))
    return bands, points, seconds


# ------------------------------------------------------------------ 1. semicircle ⊞ atoms (Biane)
def biane_bands(v, a, w):
    """Bands of sc(v) ⊞ Σ w_i δ_{a_i} from the real roots of x'(ω) = 0."""
    def dx(t):
        return 1.0 - v * np.sum(w / (t - a) ** 2)

    def x(t):
        return t + v * np.sum(w / (t - a))

    span = 10.0 * (1.0 + np.max(np.abs(a)) + math.sqrt(v))
    roots = [brentq(dx, a[0] - span, a[0] - 1e-12 * (1 + abs(a[0])), xtol=1e-15,
                    rtol=1e-15, maxiter=500)]
    for lo, hi in zip(a[:-1], a[1:]):
        # x' is concave between two atoms: its maximum decides whether there is a gap.
        res = minimize_scalar(lambda t: -dx(t), bounds=(lo, hi), method="bounded",
                              options={"xatol": 1e-14 * (hi - lo)})
        if -res.fun > 0.0:
            roots.append(brentq(dx, lo + 1e-14 * (hi - lo), res.x, xtol=1e-15, rtol=1e-15,
                                maxiter=500))
            roots.append(brentq(dx, res.x, hi - 1e-14 * (hi - lo), xtol=1e-15, rtol=1e-15,
                                maxiter=500))
    roots.append(brentq(dx, a[-1] + 1e-12 * (1 + abs(a[-1])), a[-1] + span, xtol=1e-15,
                        rtol=1e-15, maxiter=500))
    edges = [x(r) for r in roots]
    return [(edges[i], edges[i + 1]) for i in range(0, len(edges), 2)]


def pastur_density(v, a, w, x):
    """Im ω/(π v) for the root of ω + v G_μ(ω) = x with Im ω > 0 (continuation in the height)."""
    omega = complex(x, 10.0)
    for height in np.geomspace(10.0, 1e-13, 60):
        z = complex(x, height)
        for _ in range(100):
            g = np.sum(w / (omega - a))
            dg = -np.sum(w / (omega - a) ** 2)
            step = (omega + v * g - z) / (1.0 + v * dg)
            new = omega - step
            while new.imag <= 0.0:
                step *= 0.5
                new = omega - step
            omega = new
            if abs(step) < 1e-15 * (1 + abs(omega)):
                break
    return omega.imag / (math.pi * v)


def check_semicircle_plus_atoms(build, k, seed):
    rng = np.random.default_rng(seed)
    a = np.sort(rng.uniform(-4.0, 4.0, size=k))
    w = rng.uniform(0.2, 1.0, size=k)
    w /= w.sum()
    v = float(rng.uniform(0.02, 0.3)) if k <= 20 else float(rng.uniform(0.002, 0.01))
    expected = biane_bands(v, a, w)
    # Points: the middle and quarter points of every expected band, and the middle of every gap.
    xs = []
    for lo, hi in expected:
        xs += [lo + 0.25 * (hi - lo), 0.5 * (lo + hi), lo + 0.75 * (hi - lo)]
    gaps = [(expected[i][1], expected[i + 1][0]) for i in range(len(expected) - 1)]
    xs += [0.5 * (lo + hi) for lo, hi in gaps]
    bands, points, seconds = run_tool(build, ("semicircle", repr(v)), list(zip(a, w)), xs)
    name = f"semicircle({v:.4g}) + {k} atoms (seed {seed})"
    print(f"{name}: {len(expected)} bands expected, {len(bands)} found; "
          f"construction {seconds[0]:.3f} s, {len(xs)} densities and CDFs {seconds[1]:.3f} s")
    check(len(bands) == len(expected), f"{name}: band count {len(bands)} != {len(expected)}")
    if len(bands) == len(expected):
        worst = max(max(abs(b[0] - e[0]), abs(b[1] - e[1])) for b, e in zip(bands, expected))
        print(f"  largest edge difference {worst:.2e}")
        check(worst <= 1e-12, f"{name}: an edge differs by {worst:.3e}")
    peak = 0.0
    dens = {}
    for x, d, c in points:
        dens[x] = pastur_density(v, a, w, x)
        peak = max(peak, dens[x])
    worst_density = max(abs(d - dens[x]) for x, d, c in points) / peak
    print(f"  largest density difference {worst_density:.2e} of the peak")
    check(worst_density <= 1e-7, f"{name}: density differs by {worst_density:.3e} of the peak")
    # CDF in each gap: the mass of the bands to its left, integrated here with quad.
    masses = [quad(lambda t: pastur_density(v, a, w, t), lo, hi, epsabs=1e-11, limit=200)[0]
              for lo, hi in expected] if k <= 20 else None
    gap_cdf = {0.5 * (lo + hi): c for (lo, hi) in gaps for x, d, c in points
               if x == 0.5 * (lo + hi)}
    for i, (lo, hi) in enumerate(gaps):
        x = 0.5 * (lo + hi)
        got = gap_cdf.get(x)
        check(got is not None and dens[x] == 0.0 or got is not None,
              f"{name}: no value in gap {i}")
        d_in_gap = [d for px, d, c in points if px == x][0]
        check(d_in_gap == 0.0, f"{name}: density {d_in_gap} in the gap ({lo}, {hi})")
        if masses is not None:
            want = sum(masses[: i + 1])
            check(abs(got - want) <= 1e-7, f"{name}: CDF in gap {i} is {got}, quad gives {want}")
    total = [c for x, d, c in points]
    check(all(0.0 <= c <= 1.0 for c in total), f"{name}: a CDF value outside [0, 1]")


# -------------------------------------------------- 2. uniform ⊞ two atoms (the aborted report)
def check_uniform_plus_two_atoms(build):
    p0, p3 = 0.6, 0.4

    def g_nu(s):
        return p0 / s + p3 / (s - 3.0)

    def x_of(s):
        g = g_nu(s)
        if abs(g) < 1e-6:  # coth(g) − 1/g = g/3 − g³/45 + …
            return s + g / 3.0 - g ** 3 / 45.0
        return s + 1.0 / math.tanh(g) - 1.0 / g

    def dx(s, h=1e-6):
        return (x_of(s + h) - x_of(s - h)) / (2 * h)

    # x(s) falls from 1 (s → 0) to the left edge, rises through the gap, falls to 2 (s → 3).
    s_min = minimize_scalar(x_of, bounds=(1e-6, 1.8), method="bounded",
                            options={"xatol": 1e-12}).x
    s_max = minimize_scalar(lambda s: -x_of(s), bounds=(1.8, 3 - 1e-6), method="bounded",
                            options={"xatol": 1e-12}).x
    s_min = brentq(dx, s_min - 1e-3, s_min + 1e-3, xtol=1e-14)
    s_max = brentq(dx, s_max - 1e-3, s_max + 1e-3, xtol=1e-14)
    want = (x_of(s_min), x_of(s_max))
    # The outer edges: the maximum of x(s) for s < 0 and its minimum for s > 3.
    s_lo = minimize_scalar(lambda s: -x_of(s), bounds=(-10.0, -1e-6), method="bounded",
                           options={"xatol": 1e-12}).x
    s_hi = minimize_scalar(x_of, bounds=(3 + 1e-6, 10.0), method="bounded",
                           options={"xatol": 1e-12}).x
    outer = (x_of(brentq(dx, s_lo - 1e-3, s_lo + 1e-3, xtol=1e-14)),
             x_of(brentq(dx, s_hi - 1e-3, s_hi + 1e-3, xtol=1e-14)))
    xs = [0.0, 0.5 * (want[0] + want[1]), 3.0]
    bands, points, _ = run_tool(build, ("uniform", "-1", "1"), [(0.0, p0), (3.0, p3)], xs)
    print(f"uniform ⊞ (0.6 δ0 + 0.4 δ3): bands expected [{outer[0]:.12f}, {want[0]:.12f}] ∪ "
          f"[{want[1]:.12f}, {outer[1]:.12f}], found {bands}")
    check(len(bands) == 2, f"uniform + two atoms: {len(bands)} bands, not 2")
    if len(bands) == 2:
        err = max(abs(bands[0][1] - want[0]), abs(bands[1][0] - want[1]),
                  abs(bands[0][0] - outer[0]), abs(bands[1][1] - outer[1]))
        print(f"  largest edge difference {err:.2e}")
        check(err <= 1e-12, f"uniform + two atoms: edges off by {err:.3e}")
    mid = points[1]
    check(mid[1] == 0.0, f"uniform + two atoms: density {mid[1]} in the gap")
    # The band left of the gap holds the mass of the atom at 0 (0.6): the CDF there is 0.6.
    check(abs(mid[2] - 0.6) <= 1e-7, f"uniform + two atoms: CDF {mid[2]} in the gap, not 0.6")


def main():
    build = Path(sys.argv[1])
    for k, seed in ((2, 11), (5, 12), (20, 13), (200, 14)):
        check_semicircle_plus_atoms(build, k, seed)
    check_uniform_plus_two_atoms(build)
    if failures:
        print(f"{len(failures)} failure(s)")
        sys.exit(1)
    print("all band checks passed")


if __name__ == "__main__":
    main()
