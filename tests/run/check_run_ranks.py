#!/usr/bin/env python3
"""The run file does not depend on how many ranks ran it (docs/design.md rule 1).

Usage: check_run_ranks.py BUILD_DIR

Runs one job — two sizes, an automatic histogram range, kept spectra and the anticommutator
X1 X2 + X2 X1 of two GUE matrices — four ways: one plain process (no mpirun), and mpirun with 1,
2 and 3 ranks. Checks that every run exits 0, that the four files are identical outside
/provenance (h5diff), that h5diff does see a difference when the seed changes (so the
comparison can fail), and that /provenance/sessions and `freegap inspect` record the rank
count of each run.
"""
import os
import re
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

import h5py  # noqa: E402
import numpy as np  # noqa: E402

# A scenario of our own: two coupled layers of a disordered lattice, each a GUE, and their
# symmetrised product.
JOB = """\
name = "coupled layers"
seed = {seed}
sizes = [24, 48]
trials = [28, 16]
expression = "X1 X2 + X2 X1"

[matrices.X1]
ensemble = "gue"

[matrices.X2]
ensemble = "gue"

[observe]
bins = 40
range = "auto"
max_moment = 6
keep_spectra = 3

[run]
trials_per_unit = 4
"""

WAYS = [("plain", None), ("np1", 1), ("np2", 2), ("np3", 3)]

# A second scenario: a three-level energy spectrum B and a randomly rotated copy of it
# (U Haar unitary by corrected QR), in the fast-to-check form B + U B U^*.
ROTATED = """\
name = "rotated three-level spectrum"
seed = 31337
sizes = [30, 45]
trials = 20
expression = "B + U B U^*"

[matrices.B]
ensemble = "diagonal"
atoms = [[-1.0, 0.25], [0.5, 0.5], [2.0, 0.25]]

[matrices.U]
ensemble = "haar_unitary"

[observe]
bins = 30
range = "auto"
margin = 0.05
keep_spectra = 2

[run]
trials_per_unit = 4
"""


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("run file is the same for 1 process and mpirun -np 1, 2, 3")
    with rh.WorkDir("ranks") as d:
        rh.write(os.path.join(d, "layers.toml"), JOB.format(seed=8128))
        rh.write(os.path.join(d, "layers-other-seed.toml"), JOB.format(seed=8129))
        files = {}
        for name, ranks in WAYS:
            out = name + ".h5"
            p = rh.run(rh.command(exe, ["run", "layers.toml", "-o", out, "--quiet"], ranks), d)
            c.equal(p.returncode, 0, "%s: freegap run exits 0" % name)
            if p.returncode != 0:
                print(p.stderr)
            c.check(os.path.exists(os.path.join(d, out)), "%s: run file written" % name)
            files[name] = os.path.join(d, out)

        # Every file complete, with the two sizes, a derived (automatic) range and kept spectra.
        with h5py.File(files["plain"], "r") as f:
            c.equal(int(f.attrs["size_count"]), 2, "plain: two sizes")
            for i, (n, t) in enumerate([(24, 28), (48, 16)]):
                g = f["sizes/%d" % i]
                c.equal((int(g.attrs["n"]), int(g.attrs["trials"])), (n, t), "size %d is N=%d, %d trials" % (i, n, t))
                c.check(bool(np.all(g["unit_committed"][:] == 1)), "size %d: every unit committed" % i)
                c.equal(g["spectra"].shape, (3, n), "size %d: 3 kept spectra of length %d" % (i, n))
                c.check(bool(np.all(np.isfinite(g["spectra"][:]))), "size %d: kept spectra are finite" % i)
                edges = g["bin_edges"][:]
                c.check(edges.size == 41 and bool(np.all(np.diff(edges) > 0)),
                        "size %d: 40 increasing bins from the automatic range" % i)

        for name, _ in WAYS[1:]:
            rc, out = rh.h5diff(files["plain"], files[name])
            c.check(rc == 0, "h5diff --exclude-path /provenance plain.h5 %s.h5: identical (exit %d)" % (name, rc), out[-2000:])

        # The comparison can fail: another seed must differ.
        p = rh.run(rh.command(exe, ["run", "layers-other-seed.toml", "-o", "other.h5", "--quiet"]), d)
        c.equal(p.returncode, 0, "other seed: run exits 0")
        rc, _ = rh.h5diff(files["plain"], os.path.join(d, "other.h5"))
        c.equal(rc, 1, "h5diff reports a difference for another seed (exit 1)")

        # /provenance records the rank counts.
        for name, ranks in WAYS:
            expected = ranks or 1
            rows = rh.sessions(files[name])
            c.equal(len(rows), 1, "%s: one session in /provenance/sessions" % name)
            if rows:
                s = rows[0]
                c.equal(s["ranks"], expected, "%s: sessions[0].ranks = %d" % (name, expected))
                c.equal(s["status"], "finished", "%s: sessions[0].status = finished" % name)
                c.equal(len(s["hosts"].split(",")), expected, "%s: sessions[0].hosts names %d host(s)" % (name, expected))
            with h5py.File(files[name], "r") as f:
                units = f["provenance/units"][:]
                total = sum(int(f["sizes/%d" % i].attrs["units"]) for i in range(2))
                c.equal(len(units), total, "%s: one /provenance/units record per unit (%d)" % (name, total))
                ranks_used = sorted(set(int(r) for r in units["rank"]))
                c.check(all(0 <= r < expected for r in ranks_used),
                        "%s: unit records name ranks in [0, %d): %s" % (name, expected, ranks_used))
            p = rh.run([exe, "inspect", files[name]], d)
            c.equal(p.returncode, 0, "%s: freegap inspect exits 0" % name)
            c.check(re.search(r"^session 0: .*, %d rank\(s\), finished$" % expected, p.stdout, re.M) is not None,
                    "%s: inspect shows 'session 0: ..., %d rank(s), finished'" % (name, expected), p.stdout)
            c.check(re.search(r"^status:\s+complete$", p.stdout, re.M) is not None,
                    "%s: inspect shows status complete" % name, p.stdout)

        # The same for a job with a Haar unitary (LAPACK QR inside every trial).
        rh.write(os.path.join(d, "rotated.toml"), ROTATED)
        rotated = {}
        for name, ranks in [("plain", None), ("np2", 2), ("np3", 3)]:
            out = "rotated-%s.h5" % name
            p = rh.run(rh.command(exe, ["run", "rotated.toml", "-o", out, "--quiet"], ranks), d)
            c.equal(p.returncode, 0, "B + U B U^*, %s: freegap run exits 0" % name)
            rotated[name] = os.path.join(d, out)
        for name in ("np2", "np3"):
            rc, out = rh.h5diff(rotated["plain"], rotated[name])
            c.check(rc == 0, "B + U B U^*: h5diff plain vs %s identical outside /provenance (exit %d)" % (name, rc), out[-2000:])
            c.equal([s["ranks"] for s in rh.sessions(rotated[name])], [int(name[2:])],
                    "B + U B U^*, %s: /provenance/sessions records %s ranks" % (name, name[2:]))
    c.finish()


if __name__ == "__main__":
    main()
