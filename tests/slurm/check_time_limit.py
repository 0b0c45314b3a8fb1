#!/usr/bin/env python3
"""A run longer than its batch job's time limit is stopped, restarted by its own script
(jobs/slurm/long-run.sbatch) and ends identical to an uninterrupted run.

Usage: check_time_limit.py BUILD_DIR   (SLURM_CONF: the test cluster, see tests/slurm/cluster.sh)

The job needs over a minute of one core: 960 trials at N = 400 (320 took about 50 s with U drawn
whole; drawing only the N/2 columns of U that B + U B U^* reads halved that, and the run then
finished inside its first batch job); the batch jobs have the minimum limit of 1 minute, an early
warning --signal=B:USR1@30 and FREEGAP_STOP_MARGIN=15 (--stop-before = time left − 15 s), so
whichever comes first — Slurm's warning (up to 60 s early), freegap's own deadline, or SIGTERM
at the limit (enforced up to ~30 s late) — stops the first job before the run is done
(docs/cluster-notes.md §3.5: the windows are wide, so the test asserts what happened, not when).
Two chains run at once (the node advertises 8 CPUs):
  resubmit  the script submits its follow-up (sbatch --dependency=afterany:<job>);
  requeue   FREEGAP_RESTART=requeue: the script requeues its own job (scontrol requeue).
Checks for each: the chain ends with a job that COMPLETED; at least two segments ran; the log
shows the stop (signal or deadline) and the restart; the run file has an interrupted session
followed by a finished one; it equals a reference run outside /provenance.
"""
import os
import sys
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import slurmhelp as sh  # noqa: E402
from slurmhelp import rh  # noqa: E402

# A scenario of our own: a two-level ±1 signal seen through a random rotation, many trials.
JOB = rh.fixture_job("rotated-two-level", """\
name = "long rotated signal"
seed = 31337
sizes = [200, 400]
trials = [32, 960]
""", """\

[observe]
bins = 50
max_moment = 4

[run]
trials_per_unit = 8
# B + U B U^* takes the O(N) two_projection path by itself; this check
# needs units long enough for the time limit to fall between them.
force_dense = true
""")

SIGNAL = "B:USR1@30"
# The last line of a chain (jobs/slurm/long-run.sbatch).
FINAL = ("freegap long run: complete after", "not resubmitted", "resubmission failed", "requeue refused")


def submit(exe, d, tag, restart):
    env = sh.batch_env(exe, FREEGAP_STOP_MARGIN="15", FREEGAP_SIGNAL=SIGNAL, FREEGAP_RESTART=restart,
                       FREEGAP_MAX_SEGMENTS="12")
    name = "fg-limit-%s-%d" % (tag, os.getpid())
    log = os.path.join(d, tag + ".log")
    job_id = sh.sbatch(["-n", "1", "-t", "1", "--signal=" + SIGNAL, "-J", name, "-o", log,
                        os.path.join(sh.SCRIPTS, "long-run.sbatch"), "job.toml", "-o", tag + ".h5",
                        "--quiet"], d, env)
    return name, job_id, log


def diagnose(job_id):
    """What Slurm says of a chain that did not end: the job's state and reason, and the last lines
    of the daemons' logs that name it (a held or failed launch shows only there)."""
    info = sh.job_info(job_id)
    print("  -- job %s: %s" % (job_id, " ".join("%s=%s" % (k, info.get(k, "?")) for k in
                                                  ("JobState", "Reason", "Restarts", "StartTime",
                                                   "EndTime", "ExitCode"))))
    log_dir = os.path.join(os.environ.get("FREEGAP_SLURM_DIR", ""), "log")
    for name in ("slurmctld.log", "slurmd.log"):
        lines = [l for l in sh.read(os.path.join(log_dir, name)).splitlines()
                 if "JobId=%s" % job_id in l or "job %s" % job_id in l or "StepId=%s." % job_id in l
                 or "error" in l]
        print("  -- %s (lines naming job %s, and errors):\n%s" %
              (name, job_id, "\n".join("     | " + l for l in lines[-25:])))


def main():
    exe = rh.freegap_exe(sys.argv)
    sh.require_cluster()
    c = rh.Checks("a time-limited batch job restarts itself until the run is complete")
    with rh.WorkDir("slurm-limit") as d:
        rh.write(os.path.join(d, "job.toml"), JOB)
        t0 = time.monotonic()
        chains = [submit(exe, d, "resubmit", "resubmit"), submit(exe, d, "requeue", "requeue")]
        # The reference meanwhile (as a plain local process).
        p = rh.run([exe, "run", "job.toml", "-o", "reference.h5", "--quiet"], d, timeout=600)
        c.equal(p.returncode, 0, "local reference run exits 0")
        reference = os.path.join(d, "reference.h5")
        for name, first, log in chains:
            # Done when the script has written its last word and nothing of the chain is queued
            # (a requeued job leaves squeue for a moment, so the queue alone is not enough).
            ok = rh.wait_until(lambda: any(m in sh.read(log) for m in FINAL) and not sh.queue(name),
                               timeout=720, interval=0.5)
            tag = os.path.basename(log)[:-4]
            text = sh.read(log)
            print("  -- %s: chain from job %s done after %.0f s; log:\n%s" %
                  (tag, first, time.monotonic() - t0,
                   "\n".join("     | " + l for l in text.splitlines())))
            if not ok:
                diagnose(first)
            c.check(ok, "%s: the chain ended (last word written, queue empty) within 12 minutes" % tag)
            c.check("freegap long run: complete after" in text,
                    "%s: the last job reports the run complete" % tag, text)
            segments = text.count("freegap exited with status 3")
            c.check(segments >= 1, "%s: at least one job stopped with status 3 before the end (%d)" %
                    (tag, segments), text)
            stops = ("freegap: stopped by signal" in text or "freegap: stopped before the deadline" in text)
            c.check(stops, "%s: freegap says why it stopped (signal or deadline)" % tag, text)
            restart = ("submitted as job" in text) if tag == "resubmit" else ("requeueing job" in text)
            c.check(restart, "%s: the script restarted the run itself (%s)" % (tag, tag), text)
            path = os.path.join(d, tag + ".h5")
            statuses = [s["status"] for s in rh.sessions(path)] if os.path.exists(path) else []
            c.check(len(statuses) >= 2 and statuses[-1] == "finished" and "interrupted" in statuses[:-1],
                    "%s: sessions end finished after an interrupted one (%s)" % (tag, statuses))
            rc, diff = rh.h5diff(reference, path)
            c.check(rc == 0, "%s: the final run file equals the uninterrupted run outside /provenance" % tag,
                    diff[-2000:])
    c.finish()


if __name__ == "__main__":
    main()
