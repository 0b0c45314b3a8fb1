"""A catalogue of 40 random models: `limit` and `report` give the same law, and the solver's
moments equal the exact ones.

The models are drawn with a fixed seed (so the catalogue never changes between runs):
- 10 free sums of atomic laws with random atoms (2 to 40 atoms, random positions and weights),
  through the free additive convolution: `D1 + U D2 U^*` and `X + D1`;
- 30 random self-adjoint polynomials of degree at most 3 in at most 3 variables, mixing GUE,
  complex Wishart (ratios 0.25 to 2) and Haar-rotated diagonals `U D U^*` with random atoms; each
  word w with a coefficient c enters as c (w + w^*), so the polynomial is self-adjoint.

For each model that gets a law:
1. `freegap limit` prints the law's moments beside the exact ones (free cumulants, computed with
   rationals from the declarations; Nica & Speicher 2006): they agree to 1e-8 (relative to
   max(1, |m_k|)), k = 1 … 4;
2. a small run (N = 8, 2 trials) and `freegap report --no-figures` on it: the report's limit edges
   (extremes.csv) equal the support printed by `limit` to 1e-8, and its density table
   (limit_density.csv) equals `limit --window LO,HI --points P` on the same points to 1e-8
   (relative to max(1, density)); a point that failed must fail in both. The report comes first,
   so that one `limit --window` call on its points gives the moments, the support and the
   densities (each command derives the law once: two derivations per model, not three).

A model without a law must get none in both commands, for the same reason, and the report must
still be written; every one of the 40 gets a law (three did not before Newton had the analytic
Jacobian of the subordination equations and the secant predictor: their band searches spent the
work budget).

The moments are the outside check here (exact rational arithmetic from the free cumulants of the
declared laws, a computation independent of the solvers); edges and densities check that the two
commands derive one law.

Usage: /usr/bin/python3 check_limit_catalogue.py <build_dir>
"""

import csv
import math
import os
import re
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

exe = rh.freegap_exe(sys.argv)
checks = rh.Checks("a catalogue of 40 random models: limit and report agree, moments are exact")
check = checks.check

rng = np.random.default_rng(20261203)
TOL = 1e-8


def random_atoms(count):
    """`count` distinct values in [-2, 2] (two decimals) with weights that are multiples of 1/100."""
    values = sorted(set(np.round(rng.uniform(-2.0, 2.0, size=3 * count), 2).tolist()))
    values = [float(v) for v in rng.permutation(values)[:count]]
    cuts = sorted(rng.choice(np.arange(1, 100), size=count - 1, replace=False).tolist())
    weights = [(b - a) / 100.0 for a, b in zip([0] + cuts, cuts + [100])]
    return sorted(zip(values, weights))


class Model:
    def __init__(self):
        self.toml = []  # [matrices.NAME] blocks
        self.cli = []  # -m declarations
        self.expression = ""

    def gue(self, name):
        self.toml.append('[matrices.%s]\nensemble = "gue"\n' % name)
        self.cli.append("%s=gue" % name)
        return name

    def wishart(self, name, ratio):
        self.toml.append('[matrices.%s]\nensemble = "wishart_complex"\nratio = %r\n' % (name, ratio))
        self.cli.append("%s=wishart_complex:ratio=%r" % (name, ratio))
        return name

    def diagonal(self, name, atoms):
        self.toml.append('[matrices.%s]\nensemble = "diagonal"\natoms = [%s]\n' % (
            name, ", ".join("[%r, %r]" % (v, w) for v, w in atoms)))
        self.cli.append("%s=diagonal:atoms=%s" % (name, ",".join("%r@%r" % (v, w) for v, w in atoms)))
        return name

    def haar(self, name):
        self.toml.append('[matrices.%s]\nensemble = "haar_unitary"\n' % name)
        self.cli.append("%s=haar_unitary" % name)
        return name

    def job(self, seed):
        return ('seed = %d\nsizes = [8]\ntrials = 2\nexpression = "%s"\n\n' % (seed, self.expression)
                + "\n".join(self.toml)
                + "\n[observe]\nbins = 16\nmax_moment = 4\n")


