#!/usr/bin/env python3
"""A freegap run as a Slurm batch job (jobs/slurm/run.sbatch) gives the same run file as a
local run.

Usage: check_batch_run.py BUILD_DIR   (SLURM_CONF: the test cluster, see tests/slurm/cluster.sh)

1. Reference: the job run locally as one plain process.
2. sbatch -n 2 run.sbatch (srun, 2 ranks): COMPLETED with exit 0:0; the run file equals the
   reference outside /provenance; its session shows 2 ranks; the log names srun.
3. The same with FREEGAP_LAUNCH=mpirun: the same checks, the log names mpirun.
4. The early-warning path: the batch shell alone gets SIGUSR1 (scancel --signal=USR1 --batch,
   as Slurm's --signal=B:USR1@N does); the script's trap forwards it to freegap, which commits
   and exits 3; the job ends FAILED with exit code 3:0 and a resumable, incomplete file; the
   same command submitted again completes it, equal to the reference.
"""
import os
import sys
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import slurmhelp as sh  # noqa: E402
from slurmhelp import rh  # noqa: E402

# A scenario of our own: a ±1 signal mixed with a Haar-rotated copy of itself. 512 trials at
# N = 240 (dense, about 10 s on 2 ranks): with 128 the whole run took 2.6 s and ended before the
# forwarded SIGUSR1 reached it.
JOB = rh.fixture_job("rotated-two-level", """\
name = "rotated signal"
seed = 808
sizes = [60, 120, 240]
trials = [16, 16, 512]
""", """\

[observe]
bins = 40
max_moment = 6
keep_spectra = 1

[run]
trials_per_unit = 4
# B + U B U^* takes the O(N) two_projection path by itself; the signal check needs a run that is
# still going when the signal arrives.
force_dense = true
""")


def batch(c, exe, d, label, out, extra_env=None, signal_after=None):
    env = sh.batch_env(exe, **(extra_env or {}))
    log = os.path.join(d, out + ".log")
    # -t 15: the script's early warning comes 300 s (and up to 60 s more) before the limit.
    job_id = sh.sbatch(["-n", "2", "-t", "15", "-J", "fg-" + out, "-o", log,
                        os.path.join(sh.SCRIPTS, "run.sbatch"), "job.toml", "-o", out, "--quiet"],
                       d, env)
    if signal_after is not None:
        path = os.path.join(d, out)
        rh.wait_until(lambda: (lambda s: s and s[0] >= signal_after)(rh.committed_state(path)),
                      timeout=120, interval=0.05)
        os.system("scancel --signal=USR1 --batch %s" % job_id)
    states = sh.wait_job(job_id, 300)
    return job_id, states, sh.read(log)


def main():
    exe = rh.freegap_exe(sys.argv)
    sh.require_cluster()
    c = rh.Checks("a freegap batch job matches a local run")
    with rh.WorkDir("slurm-batch") as d:
        rh.write(os.path.join(d, "job.toml"), JOB)
        p = rh.run([exe, "run", "job.toml", "-o", "reference.h5", "--quiet"], d)
        c.equal(p.returncode, 0, "local reference run exits 0")
        reference = os.path.join(d, "reference.h5")

        for label, out, env, word in (("srun", "srun.h5", {}, "srun"),
                                      ("mpirun", "mpirun.h5", {"FREEGAP_LAUNCH": "mpirun"}, "mpirun")):
            t0 = time.monotonic()
            job_id, states, log = batch(c, exe, d, label, out, env)
            print("  -- %s: job %s %s in %.1f s" % (label, job_id, states, time.monotonic() - t0))
            c.equal(states and states.get(job_id), ("COMPLETED", "0:0"),
                    "%s: the batch job COMPLETED with exit code 0:0" % label)
            c.check(log.startswith("freegap batch job %s: %s " % (job_id, word)),
                    "%s: the script launched freegap with %s" % (label, word), log)
            rc, diff = rh.h5diff(reference, os.path.join(d, out))
            c.check(rc == 0, "%s: the run file equals the local run outside /provenance" % label,
                    diff[-2000:])
            c.equal([(s["ranks"], s["status"]) for s in rh.sessions(os.path.join(d, out))],
                    [(2, "finished")], "%s: one finished session of 2 ranks" % label)

        # The early warning reaches only the batch shell; the trap must pass it on.
        job_id, states, log = batch(c, exe, d, "USR1", "warned.h5", signal_after=1)
        print("  -- USR1 to the batch shell: job %s %s" % (job_id, states))
        c.equal(states and states.get(job_id), ("FAILED", "3:0"),
                "USR1 to the batch shell: the job ends with freegap's exit status 3")
        c.check("SIGUSR1 received, forwarded to freegap" in log,
                "USR1 to the batch shell: the script's trap forwarded it", log)
        c.check("freegap: stopped by signal 10" in log,
                "USR1 to the batch shell: freegap stopped on SIGUSR1", log)
        done = rh.committed_state(os.path.join(d, "warned.h5"))
        c.check(done is not None and 1 <= done[0] < done[1],
                "USR1 to the batch shell: the file is committed in part (%s)" % (done,))
        job_id, states, log = batch(c, exe, d, "resume", "warned.h5")
        c.equal(states and states.get(job_id), ("COMPLETED", "0:0"),
                "the same batch job submitted again COMPLETED")
        rc, diff = rh.h5diff(reference, os.path.join(d, "warned.h5"))
        c.check(rc == 0, "the resumed run file equals the local run outside /provenance", diff[-2000:])
        c.equal([s["status"] for s in rh.sessions(os.path.join(d, "warned.h5"))],
                ["interrupted", "finished"], "sessions: interrupted, then finished")
    c.finish()


if __name__ == "__main__":
    main()
