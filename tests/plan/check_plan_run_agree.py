#!/usr/bin/env python3
"""`plan` and `run` build the same model from a job (src/study/), so they agree on the evaluation
path, the work units and the refusals.

Usage: check_plan_run_agree.py BUILD_DIR

For every example job in jobs/ and two jobs made for the case that used to differ:
- a lone GUE with an estimator: estimators read every trial's spectrum, so `run` takes the dense
  path; `plan` used to time the O(N) tridiagonal path for it while `run` did O(N³) work;
- a β-Hermite matrix with an estimator: `run` refuses it (no spectrum on that path); `plan` used
  to accept it.
What must hold: `run --explain` (which builds the runners and runs nothing) and `plan` name the
same path for the same reason (study::Study::path_reason), the same number of work units (Σ over
sizes of ⌈trials / trials_per_unit⌉), and when one refuses, both refuse with the same message and
exit code 2 — also for --threads 2 on a job that needs complex singular value decompositions.
"""
import glob
import math
import os
import re
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

REPO = os.path.abspath(os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", ".."))

GUE_WITH_ESTIMATOR = """\
name = "lone GUE with an estimator"
seed = 3
sizes = [200, 400]
trials = 8
expression = "X"

[matrices.X]
ensemble = "%s"
%s
[observe]
bins = 50
range = [-2.5, 2.5]

[run]
trials_per_unit = 4

[[estimator]]
name = "norm"
builtin = "operator_norm"
[estimator.truth]
norm = "limit_norm"
"""


# A scenario of our own: a two-level signal rotated by a Haar unitary drawn as a polar factor.
POLAR = rh.fixture_job("rotated-two-level", """\
seed = 5
sizes = [20]
trials = 2
""", """\

[matrices.U2]
ensemble = "haar_unitary"
method = "polar"
""").replace('expression = "B + U B U^*"', 'expression = "B + U2 B U2^*"')


def explain(exe, job, d):
    r = rh.run([exe, "run", job, "--explain"], d)
    paths, units = set(), 0
    reasons = set(re.findall(r"^why the path: (.*)$", r.stdout, re.M))
    for block in r.stdout.split("\nexpression:")[0:]:
        if "size: N =" not in block:
            continue
        m = re.search(r"^path: (tridiagonal|two_projection|krylov)\b", block, re.M)
        paths.add(m.group(1) if m else "dense")
        m = re.search(r"^trials: (\d+) in units of (\d+)", block, re.M)
        if m:
            units += math.ceil(int(m.group(1)) / int(m.group(2)))
    return r, paths, units, reasons


def planned(exe, job, d):
    r = rh.run([exe, "plan", job], d)
    m = re.search(r"^expression:.*\((\w+) path\)", r.stdout, re.M)
    u = re.search(r"in (\d+) units", r.stdout)
    why = re.search(r"^why the path: (.*)$", r.stdout, re.M)
    return r, (m.group(1) if m else None), (int(u.group(1)) if u else None), (why.group(1) if why else None)


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("plan and run agree on path, units and refusals")
    with rh.WorkDir("plan-run-agree") as d:
        jobs = sorted(glob.glob(os.path.join(REPO, "jobs", "*.toml")))
        gue = rh.write(os.path.join(d, "gue-estimator.toml"), GUE_WITH_ESTIMATOR % ("gue", ""))
        beta = rh.write(os.path.join(d, "beta-estimator.toml"),
                        GUE_WITH_ESTIMATOR % ("beta_hermite", "beta = 4"))
        for job in jobs + [gue]:
            name = os.path.basename(job)
            er, paths, units, reasons = explain(exe, job, d)
            pr, path, punits, why = planned(exe, job, d)
            if not c.check(er.returncode == 0 and pr.returncode == 0, "%s: both accept it" % name):
                print(er.stderr, pr.stderr)
                continue
            c.check(len(paths) == 1 and path in paths,
                    "%s: run takes the %s path, plan times the %s path" % (name, "/".join(sorted(paths)), path))
            c.check(units == punits, "%s: %d work units in both (plan: %s)" % (name, units, punits))
            c.check(why is not None and reasons == {why},
                    "%s: for the same reason (%s)" % (name, why))
        _, paths, _, reasons = explain(exe, gue, d)
        c.check(paths == {"dense"}, "the GUE with an estimator is on the dense path")
        c.check(len(reasons) == 1 and "estimators read every trial's spectrum" in next(iter(reasons)),
                "… because its estimators read every trial's spectrum: %s" % reasons)
        er = rh.run([exe, "run", beta, "--explain"], d)
        pr = rh.run([exe, "plan", beta], d)
        c.check(er.returncode == 2 and pr.returncode == 2,
                "β-Hermite with an estimator: run exits %d, plan exits %d" % (er.returncode, pr.returncode))
        c.check(er.stderr.strip() != "" and er.stderr.strip() == pr.stderr.strip(),
                "with the same message: %s" % er.stderr.strip())
        c.check("estimators need every trial's spectrum" in pr.stderr and "beta-estimator.toml:" in pr.stderr,
                "the message names the job's place and the fix")
        # A Haar unitary by its polar factor needs complex SVDs: one refusal of --threads 2.
        polar = rh.write(os.path.join(d, "polar.toml"), POLAR)
        er = rh.run([exe, "run", polar, "--explain", "--threads", "2"], d)
        pr = rh.run([exe, "plan", polar, "--threads", "2"], d)
        c.check(er.returncode == 2 and pr.returncode == 2 and er.stderr.strip() == pr.stderr.strip()
                and "--threads 2: this job needs complex singular value decompositions" in er.stderr,
                "--threads 2 with complex SVDs: both refuse with the same message", er.stderr + pr.stderr)
    c.finish()


if __name__ == "__main__":
    main()
