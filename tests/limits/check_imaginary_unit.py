"""The imaginary unit in expressions (issue 17, item 5), against references computed here.

1. `freegap limit` of i(U − U^*) for a Haar unitary U: its eigenvalues are i(e^{iθ} − e^{−iθ}) =
   −2 sin θ with θ asymptotically uniform, so the law is the arcsine law on [−2, 2] (Kesten 1959 for
   U + U^*; elementary for the rotation): CDF against 1/2 + asin(x/2)/π.
2. `freegap limit` of the commutator i(X1 X2 − X2 X1) of two GUE matrices: the support edge against
   √((11 + 5√5)/2) ≈ 3.3302 (Nica & Speicher 1998, "Commutators of free random variables";
   docs/check-values.md §1.8), and the CDF against eigenvalues sampled here with numpy: GUE
   matrices of size N = 400 built from complex Gaussians (E|h_ij|² = 1/N), 12 pairs (seed 2026),
   4800 eigenvalues pooled; Kolmogorov distance below 1.63/√n + 2/N (tests/support/spectra.py).
3. `freegap run` of the commutator of two GOE matrices (real factors, complex coefficient) on 2
   ranks, its kept spectra against the same limit with the same bound, and each spectrum
   symmetric about 0 to rounding: i(S1 S2 − S2 S1) is Hermitian with purely imaginary entries, and
   the complex conjugate of such a matrix is its negative (elementary).
4. A matrix named i is refused with the place and the fix, and nothing is written.

Run: /usr/bin/python3 check_imaginary_unit.py <build_dir>.
"""
import csv
import math
import os
import re
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402
from spectra import kept_spectra, kolmogorov_bound, pooled_kolmogorov  # noqa: E402


def limit_table(exe, d, declarations, expression, tag):
    out = os.path.join(d, tag)
    args = [exe, "limit", "-e", expression, "-o", out, "--points", "161"]
    for m in declarations:
        args += ["-m", m]
    r = rh.run(args, d)
    if r.returncode != 0:
        return r, None, None
    with open(os.path.join(out, "limit.csv")) as f:
        rows = list(csv.DictReader(f))
    return r, np.array([float(t["x"]) for t in rows]), np.array([float(t["cdf"]) for t in rows])


def gue(rng, n):
    g = rng.standard_normal((n, n)) + 1j * rng.standard_normal((n, n))
    return (g + g.conj().T) / math.sqrt(2.0 * n) / math.sqrt(2.0)


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("The imaginary unit: limits and sampled spectra")
    with rh.WorkDir("imaginary") as d:
        r, xs, cdf = limit_table(exe, d, ["U=haar_unitary"], "i (U - U^*)", "rotation")
        if c.check(r.returncode == 0, "limit of i(U - U^*)", r.stderr):
            inside = np.clip(xs / 2.0, -1.0, 1.0)
            worst = float(np.max(np.abs(cdf - (0.5 + np.arcsin(inside) / math.pi))))
            c.check(worst < 1e-9, "its CDF is the arcsine law's to %.1e" % worst)

        decl = ["X1=gue", "X2=gue"]
        r, xs, cdf = limit_table(exe, d, decl, "i (X1 X2 - X2 X1)", "commutator")
        if c.check(r.returncode == 0, "limit of i(X1 X2 - X2 X1)", r.stderr):
            edge = math.sqrt((11.0 + 5.0 * math.sqrt(5.0)) / 2.0)
            found = re.search(r"operator-norm limit: ([0-9.eE+-]+)", r.stdout)
            norm = float(found.group(1)) if found else float("nan")
            c.check(abs(norm - edge) < 1e-8,
                    "its operator-norm limit %.10f is sqrt((11 + 5 sqrt 5)/2) = %.10f"
                    % (norm, edge), r.stdout)
            rng = np.random.default_rng(2026)
            n, pairs = 400, 12
            values = []
            for _ in range(pairs):
                a, b = gue(rng, n), gue(rng, n)
                values.append(np.linalg.eigvalsh(1j * (a @ b - b @ a)))
            ks = pooled_kolmogorov(np.concatenate(values), xs, cdf)
            bound = kolmogorov_bound(n * pairs, n)
            c.check(ks < bound, "numpy-sampled commutators: Kolmogorov distance %.4f < %.4f"
                    % (ks, bound))

        job = rh.write(os.path.join(d, "commutator.toml"), """\
name = "real commutator"
seed = 17
sizes = [300]
trials = 12
expression = "i (S1 S2 - S2 S1)"
[matrices.S1]
ensemble = "goe"
[matrices.S2]
ensemble = "goe"
[observe]
keep_spectra = "all"
""")
        out = os.path.join(d, "commutator.h5")
        r = rh.run(rh.command(exe, ["run", job, "-o", out, "--quiet"], 2), d)
        if c.check(r.returncode == 0 and xs is not None, "i(S1 S2 - S2 S1) runs on 2 ranks",
                   r.stderr):
            rows = np.concatenate([s.reshape(-1, 300) for s in kept_spectra(out)])
            if c.check(rows.shape == (12, 300), "12 kept spectra of 300 eigenvalues"):
                ordered = np.sort(rows, axis=1)
                asym = float(np.max(np.abs(ordered + ordered[:, ::-1])))
                c.check(asym < 1e-10, "each spectrum is symmetric about 0 (to %.1e)" % asym)
                ks = pooled_kolmogorov(rows, xs, cdf)
                bound = kolmogorov_bound(rows.size, 300)
                c.check(ks < bound, "sampled spectra against the limit: %.4f < %.4f" % (ks, bound))

        bad = rh.write(os.path.join(d, "named-i.toml"), """\
name = "bad"
seed = 1
sizes = [10]
trials = 1
expression = "i + X"
[matrices.i]
ensemble = "gue"
[matrices.X]
ensemble = "gue"
""")
        r = rh.run([exe, "run", bad, "-o", os.path.join(d, "bad.h5"), "--quiet"], d)
        c.check(r.returncode == 2 and "matrices.i" in r.stderr and "imaginary unit" in r.stderr,
                "a matrix named i is refused with exit 2, naming the table", r.stderr)
        c.check(not os.path.exists(os.path.join(d, "bad.h5")), "and no run file is written")
    c.finish()


if __name__ == "__main__":
    main()
