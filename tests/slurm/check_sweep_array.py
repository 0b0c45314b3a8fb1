#!/usr/bin/env python3
"""A parameter sweep runs as a 3-task Slurm job array and is collated by `freegap report`.

Usage: check_sweep_array.py BUILD_DIR   (SLURM_CONF: the test cluster, see tests/slurm/cluster.sh)

1. `freegap sweep` turns a sweep file (base job, key, three values) into three job files and a
   list; each job file has its value and its own output.
2. sbatch --array=0-2 jobs/slurm/array.sbatch LIST: every task COMPLETED with exit 0:0; task i
   wrote the run file of job i, complete, and equal outside /provenance to a local run of the same
   job file; the three files differ from each other (the swept value changes the numbers).
3. `freegap report A.h5 B.h5 C.h5 -o DIR` exits 0 and DIR/report.md collates the three files in
   one table and names each.
"""
import os
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import slurmhelp as sh  # noqa: E402
from slurmhelp import rh  # noqa: E402

# A scenario of our own: the sample covariance of a population with two noise levels, S W S,
# swept over the aspect ratio N/M of the Wishart factor.
BASE = """\
name = "two noise levels"
seed = 2718
sizes = [40, 80]
trials = 24
expression = "S W S"

[matrices.S]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [2.0, 0.5]]

[matrices.W]
ensemble = "wishart_complex"
ratio = 0.5

[observe]
bins = 30
max_moment = 4

[run]
trials_per_unit = 4
"""

SWEEP = """\
base = "noise.toml"
vary = "matrices.W.ratio"
values = [0.25, 0.5, 1.0]
directory = "ratios"
"""


def main():
    exe = rh.freegap_exe(sys.argv)
    sh.require_cluster()
    c = rh.Checks("a sweep as a job array, collated by freegap report")
    with rh.WorkDir("slurm-sweep") as d:
        rh.write(os.path.join(d, "noise.toml"), BASE)
        rh.write(os.path.join(d, "ratios.toml"), SWEEP)
        p = rh.run([exe, "sweep", "ratios.toml"], d)
        c.equal(p.returncode, 0, "freegap sweep exits 0")
        out_dir = os.path.join(d, "ratios")
        jobs = [os.path.join(out_dir, "ratios-%d.toml" % i) for i in range(3)]
        listing = sh.read(os.path.join(out_dir, "jobs.txt"))
        c.equal(listing, "".join(j + "\n" for j in jobs), "jobs.txt lists the three job files in order")
        for i, value in enumerate(("0.25", "0.5", "1.0")):
            text = sh.read(jobs[i])
            c.check("ratio = %s\n" % value in text and "output = 'ratios-%d.h5'" % i in text,
                    "job %d has ratio = %s and output ratios-%d.h5" % (i, value, i), text)

        log = os.path.join(d, "task-%a.log")
        # -t 15: the script's early warning comes 300 s (and up to 60 s more) before the limit.
        job_id = sh.sbatch(["--array=0-2", "-n", "1", "-t", "15", "-J", "fg-sweep-%d" % os.getpid(),
                            "-o", log, os.path.join(sh.SCRIPTS, "array.sbatch"),
                            os.path.join(out_dir, "jobs.txt"), "--quiet"], d, sh.batch_env(exe))
        states = sh.wait_job(job_id, 300)
        print("  -- array %s: %s" % (job_id, states))
        c.check(states is not None and len(states) == 3 and
                all(s == ("COMPLETED", "0:0") for s in states.values()),
                "all 3 array tasks COMPLETED with exit code 0:0", states)
        outputs = [os.path.join(out_dir, "ratios-%d.h5" % i) for i in range(3)]
        for i, job in enumerate(jobs):
            c.check(sh.read(os.path.join(d, "task-%d.log" % i)).startswith("freegap array task %d " % i),
                    "task %d's log names the task" % i, sh.read(os.path.join(d, "task-%d.log" % i)))
            state = rh.committed_state(outputs[i])
            c.check(state is not None and state[0] == state[1] > 0,
                    "task %d's run file is complete (%s)" % (i, state))
            local = os.path.join(d, "local-%d.h5" % i)
            p = rh.run([exe, "run", job, "-o", local, "--quiet"], d)
            c.equal(p.returncode, 0, "local run of job %d exits 0" % i)
            rc, diff = rh.h5diff(local, outputs[i])
            c.check(rc == 0, "task %d's run file equals a local run of its job file outside /provenance" % i,
                    diff[-1500:])
        rc, _ = rh.h5diff(outputs[0], outputs[1])
        c.check(rc != 0, "the swept value changes the numbers (tasks 0 and 1 differ)")

        # Collation: one report of the three run files, with a table saying what differs.
        report_dir = os.path.join(d, "report")
        p = rh.run([exe, "report"] + outputs + ["-o", report_dir, "--no-figures"], d)
        c.equal(p.returncode, 0, "freegap report A.h5 B.h5 C.h5 -o DIR exits 0")
        md = sh.read(os.path.join(report_dir, "report.md")) if p.returncode == 0 else ""
        c.check("## Runs collated" in md, "report.md opens with the collated table", md[:2000])
        for o in outputs:
            c.check(os.path.basename(o) in md, "report.md names %s" % os.path.basename(o), md[:2000])
    c.finish()


if __name__ == "__main__":
    main()
