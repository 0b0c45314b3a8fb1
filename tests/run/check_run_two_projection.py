#!/usr/bin/env python3
"""The runner's two-projection path for a·B + b·U B U^* (include/freegap/tridiagonal.hpp).

Checks, under real runs:
  - B + U B U^* of a ±1 diagonal and a Haar unitary takes the two_projection path: `run
    --explain` names it for every size, `plan` times it, and the run file's /metadata path
    records it;
  - it runs at N = 10^6, where the dense path could not, and the run file is identical outside
    /provenance for 1 process and 2 MPI ranks (docs/design.md rule 1);
  - its moments are exact where they are known: m_1 = m_3 = 0 in every trial (the eigenvalues are
    ±2σ_i), and the mean m_2 is within 4 standard errors of E m_2 = 2 (E|U_ij|² = 1/N for Haar U
    and Tr B = 0: common practice);
  - force_dense takes the dense path and records it;
  - a dense-path run file of the same job (as an older freegap wrote it: /metadata path "dense",
    same job hash) is refused on resume with exit 2, named, and left untouched.
"""
import hashlib
import os
import re
import shutil
import struct
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

import h5py  # noqa: E402
import numpy as np  # noqa: E402

# A scenario of our own: two equal halves of a ±1 signal, one of them turned by a Haar rotation.
JOB = rh.fixture_job("rotated-two-level", """\
seed = 17
sizes = [2000, 1000000]
trials = 8
""", """\
[observe]
bins = 100
range = [-2.2, 2.2]
max_moment = 4
[run]
trials_per_unit = 2
{extra}
""")


def metadata_path(path):
    with h5py.File(path, "r") as f:
        return f["metadata"].attrs["path"]


def header_sha256(f):
    """The header checksum as src/store/run_file.cpp's header_digest computes it."""
    out = bytearray()

    def count(k):
        out.extend(struct.pack("<Q", k))

    def text(s):
        b = s if isinstance(s, bytes) else s.encode()
        count(len(b))
        out.extend(b)

    def numbers(a, dtype):
        a = np.ascontiguousarray(a, dtype=dtype).ravel()
        count(a.size)
        out.extend(a.tobytes())

    a = f.attrs
    text(b"freegap header, format 1.2")
    count(int(a["format_version"][0]))
    for key in ("tool_version", "git_revision", "job_text", "job_canonical", "job_hash",
                "expression"):
        text(a[key])
    text(a["spectrum"])
    count(int(a["self_adjoint"]))
    count(int(a["size_count"]))
    for i in range(int(a["size_count"])):
        g = f["sizes/%d" % i]
        for key in ("n", "trials", "trials_per_unit", "max_moment"):
            count(int(g.attrs[key]))
        numbers(g["bin_edges"][:], "<f8")
        numbers(g["kept_trials"][:], "<u8")
    meta = f["metadata"].attrs
    keys = sorted(meta.keys(), key=lambda k: k.encode())
    count(len(keys))
    for k in keys:
        text(k)
        text(meta[k])
    count(0)  # no estimates
    return hashlib.sha256(bytes(out)).hexdigest()


def as_dense_file(path):
    """Rewrites /metadata path to "dense" and the header checksum to match: the file an older
    freegap, which ran this job on the dense path, would have left (same job, same hash)."""
    with h5py.File(path, "r+") as f:
        f["metadata"].attrs["path"] = "dense"
        f.attrs["header_sha256"] = header_sha256(f)


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("the two_projection path")
    with rh.WorkDir("two-projection") as d:
        rh.write(os.path.join(d, "arcsine.toml"), JOB.format(extra=""))
        p = rh.run([exe, "run", "arcsine.toml", "--explain"], d)
        c.check(p.returncode == 0 and len(re.findall(r"^path: two_projection", p.stdout, re.M)) == 2,
                "--explain says both sizes take the two_projection path", p.stdout + p.stderr)
        c.check(len(re.findall(r"^why the path: two_projection: ", p.stdout, re.M)) == 2,
                "--explain says why", p.stdout)
        p = rh.run([exe, "plan", "arcsine.toml"], d)
        c.check(p.returncode == 0 and re.search(r"^expression:.*\(two_projection path\)", p.stdout, re.M),
                "plan times the two_projection path", p.stdout + p.stderr)

        p1 = rh.run(rh.command(exe, ["run", "arcsine.toml", "-o", "one.h5", "--quiet"]), d)
        p2 = rh.run(rh.command(exe, ["run", "arcsine.toml", "-o", "two.h5", "--quiet"], ranks=2), d)
        c.equal((p1.returncode, p2.returncode), (0, 0), "1 process and 2 ranks finish")
        rc, out = rh.h5diff(os.path.join(d, "one.h5"), os.path.join(d, "two.h5"))
        c.check(rc == 0, "1 process and 2 ranks write the same file outside /provenance", out)
        c.equal(metadata_path(os.path.join(d, "one.h5")), "two_projection",
                "/metadata path = two_projection")
        with h5py.File(os.path.join(d, "one.h5"), "r") as f:
            for i in range(2):
                m = f["sizes/%d/moments" % i][:]
                c.check(np.all(np.abs(m[:, 1]) < 1e-12) and np.all(np.abs(m[:, 3]) < 1e-11),
                        "N = %d: m_1 and m_3 vanish in every trial" % f["sizes/%d" % i].attrs["n"])
                m2 = m[:, 2]
                se = m2.std(ddof=1) / np.sqrt(len(m2))
                c.check(abs(m2.mean() - 2.0) <= 4 * se,
                        "N = %d: mean m_2 = %.6f ± %.1e is within 4 standard errors of 2"
                        % (f["sizes/%d" % i].attrs["n"], m2.mean(), se))

        rh.write(os.path.join(d, "forced.toml"),
                 JOB.format(extra="force_dense = true").replace("[2000, 1000000]", "[100, 200]"))
        p = rh.run([exe, "run", "forced.toml", "-o", "forced.h5", "--quiet"], d)
        c.check(p.returncode == 0 and metadata_path(os.path.join(d, "forced.h5")) == "dense",
                "force_dense takes the dense path and records it", p.stderr)

        # A dense-path file of the same job is refused on resume and left as it was. The header
        # checksum is recomputed here; first, that this computes the one freegap wrote.
        with h5py.File(os.path.join(d, "one.h5"), "r") as f:
            c.equal(header_sha256(f), f.attrs["header_sha256"],
                    "the header checksum recomputed here is freegap's")
        old = os.path.join(d, "old.h5")
        shutil.copy(os.path.join(d, "one.h5"), old)
        as_dense_file(old)
        before = rh.fingerprint(old)
        p = rh.run([exe, "run", "arcsine.toml", "-o", "old.h5", "--quiet"], d)
        c.equal(p.returncode, 2, "resuming a dense-path file of the same job: exit 2")
        c.equal(p.stderr.strip(),
                "freegap: run file 'old.h5' holds trials computed on the dense path, and this "
                "freegap computes this job on the two_projection path (the paths draw different "
                "random numbers, so their trials cannot be mixed); use a new output path or "
                "--fresh to start over", "... with a message naming both paths")
        c.check(rh.fingerprint(old) == before, "... and the file untouched")
        p = rh.run([exe, "inspect", "old.h5"], d)
        c.check(p.returncode == 0 and "damaged" not in p.stdout and "path:         dense" in p.stdout
                and "(the run recorded the dense path)" in p.stdout,
                "the rewritten file is a sound run file of the dense path (inspect)",
                p.stdout + p.stderr)
    c.finish()


if __name__ == "__main__":
    main()
