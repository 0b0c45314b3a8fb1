"""The architecture check (tests/architecture/allowed_includes.py against docs/parts.toml) passes on
the repository and fails, naming the file, the line and the rule, on scratch copies with a
forbidden include; a known crossing that the code no longer has fails it too, so the list of known
crossings can only shrink.

The tests of the mathematics (rng, observe, ensembles, expr, tridiagonal, model, job) are linked
with their parts only: their binaries in the build directory must load neither MPI nor HDF5.

Usage: /usr/bin/python3 check_architecture.py <build_dir>
"""

import os
import shutil
import subprocess
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

here = os.path.dirname(os.path.abspath(__file__))
repo = os.path.abspath(os.path.join(here, "..", ".."))
checker = os.path.join(repo, "tests", "architecture", "allowed_includes.py")
checks = rh.Checks("the architecture check: includes follow docs/parts.toml")
check = checks.check


def run_checker(root):
    return subprocess.run([sys.executable, checker, root], stdout=subprocess.PIPE,
                          stderr=subprocess.PIPE, text=True, timeout=120)


def scratch_copy(work, tag):
    root = os.path.join(work, tag)
    for top in ("src", "include", "analysis", "docs"):
        shutil.copytree(os.path.join(repo, top), os.path.join(root, top))
    return root


r = run_checker(repo)
check(r.returncode == 0, "the repository's includes follow docs/parts.toml", r.stdout + r.stderr)

with rh.WorkDir("architecture") as work:
    # 1. The mathematics may not reach MPI, HDF5 or the runner.
    root = scratch_copy(work, "forbidden")
    rh.write(os.path.join(root, "src", "linalg", "scratch.cpp"),
             '// scratch\n#include <mpi.h>\n#include "freegap/run.hpp"\n#include <hdf5.h>\n'
             '#include "freegap/errors.hpp"\n')
    r = run_checker(root)
    out = r.stdout
    check(r.returncode == 1, "a forbidden include in a scratch file fails the check (exit 1)", out + r.stderr)
    check("src/linalg/scratch.cpp:2: includes mpi.h: part 'linalg' may not use the library 'mpi'" in out,
          "the message names the file, the line, the header and the rule (MPI)", out)
    check("src/linalg/scratch.cpp:3: includes freegap/run.hpp: part 'linalg' may not use part 'run'" in out,
          "… and a part the architecture forbids (the runner)", out)
    check("src/linalg/scratch.cpp:4: includes hdf5.h: part 'linalg' may not use the library 'hdf5'" in out,
          "… and HDF5 outside the store", out)
    check("scratch.cpp:5" not in out, "an allowed include (errors) is not reported", out)
    check(out.count("\n") == 4, "nothing else is reported (3 lines and the summary)", out)

    # 1b. The analysis's rooms are parts: the limit laws may not read run files.
    root = scratch_copy(work, "room")
    rh.write(os.path.join(root, "analysis", "limits", "scratch.cpp"),
             '#include "freegap/store.hpp"\n#include "freegap/analysis/statistics/fit.hpp"\n')
    r = run_checker(root)
    check(r.returncode == 1 and "analysis/limits/scratch.cpp:1: includes freegap/store.hpp: part "
          "'limits' may not use part 'store'" in r.stdout and "analysis/limits/scratch.cpp:2: includes "
          "freegap/analysis/statistics/fit.hpp: part 'limits' may not use part 'statistics'" in r.stdout,
          "a room of the analysis that reaches the store or another room fails the check", r.stdout)

    # 2. A relative include into another part is caught too.
    root = scratch_copy(work, "relative")
    rh.write(os.path.join(root, "src", "observe", "scratch.cpp"), '#include "../store/h5.hpp"\n')
    r = run_checker(root)
    check(r.returncode == 1 and "src/observe/scratch.cpp:1: includes ../store/h5.hpp: a relative "
          "include reaches into part 'store'" in r.stdout,
          "a relative include that reaches into another part fails the check", r.stdout)

    # 3. A known crossing removed from the code must leave the list.
    root = scratch_copy(work, "stale")
    with open(os.path.join(root, "docs", "parts.toml"), "a") as f:
        f.write('\n[[known]]\nfile = "src/observe/observe.cpp"\nincludes = "mpi.h"\n'
                'why = "a scratch entry for a crossing the code does not have"\n')
    r = run_checker(root)
    check(r.returncode == 1 and "the known crossing src/observe/observe.cpp → mpi.h is gone from the "
          "code; remove its [[known]] entry" in r.stdout,
          "a known crossing the code does not have fails the check until its entry goes", r.stdout)

    # 4. A new part must be declared.
    root = scratch_copy(work, "undeclared")
    os.makedirs(os.path.join(root, "src", "newpart"))
    rh.write(os.path.join(root, "src", "newpart", "a.cpp"), '#include "freegap/errors.hpp"\n')
    r = run_checker(root)
    check(r.returncode == 1 and "src/newpart/a.cpp: its part 'newpart' is not in docs/parts.toml" in r.stdout,
          "a part not declared in docs/parts.toml fails the check", r.stdout)

# Header and source names pair in the analysis's rooms: every source is named after a header of
# its room (public, include/freegap/analysis/<room>/, or private, beside it) or is <header>_<aspect>
# (laws_pushforward.cpp beside laws.hpp), and every header has a source of its own name.
for room in ("limits", "statistics", "reporting"):
    headers = {f[:-4] for d in (os.path.join(repo, "include", "freegap", "analysis", room),
                                os.path.join(repo, "analysis", room))
               for f in os.listdir(d) if f.endswith(".hpp")}
    sources = {f[:-4] for f in os.listdir(os.path.join(repo, "analysis", room)) if f.endswith(".cpp")}
    unpaired = sorted(s for s in sources if not any(s == h or s.startswith(h + "_") for h in headers))
    check(not unpaired, "analysis/%s: every source is named after a header of its room" % room,
          "unpaired: %s" % ", ".join(unpaired))
    lonely = sorted(headers - sources)
    check(not lonely, "analysis/%s: every header has a source of its own name" % room,
          "without a source: %s" % ", ".join(lonely))

# The tests of the mathematics link neither MPI nor HDF5 (tests/CMakeLists.txt links them with
# their parts only): their binaries, as the dynamic linker sees them.
build = os.path.abspath(sys.argv[1]) if len(sys.argv) > 1 else None
MATH_TESTS = ["test_rng", "test_observe", "test_ensembles", "test_expr", "test_tridiagonal",
              "test_tridiagonal_law", "test_model", "test_job", "test_laws", "test_free_convolution",
              "test_moments", "test_polynomial_limit", "test_limit", "test_fit", "test_metrics",
              "test_study", "test_polar"]
for name in MATH_TESTS:
    binary = os.path.join(build or "", "tests", name)
    if not check(build is not None and os.access(binary, os.X_OK), "%s is built" % name, binary):
        continue
    r = subprocess.run(["ldd", binary], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    linked = [line.split()[0] for line in r.stdout.splitlines()
              if line.split() and ("libmpi" in line or "libhdf5" in line or "libopen-rte" in line)]
    check(r.returncode == 0 and not linked, "%s links neither MPI nor HDF5" % name,
          "ldd found: %s" % ", ".join(linked) if linked else r.stderr)

checks.finish()
