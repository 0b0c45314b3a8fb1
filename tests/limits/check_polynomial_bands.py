"""The polynomial solver's support as it is: bands with gaps between them, and point masses away
from the constant term, found by `freegap limit` for models no closed-form rule takes.

Models (scenarios of our own):
1. (X + D)² written out as X X + X D + D X + D D, X a GUE matrix and D a diagonal with atoms 3
   and 9 (weights ½): the law is the image under t ↦ t² of the semicircle ⊞ ½(δ₃ + δ₉), which
   has two bands, so the square has a gap between 18.66 and 58.99.
2. P Q P + P with P = B and Q = U C U^* free projections of traces α = 0.7 and β = 0.6: point
   masses at 0 (the kernel of P, mass 1 − α), at 1 (the range of P meeting the kernel of Q, mass
   α − β, 0.011 from the band) and at 2 (the range of P meeting that of Q, mass α + β − 1); the
   constant term is 0, so two of them are away from it.

Outside references (independent of freegap's code):
- the edges of μ ⊞ σ_t, μ atomic: ω + t G_μ(ω) at the real critical points, the roots of
  t Σ w_k/(ω − a_k)² = 1 (Biane 1997), found here with numpy.roots; the square maps each band
  [a, b] with 0 < a to [a², b²];
- the masses of the atoms of P Q P for free projections in general position: 1 − α at 0 from
  the kernel of P, α − β at 0 from ran P ∩ ker Q and α + β − 1 at 1 from the intersection of
  the ranges (Nica & Speicher 2006, the free product of two projections; from memory), so
  P Q P + P has them at 0, 1 and 2 (the continuous part, mass 1 − α − (α − β) − (α + β − 1) =
  0.3, lives in (1, 2));
- the exact moments printed by `limit` (free cumulants) against the law's.

Usage: /usr/bin/python3 check_polynomial_bands.py <build_dir>
"""

import csv
import os
import re
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

exe = rh.freegap_exe(sys.argv)
checks = rh.Checks("the polynomial solver finds gaps and point masses")
check = checks.check


def biane_edges(atoms, weights, t):
    """Edges of the semicircle of variance t ⊞ Σ w δ_a (Biane 1997), sorted."""
    poly = np.poly1d([1.0])
    for a in atoms:
        poly = poly * np.poly1d([1.0, -a]) ** 2
    rhs = np.poly1d([0.0])
    for k, w in enumerate(weights):
        term = np.poly1d([t * w])
        for j, a in enumerate(atoms):
            if j != k:
                term = term * np.poly1d([1.0, -a]) ** 2
        rhs = rhs + term
    roots = (poly - rhs).r
    omegas = np.sort(roots[np.abs(roots.imag) < 1e-9].real)
    return np.sort([o + t * sum(w / (o - a) for a, w in zip(atoms, weights)) for o in omegas])


def run_limit(args, cwd):
    p = rh.run(rh.command(exe, ["limit"] + args), cwd=cwd)
    return p


def parse(out):
    support = re.search(r"^support: \[(\S+), (\S+)\]$", out, re.M)
    bands = [(float(a), float(b)) for a, b in re.findall(r"^  \[(\S+), (\S+)\]$", out, re.M)]
    atoms = [(float(x), float(m)) for m, x in re.findall(r"^point mass: (\S+) at x = (\S+)$", out, re.M)]
    moments = {}
    for k, law, exact in re.findall(r"^  m(\d+)\s+(\S+)\s+(\S+)$", out, re.M):
        moments[int(k)] = (float(law), float(exact))
    return support, bands, atoms, moments


with rh.WorkDir("polynomial-bands") as wd:
    # 1. A gap between two bands.
    decl = ["-m", "X=gue", "-m", "D=diagonal:atoms=3@0.5,9@0.5"]
    expression = "X X + X D + D X + D D"
    p = run_limit(["-e", expression, "-k", "4"] + decl, wd)
    check(p.returncode == 0, "(X + D)²: limit exits 0", p.stderr)
    support, bands, atoms, moments = parse(p.stdout)
    edges = biane_edges([3.0, 9.0], [0.5, 0.5], 1.0)
    want = [e * e for e in edges]  # all edges are positive here, so squaring keeps the order
    check(all(e > 0 for e in edges), "(X + D)²: the reference bands lie in (0, ∞)", edges)
    got = [x for band in bands for x in band]
    check(len(bands) == 2, "(X + D)²: two bands", p.stdout)
    if len(got) == 4:
        worst = max(abs(g - w) / w for g, w in zip(got, want))
        # The solver bisects its two-distance test down to 10⁻⁸ of the norm bound (121 here).
        check(worst < 1e-7, "(X + D)²: every edge, the gap's included, equals the squared Biane "
              "edge to 1e-7 relative (worst %.1e)" % worst, "got %s, want %s" % (got, want))
    check(moments and all(abs(law - exact) <= 1e-8 * max(1.0, abs(exact))
                          for law, exact in moments.values()),
          "(X + D)²: the law's moments equal the exact ones", p.stdout)
    if len(got) == 4:
        gap = np.linspace(got[1] + 0.05, got[2] - 0.05, 11)
        out = os.path.join(wd, "gap")
        q = run_limit(["-e", expression] + decl + ["--window", "%r,%r" % (gap[0], gap[-1]),
                                                   "--points", "11", "-o", out], wd)
        rows = list(csv.DictReader(open(os.path.join(out, "limit.csv")))) if q.returncode == 0 else []
        check(len(rows) == 11 and all(float(r["density"]) == 0.0 for r in rows),
              "(X + D)²: the density is exactly 0 inside the gap", rows or q.stderr)

    # 2. Point masses at 0 and at 2.
    alpha, beta = 0.7, 0.6
    decl = ["-m", "B=diagonal:atoms=0@0.3,1@0.7", "-m", "C=diagonal:atoms=0@0.4,1@0.6",
            "-m", "U=haar_unitary"]
    p = run_limit(["-e", "B U C U^* B + B", "-k", "4"] + decl, wd)
    check(p.returncode == 0, "P Q P + P: limit exits 0", p.stderr)
    support, bands, atoms, moments = parse(p.stdout)
    found = dict((round(x, 6), m) for x, m in atoms)
    check(0.0 in found and abs(found[0.0] - (1 - alpha)) < 1e-5,
          "P Q P + P: a point mass 1 − α = 0.3 at 0", atoms)
    near_two = [m for x, m in atoms if abs(x - 2.0) < 1e-6]
    check(len(near_two) == 1 and abs(near_two[0] - (alpha + beta - 1)) < 1e-5,
          "P Q P + P: a point mass α + β − 1 = 0.3 at 2, away from the constant term", atoms)
    near_one = [m for x, m in atoms if abs(x - 1.0) < 1e-6]
    check(len(near_one) == 1 and abs(near_one[0] - (alpha - beta)) < 1e-5,
          "P Q P + P: a point mass α − β = 0.1 at 1, beside the band", atoms)
    check(len(bands) <= 1 and support is not None and float(support.group(2)) >= 2.0 - 1e-6,
          "P Q P + P: the support reaches the atom at 2", p.stdout)

checks.finish()
