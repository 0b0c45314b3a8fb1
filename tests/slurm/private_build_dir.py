#!/usr/bin/env python3
"""The one-node test cluster works wherever the build directory is, even below a directory that
only its owner may search (a checkout in root's home, chmod 0700).

Usage: private_build_dir.py BUILD_DIR

munged refuses a socket below a directory that not everyone may search; tests/slurm/cluster.sh
used to put the socket in its directory inside the build directory, so every Slurm test failed
for such a checkout. This test makes P = a fresh directory under /tmp with mode 0700 and:

1. starts tests/slurm/cluster.sh in P/build/slurm-cluster on ports of its own (6827 and 6828, so
   that it can run beside the cluster of the other Slurm tests): exit 0 and the node idle;
2. submits a one-rank freegap run (sbatch) whose job directory is P/build/job: the job ends
   COMPLETED with exit code 0:0 and its run file has every unit committed;
3. stops the cluster: exit 0, and the private directory the start made under /tmp is gone.
"""
import os
import shutil
import subprocess
import sys
import tempfile

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import slurmhelp as sh  # noqa: E402
from slurmhelp import rh  # noqa: E402

CLUSTER = os.path.join(sh.HERE, "cluster.sh")
PORTS = {"FREEGAP_SLURM_CTLD_PORT": "6827", "FREEGAP_SLURM_D_PORT": "6828"}

JOB = """\
name = "private checkout"
seed = 17
sizes = [20, 40]
trials = 8
expression = "X"

[matrices.X]
ensemble = "goe"

[observe]
bins = 10
range = [-3.0, 3.0]
"""


class StartFailed(Exception):
    pass


def cluster(action, where):
    env = dict(os.environ)
    env.update(PORTS)
    return subprocess.run(["bash", CLUSTER, action, where], env=env, stdout=subprocess.PIPE,
                          stderr=subprocess.PIPE, text=True, timeout=120)


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("the test cluster under a directory only its owner may search")
    private = tempfile.mkdtemp(prefix="freegap-private-")
    os.chmod(private, 0o700)
    where = os.path.join(private, "build", "slurm-cluster")
    jobdir = os.path.join(private, "build", "job")
    os.makedirs(jobdir)
    runtime = None
    try:
        p = cluster("start", where)
        c.equal(p.returncode, 0, "cluster.sh start below a 0700 directory exits 0")
        if p.returncode != 0:
            print(p.stderr[-3000:])
            raise StartFailed()
        os.environ["SLURM_CONF"] = os.path.join(where, "slurm.conf")
        with open(os.path.join(where, "runtime")) as f:
            runtime = f.read().strip()
        mode = os.stat(runtime).st_mode & 0o777
        c.equal(oct(mode), oct(0o755), "the daemons' private directory is searchable by everyone")
        rh.write(os.path.join(jobdir, "job.toml"), JOB)
        job_id = sh.sbatch(["-n", "1", "-o", "slurm-%j.out", "--wrap",
                            "%s run job.toml --quiet" % exe], jobdir, env=sh.batch_env(exe))
        states = sh.wait_job(job_id, 120)
        c.equal(states, {job_id: ("COMPLETED", "0:0")},
                "a freegap run submitted from below the 0700 directory completes")
        if states != {job_id: ("COMPLETED", "0:0")}:
            print(sh.read(os.path.join(jobdir, "slurm-%s.out" % job_id))[-3000:])
        c.equal(rh.committed_state(os.path.join(jobdir, "job.h5")), (2, 2),
                "its run file has every unit committed")
    except StartFailed:
        pass
    finally:
        p = cluster("stop", where)
        c.equal(p.returncode, 0, "cluster.sh stop exits 0")
        if runtime:
            c.check(not os.path.exists(runtime), "stop removes the private directory %s" % runtime)
        shutil.rmtree(private, ignore_errors=True)
    c.finish()


if __name__ == "__main__":
    main()
