#!/usr/bin/env python3
"""A resume that may not write its run file says why, and never suggests --fresh.

Usage: check_run_read_only.py BUILD_DIR

A finished run file is resumed (the same command again) where it cannot be written:
1. on a read-only file system: a read-only bind mount of its directory in a private mount
   namespace (`unshare -m`, needs root or user namespaces); the message names the read-only file
   system;
2. as a file without write permission: mode 0444, resumed by an unprivileged user (root ignores
   file modes, so as root the resume runs under `setpriv` as nobody); the message names the
   permission.
Both: exit status 2, the message says the committed units are intact, does not mention
--fresh, and the file is unchanged. A case this machine cannot set up (no unshare, or not root
and no user namespaces) fails the test: it is not skipped.
"""
import hashlib
import os
import shutil
import subprocess
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

JOB = rh.fixture_job("rotated-two-level", """\
name = "read-only resonators"
seed = 31
sizes = [10]
trials = 8
""", """\

[observe]
bins = 8
range = [-2.5, 2.5]
max_moment = 4

[run]
trials_per_unit = 2
""")


def digest(path):
    with open(path, "rb") as f:
        return hashlib.sha256(f.read()).hexdigest()


def check_message(c, r, path, why, case):
    c.equal(r.returncode, rh.EXIT_BAD_INPUT, "%s: exit 2" % case)
    expected = ("freegap: cannot resume run file '%s': %s; its committed units are intact: make it "
                "writable, or copy it where you can write and run there, then run the same "
                "command again\n" % (path, why))
    c.equal(r.stderr, expected, "%s: the message says why and keeps the file" % case)
    c.check("--fresh" not in r.stderr, "%s: --fresh is not suggested" % case)


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("resume where the run file cannot be written")
    with rh.WorkDir("read-only") as d:
        os.chmod(d, 0o755)
        shared = os.path.join(d, "shared")
        os.mkdir(shared, 0o755)
        job = rh.write(os.path.join(shared, "job.toml"), JOB)
        path = os.path.join(shared, "run.h5")
        r = rh.run([exe, "run", job, "-q", "-o", path], d)
        c.equal(r.returncode, 0, "the run finishes")
        before = digest(path)

        # 1. A read-only file system.
        script = ('mount --bind "$1" "$1" && mount -o remount,bind,ro "$1" && '
                  'exec "$2" run "$3" -q -o "$4"')
        r = rh.run(["unshare", "-m", "sh", "-c", script, "sh", shared, exe, job, path], d)
        if "mount" in r.stderr and r.returncode != rh.EXIT_BAD_INPUT:
            c.check(False, "read-only file system: set up a private read-only mount", r.stderr)
        else:
            check_message(c, r, path, "its file system is read-only (Read-only file system)",
                          "read-only file system")
        c.equal(digest(path), before, "read-only file system: the file is unchanged")

        # 2. No write permission for the user who resumes.
        os.chmod(path, 0o444)
        cmd = [exe, "run", job, "-q", "-o", path]
        if os.geteuid() == 0:
            cmd = ["setpriv", "--reuid=65534", "--regid=65534", "--clear-groups"] + cmd
        r = rh.run(cmd, d)
        check_message(c, r, path, "no permission to write it (Permission denied)",
                      "file without write permission")
        c.equal(digest(path), before, "file without write permission: the file is unchanged")
    return c.finish()


if __name__ == "__main__":
    sys.exit(main())
