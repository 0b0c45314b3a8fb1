"""Shared helpers for the runner's tests (the check_*.py of every tests/<part>/).

Not a test itself (CTest runs only check_*.py). Importing it sets the MPI and OpenBLAS
environment the runner's tests need and disables HDF5 file locking *in this Python process
only* (so h5py can read a file a live run is writing, docs/run-file.md "Reading a file while it is
written"); child processes get the default locking unless a test asks otherwise.
"""
import os

# h5py's HDF5 reads this once, when it loads: set it before importing h5py.
os.environ["HDF5_USE_FILE_LOCKING"] = "FALSE"

import hashlib  # noqa: E402
import re  # noqa: E402
import shutil  # noqa: E402
import signal  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402

import h5py  # noqa: E402
import numpy as np  # noqa: E402

# What every child gets: root may run mpirun, more ranks than cores, one BLAS thread.
# (docs/cluster-notes.md §1.1–§1.3; the vader setting is harmless here and needed in Docker.)
MPI_ENV = {
    "OMPI_ALLOW_RUN_AS_ROOT": "1",
    "OMPI_ALLOW_RUN_AS_ROOT_CONFIRM": "1",
    "OMPI_MCA_rmaps_base_oversubscribe": "1",
    "OMPI_MCA_btl_vader_single_copy_mechanism": "none",
    "OPENBLAS_NUM_THREADS": "1",
}
os.environ.update(MPI_ENV)
if shutil.which("ssh") is None and shutil.which("rsh") is None:
    # Without ssh even single-node mpirun and singletons fail (docs/cluster-notes.md §1.3).
    os.environ["OMPI_MCA_plm"] = "isolated"

EXIT_FINISHED, EXIT_FAILURE, EXIT_BAD_INPUT, EXIT_RESUMABLE = 0, 1, 2, 3  # run.hpp

# Safety nets only, never assertions about speed.
RUN_TIMEOUT = 240


def child_env(file_locking=True, **extra):
    """The environment for freegap: ours, with HDF5 file locking at its default unless asked."""
    env = dict(os.environ)
    env.pop("HDF5_USE_FILE_LOCKING", None)
    if not file_locking:
        env["HDF5_USE_FILE_LOCKING"] = "FALSE"
    env.update(extra)
    return env


class Checks:
    """Collects failures; prints every check; exits non-zero at the end if any failed."""

    def __init__(self, title):
        self.title = title
        self.failures = []
        self.passed = 0
        print("== %s" % title, flush=True)

    def check(self, condition, what, detail=None):
        if condition:
            self.passed += 1
            print("  ok    %s" % what, flush=True)
        else:
            self.failures.append(what)
            print("  FAIL  %s" % what, flush=True)
            if detail:
                for line in str(detail).rstrip("\n").split("\n"):
                    print("        | %s" % line, flush=True)
        return bool(condition)

    def equal(self, got, expected, what):
        return self.check(got == expected, what,
                          None if got == expected else "expected: %r\n     got: %r" % (expected, got))

    def finish(self):
        print("== %s: %d checks passed, %d failed" % (self.title, self.passed, len(self.failures)))
        for f in self.failures:
            print("   failed: %s" % f)
        sys.exit(1 if self.failures else 0)


def freegap_exe(argv):
    if len(argv) < 2:
        sys.exit("usage: %s BUILD_DIR" % argv[0])
    exe = os.path.join(os.path.abspath(argv[1]), "freegap")
    if not os.access(exe, os.X_OK):
        sys.exit("FAIL: no freegap executable at %s (build it first)" % exe)
    for tool in ("mpirun", "h5diff"):
        if shutil.which(tool) is None:
            sys.exit("FAIL: %s is not installed" % tool)
    return exe


class WorkDir:
    """A fresh temporary directory, removed on exit."""

    def __init__(self, tag):
        self.path = tempfile.mkdtemp(prefix="freegap-%s-" % tag)

    def __enter__(self):
        return self.path

    def __exit__(self, *exc):
        shutil.rmtree(self.path, ignore_errors=True)


FIXTURES = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "fixtures")


def fixture_job(model, head, tail=""):
    """A job file's text: `head` (the test's own top-level keys: name, seed, sizes, trials), the
    model tests/fixtures/<model>.toml shares between tests (the expression and its matrices),
    then `tail` (the test's [observe] and [run] tables). One copy of each model, not pasted text."""
    with open(os.path.join(FIXTURES, model + ".toml"), encoding="utf-8") as f:
        return head + f.read() + tail


def write(path, text):
    with open(path, "w") as f:
        f.write(text)
    return path


def command(exe, args, ranks=None):
    """freegap ARGS as a plain process (ranks=None) or under mpirun -np RANKS."""
    if ranks is None:
        return [exe] + list(args)
    return ["mpirun", "-np", str(ranks), "--oversubscribe", exe] + list(args)


