"""Matrices read from files (ensemble = "file") against the same matrices declared otherwise, and
their limit against an independent computation.

1. Bit-identical spectra (and `plan`, which times trials, measures at the sizes that have files): the Toeplitz matrix T_N with coefficients (0.5, 1, 0.3) at N = 40 and
   80, declared by freegap's generator and written by numpy to .npy, by h5py to HDF5 and by
   scipy.io.mmwrite to Matrix Market (one file per size, {N} in the path). The model X + T with a
   GUE X (seed 5, 6 trials, every spectrum kept) gives the same kept spectra, bit for bit, in all
   four runs, on 2 ranks; the three file runs have one job hash (the digest is of the entries).
2. One file of order 30 at N = 60 and 120: the sample is k copies of A on the block diagonal, so
   the kept spectra of F are A's eigenvalues (numpy.linalg.eigvalsh) each k times, to 1e-12.
3. A complex Hermitian matrix in HDF5 (h5py's complex128): the kept spectra equal eigvalsh's.
4. The limit of X + F, X a GUE and F one file of order 200 (`limit --job`): the free additive
   convolution of the semicircle with F's eigenvalue law (Voiculescu 1991), computed here by the
   subordination equation G(z) = G_ν(z − G(z)) (Biane 1997) with G_ν(w) = mean 1/(w − λ_i) over
   numpy's eigenvalues, iterated from ω = z: densities at interior points agree to 1e-7 (freegap
   solves to about 1e-9, docs/check-values.md). Sampled at N = 600 (3 copies of F, 15 trials,
   9,000 eigenvalues) the pooled spectra are within the Kolmogorov distance 1.63/√9000 + 2/N of
   the limit CDF (the 1 % point of the one-sample test, Massey 1951; 2/N for the finite-N bias,
   recalled from memory as in check_toeplitz_free_sum.py).
5. Bad files get exit 2, a message naming the file and the problem, and no run file: a truncated
   .npy, a matrix that is not self-adjoint, a per-size file of the wrong order, a size that one
   file's order does not divide, a .npy with a 1-d array.
6. Editing a file changes the job hash: a run file of the old matrix is not resumed with the new.
7. A report made elsewhere finds the job's files: the job in jobs/ names data/a.npy, the run file
   is written to out/ and reported from the parent directory, where neither place holds data/;
   the run file records the job's directory (/provenance job_directory), so the limit is found.

Run: /usr/bin/python3 check_matrix_from_file.py <build_dir>.
"""
import csv
import os
import sys

import h5py
import numpy as np
import scipy.io
import scipy.sparse

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402
from spectra import kolmogorov_bound, pooled_kolmogorov  # noqa: E402
from subordination import semicircle_free_sum_density  # noqa: E402

COEFFICIENTS = [0.5, 1.0, 0.3]


def toeplitz(n):
    t = np.zeros((n, n))
    for k, c in enumerate(COEFFICIENTS):
        t += c * (np.eye(n, k=k) + (np.eye(n, k=-k) if k else 0))
    return t


def job_text(matrix_lines, sizes, trials, expression="X + T", seed=5):
    return """\
seed = %d
sizes = %s
trials = %d
expression = "%s"
[matrices.X]
ensemble = "gue"
%s
[observe]
keep_spectra = "all"
max_moment = 4
""" % (seed, sizes, trials, expression, matrix_lines)


def kept_spectra(path):
    """Every kept spectrum, by dataset name, as arrays."""
    out = {}
    with h5py.File(path, "r") as h5:
        h5.visititems(lambda name, obj: out.__setitem__(name, np.asarray(obj))
                      if isinstance(obj, h5py.Dataset) and name.endswith("spectra") else None)
        job_hash = h5.attrs.get("job_hash")
    return out, job_hash


def run_job(exe, d, name, text, ranks=2):
    job = rh.write(os.path.join(d, name + ".toml"), text)
    out = os.path.join(d, name + ".h5")
    return rh.run(rh.command(exe, ["run", job, "-o", out, "--quiet"], ranks), d), out


