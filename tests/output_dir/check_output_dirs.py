#!/usr/bin/env python3
"""freegap replaces or deletes only what it can prove it wrote (issue 20, items 1 and 3).

Usage: check_output_dirs.py BUILD_DIR

`report -o DIR` and `limit -o DIR` write a whole directory with a manifest of their own files
(.freegap-output). An existing directory is replaced only when every entry in it is listed in
that manifest; anything else is refused with exit 2 and left exactly as it was. The cases:
  1. a directory that merely holds a report.md beside other files (before: the whole
     directory was deleted, `src/data.txt` with it);
  2. a report written twice to the same directory (the second replaces the first);
  3. a report directory into which the user put a file of their own;
  4. `report -o .` in a directory holding a previous report (before: an uncaught
     std::filesystem_error, exit 134), from the directory itself;
  5. a report directory of an earlier freegap, without a manifest;
  6. `limit -o` into a directory with a file of the user's, and twice into its own directory;
  7. `sweep` over a task file or a jobs.txt of the user's (before: overwritten), and twice over
     its own files.
"""
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

# A scenario of our own: background noise of a small antenna array, one GUE matrix.
JOB = rh.fixture_job("gue", """\
name = "antenna background"
seed = 11
sizes = [16, 32]
trials = 8
""", """\

[observe]
bins = 16
range = [-3.0, 3.0]

[run]
trials_per_unit = 4
""")

MANIFEST = ".freegap-output"


