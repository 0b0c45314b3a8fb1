#!/usr/bin/env python3
"""A storm of SIGKILLs on a 2-rank run: no committed unit is ever lost or changed.

Usage: check_kill_storm.py BUILD_DIR

1. Reference: the job uninterrupted as one plain process.
2. 54 times (at least 50 kills must land on a live run): start `mpirun -np 2 freegap run` on the
   same run file (which resumes it) and SIGKILL either mpirun alone or one of the two ranks alone
   (drawn from a fixed-seed RNG) at a drawn moment: for half of the kills a delay after the
   launch (0.2-1.4 s: start-up, file creation or work), for the other half a delay of 0-0.4 s
   after this session's first commit (watched in the file), so that many kills land among
   commits (at least 20 must). The run's other processes get 0.5 s to leave by themselves
   (mpirun takes the other rank down about 2 s after one dies; the ranks leave about a second
   after mpirun dies); what is left then is killed too, and the test waits until all are gone. After each kill the run file — if it exists yet — must open, and
   every unit committed after the previous kill must still be committed with byte-identical
   rows: its trial rows (moments, min, max, norm, failed, failure_reason), its histogram row,
   below and above counts and its kept spectra. A run that finishes before its kill is compared
   with the reference (h5diff outside /provenance), and the storm continues on a new run file,
   so every kill lands on live work however fast the machine is.
3. The last run file is resumed without a kill: exit 0 and equal to the reference outside
   /provenance.

Time budget: under 3 minutes on 2 cores. Each of the 54 sessions costs MPI's start-up, the
delay and at most 0.5 s of grace; the reference is about 4 s of one core.
"""
import hashlib
import os
import random
import signal
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

import h5py  # noqa: E402
import numpy as np  # noqa: E402

# A scenario of our own: a sample covariance of a sensor array (Wishart) plus independent
# measurement noise (GUE), many short units so that every kill lands among commits.
JOB = """\
name = "sensor covariance under noise"
seed = 4242
sizes = [24, 48]
trials = [600, 600]
expression = "W + X"

[matrices.W]
ensemble = "wishart_complex"
ratio = 0.5

[matrices.X]
ensemble = "gue"

[observe]
bins = 24
range = "auto"
max_moment = 4
keep_spectra = 3

[run]
trials_per_unit = 3
"""

RNG_SEED = 8675309
KILLS = 54
MAX_ATTEMPTS = 90
REQUIRED_KILLS = 50
REQUIRED_AMONG_COMMITS = 20
DELAY = (0.2, 1.4)  # seconds after the launch; MPI's start-up takes a good part of it
AFTER_COMMIT = (0.0, 0.4)  # seconds after the session's first commit
GRACE = 0.5  # mpirun takes about 2 s to stop the other rank, the ranks 1 s to leave a dead mpirun
GONE_TIMEOUT = 20.0

TRIAL_ROWS = ("moments", "min", "max", "norm", "failed", "failure_reason")
UNIT_ROWS = ("unit_histograms", "unit_below", "unit_above")


def committed_units(path):
    """{(size, unit): SHA-256 of the unit's rows} for every committed unit; None if unreadable."""
    try:
        with h5py.File(path, "r") as f:
            out = {}
            for i in range(int(f.attrs["size_count"])):
                g = f["sizes/%d" % i]
                b, t = int(g.attrs["trials_per_unit"]), int(g.attrs["trials"])
                committed = g["unit_committed"][:]
                kept = g["kept_trials"][:]
                for u in np.flatnonzero(committed == 1):
                    lo, hi = int(u) * b, min((int(u) + 1) * b, t)
                    h = hashlib.sha256()
                    for name in TRIAL_ROWS:
                        rows = g[name][lo:hi]
                        h.update(repr(rows.tolist()).encode() if rows.dtype.kind == "O"
                                 else rows.tobytes())
                    for name in UNIT_ROWS:
                        h.update(g[name][int(u)].tobytes())
                    for j in np.flatnonzero((kept >= lo) & (kept < hi)):
                        h.update(g["spectra"][int(j)].tobytes())
                        h.update(g["spectrum_length"][int(j)].tobytes())
                    out[(i, int(u))] = h.hexdigest()
            return out
    except Exception as e:  # noqa: BLE001 - reported by the caller
        print("        | cannot read %s: %s" % (path, e))
        return None


def alive(pids):
    out = []
    for pid in pids:
        try:
            with open("/proc/%d/stat" % pid) as f:
                state = f.read().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if state != "Z":  # a zombie has exited
            out.append(pid)
    return out


def wait_gone(proc):
    """Gives the run's other processes GRACE seconds to leave by themselves, then SIGKILLs what
    is left of the session (a second kill, as a node failure would) and waits until all are gone.
    Returns the names of the processes that had to be killed."""
    end = time.monotonic() + GRACE
    while time.monotonic() < end and alive(rh.session_members(proc.pid)):
        proc.poll()
        time.sleep(0.02)
    left = alive(rh.session_members(proc.pid))
    names = []
    for pid in left:
        try:
            with open("/proc/%d/comm" % pid) as f:
                names.append(f.read().strip())
            os.kill(pid, signal.SIGKILL)
        except (OSError, ProcessLookupError):
            pass
    end = time.monotonic() + GONE_TIMEOUT
    while time.monotonic() < end and alive(rh.session_members(proc.pid)):
        proc.poll()
        time.sleep(0.02)
    rh.reap(proc)
    return names