def check_bit_identical(c, exe, d):
    for n in (40, 80):
        t = toeplitz(n)
        np.save(os.path.join(d, "t_%d.npy" % n), t)
        with h5py.File(os.path.join(d, "t_%d.h5" % n), "w") as h5:
            h5["operator"] = t
        scipy.io.mmwrite(os.path.join(d, "t_%d.mtx" % n), t, precision=17)
    generator = 'ensemble = "toeplitz"\ncoefficients = [0.5, 1.0, 0.3]'
    runs = {"generator": "[matrices.T]\n" + generator}
    for ext, extra in (("npy", ""), ("h5", '\ndataset = "operator"'), ("mtx", "")):
        runs[ext] = '[matrices.T]\nensemble = "file"\npath = "t_{N}.%s"%s' % (ext, extra)
    spectra, hashes = {}, {}
    for name, lines in runs.items():
        r, out = run_job(exe, d, "same-" + name, job_text(lines, "[40, 80]", 6))
        if c.check(r.returncode == 0, "X + T with T from %s runs on 2 ranks" % name, r.stderr):
            spectra[name], hashes[name] = kept_spectra(out)
    if len(spectra) != 4:
        return
    reference = spectra["generator"]
    c.check(sum(v.size for v in reference.values()) == 6 * (40 + 80),
            "%d kept eigenvalues per run" % sum(v.size for v in reference.values()))
    for name in ("npy", "h5", "mtx"):
        same = reference.keys() == spectra[name].keys() and all(
            np.array_equal(reference[k], spectra[name][k]) and
            reference[k].tobytes() == spectra[name][k].tobytes() for k in reference)
        c.check(same, "kept spectra from the %s file equal the generator's bit for bit" % name)
    c.check(hashes["npy"] == hashes["h5"] == hashes["mtx"] and hashes["npy"] is not None,
            "the three files give one job hash (%s)" % hashes["npy"])
    # plan times trials at sizes of its own choosing; with a file per size only the job's exist.
    r = rh.run([exe, "plan", os.path.join(d, "same-npy.toml"), "--remeasure", "--calibration",
                os.path.join(d, "calibration.toml")], d)
    c.check(r.returncode == 0 and "measured now at N = 40, 80" in r.stdout,
            "plan measures a per-size file model at the job's own sizes", r.stdout + r.stderr)


def check_repeated_and_complex(c, exe, d):
    rng = np.random.default_rng(2026)  # invented test data
    a = rng.standard_normal((30, 30))
    a = (a + a.T) / 2
    np.save(os.path.join(d, "a30.npy"), a)
    r, out = run_job(exe, d, "repeated",
                     job_text('[matrices.F]\nensemble = "file"\npath = "a30.npy"', "[60, 120]", 2, "F"))
    if c.check(r.returncode == 0, "one file of order 30 at N = 60, 120", r.stderr):
        spectra, _ = kept_spectra(out)
        lam = np.linalg.eigvalsh(a)
        worst, count = 0.0, 0
        for values in spectra.values():
            for row in np.atleast_2d(values):
                k = row.size // 30
                worst = max(worst, np.max(np.abs(np.sort(row) - np.sort(np.repeat(lam, k)))))
                count += 1
        c.check(count == 4 and worst < 1e-12,
                "its spectra are A's eigenvalues repeated N/30 times (%d spectra, %.1e)" % (count, worst))
    h = rng.standard_normal((50, 50)) + 1j * rng.standard_normal((50, 50))
    h = (h + h.conj().T) / 2
    with h5py.File(os.path.join(d, "h50.h5"), "w") as f:
        f["h"] = h
    r, out = run_job(exe, d, "complex",
                     job_text('[matrices.F]\nensemble = "file"\npath = "h50.h5"', "[50]", 2, "F"))
    if c.check(r.returncode == 0, "a complex Hermitian matrix from HDF5", r.stderr):
        spectra, _ = kept_spectra(out)
        lam = np.linalg.eigvalsh(h)
        rows = [row for values in spectra.values() for row in np.atleast_2d(values)]
        worst = max(np.max(np.abs(np.sort(row) - lam)) for row in rows) if rows else 1.0
        c.check(len(rows) == 2 and worst < 1e-12, "its spectra equal eigvalsh's (%.1e)" % worst)


def check_limit(c, exe, d):
    rng = np.random.default_rng(7)  # invented test data: a real symmetric matrix of order 200
    q, _ = np.linalg.qr(rng.standard_normal((200, 200)))
    lam_given = np.concatenate([np.full(100, -1.0), np.linspace(0.5, 2.0, 100)])
    f = (q * lam_given) @ q.T
    f = (f + f.T) / 2
    np.save(os.path.join(d, "f200.npy"), f)
    text = job_text('[matrices.F]\nensemble = "file"\npath = "f200.npy"', "[600]", 15, "X + F", 9)
    job = rh.write(os.path.join(d, "sum.toml"), text)
    r = rh.run([exe, "limit", "--job", job, "-o", "sum-limit", "--points", "81"], d)
    if not c.check(r.returncode == 0, "limit --job of X + F", r.stderr):
        return
    c.check("eigenvalue law of its matrix file" in r.stdout, "limit names F's eigenvalue law", r.stdout)
    with open(os.path.join(d, "sum-limit", "limit.csv")) as fh:
        table = [(float(row["x"]), float(row["density"]), float(row["cdf"])) for row in csv.DictReader(fh)]
    lam = np.linalg.eigvalsh(f)
    worst, compared = 0.0, 0
    for x, density, _ in table:
        if density < 0.02:
            continue
        g_nu = lambda w: np.mean(1.0 / (w - lam))  # noqa: E731
        worst = max(worst, abs(semicircle_free_sum_density(g_nu, x) - density))
        compared += 1
    c.check(compared >= 40 and worst < 1e-7,
            "X + F: density at %d interior points equal to the subordination solve to %.1e"
            % (compared, worst))
    r, out = run_job(exe, d, "sum", text)
    if not c.check(r.returncode == 0, "X + F at N = 600 runs", r.stderr):
        return
    spectra, _ = kept_spectra(out)
    values = np.sort(np.concatenate([v.ravel() for v in spectra.values()]))
    xs = np.array([t[0] for t in table])
    cdf = np.array([t[2] for t in table])
    if c.check(values.size == 600 * 15, "%d kept eigenvalues" % values.size):
        ks = pooled_kolmogorov(values, xs, cdf)
        bound = kolmogorov_bound(values.size, 600)
        c.check(ks < bound, "Kolmogorov distance of the pooled spectra %.4f < %.4f" % (ks, bound))
    rep = rh.run([exe, "report", out, "-o", "sum-report", "--no-figures"], d)
    if c.check(rep.returncode == 0, "and is reported", rep.stderr):
        with open(os.path.join(d, "sum-report", "report.md")) as fh:
            c.check("eigenvalue law of its matrix file" in fh.read(), "the report names F's law")