def run(cmd, cwd, env=None, timeout=RUN_TIMEOUT):
    """Runs to the end; returns CompletedProcess with text stdout/stderr."""
    return subprocess.run(cmd, cwd=cwd, env=env or child_env(), stdout=subprocess.PIPE,
                          stderr=subprocess.PIPE, text=True, timeout=timeout)


def start(cmd, cwd, env=None, stdout=subprocess.PIPE, stderr=subprocess.PIPE):
    """Starts in a new session (its own process group, so a kill reaches mpirun's ranks too)."""
    return subprocess.Popen(cmd, cwd=cwd, env=env or child_env(), stdout=stdout, stderr=stderr,
                            text=True, start_new_session=True)


def session_members(sid):
    """Pids of every process in session `sid` (read from /proc)."""
    pids = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open("/proc/%s/stat" % entry) as f:
                stat = f.read()
        except OSError:
            continue
        # Fields after the command name (in parentheses, which may contain spaces):
        # state ppid pgrp session ...
        fields = stat[stat.rindex(")") + 2:].split()
        if int(fields[3]) == sid:
            pids.append(int(entry))
    return pids


def kill_group(proc, sig=signal.SIGKILL):
    """Sends `sig` to every process of the session of a child started by start(); returns the pids.

    mpirun puts each rank in a process group of its own (but in mpirun's session), so killing
    mpirun's process group alone would leave the ranks running: every member of the session —
    all of them descendants of our child, so ours — gets the signal.
    """
    targets = [proc.pid] + [p for p in session_members(proc.pid) if p != proc.pid]
    for pid in reversed(targets):  # the ranks first, mpirun last
        try:
            os.kill(pid, sig)
        except ProcessLookupError:
            pass
    return targets


def reap(proc, timeout=RUN_TIMEOUT):
    """Waits for a started child; on timeout kills its group. Returns (rc, stdout, stderr)."""
    try:
        out, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        kill_group(proc)
        out, err = proc.communicate()
        return None, out, err
    return proc.returncode, out, err


def h5diff(a, b):
    """h5diff outside /provenance: (exit status, output)."""
    p = subprocess.run(["h5diff", "--exclude-path", "/provenance", a, b], stdout=subprocess.PIPE,
                       stderr=subprocess.STDOUT, text=True, timeout=120)
    return p.returncode, p.stdout


def committed_state(path):
    """(committed units, total units) over all sizes, read with locking off; None if unreadable."""
    try:
        with h5py.File(path, "r") as f:
            done = total = 0
            for i in range(int(f.attrs["size_count"])):
                c = f["sizes/%d/unit_committed" % i][:]
                done += int(np.count_nonzero(c == 1))
                total += c.size
            return done, total
    except Exception:  # a file being created or torn: not readable yet
        return None


def sessions(path):
    """Rows of /provenance/sessions as dicts of str/int, read row by row as docs/run-file.md advises.

    A row a kill tore (unreadable) comes back as {"status": None}.
    """
    out = []
    with h5py.File(path, "r") as f:
        ds = f["provenance/sessions"]
        for i in range(ds.shape[0]):
            try:
                r = ds[i]
                d = {}
                for name in ds.dtype.names:
                    v = r[name]
                    if isinstance(v, bytes):
                        v = v.decode()
                    elif isinstance(v, np.integer):
                        v = int(v)
                    d[name] = v
            except Exception:
                d = {"status": None}
            out.append(d)
    return out


def inspect_sessions(text):
    """The 'session i: START .. END, R rank(s), STATUS' lines of `freegap inspect`: [(R, STATUS)]."""
    return [(int(m.group(1)), m.group(2))
            for m in re.finditer(r"^session \d+:\s+\S+ \.\. \S+, (\d+) rank\(s\), (\w+)$", text, re.M)]


def temp_files(directory, name):
    """Leftover temporary files of RunFile::create for run file `name` (docs/run-file.md)."""
    pattern = re.compile(r"^\." + re.escape(name) + r"\.creating\.\d+\.\d+$")
    return sorted(n for n in os.listdir(directory) if pattern.match(n))


def fingerprint(path):
    """(SHA-256, size, mtime_ns) of a file, or None if it does not exist."""
    if not os.path.lexists(path):
        return None
    st = os.stat(path)
    with open(path, "rb") as f:
        digest = hashlib.sha256(f.read()).hexdigest()
    return digest, st.st_size, st.st_mtime_ns


def snapshot(directory):
    """Every entry of a directory tree with its fingerprint (directories by name only)."""
    out = {}
    for root, dirs, files in os.walk(directory):
        for d in dirs:
            out[os.path.relpath(os.path.join(root, d), directory) + "/"] = "dir"
        for f in files:
            p = os.path.join(root, f)
            out[os.path.relpath(p, directory)] = fingerprint(p)
    return out


def wait_until(predicate, timeout, interval=0.02):
    """Polls predicate() until it returns a true value or timeout seconds pass."""
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        v = predicate()
        if v:
            return v
        time.sleep(interval)
    return predicate()
