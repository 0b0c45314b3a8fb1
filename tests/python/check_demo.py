#!/usr/bin/env python3
"""The README's demo job end to end on 2 local MPI ranks (what jobs/run_demo.sh runs after the
set-up): `mpirun -np 2 freegap run jobs/demo.toml`, then `freegap inspect --moments`.

Checks: exit 0, every size complete with 24 trials and no failure, two ranks recorded in the
provenance, and the N = 400 moments near the arcsine limit m2 = 2, m4 = 6 (Nica & Speicher 2006,
Bernoulli ⊞ Bernoulli, from memory; docs/check-values.md §1.3) within 5 printed standard
errors plus the O(1/N²) Haar-unitary correction (< 1e-3 at N = 400; docs/check-values.md §3.3).
"""
import os
import re
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import runhelp as rh  # noqa: E402

REPO = os.path.abspath(os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", ".."))


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("the demo job on 2 ranks")
    with rh.WorkDir("demo") as d:
        out = os.path.join(d, "demo.h5")
        job = os.path.join(REPO, "jobs", "demo.toml")
        p = rh.run(rh.command(exe, ["run", job, "-o", out], ranks=2), d)
        c.equal(p.returncode, 0, "mpirun -np 2 freegap run jobs/demo.toml exits 0")
        p = rh.run([exe, "inspect", out, "--moments"], d)
        c.equal(p.returncode, 0, "inspect --moments exits 0")
        text = p.stdout
        c.check(re.search(r"^status:\s+complete$", text, re.M) is not None, "the run is complete", text)
        c.equal(len(re.findall(r"^\s+\d+\s+6/6\s+24/24\s+0\s+1$", text, re.M)), 4,
                "four sizes, 6/6 units, 24/24 trials, no failure, one kept spectrum each")
        c.check(re.search(r"2 rank\(s\), finished", text) is not None, "the session ran on 2 ranks", text)
        block = text[text.index("N = 400"):]
        for k, limit in ((2, 2.0), (4, 6.0)):
            m = re.search(r"m_%d\s+(\S+) \+- (\S+)" % k, block)
            mean, se = float(m.group(1)), float(m.group(2))
            c.check(abs(mean - limit) <= 5 * se + 1e-3,
                    "N = 400: m_%d = %.6f within 5 SE (%.6f) of the arcsine limit %g" % (k, mean, se, limit))
    c.finish()


if __name__ == "__main__":
    main()
