"""Two models whose limits have a gap in the support, sampled at N = 1000 on two ranks: the report
is written whole (both bands listed, a distance to the limit at N = 1000, no note of a failed
point), and the limit's interior edges lie where the sampled spectra have their gap.

Scenarios of our own:
  1. a detector's response A (uniform on [-1, 1]) plus a randomly rotated two-level background
     U B U^* (B: 0 with weight 0.6, 3 with weight 0.4) -- the model whose report used to abort
     inside the gap;
  2. two levels ±1 (D) broadened by GUE noise of variance 0.25 (0.5 X).

Outside references:
  - model 2's gap edges ±0.369008729828: x(w) = w + t G(w) with t = 0.25 and G(w) = w/(w² - 1),
    at the w in (0, 1) where x'(w) = 0 (Biane 1997), solved with scipy.optimize.brentq;
  - how many eigenvalues lie below each gap, exactly, for every sample: in model 1, A + 3P with P
    a rank-400 projection and -1 ≤ A ≤ 1 has at least 600 eigenvalues ≤ 1 and at least 400 ≥ 2
    (Weyl 1912: λ_{i+j-1}(X + Y) ≤ λ_i(X) + λ_j(Y)); the limit's lower band holds mass 0.6.
    In model 2 the same count (500) holds with overwhelming probability since ‖0.5 X‖ → 1.
Tolerance of the edge check: the sampled edge (mean over the 4 trials of the last eigenvalue
below the gap, or the first above) differs from the limit's by the edge fluctuation and bias,
both of order N^(-2/3) = 0.01 times an O(1) constant (Tracy-Widom scale; common practice); we
allow 5 standard errors of the 4-trial mean plus 0.05, against gaps 1.56 and 0.74 wide.

Usage: /usr/bin/python3 check_gapped_limits_sampled.py <build_dir>
"""

import os
import re
import sys

import numpy as np
from scipy import optimize

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "analysis"))
import freegap_results  # noqa: E402

N = 1000
TRIALS = 4

JOB = """name = "{name}"
seed = {seed}
sizes = [{n}]
trials = {trials}
expression = "{expression}"
{matrices}
[observe]
bins = 200
range = [{lo}, {hi}]
max_moment = 4
keep_spectra = {trials}

[run]
trials_per_unit = 2
output = "{name}.h5"
"""

MODELS = [
    {
        "name": "response-plus-background",
        "seed": 41,
        "expression": "A + U B U^*",
        "matrices": """
[matrices.A]
ensemble = "diagonal"
law = "uniform"
low = -1.0
high = 1.0

[matrices.B]
ensemble = "diagonal"
atoms = [[0.0, 0.6], [3.0, 0.4]]

[matrices.U]
ensemble = "haar_unitary"
""",
        "range": (-1.5, 4.5),
        "below": 600,
        "gap": None,  # the limit's own edges; checked against the samples only
    },
    {
        "name": "broadened-levels",
        "seed": 42,
        "expression": "0.5 X + D",
        "matrices": """
[matrices.X]
ensemble = "gue"

[matrices.D]
ensemble = "diagonal"
atoms = [[-1.0, 0.5], [1.0, 0.5]]
""",
        "range": (-2.5, 2.5),
        "below": 500,
        "gap": "biane",
    },
]


def biane_gap_edge(t=0.25):
    slope = lambda w: 1.0 + t * (-(w * w + 1.0) / (w * w - 1.0) ** 2)  # noqa: E731
    w = optimize.brentq(slope, 1e-9, 0.999, xtol=1e-15)
    return w + t * w / (w * w - 1.0)


def bands_of(report_md):
    """The report's bands: '... lives on 2 bands: [a, b] ∪ [c, d]'."""
    m = re.search(r"lives on (\d+) bands: (.*?)(?:;|\n|$)", report_md)
    if not m:
        return None
    pairs = re.findall(r"\[(\S+), (\S+?)\]", m.group(2))
    return [(float(a), float(b)) for a, b in pairs]


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("gapped limits, sampled at N = 1000")
    with rh.WorkDir("gapped") as wd:
        for model in MODELS:
            name = model["name"]
            lo, hi = model["range"]
            job = rh.write(os.path.join(wd, name + ".toml"), JOB.format(
                name=name, seed=model["seed"], n=N, trials=TRIALS, expression=model["expression"],
                matrices=model["matrices"], lo=lo, hi=hi))
            p = rh.run(rh.command(exe, ["run", job, "-q"], ranks=2), cwd=wd)
            if not c.check(p.returncode == 0, "%s: the run on two ranks ends" % name, p.stderr):
                continue
            out = os.path.join(wd, name + "-report")
            p = rh.run(rh.command(exe, ["report", name + ".h5", "-o", out, "--no-figures"]),
                       cwd=wd)
            if not c.check(p.returncode == 0, "%s: report exits 0" % name, p.stderr):
                continue
            md = open(os.path.join(out, "report.md")).read()
            c.check("no predictor applies" not in md and "- note:" not in md,
                    "%s: the report has its limit, with no note of a failed computation" % name)
            bands = bands_of(md)
            if not c.check(bands is not None and len(bands) == 2,
                           "%s: the report lists two bands" % name, bands):
                continue
            gap_lo, gap_hi = bands[0][1], bands[1][0]
            if model["gap"] == "biane":
                edge = biane_gap_edge()
                c.check(abs(gap_lo + edge) < 1e-9 and abs(gap_hi - edge) < 1e-9,
                        "%s: the gap (%.10g, %.10g) is ±%.12f (Biane 1997)"
                        % (name, gap_lo, gap_hi, edge))
            # The distance of the mean spectrum at N = 1000 is in the tables (not a NaN).
            c.check(re.search(r"^\| 1000 \|.*\d", md, re.M) is not None,
                    "%s: the tables have a row for N = 1000" % name)

            run = freegap_results.open_run(os.path.join(wd, name + ".h5"))
            spectra = [np.sort(s) for s in run.sizes[0].spectra]
            c.equal(len(spectra), TRIALS, "%s: every trial's spectrum kept" % name)
            below = [int(np.sum(s < 0.5 * (gap_lo + gap_hi))) for s in spectra]
            c.equal(below, [model["below"]] * TRIALS,
                    "%s: %d eigenvalues below the gap in every trial" % (name, model["below"]))
            k = model["below"]
            last_below = np.array([s[k - 1] for s in spectra])
            first_above = np.array([s[k] for s in spectra])
            for sampled, limit, side in ((last_below, gap_lo, "lower"),
                                         (first_above, gap_hi, "upper")):
                se = np.std(sampled, ddof=1) / np.sqrt(TRIALS)
                tol = 5.0 * se + 0.05
                c.check(abs(np.mean(sampled) - limit) < tol,
                        "%s: the gap's %s edge %.6f is where the samples' gap is (mean %.6f, "
                        "tolerance %.4f)" % (name, side, limit, np.mean(sampled), tol))
    c.finish()


if __name__ == "__main__":
    main()
