#!/usr/bin/env python3
"""Damaged run files never crash, hang or pass off changed numbers (docs/run-file.md, "Checksums").

Usage: check_damaged_run_files.py BUILD_DIR [COPIES]

1. Runs a small job (2 sizes, 6 units each, kept spectra) to a finished run file and dumps
   everything a reader gets from it (tests/tools/dump_run_file.cpp: every committed unit's
   values, bit for bit).
2. Makes COPIES (default 1000) damaged copies with a fixed-seed RNG: random bytes (1 to 16)
   overwritten at one to three random places, or the file truncated at a random length.
3. Puts the copies through the commands, two at a time (time budget: under 4 minutes on 2 free
   cores; measured: about 1,950 commands taking 241 s of CPU in all, so about 2.5 minutes of wall
   time on 2 free cores; 9.9 minutes on a 2-core machine loaded 5-8 by other work). A smaller
   campaign: give COPIES.
   - every copy: `freegap inspect --verify`, then, unless it refused the copy, the dump (the
     reading path of inspect and report, after the same check);
   - every 10th copy: `freegap inspect`, `inspect --moments` and a resume (`freegap run` of the
     same job on the copy); every 20th copy also `report --no-figures`.
   Each command must end by itself within 10 s (else a hang), never by a signal nor with
   status 134 or 139 (a crash), and with an expected status: 0 or 2 (refused); 4 from --verify
   when it names damaged units.
4. No silent wrong result: whenever the dump succeeds, every unit it returns equals the
   original's bit for bit, and every unit of the original it does not return is named damaged
   (then --verify must also exit 4 naming it). A copy --verify passes (exit 0) reads exactly as
   the original. A resume that exits 0 leaves a file that dumps exactly as the original: damaged
   units were computed again to the same bits.
"""
import concurrent.futures
import os
import random
import shutil
import signal
import subprocess
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

# A scenario of our own: two coupled resonator banks with levels ±1, mixed by a random basis.
JOB = rh.fixture_job("rotated-two-level", """\
name = "coupled resonator banks"
seed = 4242
sizes = [12, 20]
trials = 24
""", """\

[observe]
bins = 16
range = "auto"
max_moment = 4
keep_spectra = 2

[run]
trials_per_unit = 4
""")

SEED = 20261203
# 10 s, times FREEGAP_TEST_TIME_SCALE when set (tests/run_sanitized.sh: 10, for the sanitizers'
# slowdown).
HANG_SECONDS = 10 * float(os.environ.get("FREEGAP_TEST_TIME_SCALE", "1"))
FULL_EVERY = 10  # every 10th copy also goes through inspect, --moments and a resume
REPORT_EVERY = 20  # every 20th copy also through report --no-figures
CRASH_STATUSES = {134, 139}


def run_timed(cmd, cwd):
    """(status or 'hang', stdout, stderr, seconds); a hang is killed with its process group."""
    start = time.monotonic()
    # The checking child gives up after 5 s without progress (the default is 60 s, for slow file
    # systems): a read HDF5 never finishes is then a refusal well inside HANG_SECONDS.
    p = subprocess.Popen(cmd, cwd=cwd, env=rh.child_env(FREEGAP_CHECK_STALL_SECONDS="5"),
                         stdout=subprocess.PIPE,
                         stderr=subprocess.PIPE, text=True, errors="replace",
                         start_new_session=True)
    try:
        out, err = p.communicate(timeout=HANG_SECONDS)
        return p.returncode, out, err, time.monotonic() - start
    except subprocess.TimeoutExpired:
        os.killpg(p.pid, signal.SIGKILL)
        out, err = p.communicate()
        return "hang", out, err, time.monotonic() - start


