#!/usr/bin/env python3
"""Bad input gets a clear error, exit status 2, nothing written half-way (docs/design.md rule 6).

Usage: check_run_bad_input.py BUILD_DIR

A catalogue of bad job files, command lines and run files. Each case runs in a directory of its
own, prepared first; then the check is:
  - the exit status is 2 (run.hpp: kExitBadInput) and nothing goes to stdout;
  - stderr is exactly the expected message;
  - cases named "" fail with the current build: the comment above each gives
    today's output; where the wording of the fix is still open, the check states properties of
    the message (names the option/path, one short line) instead of its full text;
  - nothing was written or damaged: the output path does not exist, no temporary file of the
    store (".NAME.creating.PID.N") is left, and every file of the directory — including an
    existing run file — has the same SHA-256, size and mtime as before (and so do files
    outside it that a case points at).
"""
import os
import re
import shutil
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

import h5py  # noqa: E402
import numpy as np  # noqa: E402

# A scenario of our own: two independent noise sources on a sensor array, X complex (GUE) and
# Y real (GOE). Every bad job below is this one with one thing broken.
GOOD = """\
name = "sensor array noise"
seed = 5
sizes = [24, 48]
trials = 16
expression = "X + Y"

[matrices.X]
ensemble = "gue"

[matrices.Y]
ensemble = "goe"

[observe]
bins = 20
range = [-5.0, 5.0]

[run]
trials_per_unit = 4
"""


def edit(old, new):
    assert old in GOOD, old
    return GOOD.replace(old, new, 1)


# A job whose spectrum is the singular values of a complex, non-self-adjoint product.
COMPLEX_SVD = """\
seed = 5
sizes = [24, 48]
trials = 16
expression = "A D"

[matrices.A]
ensemble = "gue"

[matrices.D]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [-1.0, 0.5]]

[run]
trials_per_unit = 4
"""

EIGEN_FILE = edit('ensemble = "goe"', 'ensemble = "diagonal"\nlaw = "file"\npath = "levels.txt"')

OUT = "out.h5"

UNPROVEN = ("'%s' cannot be opened as an HDF5 file (damaged, cut short or not HDF5), so nothing "
            "proves it is a freegap run file and --fresh does not delete it; if it is a run file of "
            "yours, delete it yourself, otherwise choose another output path\n")


def build_templates(exe, t):
    """A finished run file of GOOD (g.h5) and of another job (o.h5, only for its hash)."""
    rh.write(os.path.join(t, "good.toml"), GOOD)
    rh.write(os.path.join(t, "other.toml"), edit("seed = 5", "seed = 6"))
    for job, out in (("good.toml", "g.h5"), ("other.toml", "o.h5")):
        p = rh.run([exe, "run", job, "-o", out, "--quiet"], t)
        if p.returncode != 0:
            sys.exit("FAIL: could not make the template run file %s: %s" % (out, p.stderr))
    with h5py.File(os.path.join(t, "g.h5"), "r") as f:
        good_hash = f.attrs["job_hash"]
    with h5py.File(os.path.join(t, "o.h5"), "r") as f:
        other_hash = f.attrs["job_hash"]
    os.remove(os.path.join(t, "o.h5"))
    return good_hash, other_hash