def check_bad_files(c, exe, d):
    good = toeplitz(40)
    np.save(os.path.join(d, "whole.npy"), good)
    with open(os.path.join(d, "whole.npy"), "rb") as fh:
        data = fh.read()
    with open(os.path.join(d, "cut.npy"), "wb") as fh:
        fh.write(data[: len(data) - 100])
    skew = good.copy()
    skew[3, 7] += 0.25
    np.save(os.path.join(d, "skew.npy"), skew)
    np.save(os.path.join(d, "odd_40.npy"), toeplitz(41))
    np.save(os.path.join(d, "flat.npy"), np.arange(5.0))
    np.save(os.path.join(d, "small.npy"), toeplitz(30))
    cases = [("cut.npy", "[40]", "truncated"),
             ("skew.npy", "[40]", "not self-adjoint"),
             ("odd_{N}.npy", "[40]", "41 × 41"),
             ("small.npy", "[40]", "multiples of 30"),
             ("flat.npy", "[40]", "2-d")]
    for path, sizes, problem in cases:
        name = "bad-" + path.replace("{N}", "N").replace(".", "-")
        r, out = run_job(exe, d, name, job_text('[matrices.T]\nensemble = "file"\npath = "%s"' % path,
                                                sizes, 2))
        file_named = path.replace("{N}", "40") in r.stderr
        c.check(r.returncode == rh.EXIT_BAD_INPUT and file_named and problem in r.stderr and
                "matrices.T.path" in r.stderr and not os.path.exists(out),
                "%s: exit 2 naming the file and '%s', no run file" % (path, problem), r.stderr)


def check_edited_file(c, exe, d):
    np.save(os.path.join(d, "edit.npy"), toeplitz(40))
    text = job_text('[matrices.T]\nensemble = "file"\npath = "edit.npy"', "[40]", 2)
    r, out = run_job(exe, d, "edit", text)
    if not c.check(r.returncode == 0, "a run with edit.npy", r.stderr):
        return
    edited = toeplitz(40)
    edited[0, 0] += 1.0
    np.save(os.path.join(d, "edit.npy"), edited)
    r, _ = run_job(exe, d, "edit", text)
    c.check(r.returncode == rh.EXIT_BAD_INPUT and "edit.h5" in r.stderr,
            "after editing the file the old run file is not resumed (exit %d)" % r.returncode,
            r.stderr)


def check_report_elsewhere(c, exe, d):
    os.makedirs(os.path.join(d, "jobs", "data"), exist_ok=True)
    os.makedirs(os.path.join(d, "out"), exist_ok=True)
    np.save(os.path.join(d, "jobs", "data", "a.npy"), toeplitz(40))
    job = rh.write(os.path.join(d, "jobs", "away.toml"),
                   job_text('[matrices.T]\nensemble = "file"\npath = "data/a.npy"', "[40]", 2))
    out = os.path.join(d, "out", "away.h5")
    r = rh.run(rh.command(exe, ["run", job, "-o", out, "--quiet"], 1), d)
    if not c.check(r.returncode == 0, "a job in jobs/ run into out/", r.stderr):
        return
    with h5py.File(out, "r") as h5:
        recorded = h5["provenance"].attrs.get("job_directory")
    recorded = recorded.decode() if isinstance(recorded, bytes) else recorded
    c.check(recorded == os.path.realpath(os.path.join(d, "jobs")) or
            recorded == os.path.abspath(os.path.join(d, "jobs")),
            "the run file records the job's directory (%s)" % recorded)
    rep = rh.run([exe, "report", out, "-o", "away-report", "--no-figures"], d)
    if c.check(rep.returncode == 0, "reported from the parent directory", rep.stderr):
        with open(os.path.join(d, "away-report", "report.md")) as fh:
            c.check("eigenvalue law of its matrix file" in fh.read(),
                    "the report found data/a.npy through the recorded directory")


def main():
    exe = rh.freegap_exe(sys.argv)
    c = rh.Checks("Matrices from files: same spectra as generators, limit, refusals")
    with rh.WorkDir("matrix-files") as d:
        check_bit_identical(c, exe, d)
        check_repeated_and_complex(c, exe, d)
        check_limit(c, exe, d)
        check_bad_files(c, exe, d)
        check_edited_file(c, exe, d)
        check_report_elsewhere(c, exe, d)
    c.finish()


if __name__ == "__main__":
    main()
