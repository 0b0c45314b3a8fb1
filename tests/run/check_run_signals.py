#!/usr/bin/env python3
"""Signals stop a run cleanly with the resumable exit status (run.hpp: kExitResumable = 3).

Usage: check_run_signals.py BUILD_DIR

1. Reference: the job run uninterrupted as one plain process.
2. SIGUSR1 to mpirun (-np 2) once at least one unit is committed: mpirun forwards it to the
   ranks; the run must exit 3, say on stderr how to resume, leave a file `freegap inspect`
   calls incomplete, with an "interrupted" session; the same command then resumes to a file
   equal to the reference outside /provenance.
3. SIGTERM, then SIGINT, to a plain single-process run: the same checks.
A signal that arrives after the last unit is a miss of the timing, not a failure: such an attempt
is repeated (at most 3 times) with the signal sent earlier.
"""
import os
import re
import signal
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

# A scenario of our own: the covariance of a population with two noise levels S W S (S holds
# the standard deviations, W complex Wishart with N/M = 0.5). Slow enough to be signalled while
# running.
JOB = """\
name = "two noise levels"
seed = 4099
sizes = [80, 160]
trials = 64
expression = "S W S"

[matrices.S]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [1.5, 0.5]]

[matrices.W]
ensemble = "wishart_complex"
ratio = 0.5

[observe]
bins = 60
range = "auto"
max_moment = 6
keep_spectra = 2

[run]
trials_per_unit = 4
"""

RESUME_HINT = ("freegap: stopped by signal {sig}; committed units are in '{out}'; "
               "run the same command again to resume")


def signal_run(c, exe, d, label, out, ranks, sig, reference):
    """Starts a run, signals it mid-run, checks the stop and the resume."""
    cmd = rh.command(exe, ["run", "noise.toml", "-o", out, "--quiet"], ranks)
    path = os.path.join(d, out)
    for attempt in range(3):
        if os.path.exists(path):
            os.remove(path)
        proc = rh.start(cmd, d)
        # Wait (reading with locking off) until at least one unit is committed, then signal
        # the process we started: mpirun itself, or the single freegap process.
        state = rh.wait_until(lambda: (lambda s: s if s and s[0] >= 1 else None)(rh.committed_state(path)),
                              timeout=rh.RUN_TIMEOUT, interval=0.01)
        if proc.poll() is None:
            os.kill(proc.pid, sig)
        rc, _, err = rh.reap(proc)
        done = rh.committed_state(path)
        if rc == 0 and done is not None and done[0] == done[1]:
            print("  -- %s: the run finished before the signal (state %s); again" % (label, state))
            continue
        break
    print("  -- %s: signalled at %s units, exit %s, %s after" % (label, state, rc, done))
    c.equal(rc, rh.EXIT_RESUMABLE, "%s: exit status 3 (resumable)" % label)
    hint = RESUME_HINT.format(sig=int(sig), out=out)
    lines = err.splitlines()
    c.check(hint in lines, "%s: stderr says how to resume: %r" % (label, hint), err)
    c.equal(sum(1 for l in lines if l.startswith("freegap: stopped")), 1, "%s: the hint is printed once" % label)
    c.check(done is not None and done[0] < done[1], "%s: the file is incomplete (%s)" % (label, done))
    p = rh.run([exe, "inspect", out], d)
    c.equal(p.returncode, 0, "%s: freegap inspect opens the stopped file" % label)
    c.check(re.search(r"^status:\s+incomplete \(run the job again to resume\)$", p.stdout, re.M) is not None,
            "%s: inspect says 'incomplete (run the job again to resume)'" % label, p.stdout)
    c.check(re.search(r"^session 0: .*, %d rank\(s\), interrupted$" % (ranks or 1), p.stdout, re.M) is not None,
            "%s: inspect shows session 0 as interrupted" % label, p.stdout)

    p = rh.run(cmd, d)
    c.equal(p.returncode, 0, "%s: resuming with the same command exits 0" % label)
    rc, diff = rh.h5diff(reference, path)
    c.check(rc == 0, "%s: resumed file equals the uninterrupted run outside /provenance" % label, diff[-2000:])
    c.equal([s["status"] for s in rh.sessions(path)], ["interrupted", "finished"],
            "%s: /provenance/sessions is [interrupted, finished]" % label)


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("SIGUSR1 / SIGTERM / SIGINT stop a run resumably")
    with rh.WorkDir("signals") as d:
        rh.write(os.path.join(d, "noise.toml"), JOB)
        p = rh.run(rh.command(exe, ["run", "noise.toml", "-o", "reference.h5", "--quiet"]), d)
        c.equal(p.returncode, 0, "uninterrupted reference run exits 0")
        reference = os.path.join(d, "reference.h5")
        signal_run(c, exe, d, "SIGUSR1 to mpirun -np 2", "usr1.h5", 2, signal.SIGUSR1, reference)
        signal_run(c, exe, d, "SIGTERM to a single process", "term.h5", None, signal.SIGTERM, reference)
        signal_run(c, exe, d, "SIGINT to a single process", "int.h5", None, signal.SIGINT, reference)
    c.finish()


if __name__ == "__main__":
    main()