def atomic_sum(i):
    m = Model()
    d1 = m.diagonal("D1", random_atoms(int(rng.integers(2, 41))))
    if i % 2 == 0:
        d2 = m.diagonal("D2", random_atoms(int(rng.integers(2, 41))))
        u = m.haar("U")
        m.expression = "%s + %s %s %s^*" % (d1, u, d2, u)
    else:
        x = m.gue("X")
        m.expression = "%s + %s" % (x, d1)
    return m


def random_polynomial():
    m = Model()
    tokens = []
    count = int(rng.integers(1, 4))
    kinds = rng.choice(["gue", "wishart", "rotated"], size=count)
    for j, kind in enumerate(kinds, start=1):
        if kind == "gue":
            tokens.append(m.gue("X%d" % j))
        elif kind == "wishart":
            tokens.append(m.wishart("W%d" % j, float(rng.choice([0.25, 0.5, 1.0, 2.0]))))
        else:
            d = m.diagonal("D%d" % j, random_atoms(int(rng.integers(2, 5))))
            u = m.haar("U%d" % j)
            tokens.append("%s %s %s^*" % (u, d, u))
    terms = []
    for _ in range(int(rng.integers(1, 4))):
        word = [tokens[int(k)] for k in rng.integers(0, len(tokens), size=int(rng.integers(1, 4)))]
        c = float(rng.choice([0.5, 1.0, 1.5, 2.0, -0.5, -1.0]))
        text = " ".join(word)
        back = " ".join(reversed(word))
        if back == text:
            terms.append((c, text))
        else:
            terms.append((c, text))
            terms.append((c, back))
    # Every variable appears (the catalogue mixes them): a missing one enters with weight 1.
    for t in tokens:
        if not any(t in text for _, text in terms):
            terms.append((1.0, t))
    parts = []
    for k, (c, text) in enumerate(terms):
        sign = "-" if c < 0 else "+"
        mag = abs(c)
        body = text if mag == 1.0 else "%g %s" % (mag, text)
        parts.append(("- " if sign == "-" else "") + body if k == 0 else " %s %s" % (sign, body))
    m.expression = "".join(parts)
    return m


def parse_limit(out):
    """Support (lo, hi) and moments {k: (law, exact or None)} from `limit`'s output."""
    support = re.search(r"^support: \[(\S+), (\S+)\]$", out, re.M)
    moments = {}
    for k, law, exact in re.findall(r"^  m(\d+)\s+(\S+)\s+(\S+(?: available\))?)$", out, re.M):
        moments[int(k)] = (float(law), None if exact.startswith("(") else float(exact))
    return (float(support.group(1)), float(support.group(2))) if support else None, moments


