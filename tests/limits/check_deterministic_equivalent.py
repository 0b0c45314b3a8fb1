"""Two deterministic matrices that do not commute, beside a GUE: the free deterministic equivalent
(Speicher & Vargas 2012) against a computation here and against sampled spectra (issue 17,
item 4).

The model is X + T + D at N = 500: X a GUE, T the Toeplitz matrix with ones beside the diagonal
(symbol 2 cos θ), D the diagonal with N/2 entries −1 then N/2 entries +1 (atoms in the order given,
include/freegap/declarations.hpp). T and D do not commute, so they have no joint N → ∞ law that
freegap could take as free; at size N the comparison is the free deterministic equivalent
semicircle ⊞ μ(T_N + D_N), μ the eigenvalue law of the formed matrix.

1. `freegap limit --size 500` against the same law computed here: the eigenvalues of T + D by numpy,
   G_ν(w) = mean 1/(w − λ), and the semicircle's subordination G(z) = G_ν(z − G(z)) (Biane 1997;
   tests/support/subordination.py), densities at interior points (density ≥ 0.02) to 1e-7.
2. `freegap run` of X + T + D at N = 200 and 500, 20 trials each on 2 ranks, kept spectra pooled
   per size: Kolmogorov distance to that size's own equivalent (`limit --size`) below
   1.63/√n + 2/N (tests/support/spectra.py); `report` names the free deterministic equivalent in
   its rule and says that each size's distances are to its own.
3. Without a size (`limit -e` alone), no law: the message says to give one.

Run: /usr/bin/python3 check_deterministic_equivalent.py <build_dir>.
"""
import csv
import os
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402
from spectra import kept_spectra, kolmogorov_bound, pooled_kolmogorov  # noqa: E402
from subordination import semicircle_free_sum_density  # noqa: E402

N = 500
DECLARATIONS = ["X=gue", "T=toeplitz:coefficients=0,1", "D=diagonal:atoms=-1@0.5,1@0.5"]


def deterministic_eigenvalues(n):
    t = np.diag(np.ones(n - 1), 1) + np.diag(np.ones(n - 1), -1)
    d = np.diag(np.concatenate([-np.ones(n // 2), np.ones(n - n // 2)]))
    return np.linalg.eigvalsh(t + d)


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("Free deterministic equivalent of X + T + D")
    with rh.WorkDir("fde") as d:
        args = [exe, "limit", "-e", "X + T + D"]
        for m in DECLARATIONS:
            args += ["-m", m]
        r = rh.run(args, d)
        c.check(r.returncode != 0 and "--size" in r.stderr,
                "without a size there is no law, and the message says to give one", r.stderr)

        r = rh.run(args + ["--size", str(N), "-o", "fde", "--points", "161"], d)
        if not c.check(r.returncode == 0, "limit --size %d" % N, r.stderr):
            c.finish()
        c.check("free deterministic equivalent at N = %d" % N in r.stdout, "the rule says so",
                r.stdout)
        with open(os.path.join(d, "fde", "limit.csv")) as f:
            table = [(float(t["x"]), float(t["density"]), float(t["cdf"]))
                     for t in csv.DictReader(f)]
        lam = deterministic_eigenvalues(N)
        worst, compared = 0.0, 0
        for x, density, _ in table:
            if density < 0.02:
                continue
            here = semicircle_free_sum_density(lambda w: complex(np.mean(1.0 / (w - lam))), x)
            worst = max(worst, abs(here - density))
            compared += 1
        c.check(compared >= 100 and worst < 1e-7,
                "density at %d interior points equal to the subordination solve here to %.1e"
                % (compared, worst))

        job = rh.write(os.path.join(d, "fde.toml"), """\
name = "two structured matrices and noise"
seed = 23
sizes = [200, %d]
trials = 20
expression = "X + T + D"
[matrices.X]
ensemble = "gue"
[matrices.T]
ensemble = "toeplitz"
coefficients = [0.0, 1.0]
[matrices.D]
ensemble = "diagonal"
atoms = [[-1.0, 0.5], [1.0, 0.5]]
[observe]
keep_spectra = "all"
""" % N)
        out = os.path.join(d, "fde.h5")
        r = rh.run(rh.command(exe, ["run", job, "-o", out, "--quiet"], 2), d)
        if c.check(r.returncode == 0, "X + T + D runs on 2 ranks", r.stderr):
            tables = {N: table}
            r = rh.run(args + ["--size", "200", "-o", "fde200", "--points", "161"], d)
            if c.check(r.returncode == 0, "limit --size 200", r.stderr):
                with open(os.path.join(d, "fde200", "limit.csv")) as f:
                    tables[200] = [(float(t["x"]), float(t["density"]), float(t["cdf"]))
                                   for t in csv.DictReader(f)]
            for n, own in sorted(tables.items()):
                values = np.concatenate([s.ravel() for s in kept_spectra(out, n)])
                if c.check(values.size == n * 20, "%d kept eigenvalues at N = %d"
                           % (values.size, n)):
                    ks = pooled_kolmogorov(values, [t[0] for t in own], [t[2] for t in own])
                    bound = kolmogorov_bound(values.size, n)
                    c.check(ks < bound, "N = %d: Kolmogorov distance of the pooled spectra to its "
                            "own free deterministic equivalent %.4f < %.4f" % (n, ks, bound))
            rep = rh.run([exe, "report", out, "-o", "rep", "--no-figures"], d)
            if c.check(rep.returncode == 0, "and is reported", rep.stderr):
                with open(os.path.join(d, "rep", "report.md")) as f:
                    md = f.read()
                c.check("free deterministic equivalent at N = %d" % N in md,
                        "the report's rule names the free deterministic equivalent")
                c.check("the distances of each size are to the equivalent formed at that size"
                        in md, "and says each size is compared with its own")
    c.finish()


if __name__ == "__main__":
    main()