def parse_dump(text):
    header, damaged, units = [], set(), {}
    for line in text.splitlines():
        if line.startswith("unit "):
            parts = line.split(" ", 3)
            units[(int(parts[1]), int(parts[2]))] = line
        elif line.startswith("damaged "):
            parts = line.split()
            damaged.add((int(parts[1]), int(parts[2])))
        elif line.startswith("header checksummed"):
            continue  # a damaged version attribute may read as unverified: checked separately
        else:
            header.append(line)
    return header, damaged, units


def damage(original, path, rng):
    data = bytearray(original)
    mode = rng.random()
    if mode < 0.2:
        cut = rng.randrange(0, len(data))
        del data[cut:]
        what = "truncated at %d" % cut
    else:
        places = []
        for _ in range(rng.choice((1, 1, 2, 3))):
            count = rng.choice((1, 2, 4, 8, 16, 16))
            at = rng.randrange(0, len(data) - count)
            data[at:at + count] = bytes(rng.randrange(256) for _ in range(count))
            places.append("%d bytes at %d" % (count, at))
        what = ", ".join(places)
    with open(path, "wb") as f:
        f.write(data)
    return what, bytes(data) != original


def main():
    exe = rh.freegap_exe(sys.argv)
    dump_tool = os.path.join(os.path.abspath(sys.argv[1]), "tests", "dump_run_file")
    copies = int(sys.argv[2]) if len(sys.argv) > 2 else 1000
    c = rh.Checks("damaged run files: %d copies, no crash, no hang, no silent change" % copies)
    with rh.WorkDir("damaged") as d:
        job = rh.write(os.path.join(d, "job.toml"), JOB)
        good = os.path.join(d, "good.h5")
        r = rh.run([exe, "run", job, "-q", "-o", good], d)
        if not c.equal(r.returncode, 0, "the original run finishes"):
            print(r.stderr)
            return c.finish()
        r = rh.run([dump_tool, good], d)
        c.equal(r.returncode, 0, "the original dumps")
        head0, damaged0, units0 = parse_dump(r.stdout)
        c.check(not damaged0 and len(units0) == 12, "the original: 12 committed units, none damaged")
        r = rh.run([exe, "inspect", "--verify", good], d)
        c.equal(r.returncode, 0, "the original passes --verify")
        original = open(good, "rb").read()

        rng = random.Random(SEED)
        plans = []
        for k in range(copies):
            path = os.path.join(d, "copy%04d.h5" % k)
            what, changed = damage(original, path, rng)
            plans.append((k, path, what, changed))

        problems = {"crash": [], "hang": [], "status": [], "silent": [], "resume": []}
        counts = {"refused": 0, "named": 0, "intact": 0, "commands": 0, "repaired": 0,
                  "contained": 0}

        def check_copy(plan):
            k, path, what, changed = plan
            found = []
            results = {}
            cmds = [("verify", [exe, "inspect", "--verify", path], {0, 2, 4}),
                    ("dump", [dump_tool, path], {0, 2})]
            if k % FULL_EVERY == 0:
                cmds += [("inspect", [exe, "inspect", path], {0, 2}),
                         ("moments", [exe, "inspect", "--moments", path], {0, 2})]
            if k % REPORT_EVERY == 0:
                rdir = os.path.join(d, "report%04d" % k)
                cmds += [("report", [exe, "report", "--no-figures", "--bootstrap", "20",
                                     "--fit-bootstrap", "20", "-o", rdir, path], {0, 2})]
            ran = 0
            for name, cmd, allowed in cmds:
                if name == "dump" and results["verify"][0] == 2:
                    results[name] = (2, "", "")
                    continue  # refused: the dump goes through the same check
                ran += 1
                status, out, err, _ = run_timed(cmd, d)
                results[name] = (status, out, err)
                if name == "verify" and "killed the process that checks it" in err:
                    found.append(("contained", None))
                tag = "copy %d (%s): %s" % (k, what, name)
                if status == "hang":
                    found.append(("hang", tag))
                elif status < 0 or status in CRASH_STATUSES:
                    found.append(("crash", "%s: status %s: %s" % (tag, status, err.strip()[-300:])))
                elif status not in allowed:
                    found.append(("status", "%s: status %s: %s" % (tag, status, err.strip()[-300:])))
            dump_status, dump_out, _ = results["dump"]
            verdict = "refused"
            if dump_status == 0:
                head, damaged, units = parse_dump(dump_out)
                wrong = [key for key, line in units.items() if units0.get(key) != line]
                missing = [key for key in units0 if key not in units and key not in damaged]
                if head != head0 or wrong or missing:
                    found.append(("silent", "copy %d (%s): header differs: %s, changed units %s, "
                                  "unnamed missing units %s" % (k, what, head != head0, wrong,
                                                                missing)))
                verdict = "named" if damaged else "intact"
                v_status, v_out, _ = results["verify"]
                if damaged and (v_status != 4 or any(
                        "N = %d, unit %d:" % ((12, 20)[s], u) not in v_out for s, u in damaged)):
                    found.append(("silent", "copy %d (%s): --verify status %s does not name %s"
                                  % (k, what, v_status, sorted(damaged))))
                if not damaged and v_status != 0:
                    found.append(("status", "copy %d (%s): dump clean but --verify status %s"
                                  % (k, what, v_status)))
            if k % FULL_EVERY == 0:
                ran += 1
                # The resume last: it writes to the copy.
                status, out, err, _ = run_timed([exe, "run", job, "-q", "-o", path], d)
                tag = "copy %d (%s): resume" % (k, what)
                if status == "hang":
                    found.append(("hang", tag))
                elif status < 0 or status in CRASH_STATUSES:
                    found.append(("crash", "%s: status %s: %s" % (tag, status, err.strip()[-300:])))
                elif status not in (0, 2):
                    found.append(("status", "%s: status %s: %s" % (tag, status, err.strip()[-300:])))
                elif status == 0:
                    after, dumped, _, _ = run_timed([dump_tool, path], d)
                    head, damaged, units = parse_dump(dumped)
                    if after != 0 or damaged or units != units0 or head != head0:
                        found.append(("resume", "%s: exit 0 but the file then dumps as %s, "
                                      "damaged %s, %d of 12 units equal" % (
                                          tag, after, sorted(damaged),
                                          sum(units.get(key) == line
                                              for key, line in units0.items()))))
                    elif verdict == "named":
                        found.append(("repaired", tag))
            return k, verdict, found, ran

        start = time.monotonic()
        with concurrent.futures.ThreadPoolExecutor(max_workers=2) as pool:
            for k, verdict, found, ncmd in pool.map(check_copy, plans):
                counts[verdict] += 1
                counts["commands"] += ncmd
                for kind, text in found:
                    if kind in ("repaired", "contained"):
                        counts[kind] += 1
                    else:
                        problems[kind].append(text)
        elapsed = time.monotonic() - start
        cpu = os.times()
        print("  %d copies, %d commands in %.0f s (children's CPU %.0f s): %d refused (%d of them "
              "because reading killed the checking process), %d with named damaged units (%d of "
              "those resumed to the original's bits), %d read exactly as the original"
              % (copies, counts["commands"], elapsed, cpu.children_user + cpu.children_system,
                 counts["refused"], counts["contained"], counts["named"], counts["repaired"],
                 counts["intact"]), flush=True)
        for kind, what in [("crash", "no command died by a signal or with status 134/139"),
                           ("hang", "no command ran over %d s" % HANG_SECONDS),
                           ("status", "every status is one the command documents"),
                           ("silent", "no changed number got through unnamed"),
                           ("resume", "every resume that exits 0 restores the original's bits")]:
            c.check(not problems[kind], what, "\n".join(problems[kind][:20]))
        c.check(counts["named"] > 0, "some copies have damaged units named and the rest read")
        c.check(counts["repaired"] > 0, "some resumes computed damaged units again")
    return c.finish()


if __name__ == "__main__":
    sys.exit(main())
