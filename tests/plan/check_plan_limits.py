#!/usr/bin/env python3
"""`freegap plan` knows its limits (issue 21, item 3).

Usage: check_plan_limits.py BUILD_DIR

  1. A job whose largest size is 4× beyond what the calibration may time (a small
     --calibration-budget keeps the ladder short): the plan names the largest timed size, and
     either prints the extrapolation warning or predicts the run's time within ±30 %. The
     warning is printed exactly when the largest size is more than 2× the largest timed one.
  2. Each part of a trial (sample, form, spectrum, observe) has its own fit, and the plan states
     its expected relative error.
  3. The Slurm line it writes asks --mem-per-cpu of at least the peak resident memory the run
     then measures (one rank, this machine) and at most twice it, and a --time.
  4. A calibration file that freegap plan did not write is never replaced.
Times in 1 and 3 come from a run on this machine; the check is on what the plan says about its
own accuracy, with the ±30 % taken from the issue, not a speed assertion.
"""
import os
import re
import subprocess
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

# A scenario of our own: a mixing model of two Haar-rotated two-level signals.
JOB = """\
name = "two-level mixing"
seed = 21
sizes = [80, 160, 320, 640]
trials = 6
expression = "B + U B U^*"

[matrices.B]
ensemble = "diagonal"
atoms = [[0.0, 0.5], [1.0, 0.5]]

[matrices.U]
ensemble = "haar_unitary"

[run]
trials_per_unit = 3
# B + U B U^* takes the O(N) two_projection path by itself; this check
# times the dense parts.
force_dense = true
"""


def run_measured(cmd, cwd):
    """Runs cmd; returns (exit status, wall seconds, peak resident bytes of the process)."""
    t0 = time.monotonic()
    p = subprocess.Popen(cmd, cwd=cwd, env=rh.child_env(), stdout=subprocess.DEVNULL,
                         stderr=subprocess.PIPE)
    _, status, usage = os.wait4(p.pid, 0)
    wall = time.monotonic() - t0
    p.stderr.close()
    return os.waitstatus_to_exitcode(status), wall, usage.ru_maxrss * 1024


def plan(exe, d, cal, budget):
    r = rh.run([exe, "plan", "job.toml", "--calibration", cal, "--remeasure",
                "--calibration-budget", str(budget)], d)
    return r


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("plan: calibration range, cost parts, error, Slurm memory and time")
    with rh.WorkDir("planlimits") as d:
        rh.write(os.path.join(d, "job.toml"), JOB)
        cal = os.path.join(d, "cal.toml")
        r = plan(exe, d, cal, 0.2)
        c.check(r.returncode == 0, "plan with a small calibration budget: exit 0", r.stderr)
        out = r.stdout
        m = re.search(r"cost error:\s+(\S+) % at most at the timed sizes \(N ≤ (\d+)\)", out)
        c.check(m is not None, "the plan states its error and the largest timed size", out)
        timed = int(m.group(2)) if m else 0
        warned = "is extrapolated from trials timed at N ≤ %d" % timed in out
        c.equal(warned, 640 > 2 * timed, "the extrapolation warning appears exactly when N = 640 is "
                "more than 2× the largest timed size (%d)" % timed)
        parts = re.search(r"cost parts:\s+(.*)", out)
        c.check(parts is not None and all(("%s " % n) in parts.group(1)
                                          for n in ("sample", "form", "spectrum", "observe")),
                "each part of a trial has its own fit", out)
        wall_m = re.search(r"wall time:\s+about (\S+) on 1 rank", out)
        slurm = re.search(r"slurm:\s+sbatch --ntasks=1 --time=(\S+) --mem-per-cpu=(\d+)M", out)
        c.check(wall_m is not None and slurm is not None, "a Slurm line with --time and --mem-per-cpu",
                out)

        code, wall, peak = run_measured([exe, "run", "job.toml", "-o", "run.h5", "--quiet"], d)
        c.equal(code, 0, "the job runs")
        if wall_m and slurm:
            predicted = parse_duration(wall_m.group(1))
            ratio = predicted / wall
            c.check(warned or abs(ratio - 1) <= 0.3,
                    "prediction within ±30 %% of the run (%.2fs predicted, %.2fs measured) or the "
                    "warning is printed" % (predicted, wall))
            mem = int(slurm.group(2)) * 1024 * 1024
            c.check(peak <= mem <= 2 * peak,
                    "--mem-per-cpu=%dM is between the run's peak resident memory (%.1f MiB) and "
                    "twice it" % (mem // (1024 * 1024), peak / 1048576.0))

        # With the default budget the ladder reaches the job's largest size.
        r = plan(exe, d, cal, 60)
        m = re.search(r"\(N ≤ (\d+)\)", r.stdout)
        c.check(r.returncode == 0 and m is not None and int(m.group(1)) == 640 and
                "extrapolated" not in r.stdout,
                "with the default budget the largest size itself is timed, no warning", r.stdout)
        slurm = re.search(r"--mem-per-cpu=(\d+)M", r.stdout)
        mem = int(slurm.group(1)) * 1024 * 1024 if slurm else 0
        c.check(peak <= mem <= 2 * peak, "  ... and its --mem-per-cpu (%d MiB) is between the run's "
                "peak (%.1f MiB) and twice it" % (mem // 1048576, peak / 1048576.0))

        # A file at the calibration path that plan did not write is read as nothing and kept.
        foreign = rh.write(os.path.join(d, "notes.toml"), "title = \"my notes\"\n")
        r = plan(exe, d, foreign, 0.2)
        c.check(r.returncode == 0 and "is not a calibration file of freegap plan" in r.stdout,
                "plan with --calibration naming a file of the user's says it is not replaced", r.stdout)
        c.equal(open(foreign).read(), "title = \"my notes\"\n", "  ... and the file is unchanged")
    c.finish()


def parse_duration(text):
    """freegap's printed durations: '45s', '10m00s', '1h30m'."""
    total = 0.0
    for number, unit in re.findall(r"([\d.]+)([dhms])", text):
        total += float(number) * {"d": 86400, "h": 3600, "m": 60, "s": 1}[unit]
    return total


if __name__ == "__main__":
    main()
