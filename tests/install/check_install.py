#!/usr/bin/env python3
"""freegap installed like a cluster tool (issue 21, items 1 and 2): the consumer test.

Usage: check_install.py BUILD_DIR SOURCE_DIR

  1. `cmake --install BUILD --prefix P` puts the executable, the plug-in header, the CMake package,
     the scripts, example jobs, Slurm scripts, module file, Python reader and docs under P in the
     usual layout.
  2. An estimator plug-in (tests/install/consumer) is configured and built out of tree with
     `find_package(freegap)` against P only.
  3. With the source tree and the build tree hidden (an empty tmpfs mounted over each in a private
     mount namespace, so nothing can be read from them), the installed freegap runs the demo job
     from P/share/freegap/jobs on 2 MPI ranks, writes its report with figures (the plotting
     scripts found relative to the executable), runs a job with the out-of-tree plug-in, the
     Python reader loads the run file, and Lmod loads the module file, which puts freegap on PATH.
     The same module file read by a plain Tcl interpreter with the commands it uses
     (Environment Modules' syntax) sets the same variables.
  4. `cpack -G DEB` builds a Debian package that declares its dependencies; it is installed with
     dpkg, `freegap --version` runs from it, and it is removed again.
"""
import glob
import os
import shutil
import subprocess
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

LAYOUT = [
    "bin/freegap",
    "bin/freegap-plugin-host",
    "include/freegap/estimator_abi.h",
    "lib/cmake/freegap/freegapConfig.cmake",
    "lib/cmake/freegap/freegapConfigVersion.cmake",
    "lib/cmake/freegap/freegapTargets.cmake",
    "share/freegap/analysis/plot_report.py",
    "share/freegap/analysis/plot_limit.py",
    "share/freegap/analysis/plot_estimators.py",
    "share/freegap/python/freegap_results.py",
    "share/freegap/jobs/demo.toml",
    "share/freegap/jobs/estimators/second_moment.py",
    "share/freegap/slurm/run.sbatch",
    "share/freegap/slurm/array.sbatch",
    "share/freegap/slurm/long-run.sbatch",
    "share/doc/freegap/README.md",
    "share/doc/freegap/LICENSE",
    "share/doc/freegap/docs/trust.md",
    "share/doc/freegap/docs/install.md",
]

# A scenario of our own: the background spectrum of a detector, scored by the plug-in.
PLUGIN_JOB = """\
name = "detector background, edge estimator"
seed = 3
sizes = [40, 80]
trials = 8
expression = "X"

[matrices.X]
ensemble = "gue"

[[estimator]]
name = "edge"
library = "%s"

[estimator.truth]
centre = 0.0
top = 2.0
"""

# Run inside the hidden-trees namespace; every path it uses is outside the hidden trees.
HIDDEN_SCRIPT = r"""
set -eu
for t in "$@"; do mount -t tmpfs -o size=1m,mode=0755 freegap-hidden "$t"; done
for t in "$@"; do [ -z "$(ls -A "$t")" ] || { echo "tree $t is still visible" >&2; exit 90; }; done
cd "$WORK"
freegap --version
mpirun -np 2 -x OPENBLAS_NUM_THREADS freegap run "$PREFIX/share/freegap/jobs/demo.toml" -o demo.h5 --quiet
freegap report demo.h5 -o demo-report > report.log
freegap run plugin.toml -o plugin.h5 --quiet
freegap inspect plugin.h5 > plugin-inspect.txt
python3 -c 'import freegap_results as fr, sys; r = fr.open_run("demo.h5"); print("sizes", len(r.sizes), "complete", r.complete)' > python.txt
if [ -f /usr/share/lmod/lmod/init/bash ]; then
  ( PATH=/usr/bin:/bin; unset PYTHONPATH
    . /usr/share/lmod/lmod/init/bash
    module use "$PREFIX/share/freegap/modulefiles"
    module load freegap
    echo "freegap=$(command -v freegap)"
    echo "PYTHONPATH=$PYTHONPATH"
    echo "FREEGAP_PREFIX=$FREEGAP_PREFIX" ) > lmod.txt
fi
"""

