#!/usr/bin/env python3
"""Bounded inputs and stop requests (issue 20, items 4 and 5).

Usage: check_input_bounds.py BUILD_DIR

1. Each input that used to crash (stack overflow, exit 139) or run without bound is refused with
   exit status 2 and its exact message, by every command that reads it (run, run --explain,
   sample, limit): 7,000 nested parentheses, 100,000 x "(-", a name followed by 100,000 x "^*",
   B^1000^1000^1000, a product of 100,000 factors, limit -e "X^7 Y + Y X^7" (pencil too large) and
   limit --points 100000000. Nothing is written: no run file and no temporary beside it.
2. SIGTERM during a long phase stops it, with nothing left half-written:
   - run, during the validation of a job (the expansion behind the self-adjointness check):
     exit 3 (run.hpp: kExitResumable), no run file;
   - limit -o DIR, during the solve: exit 143 (128 + SIGTERM), no DIR, no limit.csv.partial;
   - report -o DIR, during the bootstraps: exit 143, no DIR and no hidden temporary beside it.
   The signal is sent once the process has run for a while (it must not be done already); the
   deadline after it (STOP_DEADLINE) is a liveness net for a process that ignores the signal,
   generous on a loaded machine, not a measure of speed.
"""
import os
import signal
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

# Time limits scale by FREEGAP_TEST_TIME_SCALE (tests/run_sanitized.sh: 10, for the sanitizers'
# slowdown).
SCALE = float(os.environ.get("FREEGAP_TEST_TIME_SCALE", "1"))
STOP_DEADLINE = 10.0 * SCALE  # seconds after the signal; a liveness net, never a speed assertion
COMMAND_LIMIT = 120 * SCALE  # a hang detector for the refusals

# A scenario of our own: two coupled noise fields X, Y on a grid of sizes, a ±1 mask B and a
# random rotation U. Every case below changes only the expression.
JOB = """\
name = "coupled fields"
seed = 11
sizes = [8, 16]
trials = 2
expression = "{expression}"

[matrices.X]
ensemble = "gue"

[matrices.Y]
ensemble = "gue"

[matrices.B]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [-1.0, 0.5]]

[matrices.U]
ensemble = "haar_unitary"

[observe]
bins = 10
range = [-5.0, 5.0]
"""

NESTED = "parentheses nested more than 100 deep; expand or split the expression"
CHAIN = "more than 16 '^' in a row; combine them (\"X^2^3\" is X^6, \"X^*^*\" is X)"
DEGREE = ("degree above 1000: a word of the expanded expression would have more than 1000 "
          "matrix factors; lower the powers or split the product")

CASES = [
    # name, expression, message (without the place)
    ("7000 nested parentheses", "(" * 7000 + "X" + ")" * 7000, NESTED + " at column 101"),
    ("100000 x (-", "(-" * 100000 + "X" + ")" * 100000, NESTED + " at column 201"),
    ("name + 100000 x ^*", "X" + "^*" * 100000, CHAIN + " at column 34"),
    ("B^1000^1000^1000", "B^1000^1000^1000", DEGREE + " at column 7"),
    ("product of 100000 factors", " ".join(["X"] * 100000), DEGREE + " at column 2001"),
]
DECLARATIONS = ["-m", "X=gue", "-m", "Y=gue", "-m", "B=diagonal:atoms=-1@0.5,1@0.5"]


