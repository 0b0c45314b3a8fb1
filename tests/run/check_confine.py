#!/usr/bin/env python3
"""`--confine` (freegap run and plan): every path a job file names must lie inside its directory.

Usage: check_confine.py BUILD_DIR

A job names paths in matrices.NAME.path (an eigenvalue file, law = "file"), run.output, an
estimator's library and an estimator's command (include/freegap/job.hpp, job::Paths). Layout:

    D/outside/levels.txt       a valid eigenvalue file outside the job's directory
    D/jobs/levels.txt          the same inside
    D/jobs/sub/levels.txt      and in a subdirectory
    D/jobs/link.txt            a symbolic link to ../outside/levels.txt
    D/jobs/libtest_plugin_ok.so, D/jobs/estimate_command   copies of the test plug-ins

Each refusal: exit 2, nothing on stdout, exactly one line naming the job file, the line and key,
the path as written and the job's directory, and nothing written. Without --confine the same
jobs run (the option changes nothing else), and with it the jobs whose paths stay inside run.

1. law file "../outside/levels.txt", an absolute path, a symbolic link leading out: refused; run
   and plan alike. "sub/levels.txt", "levels.txt": accepted.
2. run.output = "../outside/x.h5" or a link leading out (even to a file not there yet):
   refused, no file made; "-o" on the command line is the user's own choice and not confined.
3. estimator library outside: refused before it is read; inside: runs.
4. estimator command ["python3", ...] (looked up on PATH) and ["/bin/cat"]: refused;
   ["./estimate_command", "ok"] inside: runs.
"""
import os
import shutil
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

# A scenario of our own: a fixed spectrum of levels read from a file, rotated by Haar unitaries.
BASE = """\
name = "confined"
seed = 11
sizes = [4]
trials = 2
expression = "D + U D U^*"

[matrices.D]
ensemble = "diagonal"
law = "file"
path = "%(levels)s"

[matrices.U]
ensemble = "haar_unitary"

[observe]
bins = 4
range = [-10.0, 10.0]
%(extra)s"""

LEVELS = "# four levels\n-1.5\n-0.5\n0.5\n1.5\n"

LIBRARY = """
[[estimator]]
name = "lib"
library = "%s"
[estimator.truth]
top = "limit_norm"
mean_square = "limit_moment:2"
"""

COMMAND = """
[[estimator]]
name = "cmd"
command = [%s]
[estimator.truth]
top = "limit_norm"
mean_square = "limit_moment:2"
"""

TRUSTED = "run without --confine if you trust this job file"


def job(levels="levels.txt", extra=""):
    return BASE % {"levels": levels, "extra": extra}


def line_of(text, needle):
    for i, line in enumerate(text.splitlines(), 1):
        if needle in line:
            return i
    raise AssertionError(needle)


def outside(key, line, given, jobs):
    return ("freegap: job.toml:%d: %s: '%s' lies outside the job file's directory '%s', and "
            "--confine allows only paths inside it; give a path inside that directory, or %s\n" %
            (line, key, given, jobs, TRUSTED))


def snapshot(directory):
    """rh.snapshot, with symbolic links by their target (a dangling one has no fingerprint)."""
    out = {}
    for root, dirs, files in os.walk(directory):
        for name in dirs + files:
            p = os.path.join(root, name)
            out[os.path.relpath(p, directory)] = (
                ("link", os.readlink(p)) if os.path.islink(p) else
                "dir" if os.path.isdir(p) else rh.fingerprint(p))
    return out


def refused(c, exe, jobs, label, text, expect, args=("run",), extra_args=()):
    rh.write(os.path.join(jobs, "job.toml"), text)
    before = snapshot(os.path.dirname(jobs))
    p = rh.run([exe] + list(args) + ["job.toml", "--confine"] + list(extra_args), jobs)
    c.equal(p.returncode, rh.EXIT_BAD_INPUT, "%s: exit status 2" % label)
    c.equal(p.stdout, "", "%s: nothing on stdout" % label)
    c.equal(p.stderr, expect, "%s: the message" % label)
    c.equal(snapshot(os.path.dirname(jobs)), before, "%s: nothing written" % label)