def cases(good_hash, other_hash, template):
    g = os.path.join(template, "g.h5")
    size = os.path.getsize(g)

    def copy_run_file(name):
        return lambda d: shutil.copy2(g, os.path.join(d, name))

    def truncated(name):
        def make(d):
            with open(g, "rb") as src, open(os.path.join(d, name), "wb") as dst:
                dst.write(src.read(size // 2))
        return make

    def foreign(name):
        def make(d):
            with h5py.File(os.path.join(d, name), "w") as f:
                f["soil_moisture"] = np.linspace(0.1, 0.4, 12)
                f.attrs["site"] = "river terrace"
        return make

    def text_file(name):
        return lambda d: rh.write(os.path.join(d, name), "station log: 14 readings\n")

    def signature_text(name):
        # A text file that merely starts with the 8-byte HDF5 signature (issue 20, item 2).
        return lambda d: open(os.path.join(d, name), "wb").write(
            b"\x89HDF\r\n\x1a\n" + b"station log: 14 readings\n" * 40)

    def foreign_cut(name):
        # A foreign HDF5 file cut short in transfer: `head -c 3000 survey.h5` (issue 20, item 2).
        def make(d):
            full = os.path.join(d, "full-survey.h5")
            with h5py.File(full, "w") as f:
                f["soil_moisture"] = np.linspace(0.1, 0.4, 4000)
            with open(full, "rb") as src, open(os.path.join(d, name), "wb") as dst:
                dst.write(src.read(3000))
            os.remove(full)
        return make

    def eigen_file(content):
        return lambda d: rh.write(os.path.join(d, "levels.txt"), content)

    def directory(name):
        return lambda d: os.mkdir(os.path.join(d, name))

    run_out = ["-o", OUT, "--quiet"]
    F = "freegap: "
    return [
        # ---- job files ----
        dict(name="job file does not exist", args=["run", "absent.toml"] + run_out,
             expect=F + "cannot read job file 'absent.toml': No such file or directory\n"),
        dict(name="TOML syntax error", files={"job.toml": edit("seed = 5", "seed = 5 five")},
             args=["run", "job.toml"] + run_out,
             expect=F + "job.toml:2:10: TOML syntax: Error while parsing key-value pair: expected a comment or whitespace, saw 'f'\n"),
        dict(name="unknown key", files={"job.toml": edit("trials_per_unit = 4", "trials_per_unit = 4\ncolour = \"red\"")},
             args=["run", "job.toml"] + run_out,
             expect=F + "job.toml:19: run.colour: unknown key 'colour'; known keys: trials_per_unit, memory_per_rank, output, force_dense, path\n"),
        dict(name="sizes not increasing", files={"job.toml": edit("sizes = [24, 48]", "sizes = [48, 24]")},
             args=["run", "job.toml"] + run_out,
             expect=F + "job.toml:3: sizes: must be strictly increasing (got 24 after 48); sort the ladder\n"),
        dict(name="unknown ensemble", files={"job.toml": edit('"goe"', '"gaussian_blob"')},
             args=["run", "job.toml"] + run_out,
             expect=F + "job.toml:11: matrices.Y.ensemble: unknown ensemble 'gaussian_blob' (known: gue, goe, "
                        "wigner_rademacher, wishart_complex, wishart_real, ginibre_complex, ginibre_real, "
                        "haar_unitary, haar_orthogonal, diagonal, beta_hermite, beta_laguerre, toeplitz, file, jacobi)\n"),
        dict(name="expression error, with its column", files={"job.toml": edit('"X + Y"', '"X + * Y"')},
             args=["run", "job.toml"] + run_out,
             expect=F + "job.toml:5: expression: expected a matrix name, a number or '(' after '+' at column 5\n"),
        dict(name="expression names an undeclared matrix", files={"job.toml": edit('"X + Y"', '"X + Z"')},
             args=["run", "job.toml"] + run_out,
             expect=F + "job.toml:5: expression: unknown matrix 'Z' at column 5 (declared: X, Y)\n"),
        dict(name="size too large for memory_per_rank",
             files={"job.toml": edit("sizes = [24, 48]", "sizes = [2000]").replace(
                 "trials_per_unit = 4", 'trials_per_unit = 4\nmemory_per_rank = "1 MiB"')},
             args=["run", "job.toml"] + run_out,
             expect=F + "job.toml:3: sizes: N = 2000 needs about 399.7 MiB per rank (estimate), more than the "
                        "1.0 MiB from memory_per_rank in the job; remove the size, run fewer ranks per node, "
                        "or raise memory_per_rank\n"),
        dict(name="weights do not sum to 1",
             files={"job.toml": edit('ensemble = "goe"', 'ensemble = "diagonal"\natoms = [[1.0, 0.5], [-1.0, 0.4]]')},
             args=["run", "job.toml"] + run_out,
             expect=F + "job.toml:12: matrices.Y.atoms: weights must sum to 1 (got 0.9); rescale them\n"),
        dict(name="eigenvalue file missing", files={"job.toml": EIGEN_FILE},
             args=["run", "job.toml"] + run_out,
             expect=F + "job.toml:13: matrices.Y.path: cannot read eigenvalue file 'levels.txt': No such file "
                        "or directory; a relative path is relative to the job file's directory\n"),
        dict(name="eigenvalue file unreadable (not numbers)", files={"job.toml": EIGEN_FILE},
             setup=[eigen_file("0.5\n1.25\nbanana\n")], args=["run", "job.toml"] + run_out,
             expect=F + "job.toml:13: matrices.Y.path: eigenvalue file 'levels.txt' line 3: 'banana' is not a finite number\n"),
        dict(name="eigenvalue path is a directory", files={"job.toml": EIGEN_FILE},
             setup=[directory("levels.txt")], args=["run", "job.toml"] + run_out,
             expect=F + "job.toml:13: matrices.Y.path: 'levels.txt' is a directory; give the eigenvalue file's path\n"),
        # ---- command line ----
        dict(name="unknown option", files={"job.toml": GOOD}, args=["run", "job.toml", "--bogus"] + run_out,
             expect="The following argument was not expected: --bogus\nRun with --help for more information.\n"),
        dict(name="missing job argument", args=["run"] + run_out,
             expect="job is required\nRun with --help for more information.\n"),
        dict(name="--threads 0", files={"job.toml": GOOD}, args=["run", "job.toml", "--threads", "0"] + run_out,
             expect="--threads: Value 0 not in range 1 to 1024\nRun with --help for more information.\n"),
        dict(name="--progress-every -1", files={"job.toml": GOOD},
             args=["run", "job.toml", "--progress-every", "-1"] + run_out,
             expect="--progress-every: must be a positive number of seconds (got -1)\n"
                    "Run with --help for more information.\n"),
        dict(name="unknown subcommand", files={"job.toml": GOOD}, args=["frobnicate", "job.toml"],
             expect="freegap: unknown command 'frobnicate'; the commands are sample, run, inspect, "
                    "report, limit, plan, sweep (see freegap --help)\n"),
        dict(name="--stop-before with units out of order", files={"job.toml": GOOD},
             args=["run", "job.toml", "--stop-before", "10m1h"] + run_out,
             expect=F + "--stop-before 10m1h: units must come in the order d, h, m, s, each at most once; "
                        "write e.g. 90s, 10m or 1h30m\n"),
        dict(name="--stop-before with an unknown unit", files={"job.toml": GOOD},
             args=["run", "job.toml", "--stop-before", "5 min"] + run_out,
             expect=F + "--stop-before 5 min: unknown unit ' ' (use d, h, m, s); write e.g. 90s, 10m or 1h30m\n"),
        dict(name="plan --deadline 0", files={"job.toml": GOOD},
             args=["plan", "job.toml", "--deadline", "0", "--calibration", "cal.toml"],
             expect=F + "--deadline 0: must be positive; write e.g. 90s, 10m or 1h30m\n"),
        dict(name="plan of a job with a bad expression", files={"job.toml": edit('"X + Y"', '"X + * Y"')},
             args=["plan", "job.toml", "--calibration", "cal.toml"],
             expect=F + "job.toml:5: expression: expected a matrix name, a number or '(' after '+' at column 5\n"),
        dict(name="sweep without values",
             files={"job.toml": GOOD, "s.toml": 'base = "job.toml"\nvary = "seed"\nvalues = []\n'},
             args=["sweep", "s.toml"],
             expect=F + "s.toml:3: values: required: a non-empty list of values, e.g. values = [0.25, 0.5, 1.0]\n"),
        dict(name="sweep value that makes a bad job",
             files={"job.toml": GOOD, "s.toml": 'base = "job.toml"\nvary = "observe.bins"\nvalues = [10, 0]\n'},
             args=["sweep", "s.toml"],
             expect=lambda err: (err.startswith(F + "s.toml:3: values: value 0 makes an invalid job: ")
                                 and "observe.bins" in err and err.count("\n") == 1,
                                 "names the sweep file, the value and the job key, in one line")),
        dict(name="--threads 2 with complex singular values", files={"job.toml": COMPLEX_SVD},
             args=["run", "job.toml", "--threads", "2"] + run_out,
             expect=F + "--threads 2: this job needs complex singular value decompositions, which crash with "
                        "more than one OpenBLAS thread in the OpenBLAS shipped with Debian 12; use --threads 1 "
                        "and more ranks instead\n"),
        # ---- run files ----
        dict(name="output is the run file of another job",
             files={"job.toml": edit("seed = 5", "seed = 6")}, setup=[copy_run_file("g.h5")],
             args=["run", "job.toml", "-o", "g.h5", "--quiet"], output="g.h5",
             expect=F + "run file 'g.h5' was written by another job (job hash %s… in the file, %s… for this "
                        "job); use a new output path or --fresh to start over\n" % (good_hash[:12], other_hash[:12])),
        dict(name="output is the run file of another job, mpirun -np 2", ranks=2,
             files={"job.toml": edit("seed = 5", "seed = 6")}, setup=[copy_run_file("g.h5")],
             args=["run", "job.toml", "-o", "g.h5", "--quiet"], output="g.h5",
             expect=F + "run file 'g.h5' was written by another job (job hash %s… in the file, %s… for this "
                        "job); use a new output path or --fresh to start over\n" % (good_hash[:12], other_hash[:12])),
        # The thread count is checked on a read-only handle, so the file's bytes and mtime stay.
        dict(name="resume with another --threads than the file",
             files={"job.toml": GOOD}, setup=[copy_run_file("g.h5")],
             args=["run", "job.toml", "-o", "g.h5", "--quiet", "--threads", "2"], output="g.h5",
             expect=F + "run file 'g.h5' was written with 1 BLAS thread(s) per rank and this run asks for 2; "
                        "the last bits of the results depend on it, so resume with --threads 1 or start over "
                        "with --fresh\n"),
        dict(name="inspect: a text file named .h5", setup=[text_file("notes.h5")], args=["inspect", "notes.h5"],
             output="notes.h5", expect=F + "'notes.h5' is not a freegap run file (not an HDF5 file); check the path\n"),
        # Files a run cannot continue get the store's resume wording.
        dict(name="run -o: a text file named .h5", files={"job.toml": GOOD}, setup=[text_file("notes.h5")],
             args=["run", "job.toml", "-o", "notes.h5", "--quiet"], output="notes.h5",
             expect=F + "'notes.h5' is not a freegap run file (not an HDF5 file); choose another output path\n"),
        dict(name="inspect: a truncated copy of a run file", setup=[truncated("cut.h5")], args=["inspect", "cut.h5"],
             output="cut.h5",
             expect=F + "run file 'cut.h5' is truncated (it ends before the data HDF5 recorded); restore a good copy\n"),
        dict(name="run -o: a truncated copy of a run file (resume)", files={"job.toml": GOOD},
             setup=[truncated("cut.h5")], args=["run", "job.toml", "-o", "cut.h5", "--quiet"], output="cut.h5",
             expect=F + "run file 'cut.h5' is truncated (it ends before the data HDF5 recorded); restore a good "
                        "copy, or start over with --fresh\n"),
        dict(name="inspect: an HDF5 file that is not a run file", setup=[foreign("survey.h5")],
             args=["inspect", "survey.h5"], output="survey.h5",
             expect=F + "'survey.h5' is not a freegap run file (file_kind is missing); check the path\n"),
        dict(name="run -o: an HDF5 file that is not a run file", files={"job.toml": GOOD}, setup=[foreign("survey.h5")],
             args=["run", "job.toml", "-o", "survey.h5", "--quiet"], output="survey.h5",
             expect=F + "'survey.h5' is not a freegap run file (file_kind is missing); choose another output path\n"),
        dict(name="run -o: a directory", files={"job.toml": GOOD}, setup=[directory("results")],
             args=["run", "job.toml", "-o", "results", "--quiet"], output="results",
             expect=F + "'results' is not a freegap run file (not a regular file); choose another output path\n"),
        # --fresh deletes only freegap run files (a damaged one included); anything else is refused.
        dict(name="--fresh on an HDF5 file that is not a run file", files={"job.toml": GOOD},
             setup=[foreign("survey.h5")], args=["run", "job.toml", "-o", "survey.h5", "--quiet", "--fresh"],
             output="survey.h5",
             expect=F + "'survey.h5' is not a freegap run file (file_kind is missing); --fresh replaces "
                        "only freegap run files; choose another output path\n"),
        # Nothing HDF5 cannot open is deleted: no kind marker can be read, so nothing proves
        # freegap wrote it (issue 20, item 2; these two were deleted and replaced before).
        dict(name="--fresh on a text file that starts with the HDF5 signature", files={"job.toml": GOOD},
             setup=[signature_text("s.h5")], args=["run", "job.toml", "-o", "s.h5", "--quiet", "--fresh"],
             output="s.h5", expect=F + UNPROVEN % "s.h5"),
        dict(name="--fresh on a foreign HDF5 file cut short", files={"job.toml": GOOD},
             setup=[foreign_cut("s.h5")], args=["run", "job.toml", "-o", "s.h5", "--quiet", "--fresh"],
             output="s.h5", expect=F + UNPROVEN % "s.h5"),
        dict(name="--fresh on a run file cut short", files={"job.toml": GOOD},
             setup=[truncated("cut.h5")], args=["run", "job.toml", "-o", "cut.h5", "--quiet", "--fresh"],
             output="cut.h5", expect=F + UNPROVEN % "cut.h5"),
        dict(name="--fresh on a directory", files={"job.toml": GOOD},
             setup=[directory("results"), lambda d: rh.write(os.path.join(d, "results", "table.csv"), "1,2\n")],
             args=["run", "job.toml", "-o", "results", "--quiet", "--fresh"],
             output="results",
             expect=F + "'results' is not a freegap run file (not a regular file); --fresh replaces only "
                        "freegap run files; choose another output path\n"),
        dict(name="output under a regular file", files={"job.toml": GOOD},
             args=["run", "job.toml", "-o", "/etc/hostname/x.h5", "--quiet"], output="/etc/hostname/x.h5",
             external=["/etc/hostname"],
             expect=F + "cannot create run file '/etc/hostname/x.h5' (Not a directory); choose an output path in "
                        "a directory you can write to\n"),
        dict(name="output in a directory that does not exist", files={"job.toml": GOOD},
             args=["run", "job.toml", "-o", "missing-dir/x.h5", "--quiet"], output="missing-dir/x.h5",
             expect=F + "cannot create run file 'missing-dir/x.h5' (No such file or directory); choose an output "
                        "path in a directory you can write to\n"),
        dict(name="inspect: a missing file", args=["inspect", "absent.h5"], output="absent.h5",
             expect=F + "run file 'absent.h5' does not exist; check the path\n"),
    ]


def run_case(c, exe, root, index, case):
    name = case["name"]
    d = os.path.join(root, "case%02d" % index)
    os.mkdir(d)
    for fname, text in case.get("files", {}).items():
        rh.write(os.path.join(d, fname), text)
    for make in case.get("setup", []):
        make(d)
    output = case.get("output", OUT)
    out_path = output if os.path.isabs(output) else os.path.join(d, output)
    existed = os.path.lexists(out_path)
    before = rh.snapshot(d)
    external = {p: rh.fingerprint(p) for p in case.get("external", [])}

    p = rh.run(rh.command(exe, case["args"], case.get("ranks")), d)
    label = "%s: freegap %s" % (name, " ".join(case["args"]))
    c.equal(p.returncode, rh.EXIT_BAD_INPUT, label + " -> exit 2")
    c.equal(p.stdout, "", name + ": nothing on stdout")
    expect = case["expect"]
    err = p.stderr
    if case.get("ranks"):
        # mpirun adds its own report after ours; ours must come first and only once.
        ours = [l + "\n" for l in err.splitlines() if l.startswith("freegap:")]
        c.equal(len(ours), 1, name + ": one freegap message from all ranks")
        err = ours[0] if ours else err
    if callable(expect):
        ok, rule = expect(err)
        c.check(ok, "%s: message %s" % (name, rule), "stderr: %r" % p.stderr)
    else:
        c.equal(err, expect, name + ": stderr is the expected message")

    after = rh.snapshot(d)
    if existed:
        c.equal(after, before, name + ": the existing file and the directory are unchanged (SHA-256, size, mtime)")
    else:
        c.check(not os.path.lexists(out_path), "%s: output %s was not created" % (name, output))
        changed = sorted(k for k in set(before) | set(after) if before.get(k) != after.get(k))
        c.check(not changed, name + ": nothing written in the directory (SHA-256, size, mtime)", changed)
    out_dir = os.path.dirname(out_path)
    if os.path.isdir(out_dir):
        left = rh.temp_files(out_dir, os.path.basename(out_path))
        c.check(not left, name + ": no temporary file left", left)
    for path, fp in external.items():
        c.equal(rh.fingerprint(path), fp, "%s: %s unchanged" % (name, path))


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("bad input: clear message, exit 2, nothing written")
    with rh.WorkDir("badinput") as root:
        template = os.path.join(root, "template")
        os.mkdir(template)
        good_hash, other_hash = build_templates(exe, template)
        catalogue = cases(good_hash, other_hash, template)
        for i, case in enumerate(catalogue):
            run_case(c, exe, root, i, case)
        print("  -- %d cases" % len(catalogue))
        c.check(len(catalogue) >= 20, "the catalogue has at least 20 cases")
    c.finish()


if __name__ == "__main__":
    main()