# The commands of the module file, as Environment Modules defines them, for a plain tclsh.
TCL_STUBS = r"""
proc module-whatis {args} {}
proc conflict {args} {}
proc prepend-path {var value} {
  if {[info exists ::env($var)] && $::env($var) ne ""} {
    set ::env($var) "$value:$::env($var)"
  } else { set ::env($var) $value }
}
proc setenv {var value} { set ::env($var) $value }
source [lindex $argv 0]
puts "PATH=$::env(PATH)"
puts "PYTHONPATH=$::env(PYTHONPATH)"
puts "FREEGAP_PREFIX=$::env(FREEGAP_PREFIX)"
"""


def sh(cmd, cwd=None, env=None, timeout=600):
    return subprocess.run(cmd, cwd=cwd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                          text=True, timeout=timeout)


def main():
    if len(sys.argv) != 3:
        sys.exit("usage: check_install.py BUILD_DIR SOURCE_DIR")
    build, source = (os.path.realpath(p) for p in sys.argv[1:3])
    c = rh.Checks("installed freegap: layout, find_package, hidden source tree, Debian package")
    with rh.WorkDir("install") as d:
        prefix = os.path.join(d, "prefix")
        r = sh(["cmake", "--install", build, "--prefix", prefix])
        if not c.check(r.returncode == 0, "cmake --install into a scratch prefix", r.stderr):
            c.finish()
        for path in LAYOUT:
            c.check(os.path.isfile(os.path.join(prefix, path)), "installed: " + path)
        module = os.path.join(prefix, "share/freegap/modulefiles/freegap")
        c.check(len(glob.glob(os.path.join(module, "*"))) == 1, "installed: the module file")

        # 2. The plug-in, out of tree, against the installed package only.
        consumer = os.path.join(d, "consumer")
        shutil.copytree(os.path.join(source, "tests", "install", "consumer"), consumer)
        cb = os.path.join(d, "consumer-build")
        r = sh(["cmake", "-S", consumer, "-B", cb, "-DCMAKE_PREFIX_PATH=" + prefix])
        c.check(r.returncode == 0, "find_package(freegap) configures the plug-in", r.stdout + r.stderr)
        c.check(os.path.join(prefix, "bin", "freegap") in r.stdout,
                "freegap::freegap names the installed executable", r.stdout)
        r = sh(["cmake", "--build", cb])
        plugin = os.path.join(cb, "libedge_estimator.so")
        c.check(r.returncode == 0 and os.path.isfile(plugin), "the plug-in builds", r.stdout + r.stderr)

        # 3. Everything from the installed tree, with the source and build trees hidden.
        work = os.path.join(d, "work")
        os.mkdir(work)
        rh.write(os.path.join(work, "plugin.toml"), PLUGIN_JOB % plugin)
        hidden = [source] + ([build] if not build.startswith(source + os.sep) else [])
        env = rh.child_env(PATH=os.path.join(prefix, "bin") + ":/usr/bin:/bin",
                           PYTHONPATH=os.path.join(prefix, "share/freegap/python"),
                           PREFIX=prefix, WORK=work)
        unshare = ["unshare", "--mount", "--propagation", "private"]
        if os.geteuid() != 0:
            unshare.insert(1, "--map-root-user")
        r = sh(unshare + ["bash", "-c", HIDDEN_SCRIPT, "hidden"] + hidden, env=env)
        c.check(r.returncode == 0, "installed freegap runs with the source and build trees hidden "
                "(demo on 2 ranks, report with figures, plug-in job, Python reader)",
                r.stdout[-2000:] + r.stderr[-3000:])
        rep = os.path.join(work, "demo-report")
        c.check(os.path.isfile(os.path.join(rep, "report.md")), "  ... the demo's report.md")
        c.check(len(glob.glob(os.path.join(rep, "figures", "*.png"))) >= 3,
                "  ... its figures, drawn by the installed scripts")
        text = open(os.path.join(work, "plugin-inspect.txt")).read() \
            if os.path.exists(os.path.join(work, "plugin-inspect.txt")) else ""
        c.check("edge.centre" in text and "edge.top" in text,
                "  ... the out-of-tree plug-in's estimates are in the run file", text)
        text = open(os.path.join(work, "python.txt")).read() \
            if os.path.exists(os.path.join(work, "python.txt")) else ""
        c.equal(text.strip(), "sizes 4 complete True", "  ... the installed Python reader reads it")
        lmod = os.path.join(work, "lmod.txt")
        c.check(os.path.exists(lmod), "  ... Lmod is installed (package lmod) and was tried")
        text = open(lmod).read() if os.path.exists(lmod) else ""
        c.check("freegap=%s/bin/freegap" % prefix in text, "  ... Lmod's module load puts freegap on PATH", text)
        c.check("PYTHONPATH=%s/share/freegap/python" % prefix in text,
                "  ... and the Python reader on PYTHONPATH", text)

        stubs = rh.write(os.path.join(d, "stubs.tcl"), TCL_STUBS)
        files = glob.glob(os.path.join(module, "*"))
        r = sh(["tclsh", stubs, files[0]] if files else ["false"],
               env={"PATH": "/usr/bin:/bin"})
        c.check(r.returncode == 0 and "PATH=%s/bin:/usr/bin:/bin" % prefix in r.stdout and
                "FREEGAP_PREFIX=%s\n" % prefix in r.stdout,
                "the module file read as plain Tcl (Environment Modules' commands) sets PATH",
                r.stdout + r.stderr)

        # 4. The Debian package: the same build as the one installed above.
        version = sh([os.path.join(prefix, "bin", "freegap"), "--version"]).stdout
        debs = os.path.join(d, "deb")
        r = sh(["cpack", "-G", "DEB", "-B", debs, "--config", os.path.join(build, "CPackConfig.cmake")])
        found = glob.glob(os.path.join(debs, "freegap_*.deb"))
        if c.check(r.returncode == 0 and len(found) == 1, "cpack builds freegap_*.deb", r.stdout + r.stderr):
            info = sh(["dpkg-deb", "--field", found[0], "Depends"]).stdout
            for dep in ("libhdf5", "libopenmpi", "openmpi-bin", "python3-h5py"):
                c.check(dep in info, "  ... the package depends on %s" % dep, info)
            contents = sh(["dpkg-deb", "--contents", found[0]]).stdout
            c.check("./usr/bin/freegap" in contents and
                    "./usr/share/freegap/modulefiles/freegap/" in contents,
                    "  ... it holds /usr/bin/freegap and the module file")
            if os.geteuid() == 0:
                r = sh(["dpkg", "-i", found[0]])
                c.check(r.returncode == 0, "  ... dpkg -i installs it", r.stdout + r.stderr)
                v = sh(["/usr/bin/freegap", "--version"])
                c.check(v.returncode == 0 and v.stdout == version,
                        "  ... /usr/bin/freegap --version runs from the package", v.stdout + v.stderr)
                r = sh(["dpkg", "-r", "freegap"])
                c.check(r.returncode == 0 and not os.path.exists("/usr/bin/freegap"),
                        "  ... dpkg -r removes it again", r.stdout + r.stderr)
            else:
                x = os.path.join(d, "extracted")
                sh(["dpkg-deb", "-x", found[0], x])
                v = sh([os.path.join(x, "usr/bin/freegap"), "--version"])
                c.check(v.returncode == 0, "  ... (not root: extracted, not installed) freegap "
                        "--version runs from it", v.stderr)
    c.finish()


if __name__ == "__main__":
    main()
