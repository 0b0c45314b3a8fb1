"""A diagonal read from a file gets a limit: the empirical law of the file's numbers, in `limit`
and in `report`, found beside the run file from any working directory, and refused when the file
holds other numbers than the run used.

Scenario of our own: the energy levels of a small lattice model, written to a file, plus GUE noise
(`A + D`). Outside references:
- the support's edges of semicircle ⊞ Σ w_i δ_{a_i}: x(ω) = ω + Σ w_i/(ω − a_i) at the real ω
  outside the atoms where x'(ω) = 0, i.e. Σ w_i/(ω − a_i)² = 1 (Biane 1997), solved here with
  scipy.optimize.brentq on each side of the atoms;
- m1 and m2 of A + D with A standard semicircular free from D: m1 = mean(a), m2 = 1 + mean(a²)
  (freeness; elementary).

Usage: /usr/bin/python3 check_file_law_limit.py <build_dir>
"""

import os
import re
import subprocess
import sys
import tempfile

import numpy as np
from scipy import optimize

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

build = os.path.abspath(sys.argv[1])
exe = os.path.join(build, "freegap")
checks = rh.Checks("a diagonal read from a file: its limit")
check = checks.check


# 12 levels, two of them repeated (weights 2/12): the law has 10 atoms.
LEVELS = [-1.75, -1.75, -1.1, -0.4, 0.0, 0.3, 0.3, 0.85, 1.4, 1.9, 2.6, 3.2]
values, counts = np.unique(np.array(LEVELS), return_counts=True)
weights = counts / len(LEVELS)


def outer_edges():
    def slope_gap(w):
        return np.sum(weights / (w - values) ** 2) - 1.0

    def x_of(w):
        return w + np.sum(weights / (w - values))

    span = 10.0 + np.max(np.abs(values))
    hi_w = optimize.brentq(slope_gap, values[-1] + 1e-9, values[-1] + span, xtol=1e-15)
    lo_w = optimize.brentq(slope_gap, values[0] - span, values[0] - 1e-9, xtol=1e-15)
    return x_of(lo_w), x_of(hi_w)


JOB = """name = "lattice levels plus noise"
seed = 11
sizes = [12, 24]
trials = 8
expression = "A + D"

[matrices.A]
ensemble = "gue"

[matrices.D]
ensemble = "diagonal"
law = "file"
path = "levels.txt"

[observe]
bins = 20
range = [-5, 6]
max_moment = 4

[run]
trials_per_unit = 4
output = "run.h5"
"""

lo_ref, hi_ref = outer_edges()
with tempfile.TemporaryDirectory() as tmp:
    study = os.path.join(tmp, "study")
    os.makedirs(study)
    levels = os.path.join(study, "levels.txt")
    with open(levels, "w") as f:
        f.write("# levels of the lattice model, one per line\n")
        f.write("\n".join(repr(v) for v in LEVELS) + "\n")

    # 1. limit with the file declared on the command line.
    r = subprocess.run([exe, "limit", "-m", "A=gue", "-m", f"D=diagonal:law=file:path={levels}",
                        "-e", "A + D"], capture_output=True, text=True)
    check(r.returncode == 0, f"limit exits 0 (got {r.returncode}: {r.stderr})")
    m = re.search(r"^support: \[(\S+), (\S+)\]", r.stdout, re.M)
    check(m is not None, "limit prints the support")
    if m:
        lo, hi = float(m.group(1)), float(m.group(2))
        # Printed with 10 decimals; the engine's edges are accurate to ~1e-12 (check_law_bands).
        check(abs(lo - lo_ref) < 2e-10 and abs(hi - hi_ref) < 2e-10,
              f"limit's support [{lo}, {hi}] equals Biane's edges [{lo_ref:.12f}, {hi_ref:.12f}]")
    check("empirical law of its file" in r.stdout and "Speicher & Vargas 2012" in r.stdout,
          "limit says the law is the file's empirical law, a finite-N deterministic equivalent")
    m1 = re.search(r"^\s+m1\s+(\S+)\s+(\S+)", r.stdout, re.M)
    m2 = re.search(r"^\s+m2\s+(\S+)\s+(\S+)", r.stdout, re.M)
    check(m1 is not None and m2 is not None, "limit prints m1 and m2")
    if m1 and m2:
        m1_ref = float(np.mean(LEVELS))
        m2_ref = 1.0 + float(np.mean(np.square(LEVELS)))
        for got, ref, k in ((m1, m1_ref, 1), (m2, m2_ref, 2)):
            for col in (1, 2):
                check(abs(float(got.group(col)) - ref) < 1e-9 * max(1.0, abs(ref)),
                      f"m{k} column {col}: {got.group(col)} against {ref!r}")

    # 2. A run, then its report from another working directory: the file is found beside the run
    # file, and the report's limit is the same law.
    job = os.path.join(study, "job.toml")
    with open(job, "w") as f:
        f.write(JOB)
    r = subprocess.run([exe, "run", job, "-q"], capture_output=True, text=True, cwd=study,
                       env=rh.child_env())
    check(r.returncode == 0, f"run exits 0 (got {r.returncode}: {r.stderr})")
    elsewhere = os.path.join(tmp, "elsewhere")
    os.makedirs(elsewhere)
    report_dir = os.path.join(tmp, "report")
    r = subprocess.run([exe, "report", os.path.join(study, "run.h5"), "-o", report_dir,
                        "--no-figures"], capture_output=True, text=True, cwd=elsewhere,
                       env=rh.child_env())
    check(r.returncode == 0, f"report exits 0 (got {r.returncode}: {r.stderr})")
    text = open(os.path.join(report_dir, "report.md")).read() if r.returncode == 0 else ""
    check("no predictor applies" not in text, "the report has a limit")
    check("empirical law of its file" in text, "the report names the file's empirical law")
    m = re.search(r"^- support: \[(\S+), (\S+)\]", text, re.M)
    check(m is not None, "the report prints the support")
    if m:
        lo, hi = float(m.group(1)), float(m.group(2).rstrip(";"))
        check(abs(lo - lo_ref) < 1e-8 and abs(hi - hi_ref) < 1e-8,
              f"report's support [{lo}, {hi}] equals Biane's edges")

    # 3. The file changed after the run: the report says so and still writes the finite-N data.
    with open(levels, "a") as f:
        f.write("4.5\n")
    r = subprocess.run([exe, "report", os.path.join(study, "run.h5"), "-o", report_dir,
                        "--no-figures"], capture_output=True, text=True, cwd=elsewhere,
                       env=rh.child_env())
    check(r.returncode == 0, f"report on a changed file exits 0 (got {r.returncode}: {r.stderr})")
    text = open(os.path.join(report_dir, "report.md")).read() if r.returncode == 0 else ""
    check("holds other numbers than the run used" in text,
          "the report says the eigenvalue file holds other numbers than the run used")

checks.finish()