def read_csv(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def close(a, b):
    return abs(a - b) <= TOL * max(1.0, abs(b))


models = [atomic_sum(i) for i in range(10)] + [random_polynomial() for _ in range(30)]
refused = []

def run_and_report(wd, env, i, m):
    """Runs the model's small job and reports it; returns (report exit, report directory)."""
    job = rh.write(os.path.join(wd, "m%d.toml" % i), m.job(100 + i))
    run_file = os.path.join(wd, "m%d.h5" % i)
    p = rh.run(rh.command(exe, ["run", job, "-o", run_file, "--quiet"]), cwd=wd, env=env)
    if p.returncode != 0:
        return p, None
    report = os.path.join(wd, "r%d" % i)
    return rh.run(rh.command(exe, ["report", run_file, "-o", report, "--no-figures"]), cwd=wd,
                  env=env), report


def compare_densities(tag, out, xs, dens):
    mine = read_csv(os.path.join(out, "limit.csv"))
    mismatches = []
    for r, x, d in zip(mine, xs, dens):
        lx, ld = float(r["x"]), float(r["density"])
        same_x = abs(lx - x) <= 1e-11 * max(1.0, abs(x))
        both_failed = math.isnan(ld) and math.isnan(d)
        if not same_x or not (both_failed or (not math.isnan(ld) and not math.isnan(d)
                                              and close(ld, d))):
            mismatches.append((x, lx, d, ld))
    check(len(mine) == len(xs) and not mismatches,
          "%s: limit's density equals the report's on its %d points to 1e-8" % (tag, len(xs)),
          "%d points differ; first: %s" % (len(mismatches), mismatches[:3]))


def check_model(wd, env, i, m):
    """Report first, then one `limit` on the report's density points (one derivation fewer)."""
    tag = "model %d: %s" % (i, m.expression)
    q, report = run_and_report(wd, env, i, m)
    if not check(report is not None, "%s: run exits 0" % tag, q.stderr):
        return
    rows = read_csv(os.path.join(report, "runs.csv")) if q.returncode == 0 else []
    table = []
    if q.returncode == 0 and os.path.exists(os.path.join(report, "limit_density.csv")):
        table = [r for r in read_csv(os.path.join(report, "limit_density.csv")) if r["run"] == "1"]
    xs = [float(r["x"]) for r in table]
    dens = [float(r["density"]) for r in table]
    base = ["limit", "-e", m.expression, "-k", "4"]
    for d in m.cli:
        base += ["-m", d]
    out = os.path.join(wd, "l%d" % i)
    window = ["--window", "%r,%r" % (xs[0], xs[-1]), "--points", str(len(xs)), "-o", out] if xs else []
    p = rh.run(rh.command(exe, base + window), cwd=wd, env=env)
    refusal = re.match(r"freegap: no limit is derived for '.*?': (.*)$", p.stderr.strip(), re.S)
    if p.returncode == 2 and refusal:
        # No law rather than a wrong one: the report must say the same and still be written.
        refused.append(i)
        check(len(rows) == 1 and rows[0]["limit"] == "none"
              and rows[0]["rule_or_reason"] == refusal.group(1),
              "%s: limit and report both give no law, for the same reason" % tag,
              "limit: %s\nreport (exit %d): %s" % (refusal.group(1), q.returncode, rows))
        return
    if not check(p.returncode == 0, "%s: limit exits 0" % tag, p.stderr):
        return
    support, moments = parse_limit(p.stdout)
    if not check(support is not None and len(moments) == 4, "%s: limit prints a support and "
                 "4 moments" % tag, p.stdout):
        return
    # The law accounts for its mass: `limit` notes a total of its density tables and point masses
    # that is off by more than 1e-6. Before the forced point masses, model 12 noted 0.990941 (its
    # 0.01 at 0.136048 missed), and before panels were split where unresolved, models 25 and 30
    # noted 1.000071 and 1.000409; today the worst is model 12's 0.999996.
    total = re.search(r"add up to (\S+) instead of 1", p.stdout)
    check(total is None or abs(float(total.group(1)) - 1.0) <= 1e-5,
          "%s: the law's density and point masses add up to 1 within 1e-5" % tag,
          total.group(0) if total else "")
    bad = [(k, law, exact) for k, (law, exact) in moments.items()
           if exact is None or not close(law, exact)]
    check(not bad, "%s: the law's moments m1..m4 equal the exact ones to 1e-8" % tag,
          "%s\n%s" % (bad, p.stdout))
    if not check(q.returncode == 0 and xs, "%s: report exits 0 with a density table" % tag,
                 q.stderr):
        return
    edges = {r["quantity"]: float(r["limit"]) for r in read_csv(os.path.join(report, "extremes.csv"))}
    check("smallest" in edges and "largest" in edges
          and close(edges["smallest"], support[0]) and close(edges["largest"], support[1]),
          "%s: the report's limit edges equal limit's support to 1e-8" % tag,
          "report %s, limit %s" % (edges, support))
    compare_densities(tag, out, xs, dens)


with rh.WorkDir("catalogue") as wd:
    no_plot = rh.write(os.path.join(wd, "no_plot.py"), "import sys\nsys.exit(0)\n")
    env = rh.child_env(FREEGAP_PLOT_LIMIT=no_plot)
    for i, m in enumerate(models, start=1):
        check_model(wd, env, i, m)

# A model may have no law (the solver cannot reach its edges, or its law failed the check against
# the exact moments: no law rather than a wrong one), but the catalogue is there to show laws:
# models 12, 29 and 40 had none before the analytic Jacobian and the secant predictor.
check(not refused, "every one of the 40 models has a law (without one: models %s)" % refused)

checks.finish()
