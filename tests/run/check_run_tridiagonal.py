#!/usr/bin/env python3
"""The runner's tridiagonal path for single β-ensemble matrices (a·X + b).

Checks, under real runs:
  - an affine expression in one GUE matrix takes the tridiagonal path (said by --explain and
    recorded in the run file's /metadata), runs at N = 10^6, and its moments agree with the exact
    E tr(2X + 1)^2 = 5 (E tr X^2 = 1 for GUE, all N: Harer & Zagier 1986; docs/check-values.md §2.1)
    within 5 standard errors of the stated trial count;
  - the run file is identical outside /provenance for 1 process and 2 MPI ranks;
  - force_dense switches to the dense path (recorded too);
  - a β-Hermite matrix with β = 4 runs; in a product with another matrix, or with force_dense,
    it is refused with exact messages and exit 2;
  - a size of 10^7 fits a 1 GiB rank on this path (the plan's O(N) estimate), while the dense
    path refuses it;
  - the choice by predicted cost (docs/performance.md §5b): with 40,000 bins a ladder N = 20, 3000
    takes the dense path at 20 and the tridiagonal one at 3000 (said by --explain with the
    predicted seconds, recorded as /metadata path "dense,tridiagonal"), the same on 2 ranks;
    path = "tridiagonal" forces it at N = 20 too.
"""
import os
import re
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

import h5py  # noqa: E402
import numpy as np  # noqa: E402

JOB = """# The edge of a shifted and scaled GUE at sizes dense methods cannot reach.
seed = 11
sizes = [2000, 1000000]
trials = 8
expression = "2 X + 1"
[matrices.X]
ensemble = "gue"
[observe]
bins = 120
range = "auto"
max_moment = 4
[run]
trials_per_unit = 2
{extra}
"""


def metadata_path(path):
    with h5py.File(path, "r") as f:
        return f["metadata"].attrs["path"]


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("the tridiagonal path")
    with rh.WorkDir("tridiagonal") as d:
        rh.write(os.path.join(d, "edge.toml"), JOB.format(extra=""))
        p = rh.run([exe, "run", "edge.toml", "--explain"], d)
        c.check(p.returncode == 0 and len(re.findall(r"^\s*path: tridiagonal", p.stdout, re.M)) == 2,
                "--explain says both sizes take the tridiagonal path", p.stdout + p.stderr)

        p1 = rh.run(rh.command(exe, ["run", "edge.toml", "-o", "one.h5", "--quiet"]), d)
        p2 = rh.run(rh.command(exe, ["run", "edge.toml", "-o", "two.h5", "--quiet"], ranks=2), d)
        c.equal((p1.returncode, p2.returncode), (0, 0), "1 process and 2 ranks finish")
        rc, out = rh.h5diff(os.path.join(d, "one.h5"), os.path.join(d, "two.h5"))
        c.equal(rc, 0, "run files of 1 process and 2 ranks identical outside /provenance")
        c.equal(metadata_path(os.path.join(d, "one.h5")), "tridiagonal", "/metadata path = tridiagonal")
        with h5py.File(os.path.join(d, "one.h5"), "r") as f:
            for i, n in enumerate((2000, 1000000)):
                m2 = f["sizes/%d/moments" % i][:, 2]
                mean, se = float(np.mean(m2)), float(np.std(m2, ddof=1) / np.sqrt(len(m2)))
                c.check(abs(mean - 5.0) < 5 * se + 1e-12,
                        "N = %d: mean tr(2X+1)^2 = %.6f within 5 SE (%.2g) of 5 (8 trials)" % (n, mean, se))
                hist = f["sizes/%d/unit_histograms" % i][:].sum() + f["sizes/%d/unit_below" % i][:].sum() \
                    + f["sizes/%d/unit_above" % i][:].sum()
                c.equal(int(hist), 8 * n, "N = %d: every eigenvalue of every trial is counted" % n)
                top = f["sizes/%d/max" % i][:]
                c.check(bool(np.all(top < 5.0 + 0.2)) and bool(np.all(top > 4.5)),
                        "N = %d: largest eigenvalues near the edge 2·2 + 1 = 5" % n)

        rh.write(os.path.join(d, "dense.toml"), JOB.format(extra="force_dense = true").replace(
            "sizes = [2000, 1000000]", "sizes = [100]"))
        p = rh.run([exe, "run", "dense.toml", "--quiet"], d)
        c.equal(p.returncode, 0, "force_dense runs")
        c.equal(metadata_path(os.path.join(d, "dense.h5")), "dense", "/metadata path = dense with force_dense")

        beta = """seed = 3
sizes = [5000]
trials = 4
expression = "X"
[matrices.X]
ensemble = "beta_hermite"
beta = 4
"""
        rh.write(os.path.join(d, "beta.toml"), beta)
        p = rh.run([exe, "run", "beta.toml", "--quiet"], d)
        c.equal(p.returncode, 0, "beta_hermite with beta = 4 runs")
        rh.write(os.path.join(d, "product.toml"), beta.replace('expression = "X"', 'expression = "X Y"')
                 + '[matrices.Y]\nensemble = "gue"\n')
        p = rh.run([exe, "run", "product.toml", "--quiet"], d)
        c.equal((p.returncode, p.stderr),
                (2, "freegap: product.toml:4: expression: matrix 'X' (beta_hermite) has only a tridiagonal "
                    "model, which gives the law of its eigenvalues alone; use it alone or as a·X + b\n"),
                "beta_hermite in a product is refused")
        c.check(not os.path.exists(os.path.join(d, "product.h5")), "and nothing is written")
        rh.write(os.path.join(d, "forced.toml"), beta + "[run]\nforce_dense = true\n")
        p = rh.run([exe, "run", "forced.toml", "--quiet"], d)
        c.equal((p.returncode, p.stderr),
                (2, "freegap: forced.toml:4: expression: matrix 'X' (beta_hermite) has no dense sampler, so "
                    "the dense path cannot apply; compare with gue or goe (β = 2, 1) or wishart_complex or "
                    "wishart_real instead\n"),
                "beta_hermite with force_dense is refused")

        big = JOB.format(extra='memory_per_rank = "1 GiB"').replace("sizes = [2000, 1000000]",
                                                                   "sizes = [10000000]")
        rh.write(os.path.join(d, "big.toml"), big)
        p = rh.run([exe, "run", "big.toml", "--explain"], d)
        c.check(p.returncode == 0 and re.search(r"estimated peak per rank: [0-9.]+ MiB", p.stdout) is not None,
                "N = 10^7 fits a 1 GiB rank on the tridiagonal path (estimate in MiB)", p.stdout + p.stderr)
        rh.write(os.path.join(d, "bigdense.toml"), big.replace("[run]", "[run]\nforce_dense = true"))
        p = rh.run([exe, "run", "bigdense.toml", "--explain"], d)
        c.check(p.returncode == 2 and "N = 10000000 needs about" in p.stderr,
                "the dense path refuses N = 10^7 in 1 GiB", p.stderr)
        check_cost_choice(exe, c, d)
    c.finish()


