#!/usr/bin/env python3
"""The run file's predicted size against the free space of its file system, and empty outputs.

Usage: check_run_free_space.py BUILD_DIR

The free space is real, not faked: the script runs itself again in a private mount namespace
(`unshare -m` as root, `unshare -rm` otherwise) and mounts a 256 KiB tmpfs there, which nothing
outside the namespace sees and which disappears with it. In it:

1. A job of 2000 trials (run file about 2.4 MiB by the estimate): `freegap run` exits 2 with one
   line naming the file, the predicted size and the free space read by statvfs (both as freegap
   prints sizes), and writes nothing. `run --explain` states both numbers and that run would
   refuse; `plan` states them with a warning.
2. A job of 200 trials, predicted about 309 KiB, more than the tmpfs holds, though the file it
   really writes (about 190 KiB) fits: refused without the flag; with --ignore-free-space the
   run finishes (exit 0) and the file is complete.
3. A job of 20 trials that fits: run exits 0 without any flag.
4. `run -o ''` (and `--output ''`) exits 2 with a message saying the path is empty; nothing
   written (it used to mean the job's default output, silently).
"""
import os
import subprocess
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

INSIDE = "FREEGAP_FREE_SPACE_NAMESPACE"
TMPFS_BYTES = 256 * 1024

# A scenario of our own: a level-spacing study with many small trials.
JOB = rh.fixture_job("gue", """\
name = "spacing study"
seed = 3
sizes = [8]
trials = %d
""", """\

[observe]
bins = 4
max_moment = 2
keep_spectra = "none"  # sized for the tmpfs below without spectra

[run]
trials_per_unit = 1
""")


def human_bytes(b):
    """As freegap prints sizes (plan::human_bytes): one decimal, binary units."""
    units = ["B", "KiB", "MiB", "GiB", "TiB", "PiB"]
    i = 0
    b = float(b)
    while b >= 1024.0 and i < 5:
        b /= 1024.0
        i += 1
    return "%.1f %s" % (b, units[i])


def free_bytes(path):
    st = os.statvfs(path)
    return st.f_bavail * st.f_frsize


def inside(exe, d):
    c = rh.Checks("run file size against free space (tmpfs of %s)" % human_bytes(TMPFS_BYTES))

    # 1. Far too big: refused with both numbers, nothing written.
    rh.write(os.path.join(d, "big.toml"), JOB % 2000)
    free = free_bytes(d)
    before = sorted(os.listdir(d))
    p = rh.run([exe, "run", "big.toml"], d)
    c.equal(p.returncode, rh.EXIT_BAD_INPUT, "too big: exit status 2")
    lines = p.stderr.splitlines()
    c.check(len(lines) == 1, "too big: one line on stderr", p.stderr)
    prefix = "freegap: run file 'big.h5' needs about "
    middle = " when complete (estimate), more than the %s free on its file system; free space " \
             "there, write the run file elsewhere with -o, or pass --ignore-free-space to run " \
             "anyway" % human_bytes(free)
    c.check(len(lines) == 1 and lines[0].startswith(prefix) and lines[0].endswith(middle),
            "too big: the message names the file, the predicted size and the free space (%s)" %
            human_bytes(free), p.stderr)
    predicted = lines[0][len(prefix):-len(middle)] if lines else ""
    print("  -- predicted %s, free %s" % (predicted, human_bytes(free)))
    c.check(predicted.endswith("MiB"), "too big: the predicted size is in MiB (%s)" % predicted)
    c.equal(sorted(os.listdir(d)), before, "too big: nothing written")

    p = rh.run([exe, "run", "big.toml", "--explain"], d)
    c.equal(p.returncode, 0, "too big, --explain: exit status 0")
    c.check("run file: big.h5: about %s when complete (estimate); %s free on its file system; "
            "more than is free: freegap run will refuse it" % (predicted, human_bytes(free))
            in p.stdout.splitlines(), "too big, --explain: states both sizes and the refusal",
            p.stdout)

    p = rh.run([exe, "plan", "big.toml", "--calibration", os.path.join(d, "cal.toml")], d)
    c.equal(p.returncode, 0, "too big, plan: exit status 0")
    free_now = free_bytes(d)  # the calibration file took a page
    c.check("run file:     big.h5: about %s, %s free there" % (predicted, human_bytes(free_now))
            in p.stdout.splitlines(), "too big, plan: states the size and the free space",
            p.stdout)
    c.check(("warning:      the run file needs about %s (estimate), more than the %s free on the "
             "file system of 'big.h5'; freegap run will refuse it" %
             (predicted, human_bytes(free_now))) in p.stdout,
            "too big, plan: warns that run will refuse it", p.stdout)
    os.remove(os.path.join(d, "cal.toml"))

    # 2. Predicted too big, really fits: the flag overrides the estimate.
    rh.write(os.path.join(d, "edge.toml"), JOB % 200)
    p = rh.run([exe, "run", "edge.toml", "--quiet"], d)
    c.equal(p.returncode, rh.EXIT_BAD_INPUT, "predicted over the free space: refused (exit 2)")
    c.check(not os.path.exists(os.path.join(d, "edge.h5")), "refused: no run file")
    p = rh.run([exe, "run", "edge.toml", "--quiet", "--ignore-free-space"], d)
    c.check(p.returncode == 0, "--ignore-free-space: the run finishes (exit 0)", p.stderr)
    c.equal(rh.committed_state(os.path.join(d, "edge.h5")), (200, 200),
            "--ignore-free-space: every unit committed")
    os.remove(os.path.join(d, "edge.h5"))

    # 3. Fits: no flag needed.
    rh.write(os.path.join(d, "small.toml"), JOB % 20)
    p = rh.run([exe, "run", "small.toml", "--quiet"], d)
    c.check(p.returncode == 0, "a run file that fits: exit 0 without any flag", p.stderr)

    # 4. Empty output paths.
    for opt in (["-o", ""], ["--output", ""]):
        before = sorted(os.listdir(d))
        p = rh.run([exe, "run", "small.toml"] + opt, d)
        c.equal(p.returncode, rh.EXIT_BAD_INPUT, "run %s '': exit status 2" % opt[0])
        c.equal(p.stderr, "freegap: -o/--output: the run file's path is empty; give a path, or "
                "leave out -o to write the job's output\n", "run %s '': the message" % opt[0])
        c.equal(sorted(os.listdir(d)), before, "run %s '': nothing written" % opt[0])
    c.finish()


def main():
    exe = rh.freegap_exe(sys.argv)
    if os.environ.get(INSIDE):
        d = os.environ[INSIDE]
        mount = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=%d" % TMPFS_BYTES, "tmpfs", d],
                               stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
        if mount.returncode != 0:
            sys.exit("FAIL: cannot mount a tmpfs in the private namespace: %s" % mount.stdout)
        inside(exe, d)  # exits
    with rh.WorkDir("free-space") as d:
        # A mount namespace of our own (and, without root, a user namespace to get one).
        unshare = ["unshare", "-m", "--propagation", "private"]
        if os.geteuid() != 0:
            unshare.insert(1, "-r")
        env = dict(os.environ)
        env[INSIDE] = d
        p = subprocess.run(unshare + [sys.executable, os.path.abspath(__file__), sys.argv[1]],
                           env=env, timeout=rh.RUN_TIMEOUT)
        if p.returncode not in (0, 1):
            sys.exit("FAIL: could not run the checks in a private mount namespace (%s exited %d); "
                     "they need root or unprivileged user namespaces" % (" ".join(unshare),
                                                                         p.returncode))
        sys.exit(p.returncode)


if __name__ == "__main__":
    main()