def refusals(c, exe):
    with rh.WorkDir("bounds") as wd:
        for name, expression, message in CASES:
            rh.write(os.path.join(wd, "fields.toml"), JOB.format(expression=expression))
            for extra in ([], ["--explain"]):
                p = rh.run(rh.command(exe, ["run", "fields.toml"] + extra), cwd=wd,
                           timeout=COMMAND_LIMIT)
                what = "run %s%s" % (name, " --explain" if extra else "")
                c.equal(p.returncode, rh.EXIT_BAD_INPUT, what + ": exit 2")
                c.equal(p.stderr, "freegap: fields.toml:5: expression: %s\n" % message,
                        what + ": message")
                c.equal(sorted(os.listdir(wd)), ["fields.toml"], what + ": nothing written")
            # The command line takes at most 128 KiB per argument: the shorter inputs only.
            if len(expression) < 100000:
                for cmd in (["sample"] + DECLARATIONS + ["-e", expression, "-n", "8"],
                            ["limit"] + DECLARATIONS + ["-e", expression]):
                    p = rh.run(rh.command(exe, cmd), cwd=wd, timeout=COMMAND_LIMIT)
                    c.equal((p.returncode, p.stderr), (rh.EXIT_BAD_INPUT, "freegap: %s\n" % message),
                            "%s %s: exit 2 and the message" % (cmd[0], name))
        # (X^22 − 1 was the case here until a polynomial in one matrix got its own rule, the
        # image of X's law; two matrices still go to the solver.)
        p = rh.run(rh.command(exe, ["limit", "-m", "X=gue", "-m", "Y=gue", "-e", "X^7 Y + Y X^7"]),
                   cwd=wd, timeout=COMMAND_LIMIT)
        # The closed-form rules say why they do not apply, then the solver's bound is named.
        c.check(p.returncode == rh.EXIT_BAD_INPUT and p.stderr.startswith(
                    "freegap: no limit is derived for 'X^7 Y + Y X^7': ") and p.stderr.endswith(
                    "expression 'X^7 Y + Y X^7': its linearization is a 15×15 pencil, larger "
                    "than the 12 the limit solver takes (its cost climbs steeply with the size); "
                    "lower the degree or the number of distinct words\n"),
                "limit X^7 Y + Y X^7: exit 2 and the message", p.stderr)
        p = rh.run(rh.command(exe, ["limit", "-m", "X=gue", "-e", "X", "--points", "100000000",
                                    "-o", "out"]), cwd=wd, timeout=COMMAND_LIMIT)
        c.equal((p.returncode, p.stderr),
                (rh.EXIT_BAD_INPUT,
                 "freegap: --points must be between 10 and 100000 (got 100000000)\n"),
                "limit --points 100000000: exit 2 and the message")
        c.check(not os.path.exists(os.path.join(wd, "out")), "limit --points: no output")
        for window in ("1,-1", "1,1", "0,nan", "0,inf"):
            p = rh.run(rh.command(exe, ["limit", "-m", "X=gue", "-e", "X", "--window", window,
                                        "-o", "out"]), cwd=wd, timeout=COMMAND_LIMIT)
            c.equal((p.returncode, p.stderr),
                    (rh.EXIT_BAD_INPUT,
                     "freegap: --window takes two finite numbers LO,HI with LO < HI (the first "
                     "and last x of the density table), for example --window -3,3\n"),
                    "limit --window %s: exit 2 and the message" % window)
            c.check(not os.path.exists(os.path.join(wd, "out")), "limit --window %s: no output"
                    % window)


def stop_during(c, what, cmd, cwd, expected_rc, wait=1.5):
    """Starts cmd, sends SIGTERM after `wait` seconds, returns (rc, stderr, signalled in time)."""
    proc = rh.start(cmd, cwd)
    time.sleep(wait)
    if proc.poll() is not None:
        out, err = proc.communicate()
        c.check(False, "%s: still running when signalled" % what, err)
        return
    proc.send_signal(signal.SIGTERM)
    sent = time.monotonic()
    rc, out, err = rh.reap(proc, timeout=STOP_DEADLINE)
    c.check(rc is not None and time.monotonic() - sent < STOP_DEADLINE,
            "%s: exited after SIGTERM (liveness net %g s)" % (what, STOP_DEADLINE))
    c.equal(rc, expected_rc, "%s: exit %d" % (what, expected_rc))
    c.check("stopped by signal 15" in err, "%s: says it was stopped" % what, err)


def stops(c, exe):
    with rh.WorkDir("stops") as wd:
        # Validation: the self-adjointness expansion of this expression forms millions of word
        # products (inside the bounds), several seconds of work before any file is written.
        slow = "(U + U^*)^1000"
        job = rh.write(os.path.join(wd, "fields.toml"), JOB.format(expression=slow))
        stop_during(c, "run during validation", rh.command(exe, ["run", job]), wd,
                    rh.EXIT_RESUMABLE)
        c.equal(sorted(os.listdir(wd)), ["fields.toml"], "run stopped: nothing written")

        # limit: X^4 Y + Y X^4 (pencil 9) takes about 2 ms a density point, so 100,000 points
        # take minutes; a cheaper model can finish before the signal on a fast machine. (X^8 − 1
        # was the model here until a polynomial in one matrix got its closed-form image.)
        stop_during(c, "limit during the solve",
                    rh.command(exe, ["limit", "-m", "X=gue", "-m", "Y=gue", "-e", "X^4 Y + Y X^4",
                                     "--points", "100000", "-o", "lim"]), wd, 143)
        c.equal(sorted(os.listdir(wd)), ["fields.toml"], "limit stopped: no directory, no partial")

        # report: a run of 128 one-trial units first, then a report with 100,000 bootstrap
        # replicates (about 15 s on a loaded 2-core machine).
        small = JOB.format(expression="X + Y").replace("sizes = [8, 16]", "sizes = [8, 16, 32, 64]")
        small = small.replace("trials = 2", "trials = 32") + "\n[run]\ntrials_per_unit = 1\n"
        small = rh.write(os.path.join(wd, "small.toml"), small)
        p = rh.run(rh.command(exe, ["run", small, "-q"]), cwd=wd)
        c.check(p.returncode == 0, "the small run finishes", p.stderr)
        before = sorted(os.listdir(wd))
        stop_during(c, "report during the bootstraps",
                    rh.command(exe, ["report", "small.h5", "-o", "rep", "--no-figures",
                                     "--bootstrap", "100000", "--fit-bootstrap", "100000"]),
                    wd, 143)
        c.equal(sorted(os.listdir(wd)), before, "report stopped: no directory, no temporary")


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("bounded inputs and stop requests")
    refusals(c, exe)
    stops(c, exe)
    c.finish()


if __name__ == "__main__":
    main()
