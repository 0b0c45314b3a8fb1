#!/usr/bin/env python3
"""A plug-in library is loaded, described and run only in its helper process (docs/plugins.md).

Usage: check_plugin_host.py BUILD_DIR

With the test plug-ins of tests/estimate/plugin.c:
  - one whose describe segfaults, and one whose describe hangs past the estimator's timeout, are
    refused by `run` (1 and 2 ranks), `run --explain` and `plan`: exit 2, a message naming the
    estimator's job file line and what happened, no run file and no log — never a crash of freegap;
  - without the helper program (FREEGAP_PLUGIN_HOST naming no file) a job with a library stops
    with exit 1 and one message on 1 or 2 ranks, nothing written;
  - one that calls exit(0) on trials ≡ 1 (mod 3) has exactly those trials recorded as
    "plug-in called exit(0)", and the run exits 0;
  - one that prints on every trial (and when loaded) puts none of it in freegap's standard output
    or error, on 1 or 2 ranks, `run --explain` and `plan` included; a run's log beside the run
    file, RUN.estimators.log, has every line, prefixed with the estimator and its stream;
  - one that hangs for good (timeout 60 s) is cut short by SIGTERM to the run: the run exits 3
    (resumable) with the usual hint, no helper process is left, and a resume gives a file equal
    to an uninterrupted run outside /provenance.
"""
import os
import re
import signal
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

import h5py  # noqa: E402

# A scenario of our own: a two-level population of receiver gains T observed through a real
# sample covariance W of twice as many snapshots as channels, S = T W T.
JOB = """\
name = "receiver gains, plug-in in its helper"
seed = 31
sizes = [16, 24]
trials = 6
expression = "T W T"

[matrices.T]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [2.0, 0.5]]

[matrices.W]
ensemble = "wishart_real"
ratio = 0.5

[run]
trials_per_unit = 3

[[estimator]]
name = "norm"
builtin = "operator_norm"
[estimator.truth]
norm = "limit_norm"

[[estimator]]
name = "lib"
library = "{plugins}/libtest_plugin_{behaviour}.so"
timeout = {timeout}
[estimator.truth]
top = "none"
mean_square = "none"
"""

LIBRARY_LINE = JOB.splitlines().index('library = "{plugins}/libtest_plugin_{behaviour}.so"') + 1
HINT = ("freegap: stopped by signal %d; committed units are in 'run.h5'; run the same command "
        "again to resume" % signal.SIGTERM)


def failures(path):
    with h5py.File(path, "r") as f:
        return [[[x.decode() for x in row] for row in f["sizes/%d/estimate_failure" % i][:]]
                for i in range(int(f.attrs["size_count"]))]


def helpers_of(plugin):
    """Process ids of helper processes running `plugin` (their command line names it)."""
    pids = []
    for pid in os.listdir("/proc"):
        if not pid.isdigit():
            continue
        try:
            with open("/proc/%s/cmdline" % pid, "rb") as f:
                if plugin.encode() in f.read():
                    pids.append(int(pid))
        except OSError:
            pass
    return pids


