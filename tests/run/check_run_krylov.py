#!/usr/bin/env python3
"""The Krylov path under real runs: jobs that observe only the extremes (observe.extremes_only).

Checks:
  - a ladder N = 60, 1200 of X1 X2 + X2 X1 (two GUE) runs dense at 60 and krylov at 1200 (said
    by --explain with the predicted costs, recorded as /metadata path "dense,krylov");
  - the run file (format 1.5) has no bins, extremes_only = 1 on every size, and a certificate
    row per trial: NaN on the dense size, Lanczos steps, residuals and error estimates on the
    Krylov size within the stated tolerance;
  - 1 process and 2 MPI ranks write the same file outside /provenance;
  - the extremes equal LAPACK's on the same sampled matrices (the job forced to the dense path,
    which draws the same GUE samples) to 10·1e-12·scale + N·eps·scale (the stopping rule's
    accepted estimate plus LAPACK's backward error, as in tests/model/test_krylov_path.cpp);
  - a run killed after its second committed unit resumes to the same file;
  - `freegap report` writes its report with the extremes table and the reason there are no
    distances;
  - extremes_only with bins, and path = "krylov" without extremes_only, are refused with exit 2,
    a message naming the line and key, and nothing written.
"""
import os
import re
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

import h5py  # noqa: E402
import numpy as np  # noqa: E402

# A scenario of our own: the anticommutator of two independent noisy couplings, whose largest
# eigenvalue is all a stability study needs.
JOB = """seed = 4242
sizes = [{sizes}]
trials = {trials}
expression = "X1 X2 + X2 X1"
[matrices.X1]
ensemble = "gue"
[matrices.X2]
ensemble = "gue"
[observe]
extremes_only = true
[run]
trials_per_unit = 2
{extra}
"""
EPS = np.finfo(float).eps


def check_file(c, path):
    with h5py.File(path, "r") as f:
        c.equal(list(f.attrs["format_version"]), [1, 5], "format_version [1, 5]")
        c.equal(f["metadata"].attrs["path"], "dense,krylov", "/metadata path = dense,krylov")
        for i, n in enumerate((60, 1200)):
            g = f["sizes/%d" % i]
            c.equal((int(g.attrs["extremes_only"]), int(g.attrs["bins"]), g["unit_histograms"].shape[1]),
                    (1, 0, 0), "N = %d: extremes_only, no bins" % n)
            cert = g["certificate"][:]
            if n == 60:
                c.check(bool(np.all(np.isnan(cert))), "N = 60 (dense): certificates are NaN")
                continue
            scale = np.maximum(np.abs(g["min"][:]), np.abs(g["max"][:]))
            c.check(bool(np.all(cert[:, 0] >= 2)) and bool(np.all(cert[:, 0] <= 1000)),
                    "N = 1200: Lanczos steps recorded per trial", cert[:, 0])
            c.check(bool(np.all(cert[:, 3:5] <= 10 * 1e-12 * scale[:, None])),
                    "N = 1200: error estimates within 10·tolerance·scale", cert[:, 3:5])
            c.check(bool(np.all(cert[:, 1:3] > 0)) and bool(np.all(cert[:, 1:3] < 1e-4)),
                    "N = 1200: residuals recorded", cert[:, 1:3])


def check_against_dense(c, d):
    with h5py.File(os.path.join(d, "one.h5"), "r") as k, h5py.File(os.path.join(d, "dense.h5"), "r") as e:
        g, h = k["sizes/1"], e["sizes/1"]
        scale = np.maximum(np.abs(h["min"][:]), np.abs(h["max"][:]))
        allowed = 10 * 1e-12 * scale + 1200 * EPS * scale
        for name in ("min", "max", "norm"):
            diff = np.abs(g[name][:] - h[name][:])
            c.check(bool(np.all(diff <= allowed)),
                    "N = 1200: Krylov %s equals LAPACK's on the same matrices (largest gap %.2g)"
                    % (name, float(diff.max())), diff)