def runs(c, exe, jobs, label, text, confine=True, extra_args=()):
    rh.write(os.path.join(jobs, "job.toml"), text)
    out = os.path.join(jobs, "job.h5")  # the default output: the job file's stem
    if os.path.exists(out):
        os.remove(out)
    args = ["run", "job.toml", "--quiet"] + (["--confine"] if confine else []) + list(extra_args)
    p = rh.run([exe] + args, jobs)
    c.equal(p.returncode, 0, "%s: runs (exit 0)" % label)
    if p.returncode != 0:
        print(p.stderr)


def main():
    exe = rh.freegap_exe(sys.argv)
    plugins = os.path.join(os.path.abspath(sys.argv[1]), "tests", "estimate")
    c = rh.Checks("--confine: paths a job names stay in its directory")
    with rh.WorkDir("confine") as d:
        d = os.path.realpath(d)
        jobs = os.path.join(d, "jobs")
        os.makedirs(os.path.join(jobs, "sub"))
        os.makedirs(os.path.join(d, "outside"))
        for place in ("outside", "jobs", "jobs/sub"):
            rh.write(os.path.join(d, place, "levels.txt"), LEVELS)
        os.symlink(os.path.join("..", "outside", "levels.txt"), os.path.join(jobs, "link.txt"))
        shutil.copy(os.path.join(plugins, "libtest_plugin_ok.so"), jobs)
        shutil.copy(os.path.join(plugins, "libtest_plugin_ok.so"), os.path.join(d, "outside"))
        shutil.copy(os.path.join(plugins, "estimate_command"), jobs)

        # 1. Eigenvalue files.
        at = line_of(job(), "path = ")
        for given in ("../outside/levels.txt", os.path.join(d, "outside", "levels.txt"),
                      "link.txt"):
            for args in (("run",), ("plan",)):
                refused(c, exe, jobs, "%s --confine, law file %s" % (args[0], given),
                        job(levels=given), outside("matrices.D.path", at, given, jobs), args)
            runs(c, exe, jobs, "run without --confine, law file %s" % given, job(levels=given),
                 confine=False)
        for given in ("levels.txt", "sub/levels.txt", "./sub/../levels.txt"):
            runs(c, exe, jobs, "run --confine, law file %s" % given, job(levels=given))

        # 2. The run file.
        text = job(extra="\n[run]\noutput = \"../outside/x.h5\"\n")
        refused(c, exe, jobs, "run --confine, run.output outside", text,
                outside("run.output", line_of(text, "output ="), "../outside/x.h5", jobs))
        # A link to a file that does not exist yet is followed too.
        os.symlink(os.path.join("..", "outside", "new.h5"), os.path.join(jobs, "dangling.h5"))
        text = job(extra="\n[run]\noutput = \"dangling.h5\"\n")
        refused(c, exe, jobs, "run --confine, run.output a link leading out", text,
                outside("run.output", line_of(text, "output ="), "dangling.h5", jobs))
        os.remove(os.path.join(jobs, "dangling.h5"))
        runs(c, exe, jobs, "run --confine -o ../outside/y.h5 (the command line is not confined)",
             job(), extra_args=["-o", "../outside/y.h5"])
        c.check(os.path.exists(os.path.join(d, "outside", "y.h5")),
                "run --confine -o ../outside/y.h5: the run file is there")

        # 3. Plug-in libraries.
        text = job(extra=LIBRARY % "../outside/libtest_plugin_ok.so")
        refused(c, exe, jobs, "run --confine, library outside", text,
                outside("estimator.lib.library", line_of(text, "library ="),
                        "../outside/libtest_plugin_ok.so", jobs))
        runs(c, exe, jobs, "run --confine, library inside",
             job(extra=LIBRARY % "libtest_plugin_ok.so"))

        # 4. Commands.
        text = job(extra=COMMAND % '"python3", "estimate.py"')
        refused(c, exe, jobs, "run --confine, command looked up on PATH", text,
                "freegap: job.toml:%d: estimator.cmd.command: program 'python3' would be looked "
                "up on PATH, outside the job file's directory '%s', and --confine allows only "
                "paths inside it; name a program inside that directory (e.g. \"./estimate.sh\"), "
                "or %s\n" % (line_of(text, "command ="), jobs, TRUSTED))
        text = job(extra=COMMAND % '"/bin/cat"')
        refused(c, exe, jobs, "run --confine, command /bin/cat", text,
                outside("estimator.cmd.command", line_of(text, "command ="), "/bin/cat", jobs))
        runs(c, exe, jobs, "run --confine, command inside",
             job(extra=COMMAND % '"./estimate_command", "ok"'))
    c.finish()


if __name__ == "__main__":
    main()