def main():
    exe = rh.freegap_exe(sys.argv)
    plugins = os.path.join(os.path.abspath(sys.argv[1]), "tests", "estimate")
    c = rh.Checks("plug-ins are loaded, described and run only in their helper process")
    with rh.WorkDir("plugin-host") as d:
        def job(name, behaviour, timeout=60):
            return rh.write(os.path.join(d, name), JOB.format(plugins=plugins, behaviour=behaviour,
                                                                 timeout=timeout))

        # 1. describe crashes or hangs: refused before the run by run, run --explain and plan.
        for behaviour, timeout, what in [
                ("describe_segfault", 60, "freegap_estimator_describe crashed: signal 11 (SIGSEGV)"),
                ("describe_hang", 1, "freegap_estimator_describe did not finish within the "
                                     "estimator's timeout of 1 s")]:
            path = job("%s.toml" % behaviour, behaviour, timeout)
            expected = ("freegap: %s:%d: estimator.lib.library: '%s/libtest_plugin_%s.so': %s; fix "
                        "the plug-in: loading it and freegap_estimator_describe must only return "
                        "static data\n" % (path, LIBRARY_LINE, plugins, behaviour, what))
            out = os.path.join(d, "%s.h5" % behaviour)
            for label, args, ranks in [("run", ["run", path, "-q", "-o", out], None),
                                       ("run -np 2", ["run", path, "-q", "-o", out], 2),
                                       ("run --explain", ["run", path, "--explain"], None),
                                       ("plan", ["plan", path, "--ranks", "4"], None)]:
                r = rh.run(rh.command(exe, args, ranks), d)
                # Under mpirun, mpirun's own notice of the non-zero exit follows the message.
                ok = r.stderr == expected if ranks is None else r.stderr.startswith(expected)
                c.check(r.returncode == rh.EXIT_BAD_INPUT and ok,
                        "%s, %s: exit 2 with the message naming the estimator's line" % (
                            behaviour, label),
                        "exit %s\nexpected: %s\n     got: %s" % (r.returncode, expected, r.stderr))
                c.check(not os.path.exists(out) and not os.path.exists(out + ".estimators.log"),
                        "%s, %s: no run file, no log" % (behaviour, label))

        # 1b. Without the helper program a job with a library is refused too, as a failure of
        #     the installation (exit 1) rather than of the job, on every rank, nothing written.
        path = job("ok.toml", "ok")
        out = os.path.join(d, "nohost.h5")
        for ranks in (None, 2):
            r = rh.run(rh.command(exe, ["run", path, "-q", "-o", out], ranks), d,
                       env=rh.child_env(FREEGAP_PLUGIN_HOST=os.path.join(d, "no-such-host")))
            expected = ("freegap: cannot start the plug-in's host process (%s: No such file or "
                        "directory)\n" % os.path.join(d, "no-such-host"))
            # Under mpirun, mpirun's notice follows; the ranks agree on one message, not one each.
            ok = r.stderr == expected if ranks is None else (
                r.stderr.startswith(expected) and r.stderr.count("freegap: cannot start") == 1
                and "MPI_ABORT" not in r.stderr)
            c.check(r.returncode == rh.EXIT_FAILURE and ok and not os.path.exists(out),
                    "no helper program (%s): exit 1, one message, no run file" % (ranks or "plain"),
                    "exit %s\nexpected: %s\n     got: %s" % (r.returncode, expected, r.stderr))

        # 2. exit(0) in estimate: recorded as an exit on exactly the trials that called it.
        path = job("exit.toml", "exit")
        out = os.path.join(d, "exit.h5")
        r = rh.run(rh.command(exe, ["run", path, "-q", "-o", out]), d)
        c.equal(r.returncode, 0, "exit(0) in the plug-in: the run exits 0")
        if r.returncode == 0:
            for i, fail in enumerate(failures(out)):
                c.equal([row[1] for row in fail],
                        ["plug-in called exit(0)" if t % 3 == 1 else "" for t in range(len(fail))],
                        "size %d: 'plug-in called exit(0)' on trials = 1 (mod 3) only" % i)

        # 3. A plug-in that prints: none of it in freegap's output; all of it in the log.
        path = job("talker.toml", "chatty")
        for label, args, ranks in [("run --explain", ["run", path, "--explain"], None),
                                   ("plan", ["plan", path, "--ranks", "4"], None)]:
            r = rh.run(rh.command(exe, args, ranks), d)
            c.check(r.returncode == 0 and "chatty " not in r.stdout + r.stderr,
                    "chatty plug-in, %s: exit 0, none of its output in freegap's" % label,
                    r.stdout[-1000:] + r.stderr[-1000:])
        c.check(not [n for n in os.listdir(d) if n.endswith(".estimators.log")],
                "chatty plug-in: run --explain and plan write no log")
        for label, ranks in [("plain", None), ("np2", 2)]:
            out = os.path.join(d, "talker-%s.h5" % label)
            r = rh.run(rh.command(exe, ["run", path, "-o", out], ranks), d)
            c.check(r.returncode == 0 and "chatty " not in r.stdout + r.stderr,
                    "chatty plug-in, %s run: exit 0, none of its output in freegap's" % label,
                    r.stdout[-1000:] + r.stderr[-1000:])
            log = out + ".estimators.log"
            text = open(log).read() if os.path.exists(log) else ""
            lines = text.splitlines()
            c.check(all(re.match(r"^lib\[\d+\] (out|err): ", l) for l in lines) and len(lines) > 0,
                    "%s: every log line names the estimator, its helper and the stream" % label,
                    "\n".join(lines[:5]))
            # 12 trials, each printed by exactly one rank; 100 lines out and one err per trial.
            for t in range(6):
                out_lines = [l for l in lines if re.match(r"^lib\[\d+\] out: chatty trial %d line "
                                                          r"\d{3} \.{72}$" % t, l)]
                err_lines = [l for l in lines if re.match(r"^lib\[\d+\] err: chatty trial %d to "
                                                          r"standard error$" % t, l)]
                c.check(len(out_lines) == 2 * 100 and len(err_lines) == 2,
                        "%s: trial %d of both sizes in the log, whole lines (%d out, %d err)" % (
                            label, t, len(out_lines), len(err_lines)))
            loaded = [l for l in lines if l.endswith(" out: chatty plug-in loaded")]
            c.equal(len(loaded), 1 if ranks is None else 2,
                    "%s: what it printed when loaded is in the log, once per rank" % label)

        # 4. SIGTERM while the plug-in hangs (timeout 60 s): the run stops at once, resumably.
        path = job("hang.toml", "hang")
        reference = os.path.join(d, "reference.h5")
        r = rh.run(rh.command(exe, ["run", path, "-q", "-o", reference]), d)
        c.equal(r.returncode, 0, "the hanging plug-in without its variable: the run exits 0")
        out = os.path.join(d, "run.h5")
        sentinel = os.path.join(d, "hanging.txt")
        proc = rh.start(rh.command(exe, ["run", path, "-q", "-o", "run.h5"]), d,
                        env=rh.child_env(FREEGAP_TEST_PLUGIN_HANG=sentinel))
        hanging = rh.wait_until(lambda: os.path.exists(sentinel) and open(sentinel).read(),
                                timeout=120)
        c.equal(hanging, "hanging on trial 1\n", "the plug-in hangs on trial 1 (it says so)")
        os.kill(proc.pid, signal.SIGTERM)
        # A liveness check, not a speed assertion: before the fix the run waited out the
        # plug-in's whole 60 s timeout; a scheduler sends SIGKILL 30 s after SIGTERM.
        try:
            proc.wait(timeout=10)
        except Exception:
            pass
        gone = proc.poll() is not None
        c.check(gone, "SIGTERM: the run is gone within 10 s of the signal, long before the 60 s "
                      "timeout")
        rc, _, err = rh.reap(proc)
        c.equal(rc, rh.EXIT_RESUMABLE, "SIGTERM: exit 3 (resumable)")
        c.check(HINT in err.splitlines(), "SIGTERM: stderr says how to resume", err)
        st = rh.committed_state(out)
        c.check(st is not None and st[0] < st[1], "SIGTERM: the file is incomplete (%s)" % (st,))
        left = rh.wait_until(lambda: not helpers_of("libtest_plugin_hang.so"), timeout=5)
        c.check(left, "SIGTERM: no helper process is left", helpers_of("libtest_plugin_hang.so"))
        r = rh.run(rh.command(exe, ["run", path, "-q", "-o", "run.h5"]), d)
        c.equal(r.returncode, 0, "resume without the variable: exit 0")
        status, text = rh.h5diff(reference, out)
        c.check(status == 0, "resumed file equals the uninterrupted run outside /provenance",
                text[-2000:])
        if status == 0:
            c.check(all(row[1] == "" for fail in failures(out) for row in fail),
                    "no trial of the resumed file records the stop as a failure")
    c.finish()


if __name__ == "__main__":
    main()
