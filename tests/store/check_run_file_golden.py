#!/usr/bin/env python3
"""Golden run file: a fixed small job's run file must equal tests/store/golden/rotated-two-level.h5
outside its provenance — every group and dataset outside /provenance by h5diff, and every
attribute of the root but the build's git revision and the header checksum that covers it — so
that a change which moves any number, layout or header field of the run file is seen
(docs/design.md rule 1; docs/run-file.md).

Usage: check_run_file_golden.py BUILD_DIR

Within a version results are bit-identical for any rank count and after a resume; between
versions they may change when the computation changes. When a change is meant to change the run
file, regenerate the golden file with FREEGAP_UPDATE_GOLDEN=1 (it is written from a 2-rank run),
check the difference with h5diff, and say why in the commit (and in the run file's format
version when older files become incompatible).
"""
import os
import shutil
import subprocess
import sys

import h5py
import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

GOLDEN = os.path.join(os.path.dirname(os.path.abspath(__file__)), "golden", "rotated-two-level.h5")

# A scenario of our own: a ±1 signal seen through a random rotation, at two small sizes, with
# kept spectra and an uneven last unit.
JOB = rh.fixture_job("rotated-two-level", """\
name = "golden rotated signal"
seed = 1234
sizes = [16, 32]
trials = [12, 8]
""", """\

[observe]
bins = 24
range = [-2.5, 2.5]
max_moment = 4
keep_spectra = 2

[run]
trials_per_unit = 4
# B + U B U^* takes the O(N) two_projection path by itself; this check
# needs the golden copy records the dense path.
force_dense = true
""")


# Root attributes a build stamps: the git revision, and the header checksum, which covers it.
BUILD_STAMPS = {"git_revision", "header_sha256"}


def differences(a, b):
    """h5diff outside /provenance and the root's attributes, then the root's attributes but the
    build stamps: (equal, what differs)."""
    p = subprocess.run(["h5diff", "--exclude-path", "/provenance", "--exclude-attribute", "/", a, b],
                       stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, timeout=120)
    with h5py.File(a, "r") as fa, h5py.File(b, "r") as fb:
        keys = (set(fa.attrs) | set(fb.attrs)) - BUILD_STAMPS
        attrs = sorted(k for k in keys if k not in fa.attrs or k not in fb.attrs
                       or not np.array_equal(fa.attrs[k], fb.attrs[k]))
    return p.returncode == 0 and not attrs, p.stdout[-3000:] + ("root attributes: %s" % attrs if attrs else "")


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("the run file of a fixed job equals the golden one outside /provenance")
    with rh.WorkDir("run-file-golden") as d:
        job = rh.write(os.path.join(d, "job.toml"), JOB)
        out = os.path.join(d, "run.h5")
        r = rh.run(rh.command(exe, ["run", job, "-o", out, "-q"], ranks=2), d)
        if not c.check(r.returncode == 0, "the job runs on 2 ranks", r.stdout + r.stderr):
            c.finish()
        if os.environ.get("FREEGAP_UPDATE_GOLDEN") == "1":
            shutil.copyfile(out, GOLDEN)
            print("wrote %s" % GOLDEN)
        same, diff = differences(GOLDEN, out)
        c.check(same, "the run file equals the golden one outside its provenance", diff)
        # The comparison can fail: another seed gives another file.
        other = rh.write(os.path.join(d, "other.toml"), JOB.replace("seed = 1234", "seed = 1235"))
        other_out = os.path.join(d, "other.h5")
        r = rh.run(rh.command(exe, ["run", other, "-o", other_out, "-q"], ranks=2), d)
        same, _ = differences(GOLDEN, other_out)
        c.check(r.returncode == 0 and not same, "the comparison sees another seed's file as different")
    c.finish()


if __name__ == "__main__":
    main()