def check_kill_resume(exe, c, d):
    # The Krylov path forced at N = 600: 20 units of about 0.1 s each, so a kill after the
    # second commit lands mid-run with room to spare.
    job = JOB.format(sizes="600", trials=40, extra='path = "krylov"')
    rh.write(os.path.join(d, "long.toml"), job)
    p = rh.run([exe, "run", "long.toml", "-o", "ref.h5", "--quiet"], d)
    c.equal(p.returncode, 0, "the uninterrupted reference run finishes")
    target = os.path.join(d, "killed.h5")
    proc = rh.start([exe, "run", "long.toml", "-o", "killed.h5", "--quiet"], d)
    state = {}

    def partly_done():
        s = rh.committed_state(target)
        state["s"] = s
        return s is not None and s[0] >= 2
    hit = rh.wait_until(partly_done, timeout=120, interval=0.01)
    rh.kill_group(proc)
    rh.reap(proc)
    s = rh.committed_state(target)
    c.check(hit and s is not None and s[0] < s[1], "the kill landed mid-run (%r)" % (s,))
    p = rh.run([exe, "run", "long.toml", "-o", "killed.h5", "--quiet"], d)
    c.check(p.returncode == 0, "the killed run resumes", p.stderr)
    rc, out = rh.h5diff(os.path.join(d, "ref.h5"), target)
    c.check(rc == 0, "the resumed file equals the uninterrupted one outside /provenance", out)


def check_refusals(exe, c, d):
    bad = JOB.format(sizes="60", trials=2, extra="").replace("extremes_only = true",
                                                              "extremes_only = true\nbins = 40")
    rh.write(os.path.join(d, "bins.toml"), bad)
    p = rh.run([exe, "run", "bins.toml", "--quiet"], d)
    c.equal((p.returncode, p.stderr),
            (2, "freegap: bins.toml:11: observe.bins: needs the whole spectrum, which extremes_only = "
                "true does not observe; remove bins or set extremes_only = false\n"),
            "extremes_only with bins is refused")
    forced = JOB.format(sizes="60", trials=2, extra='path = "krylov"').replace(
        "extremes_only = true", "bins = 40")
    rh.write(os.path.join(d, "forced.toml"), forced)
    p = rh.run([exe, "run", "forced.toml", "--quiet"], d)
    c.check(p.returncode == 2 and p.stderr.startswith(
        'freegap: forced.toml:13: run.path: path = "krylov" does not apply to this model: the krylov '
        "path finds only the smallest and largest eigenvalue"), "path = krylov without extremes_only "
            "is refused at its line", p.stderr)
    c.check(not os.path.exists(os.path.join(d, "bins.h5")) and not os.path.exists(os.path.join(d, "forced.h5")),
            "and nothing is written")


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("the krylov path")
    with rh.WorkDir("krylov") as d:
        rh.write(os.path.join(d, "norm.toml"), JOB.format(sizes="60, 1200", trials=6, extra=""))
        p = rh.run([exe, "run", "norm.toml", "--explain"], d)
        paths = re.findall(r"^why the path: (\w+)", p.stdout, re.M)
        c.check(p.returncode == 0 and paths == ["dense", "krylov"]
                and p.stdout.count("predicted CPU per trial: dense") == 2,
                "--explain: dense at N = 60, krylov at N = 1200, with the predicted costs",
                p.stdout + p.stderr)
        p1 = rh.run(rh.command(exe, ["run", "norm.toml", "-o", "one.h5", "--quiet"]), d)
        p2 = rh.run(rh.command(exe, ["run", "norm.toml", "-o", "two.h5", "--quiet"], ranks=2), d)
        c.equal((p1.returncode, p2.returncode), (0, 0), "1 process and 2 ranks finish")
        rc, out = rh.h5diff(os.path.join(d, "one.h5"), os.path.join(d, "two.h5"))
        c.check(rc == 0, "run files of 1 process and 2 ranks identical outside /provenance", out)
        check_file(c, os.path.join(d, "one.h5"))

        rh.write(os.path.join(d, "dense.toml"),
                 JOB.format(sizes="60, 1200", trials=6, extra='path = "dense"'))
        p = rh.run([exe, "run", "dense.toml", "--quiet"], d)
        c.equal(p.returncode, 0, "the same job forced dense runs")
        check_against_dense(c, d)

        p = rh.run([exe, "report", "one.h5", "-o", "rep", "--no-figures"], d)
        c.check(p.returncode == 0, "report of an extremes-only run", p.stderr)
        md = open(os.path.join(d, "rep", "report.md")).read() if p.returncode == 0 else ""
        c.check("### Extremes and operator norm" in md and "evaluation path: dense,krylov" in md,
                "the report has the extremes table and names both paths", md[:2000])
        check_kill_resume(exe, c, d)
        check_refusals(exe, c, d)
    c.finish()


if __name__ == "__main__":
    main()
