#!/usr/bin/env python3
"""jobs/slurm/long-run.sbatch ignores a stale early warning in a requeued job, and only there.

Usage: check_long_run_stale_warning.py BUILD_DIR   (BUILD_DIR is not used: no freegap is run)

Found under load with Slurm 22.05 (docs/cluster-notes.md §3.6): a requeued job can get SIGUSR1
within a second of its restart with its whole time limit still ahead; the script forwarded it,
freegap stopped after 2 s of work, the script requeued the job, and the chain went round without
progress until its segment limit. The script is run here outside Slurm, with stand-ins on PATH:
squeue reports 58 s left, srun runs its command, scontrol records a requeue, and the "freegap"
stand-in exits 3 when it gets SIGUSR1 and 0 after 3 s otherwise. The warning's lead is 30 s.

1. Restarted job (SLURM_RESTART_COUNT=1), SIGUSR1 after 0.5 s: not forwarded, the log says why,
   the run completes (exit 0) and nothing is requeued.
2. First job (no restart count), the same signal: forwarded (a user's own SIGUSR1 still stops a
   first job), freegap exits 3 and the script requeues the job.
"""
import os
import signal
import subprocess
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

SOURCE = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
SCRIPT = os.path.join(SOURCE, "jobs", "slurm", "long-run.sbatch")

STUBS = {
    "squeue": "#!/bin/sh\necho 0:58\n",
    "srun": "#!/bin/sh\nshift\nexec \"$@\"\n",  # drops --mpi=...
    "scontrol": "#!/bin/sh\necho \"$@\" >> \"$STUB_LOG\"\nexit 0\n",
    "fake-freegap": ("#!/bin/bash\ntrap 'echo got-usr1 >> \"$STUB_LOG\"; exit 3' USR1\n"
                     "for i in 1 2 3 4 5 6; do sleep 0.5; done\nexit 0\n"),
}


def attempt(d, restart_count):
    bindir = os.path.join(d, "bin")
    os.makedirs(bindir, exist_ok=True)
    for name, text in STUBS.items():
        rh.write(os.path.join(bindir, name), text)
        os.chmod(os.path.join(bindir, name), 0o755)
    stub_log = os.path.join(d, "stub-%s.log" % restart_count)
    env = dict(os.environ)
    env.update(PATH=bindir + os.pathsep + env.get("PATH", ""), STUB_LOG=stub_log,
               FREEGAP=os.path.join(bindir, "fake-freegap"), FREEGAP_LAUNCH="srun",
               FREEGAP_SIGNAL="B:USR1@30", FREEGAP_RESTART="requeue", FREEGAP_STOP_MARGIN="off",
               SLURM_JOB_ID="77")
    env.pop("SLURM_RESTART_COUNT", None)
    if restart_count is not None:
        env["SLURM_RESTART_COUNT"] = str(restart_count)
    p = subprocess.Popen(["bash", SCRIPT, "job.toml"], cwd=d, env=env, stdout=subprocess.PIPE,
                         stderr=subprocess.STDOUT, text=True)
    time.sleep(0.5)
    p.send_signal(signal.SIGUSR1)
    out, _ = p.communicate(timeout=60)
    stubs = open(stub_log).read() if os.path.exists(stub_log) else ""
    return p.returncode, out, stubs


def main():
    c = rh.Checks("a requeued job's stale early warning is not forwarded")
    with rh.WorkDir("stale-warning") as d:
        rc, out, stubs = attempt(d, 1)
        c.check(rc == 0, "restarted job: the run completes (exit %s)" % rc, out)
        c.check("a stale warning of the requeued run, not forwarded" in out,
                "restarted job: the log says the warning was not forwarded", out)
        c.check("got-usr1" not in stubs and "requeue" not in stubs,
                "restarted job: freegap got no SIGUSR1 and nothing was requeued", stubs)

        rc, out, stubs = attempt(d, None)
        c.check(rc == 3, "first job: freegap stopped and the script exits 3 (exit %s)" % rc, out)
        c.check("forwarded to freegap" in out and "got-usr1" in stubs,
                "first job: the signal was forwarded", out + stubs)
        c.check("requeue 77" in stubs, "first job: the script requeued its job", stubs)
    c.finish()


if __name__ == "__main__":
    main()
