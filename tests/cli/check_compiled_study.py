#!/usr/bin/env python3
"""`sample` and `inspect` use the compiled study (src/study/) as `run`, `plan`, `limit` and
`report` do.

Usage: check_compiled_study.py BUILD_DIR

1. `sample --explain` prints, per size, what the study's runner computes and why it takes its path:
   a lone GUE the tridiagonal path, X X the dense path, with the reasons `run --explain` gives.
2. `sample` of a lone GUE at N = 50 and 100, 400 trials each (seed 1): the mean of m_2 is 1 and of
   m_4 is 2 + 1/N² within 4 standard errors (E Tr H⁴ = 2N³ + N with E|H_ij|² = 1: Harer & Zagier
   1986, docs/check-values.md §2.1).
3. `inspect` of a run file names the path this freegap compiles the stored job to and why, the
   same reason `run --explain` printed for the job; for a lone GUE job, the tridiagonal one.
"""
import os
import re
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

# A scenario of our own: the level spread of a small disordered grain.
GRAIN = rh.fixture_job("gue", """\
name = "disordered grain"
seed = 8
sizes = [30, 60]
trials = 4
""", """\

[observe]
bins = 10
range = [-2.5, 2.5]
max_moment = 4
""")


def reasons(text):
    return re.findall(r"^why the path: (.*)$", text, re.M)


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("sample and inspect use the compiled study")
    with rh.WorkDir("compiled-study") as d:
        # 1. sample --explain
        r = rh.run([exe, "sample", "-m", "X=gue", "-e", "X", "-n", "50", "100", "--explain"], d)
        why = reasons(r.stdout)
        c.check(r.returncode == 0 and len(why) == 2 and all(w.startswith("tridiagonal: ") for w in why)
                and len(re.findall(r"^path: tridiagonal", r.stdout, re.M)) == 2,
                "sample --explain: a lone GUE takes the tridiagonal path at both sizes, and says why",
                r.stdout + r.stderr)
        r = rh.run([exe, "sample", "-m", "X=gue", "-e", "X X", "-n", "20", "--explain"], d)
        why = reasons(r.stdout)
        c.check(r.returncode == 0 and len(why) == 1 and why[0].startswith("dense: "),
                "sample --explain: X X takes the dense path, and says why", r.stdout + r.stderr)

        # 2. sample's moments
        r = rh.run([exe, "sample", "-m", "X=gue", "-e", "X", "-n", "50", "100", "-t", "400", "-k", "4"], d)
        rows = [line.split() for line in r.stdout.splitlines() if re.match(r"^\s+\d+\s+\d+\s", line)]
        c.check(r.returncode == 0 and len(rows) == 2, "sample prints one row per size", r.stdout + r.stderr)
        for row in rows:
            n = int(row[0])
            # N failed, then "mean +- se" for m_1 … m_4
            m2, se2 = float(row[5]), float(row[7])
            m4, se4 = float(row[11]), float(row[13])
            c.check(abs(m2 - 1.0) <= 4 * se2, "N = %d: m_2 = %.5f ± %.5f, expected 1" % (n, m2, se2))
            c.check(abs(m4 - (2.0 + 1.0 / n ** 2)) <= 4 * se4,
                    "N = %d: m_4 = %.5f ± %.5f, expected 2 + 1/N²" % (n, m4, se4))

        # 3. inspect
        job = rh.write(os.path.join(d, "grain.toml"), GRAIN)
        explained = rh.run([exe, "run", job, "--explain"], d)
        run_file = os.path.join(d, "grain.h5")
        r = rh.run(rh.command(exe, ["run", job, "-o", run_file, "-q"], ranks=2), d)
        c.check(r.returncode == 0, "the grain job runs on 2 ranks", r.stdout + r.stderr)
        r = rh.run([exe, "inspect", run_file], d)
        compiled = re.findall(r"^compiled:\s+(.*)$", r.stdout, re.M)
        c.check(r.returncode == 0 and len(compiled) == 1 and compiled[0].startswith("tridiagonal: "),
                "inspect names the path this freegap compiles the stored job to", r.stdout + r.stderr)
        c.check(compiled and set(reasons(explained.stdout)) == {compiled[0]},
                "… with the reason run --explain gave", explained.stdout + "\n" + r.stdout)
    c.finish()


if __name__ == "__main__":
    main()