def check_cost_choice(exe, c, d):
    cross = JOB.format(extra="").replace("sizes = [2000, 1000000]", "sizes = [20, 3000]") \
        .replace("bins = 120", "bins = 40000").replace("trials = 8", "trials = 4")
    rh.write(os.path.join(d, "cross.toml"), cross)
    p = rh.run([exe, "run", "cross.toml", "--explain"], d)
    paths = re.findall(r"^why the path: (\w+)", p.stdout, re.M)
    c.check(p.returncode == 0 and paths == ["dense", "tridiagonal"]
            and p.stdout.count("predicted CPU per trial: tridiagonal") == 2,
            "40,000 bins: dense at N = 20, tridiagonal at N = 3000, with the predicted costs",
            p.stdout + p.stderr)
    p1 = rh.run(rh.command(exe, ["run", "cross.toml", "-o", "c1.h5", "--quiet"]), d)
    p2 = rh.run(rh.command(exe, ["run", "cross.toml", "-o", "c2.h5", "--quiet"], ranks=2), d)
    c.equal((p1.returncode, p2.returncode), (0, 0), "the crossing ladder runs on 1 and 2 ranks")
    if p1.returncode == 0:
        c.equal(metadata_path(os.path.join(d, "c1.h5")), "dense,tridiagonal",
                "/metadata path lists both paths in ladder order")
        rc, out = rh.h5diff(os.path.join(d, "c1.h5"), os.path.join(d, "c2.h5"))
        c.check(rc == 0, "the crossing ladder's run file is the same on 1 and 2 ranks", out)
    rh.write(os.path.join(d, "crossforced.toml"), cross.replace("[run]", '[run]\npath = "tridiagonal"'))
    p = rh.run([exe, "run", "crossforced.toml", "--explain"], d)
    c.check(p.returncode == 0 and re.findall(r"^why the path: (\w+)", p.stdout, re.M) == ["tridiagonal"] * 2,
            'path = "tridiagonal" forces the tridiagonal path at N = 20 too', p.stdout + p.stderr)


if __name__ == "__main__":
    main()
