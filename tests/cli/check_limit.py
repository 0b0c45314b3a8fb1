"""`freegap limit` end to end: printed edges and moments, the CSV against an outside computation,
the figures, and bad input (exit 2, nothing written).

Outside reference: the anticommutator s1 s2 + s2 s1 of free standard semicirculars has the Cauchy
transform solving z G³ + G² − z G + 1 = 0 (docs/check-values.md §1.8; law: Nica & Speicher 1998);
numpy.roots solves the cubic at each x and the density is max(−Im G)/π over the roots, the CDF is
scipy.integrate.quad of that density.

Usage: /usr/bin/python3 check_limit.py <build_dir>
"""

import os
import subprocess
import sys
import tempfile

import numpy as np
from scipy import integrate

build = sys.argv[1]
exe = os.path.join(build, "freegap")
failures = []


def check(ok, what):
    if not ok:
        failures.append(what)
        print("FAIL:", what)


def anticommutator_density(x):
    roots = np.roots([x, 1.0, -x, 1.0]) if x != 0 else np.roots([1.0, 0.0, 1.0])
    return max(0.0, max(-r.imag for r in roots) / np.pi)


with tempfile.TemporaryDirectory() as tmp:
    out = os.path.join(tmp, "anticommutator")
    r = subprocess.run([exe, "limit", "-m", "X1=gue", "-m", "X2=gue", "-e", "X1 X2 + X2 X1",
                        "-o", out, "--points", "200"], capture_output=True, text=True)
    check(r.returncode == 0, f"limit exits 0 (got {r.returncode}: {r.stderr})")
    text = r.stdout
    # Edge φ^{5/2} = 3.33019067678556 (docs/check-values.md §1.8), printed to 10 decimals.
    check("support: [-3.3301906768, 3.3301906768]" in text, "support edges printed")
    check("operator-norm limit: 3.3301906768" in text, "norm limit printed")
    check("pencil size: 3" in text, "pencil size printed")
    # Moments 2, 10, 66 (docs/check-values.md §1.8), solver beside exact.
    for k, m in ((2, "2"), (4, "10"), (6, "66")):
        line = next((l for l in text.splitlines() if l.strip().startswith(f"m{k} ")), "")
        check(line.split()[1:] == [m, m], f"m{k} solver and exact are {m}: '{line}'")
    check("200 points, 200 converged" in text, "every grid point converged")
    data = np.genfromtxt(os.path.join(out, "limit.csv"), delimiter=",", names=True)
    check(list(data.dtype.names) == ["x", "density", "cdf"], "CSV columns x, density, cdf")
    check(len(data) == 200, "200 rows")
    ref = np.array([anticommutator_density(x) for x in data["x"]])
    inside = np.abs(data["x"]) < 3.33
    err = np.max(np.abs(data["density"][inside] - ref[inside]))
    check(err < 1e-6, f"density within 1e-6 of the cubic's (max error {err:.2e})")
    for x0 in (-2.0, 0.5, 2.5):
        i = int(np.argmin(np.abs(data["x"] - x0)))
        F = integrate.quad(anticommutator_density, -3.33019067678556, data["x"][i],
                           epsabs=1e-12, limit=200)[0]
        check(abs(data["cdf"][i] - F) < 1e-6, f"CDF at {data['x'][i]:.4f}: {data['cdf'][i]} vs {F}")
    try:
        import matplotlib  # noqa: F401
        for ext in ("png", "svg"):
            p = os.path.join(out, "limit." + ext)
            check(os.path.exists(p) and os.path.getsize(p) > 1000, f"{p} written")
    except ImportError:
        check("note: no figures" in text, "missing matplotlib is reported")

    # The singular values of a non-self-adjoint product come from the law of P^*P, the same
    # derivation `report` uses: for free semicirculars X1, X2, (X1 X2)^*(X1 X2) = X2 X1² X2 has
    # the law of π ⊠ π, the Fuss–Catalan law with s = 2 on [0, 27/4] (Banica, Belinschi,
    # Capitaine & Collins 2011), so the singular values end at √(27/4) = 2.5980762114.
    r = subprocess.run([exe, "limit", "-m", "X1=gue", "-m", "X2=gue", "-e", "X1 X2",
                        "--points", "50"], capture_output=True, text=True)
    check(r.returncode == 0, f"singular values of X1 X2: exit 0 (got {r.returncode}: {r.stderr})")
    check("spectrum: singular values" in r.stdout, "singular values of X1 X2: the spectrum named")
    check("support: [0.0000000000, 2.5980762114]" in r.stdout,
          "singular values of X1 X2: support [0, sqrt(27/4)]")

    # The same derivation as `report`: a sum of two free U + U^* pairs is Kesten–McKay of
    # degree 4, edge 2√3 (Kesten 1959; McKay 1981).
    r = subprocess.run([exe, "limit", "-m", "U1=haar_unitary", "-m", "U2=haar_unitary", "-e",
                        "U1 + U1^* + U2 + U2^*", "--points", "50"], capture_output=True, text=True)
    check(r.returncode == 0 and "support: [-3.4641016151, 3.4641016151]" in r.stdout,
          f"Kesten–McKay from limit: {r.returncode} {r.stdout[:300]!r} {r.stderr!r}")

    # A support with a gap: uniform on [-1, 1] plus a Haar-rotated diagonal with atoms 0 (0.6)
    # and 3 (0.4): two bands, whose edges tests/limits/check_law_bands.py checks in closed form.
    r = subprocess.run([exe, "limit", "-m", "A=diagonal:law=uniform:low=-1:high=1",
                        "-m", "B=diagonal:atoms=0@0.6,3@0.4", "-m", "U=haar_unitary",
                        "-e", "A + U B U^*", "--points", "50"], capture_output=True, text=True)
    check(r.returncode == 0 and "bands of the continuous part: 2" in r.stdout and
          "[-0.8564018927, 0.8012434581]" in r.stdout and
          "[2.3606319603, 3.7415047768]" in r.stdout and "50 points, 50 converged" in r.stdout,
          f"gapped support from limit: {r.returncode} {r.stdout!r} {r.stderr!r}")

    # The limit does not depend on OPENBLAS_NUM_THREADS: `limit` and `report` run OpenBLAS on one
    # thread. Found 2026-12-05: with OpenBLAS's own threads this model's CDF differed in its 12th
    # digit between OPENBLAS_NUM_THREADS=1 and 2 (the solver's Newton systems go to LAPACK).
    model = ["-m", "A=diagonal:atoms=-1@0.5,1@0.5", "-m", "B=diagonal:atoms=1@0.5,2@0.5",
             "-m", "V=haar_unitary", "-e", "A V B V^* + V B V^* A", "--points", "50"]
    tables = []
    for threads in ("1", "2"):
        d = os.path.join(tmp, "blas" + threads)
        env = dict(os.environ, OPENBLAS_NUM_THREADS=threads)
        r = subprocess.run([exe, "limit"] + model + ["-o", d], capture_output=True, text=True,
                           env=env)
        check(r.returncode == 0, f"OPENBLAS_NUM_THREADS={threads}: exit 0 ({r.stderr})")
        with open(os.path.join(d, "limit.csv"), "rb") as f:
            tables.append(f.read())
    check(tables[0] == tables[1], "the limit's table is the same for 1 and 2 OpenBLAS threads")

    # Bad input: exit 2, a message naming the place, nothing written.
    for args, expect in (
        (["-m", "X1=gue", "-e", "X1 Y"], "freegap: unknown matrix 'Y' at column 4 (declared: X1)\n"),
        (["-m", "G=ginibre_complex", "-e", "G G^*"],
         "freegap: no limit is derived for 'G G^*': no predictor applies yet: no rule covers the "
         "term 'G G^*'; the polynomial solver does not cover it either: matrix 'G': Ginibre "
         "matrices are not covered by the polynomial limit (it needs self-adjoint variables; for "
         "G G^* declare a Wishart matrix instead)\n"),
        (["-m", "X=gue", "-e", "X", "--points", "3"], "freegap: --points must be between 10 and 100000 (got 3)\n"),
    ):
        bad = os.path.join(tmp, "bad")
        r = subprocess.run([exe, "limit"] + args + ["-o", bad], capture_output=True, text=True)
        check(r.returncode == 2, f"{args}: exit 2 (got {r.returncode})")
        check(r.stderr == expect, f"{args}: message {r.stderr!r}")
        check(not os.path.exists(bad), f"{args}: nothing written")

if failures:
    print(f"{len(failures)} failure(s)")
    sys.exit(1)
print("ok")
