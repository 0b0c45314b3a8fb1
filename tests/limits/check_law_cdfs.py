"""Cross-check of the law tables printed by law_table: each density is re-implemented here from its
published formula and integrated with scipy.integrate.quad; the C++ CDF must agree to 1e-9 and the
C++ density to 1e-9 (relative). Run: /usr/bin/python3 check_law_cdfs.py <build_dir>."""
import math
import subprocess
import sys
from pathlib import Path

import warnings

from scipy.integrate import IntegrationWarning, quad

# quad warns about roundoff at the requested 1e-13; the comparison tolerance is 1e-9.
warnings.simplefilter("ignore", IntegrationWarning)


def sc(v):
    r = 2 * math.sqrt(v)
    return lambda x: math.sqrt(max(r * r - x * x, 0.0)) / (2 * math.pi * v)


def mp(c):
    # Marchenko & Pastur 1967 (from memory); the atom 1 - 1/c at 0 for c > 1 is added below.
    a, b = (1 - math.sqrt(c)) ** 2, (1 + math.sqrt(c)) ** 2
    return lambda x: math.sqrt(max((b - x) * (x - a), 0.0)) / (2 * math.pi * c * x) if a < x < b else 0.0


def km(d):
    # Kesten 1959; McKay 1981 (from memory).
    D = 2 * d
    return lambda x: D * math.sqrt(max(4 * (D - 1) - x * x, 0.0)) / (2 * math.pi * (D * D - x * x))


def arcsine(x):
    return 1 / (math.pi * math.sqrt(4 - x * x))


def fc2(x):
    # Penson & Zyczkowski 2011 closed form, as in reference section 1.5.
    r = 27 + 3 * math.sqrt(81 - 12 * x)
    return (2 ** (1 / 3) * math.sqrt(3) / (12 * math.pi)) * (
        2 ** (1 / 3) * r ** (2 / 3) - 6 * x ** (1 / 3)) / (x ** (2 / 3) * r ** (1 / 3))


def fc(s):
    # Parametrisation x(a) = sin^{s+1}((s+1)a)/(sin a sin^s(sa)), f = sin((s+1)a) sin a/(pi x sin(sa))
    # (derived from w^{s+1} = x(w - 1); see laws.cpp), a found by bisection.
    def xa(a):
        return math.sin((s + 1) * a) ** (s + 1) / (math.sin(a) * math.sin(s * a) ** s)

    def f(x):
        lo, hi = 0.0, math.pi / (s + 1)
        for _ in range(200):
            mid = 0.5 * (lo + hi)
            if xa(mid) > x:
                lo = mid
            else:
                hi = mid
        a = 0.5 * (lo + hi)
        return math.sin((s + 1) * a) * math.sin(a) / (math.pi * x * math.sin(s * a))
    return f


DENSITIES = {
    "semicircle_2": (sc(2.0), 0.0, None),
    "mp_0.5": (mp(0.5), 0.0, None),
    "mp_1": (mp(1.0), 0.0, None),
    "mp_2": (mp(2.0), 0.5, 0.0),
    "arcsine": (arcsine, 0.0, None),
    "km_2": (km(2), 0.0, None),
    "km_3": (km(3), 0.0, None),
    "uniform_-1_2": (lambda x: 1 / 3, 0.0, None),
    "quarter_circle": (lambda x: math.sqrt(max(4 - x * x, 0.0)) / math.pi, 0.0, None),
    "fc_2": (fc2, 0.0, None),
    "fc_3": (fc(3), 0.0, None),
    "circular": (lambda r: 2 * r, 0.0, None),
    "affine_sc_2_1": (lambda x: 0.5 * sc(1.0)((x - 1) / 2), 0.0, None),
    "bern_plus_bern": (arcsine, 0.0, None),
    "sc1_plus_sc2": (sc(3.0), 0.0, None),
    "pi_times_pi": (fc2, 0.0, None),
}


def main():
    build = Path(sys.argv[1])
    tool = next(build.rglob("law_table"), None)
    if tool is None:
        print("law_table not built under", build)
        return 1
    out = subprocess.run([str(tool)], check=True, capture_output=True, text=True).stdout
    failures = 0
    checked = 0
    key = lo = None
    for line in out.splitlines():
        parts = line.split()
        if parts[0] == "law":
            key, lo = parts[1], float(parts[2])
            continue
        x, dens, cdf = map(float, parts)
        f, atom, atom_at = DENSITIES[key]
        expected_cdf = quad(f, lo, x, epsabs=1e-13, epsrel=1e-13, limit=400)[0]
        if atom_at is not None and x >= atom_at:
            expected_cdf += atom
        expected_dens = f(x)
        checked += 1
        if abs(cdf - expected_cdf) > 1e-9 or abs(dens - expected_dens) > 1e-9 * max(1.0, expected_dens):
            failures += 1
            print(f"{key} x={x:.12g}: cdf {cdf:.15g} vs {expected_cdf:.15g}, "
                  f"density {dens:.15g} vs {expected_dens:.15g}")
    print(f"checked {checked} points, {failures} failures")
    return 1 if failures or checked == 0 else 0


if __name__ == "__main__":
    sys.exit(main())