def wait_first_commit(proc, path, done_before, timeout=30.0):
    """Polls the live file (read-only, locking off) until a unit more than `done_before` is
    committed or the run ends; True if a commit was seen."""
    end = time.monotonic() + timeout
    while time.monotonic() < end and proc.poll() is None:
        state = rh.committed_state(path) if os.path.exists(path) else None
        if state is not None and state[0] > done_before:
            return True
        time.sleep(0.02)
    return False


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("a storm of SIGKILLs on mpirun and single ranks")
    started = time.monotonic()
    with rh.WorkDir("storm") as d:
        rh.write(os.path.join(d, "job.toml"), JOB)
        p = rh.run([exe, "run", "job.toml", "-o", "reference.h5", "--quiet"], d)
        c.equal(p.returncode, 0, "uninterrupted plain reference run exits 0")
        reference = os.path.join(d, "reference.h5")

        rng = random.Random(RNG_SEED)
        generation = 0
        out = "storm-0.h5"
        before = {}
        kills = {"mpirun": 0, "rank": 0}
        landed = lost = changed = unreadable = among_commits = 0
        # A run that ends before its kill lands costs an attempt, not a kill: on a loaded machine
        # more of them end first, so the storm goes on until KILLS kills have landed (at most
        # MAX_ATTEMPTS runs).
        k = -1
        while landed < KILLS and k + 1 < MAX_ATTEMPTS:
            k += 1
            after_commit = k % 2 == 1
            delay = rng.uniform(*(AFTER_COMMIT if after_commit else DELAY))
            target = rng.choice(("mpirun", "rank"))
            which = rng.randrange(2)
            path = os.path.join(d, out)
            proc = rh.start(rh.command(exe, ["run", "job.toml", "-o", out, "--quiet"], 2), d)
            if after_commit:
                wait_first_commit(proc, path, len(before))
            time.sleep(delay)
            hit = proc.poll() is None
            victim = None
            if hit:
                members = alive(rh.session_members(proc.pid))
                ranks = sorted(p for p in members if p != proc.pid)
                victim = proc.pid if target == "mpirun" or len(ranks) < 2 else ranks[which]
                try:
                    os.kill(victim, signal.SIGKILL)
                    kills["mpirun" if victim == proc.pid else "rank"] += 1
                except ProcessLookupError:
                    hit = False
            second = wait_gone(proc)
            c.check(not alive(rh.session_members(proc.pid)),
                    "kill %d: every process of the run is gone" % k)
            now = committed_units(path) if os.path.exists(path) else {}
            if now is None:
                unreadable += 1
                now = {}
            gone = [u for u in before if u not in now]
            differ = [u for u in before if u in now and now[u] != before[u]]
            lost += len(gone)
            changed += len(differ)
            if gone or differ:
                c.check(False, "kill %d: units committed before are still committed and unchanged"
                        % k, "lost %s, changed %s" % (gone[:10], differ[:10]))
            total = rh.committed_state(path) if os.path.exists(path) else None
            print("  -- kill %2d: %s %.2f s after %s: %s" %
                  (k, ("SIGKILL to " + ("mpirun" if victim == proc.pid else "rank")) if hit
                   else "run ended first", delay, "a commit" if after_commit else "the launch",
                   "%d/%d units committed" % total if total else "no run file yet") +
                  ("; then killed %s" % ", ".join(second) if second else ""), flush=True)
            if hit:
                landed += 1
                # Units were committed in this session and it did not finish: killed among them.
                if len(now) > len(before) and total and total[0] < total[1]:
                    among_commits += 1
            if total and total[0] == total[1]:
                rc, diff = rh.h5diff(reference, path)
                c.check(rc == 0, "%s: a storm run that finished equals the reference outside "
                        "/provenance" % out, diff[-1500:])
                generation += 1
                out = "storm-%d.h5" % generation
                now = {}
            before = now

        print("  -- %d kills landed (%d on mpirun, %d on a single rank; %d among commits), "
              "%d run file(s) finished during the storm" %
              (landed, kills["mpirun"], kills["rank"], among_commits, generation))
        c.check(landed >= REQUIRED_KILLS, "at least %d kills landed on a live run (%d)" %
                (REQUIRED_KILLS, landed))
        c.check(among_commits >= REQUIRED_AMONG_COMMITS,
                "at least %d kills landed while the session was committing units (%d)" %
                (REQUIRED_AMONG_COMMITS, among_commits))
        c.check(kills["mpirun"] > 0 and kills["rank"] > 0,
                "kills hit both mpirun and single ranks (%s)" % kills)
        c.equal(unreadable, 0, "the run file opened after every kill")
        c.equal((lost, changed), (0, 0), "no committed unit lost or changed over the storm")

        p = rh.run(rh.command(exe, ["run", "job.toml", "-o", out, "--quiet"], 2), d)
        c.equal(p.returncode, 0, "the last run file resumes without a kill (exit 0)")
        rc, diff = rh.h5diff(reference, os.path.join(d, out))
        c.check(rc == 0, "the last run file equals the plain reference outside /provenance",
                diff[-1500:])
    print("  -- took %.0f s" % (time.monotonic() - started))
    c.finish()


if __name__ == "__main__":
    main()
