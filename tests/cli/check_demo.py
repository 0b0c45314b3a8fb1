#!/usr/bin/env python3
"""The README's demo job end to end on 2 local MPI ranks (what jobs/run_demo.sh runs after the
set-up): `mpirun -np 2 freegap run jobs/demo.toml`, `freegap inspect --moments`, then
`freegap report`.

Checks: exit 0, every size complete with 240 trials, no failure and every spectrum kept, two
ranks recorded in the provenance; the N = 400 moments near the arcsine limit m2 = 2, m4 = 6
(Nica & Speicher 2006, Bernoulli ⊞ Bernoulli, from memory; docs/check-values.md §1.3) within 5
printed standard errors plus 4/N (a Haar orthogonal rotation leaves an O(1/N) bias; measured
here: m4 − 6 ≈ 0.0044 at N = 400, no published value used); and the report's headline: the
Kolmogorov distance of the mean spectral distribution resolved at every size (computed from the
kept eigenvalues) and fitted, with a positive exponent.
"""
import csv
import os
import re
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
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
        c.equal(len(re.findall(r"^\s+\d+\s+20/20\s+240/240\s+0\s+240$", text, re.M)), 4,
                "four sizes, 20/20 units, 240/240 trials, no failure, every spectrum kept")
        c.check(re.search(r"2 rank\(s\), finished", text) is not None, "the session ran on 2 ranks", text)
        block = text[text.index("N = 400"):]
        for k, limit in ((2, 2.0), (4, 6.0)):
            m = re.search(r"m_%d\s+(\S+) \+- (\S+)" % k, block)
            mean, se = float(m.group(1)), float(m.group(2))
            c.check(abs(mean - limit) <= 5 * se + 4.0 / 400,
                    "N = 400: m_%d = %.6f within 5 SE (%.6f) + 4/N of the arcsine limit %g" % (k, mean, se, limit))
        p = rh.run([exe, "report", out, "-o", os.path.join(d, "rep"), "--no-figures"], d)
        c.equal(p.returncode, 0, "freegap report exits 0")
        with open(os.path.join(d, "rep", "sizes.csv"), newline="") as f:
            sizes = list(csv.DictReader(f))
        c.check(len(sizes) == 4 and all(s["distances_from_spectra"] == "1" and s["kolmogorov_resolved"] == "1"
                                        for s in sizes),
                "the mean-spectrum Kolmogorov distance comes from the spectra and is resolved at every size",
                "\n".join("N = %s: %s ± %s resolved %s" % (s["n"], s["kolmogorov"], s["kolmogorov_se"],
                                                          s["kolmogorov_resolved"]) for s in sizes))
        with open(os.path.join(d, "rep", "fits.csv"), newline="") as f:
            fits = {row["key"]: row for row in csv.DictReader(f)}
        ks = fits.get("kolmogorov", {})
        c.check(ks.get("ok") == "1" and ks.get("points") == "4" and float(ks.get("alpha", "nan")) > 0,
                "the Kolmogorov distance is fitted on all 4 sizes with a positive exponent (%s)" % ks.get("alpha"),
                ks)
    c.finish()


if __name__ == "__main__":
    main()
