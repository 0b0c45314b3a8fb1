#!/usr/bin/env python3
"""`freegap plan --rate-halfwidth H --pilot RUN` recommends trials that give an exponent's 95%
interval of about ± H.

Usage: check_plan_rate.py BUILD_DIR

The model: a GOE ladder N = 50 … 800 on the tridiagonal path (spectra not kept, so trials are
cheap). Its second moment has the exact finite-N error E tr X²/N − 1 = 1/N (off-diagonal variance
1/N, diagonal 2/N; docs/check-values.md §2.2), an exact power law, so the interval of its fitted
exponent is limited by noise alone and narrows like 1/√R.

1. A pilot of 40 trials per size; `plan --rate-halfwidth 0.1 --pilot pilot.h5 --rate-quantity
   moment_2` prints the pilot's interval, the factor and the recommended trials per size, and
   prices them (core-hours for those trials).
2. The job run with the recommended trials: the reported exponent's interval half-width is
   within ± 30 % of 0.1, and the interval contains 1.
3. Bad use: --rate-halfwidth without --pilot, a pilot that is not a run file, an unknown quantity:
   a message naming the fix and exit 2; nothing written.
"""
import csv
import os
import re
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

JOB = """\
name = "GOE second moment ladder"
seed = 2718
sizes = [50, 100, 200, 400, 800]
trials = %d
expression = "X"

[matrices.X]
ensemble = "goe"

[observe]
bins = 50
max_moment = 2
keep_spectra = "none"

[run]
trials_per_unit = 20
"""
TARGET = 0.1


def fit_of(d, run_file, key):
    out = os.path.join(d, run_file + "-rep")
    p = rh.run([rh.EXE, "report", run_file, "-o", out, "--no-figures"], d)
    if p.returncode != 0:
        return None, p.stderr
    with open(os.path.join(out, "fits.csv"), newline="") as f:
        for row in csv.DictReader(f):
            if row["key"] == key:
                return row, ""
    return None, "no fit of " + key


def main():
    exe = rh.freegap_exe(sys.argv)
    rh.EXE = exe
    c = rh.Checks("plan recommends the trials for an exponent's interval")
    with rh.WorkDir("plan-rate") as d:
        rh.write(os.path.join(d, "pilot.toml"), JOB % 40)
        p = rh.run(rh.command(exe, ["run", "pilot.toml", "-o", "pilot.h5", "--quiet"], ranks=2), d)
        c.equal(p.returncode, 0, "the pilot runs")
        pilot_fit, why = fit_of(d, "pilot.h5", "moment_2")
        c.check(pilot_fit is not None and pilot_fit["ok"] == "1", "the pilot's m_2 error is fitted", why)

        p = rh.run([exe, "plan", "pilot.toml", "--rate-halfwidth", str(TARGET), "--pilot", "pilot.h5",
                    "--rate-quantity", "moment_2", "--calibration", os.path.join(d, "cal.toml")], d)
        c.equal(p.returncode, 0, "plan --rate-halfwidth exits 0")
        text = p.stdout
        m = re.search(r"^recommended:\s+trials per size ([0-9, ]+) \(", text, re.M)
        c.check(m is not None and "95% interval" in text and "core-hours" in text,
                "plan prints the pilot's interval, the recommended trials and their cost", text + p.stderr)
        if m is None:
            c.finish()
        trials = [int(t) for t in m.group(1).split(",")]
        c.check(len(trials) == 5 and len(set(trials)) == 1 and trials[0] > 40,
                "one recommended count per size, more than the pilot's 40 (%s)" % trials)

        rh.write(os.path.join(d, "target.toml"), JOB % trials[0])
        p = rh.run(rh.command(exe, ["run", "target.toml", "-o", "target.h5", "--quiet"], ranks=2), d)
        c.equal(p.returncode, 0, "the recommended run runs")
        fit, why = fit_of(d, "target.h5", "moment_2")
        if c.check(fit is not None and fit["ok"] == "1", "the run's m_2 error is fitted", why):
            lo, hi = float(fit["ci_low"]), float(fit["ci_high"])
            half = 0.5 * (hi - lo)
            c.check(0.7 * TARGET <= half <= 1.3 * TARGET,
                    "its interval [%.3f, %.3f] has half-width %.3f, within ± 30 %% of %g" % (lo, hi, half, TARGET))
            c.check(lo <= 1.0 <= hi, "and contains the exact exponent 1")

        # Bad use: a clear message, exit 2, no file written.
        before = sorted(os.listdir(d))
        for args, needle in ((["--rate-halfwidth", "0.1"], "--pilot"),
                             (["--rate-halfwidth", "0.1", "--pilot", "pilot.toml"], "pilot.toml"),
                             (["--rate-halfwidth", "0.1", "--pilot", "pilot.h5", "--rate-quantity", "moment_9"],
                              "moment_9"),
                             (["--rate-halfwidth", "-1", "--pilot", "pilot.h5"], "--rate-halfwidth"),
                             # The pilot's moment errors carry no noise floor; a tiny target asks
                             # for more trials than any plan should recommend.
                             (["--rate-halfwidth", "1e-6", "--pilot", "pilot.h5", "--rate-quantity", "moment_2"],
                              "10^12 trials")):
            p = rh.run([exe, "plan", "pilot.toml", "--calibration", os.path.join(d, "cal.toml")] + args, d)
            c.check(p.returncode == 2 and needle in p.stderr,
                    "plan %s: exit 2 naming %s" % (" ".join(args), needle), "exit %d\n%s" % (p.returncode, p.stderr))
        c.equal(sorted(os.listdir(d)), before, "nothing written by the refused commands")
    c.finish()


if __name__ == "__main__":
    main()