def report(exe, run_file, out, cwd):
    return rh.run([exe, "report", run_file, "-o", out, "--no-figures"], cwd)


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("output directories: only what freegap wrote is replaced")
    with rh.WorkDir("outdirs") as d:
        rh.write(os.path.join(d, "job.toml"), JOB)
        r = rh.run([exe, "run", "job.toml", "-o", "run.h5", "--quiet"], d)
        if r.returncode != 0:
            sys.exit("FAIL: could not make the run file: %s" % r.stderr)
        run_file = os.path.join(d, "run.h5")

        # 1. report.md beside a folder of the user's: refused, nothing touched.
        proj = os.path.join(d, "proj")
        os.makedirs(os.path.join(proj, "src"))
        rh.write(os.path.join(proj, "report.md"), "notes\n")
        rh.write(os.path.join(proj, "src", "data.txt"), "x\n")
        before = rh.snapshot(d)
        r = report(exe, run_file, "proj", d)
        c.equal(r.returncode, rh.EXIT_BAD_INPUT, "a folder with a report.md and other files: exit 2")
        c.equal(r.stderr,
                "freegap: -o %s: the directory is not empty and holds no list of files freegap wrote "
                "there (.freegap-output), so it is not replaced; choose another -o or an empty "
                "directory (an older freegap report without that list is removed by hand)\n"
                % "proj",
                "  ... the message names the directory and the fix")
        c.equal(rh.snapshot(d), before, "  ... nothing in the directory changed (src/data.txt kept)")

        # 2. Written twice: the second replaces the first, and the manifest lists every file.
        r = report(exe, run_file, "rep", d)
        c.equal(r.returncode, 0, "a report into a new directory: exit 0")
        rep = os.path.join(d, "rep")
        with open(os.path.join(rep, MANIFEST)) as f:
            listed = f.read().splitlines()
        c.equal(listed[:2], ["freegap output directory, format 1", "kind report"],
                "  ... the manifest says what it is")
        present = sorted(os.path.relpath(os.path.join(a, n), rep)
                         for a, dirs, files in os.walk(rep) for n in dirs + files)
        c.equal(sorted(l[2:] for l in listed[2:]), sorted(p for p in present if p != MANIFEST),
                "  ... the manifest lists exactly the report's files")
        r = report(exe, run_file, "rep", d)
        c.equal(r.returncode, 0, "the same report again into its own directory: exit 0")
        c.check(not [n for n in os.listdir(d) if n.startswith(".rep.")],
                "  ... no staging or old copy left beside it")

        # 3. The user adds a file to the report directory: refused, the file stays.
        rh.write(os.path.join(rep, "my-notes.txt"), "keep me\n")
        before = rh.snapshot(d)
        r = report(exe, run_file, "rep", d)
        c.equal(r.returncode, rh.EXIT_BAD_INPUT, "a report directory holding a file of the user's: exit 2")
        c.check("holds 'my-notes.txt', which freegap did not write there" in r.stderr,
                "  ... the message names the file", r.stderr)
        c.equal(rh.snapshot(d), before, "  ... nothing changed")

        # 4. `report -o .` from inside a directory holding a previous report.
        here = os.path.join(d, "here")
        os.mkdir(here)
        r = report(exe, run_file, ".", here)
        c.check(r.returncode == 0, "report -o . in an empty directory: exit 0", r.stderr)
        r = report(exe, run_file, ".", here)
        c.check(r.returncode == 0, "report -o . again, over the previous report (was exit 134)",
                r.stderr)
        c.check(os.path.isfile(os.path.join(here, "report.md")) and
                os.path.isfile(os.path.join(here, MANIFEST)), "  ... the report is there")
        c.check(not [n for n in os.listdir(d) if n.startswith(".here.")],
                "  ... no staging or old copy left beside it")

        # 5. A report directory of an earlier freegap (no manifest) is not replaced.
        old = os.path.join(d, "old-report")
        os.mkdir(old)
        rh.write(os.path.join(old, "report.md"), "# old report\n")
        rh.write(os.path.join(old, "sizes.csv"), "N\n16\n")
        before = rh.snapshot(d)
        r = report(exe, run_file, "old-report", d)
        c.equal(r.returncode, rh.EXIT_BAD_INPUT, "a report without a manifest: exit 2")
        c.equal(rh.snapshot(d), before, "  ... nothing changed")

        # 6. limit -o follows the same rule.
        lim = os.path.join(d, "lim")
        os.mkdir(lim)
        rh.write(os.path.join(lim, "limit.csv"), "my own table\n")
        before = rh.snapshot(d)
        args = [exe, "limit", "-m", "X=gue", "-e", "X", "--points", "20"]
        r = rh.run(args + ["-o", "lim"], d)
        c.equal(r.returncode, rh.EXIT_BAD_INPUT, "limit -o into a folder with the user's limit.csv: exit 2")
        c.equal(rh.snapshot(d), before, "  ... the user's limit.csv is unchanged")
        for attempt in ("first", "second"):
            r = rh.run(args + ["-o", "lim2"], d, env=rh.child_env(FREEGAP_PLOT_LIMIT="/nonexistent"))
            c.check(r.returncode == 0, "limit -o into its own directory (%s time): exit 0" % attempt,
                    r.stderr)
        c.check(os.path.isfile(os.path.join(d, "lim2", "limit.csv")), "  ... limit.csv is there")

        # 7. sweep writes its task files only over files an earlier sweep wrote.
        rh.write(os.path.join(d, "seeds.toml"), 'base = "job.toml"\nvary = "seed"\nvalues = [1, 2]\n')
        r = rh.run([exe, "sweep", "seeds.toml"], d)
        c.check(r.returncode == 0, "sweep into a new folder: exit 0", r.stderr)
        r = rh.run([exe, "sweep", "seeds.toml"], d)
        c.check(r.returncode == 0, "the same sweep again over its own files: exit 0", r.stderr)
        for victim, text in (("seeds-1.toml", "# my own job, do not lose\n"), ("jobs.txt", "my list\n")):
            rh.write(os.path.join(d, "seeds", victim), text)
            before = rh.snapshot(d)
            r = rh.run([exe, "sweep", "seeds.toml"], d)
            c.equal(r.returncode, rh.EXIT_BAD_INPUT, "sweep over the user's %s: exit 2" % victim)
            c.check("was not written by freegap sweep" in r.stderr or "is not a list freegap sweep wrote"
                    in r.stderr, "  ... the message says why", r.stderr)
            c.equal(rh.snapshot(d), before, "  ... nothing changed")
            os.remove(os.path.join(d, "seeds", victim))
    c.finish()


if __name__ == "__main__":
    main()
