"""Shared helpers for the Slurm tests (tests/slurm/check_*.py); not a test itself.

The cluster is the one tests/slurm/cluster.sh started (CTest fixture "slurm"); SLURM_CONF names
its configuration. Jobs run as root on the one node and inherit this environment (sbatch's
default --export=ALL), including runhelp's MPI settings.
"""
import os
import re
import subprocess
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
SOURCE = os.path.dirname(os.path.dirname(HERE))
sys.path.insert(0, os.path.join(SOURCE, "tests", "support"))
import runhelp as rh  # noqa: E402,F401

SCRIPTS = os.path.join(SOURCE, "jobs", "slurm")
TERMINAL = {"COMPLETED", "FAILED", "TIMEOUT", "CANCELLED", "NODE_FAIL", "OUT_OF_MEMORY",
            "BOOT_FAIL", "DEADLINE", "PREEMPTED"}


def require_cluster():
    conf = os.environ.get("SLURM_CONF", "")
    if not conf or not os.path.exists(conf):
        sys.exit("FAIL: no test cluster (SLURM_CONF=%r); run through ctest, which starts "
                 "tests/slurm/cluster.sh" % conf)


def sbatch(args, cwd, env=None):
    """Submits; returns the job id (str). Raises on failure with sbatch's message."""
    p = subprocess.run(["sbatch", "--parsable"] + list(args), cwd=cwd, env=env or os.environ,
                       stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, timeout=60)
    if p.returncode != 0:
        raise RuntimeError("sbatch %s failed: %s" % (" ".join(args), p.stderr))
    return p.stdout.strip().split(";")[0]


def job_info(job_id):
    """scontrol's fields of a job as a dict ({} if unknown)."""
    p = subprocess.run(["scontrol", "show", "job", str(job_id)], stdout=subprocess.PIPE,
                       stderr=subprocess.PIPE, text=True, timeout=30)
    if p.returncode != 0:
        return {}
    return dict(re.findall(r"(\S+?)=(\S*)", p.stdout))


def wait_job(job_id, timeout):
    """Polls until the job (or every task of an array) is in a terminal state; returns the state
    of each (a dict job id -> (JobState, ExitCode)), or None on timeout."""
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        p = subprocess.run(["scontrol", "show", "job", str(job_id)], stdout=subprocess.PIPE,
                           stderr=subprocess.PIPE, text=True, timeout=30)
        records = [dict(re.findall(r"(\S+?)=(\S*)", block))
                   for block in p.stdout.split("\n\n") if block.strip()]
        if records and all(r.get("JobState") in TERMINAL for r in records):
            return {r["JobId"]: (r["JobState"], r.get("ExitCode")) for r in records}
        time.sleep(0.3)
    return None


def queue(name=None):
    """Job ids in the queue (optionally of one job name)."""
    cmd = ["squeue", "-h", "-o", "%i"] + (["-n", name] if name else [])
    p = subprocess.run(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, timeout=30)
    return p.stdout.split()


def wait_queue_empty(name, timeout):
    """Waits until no job of this name is queued or running; True if it happened in time."""
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if not queue(name):
            return True
        time.sleep(0.5)
    return False


def batch_env(exe, **extra):
    """The environment batch jobs get: ours, the freegap executable, default HDF5 locking."""
    env = rh.child_env(FREEGAP=exe)
    env.update(extra)
    return env


def read(path):
    try:
        with open(path) as f:
            return f.read()
    except OSError as e:
        return "(cannot read %s: %s)" % (path, e)
