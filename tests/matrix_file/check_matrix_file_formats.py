"""Matrix files written by the reference libraries read back exactly by freegap.

numpy (np.save: float64 in C and Fortran order, complex128, int32, float32), h5py (float64,
complex128 — which h5py stores as a compound of two doubles "r" and "i" — and int64, at the root
and in a group) and scipy.io.mmwrite (a dense real general matrix, a symmetric one, a complex
hermitian one, all in array storage, and sparse matrices in coordinate storage) write files here;
<build_dir>/tests/read_matrix_file (tests/tools/read_matrix_file.cpp) reads each as freegap does
and prints every entry with %.17g, which must parse back to the very same doubles (bit for bit)
as the reference library's own reading of the file (np.load, h5py, scipy.io.mmread).
A few damaged files (a truncated .npy, a .mtx with an index out of range, an .h5 cut short) must
be refused with exit status 2 and a message naming the file.

Run: /usr/bin/python3 check_matrix_file_formats.py <build_dir>
"""
import os
import subprocess
import sys

import numpy as np
import scipy.io
import scipy.sparse

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
import runhelp as rh  # noqa: E402

import h5py  # noqa: E402  (after runhelp, which sets HDF5's environment)

checks = rh.Checks("matrix files written by numpy, h5py and scipy read back exactly")
check = checks.check


def tool_path():
    if len(sys.argv) < 2:
        sys.exit("usage: %s BUILD_DIR" % sys.argv[0])
    tool = os.path.join(os.path.abspath(sys.argv[1]), "tests", "read_matrix_file")
    if not os.access(tool, os.X_OK):
        sys.exit("FAIL: no read_matrix_file at %s (build it first)" % tool)
    return tool


TOOL = tool_path()


def read_with_tool(path, dataset=None):
    """(exit status, matrix or None, stderr)."""
    args = [TOOL, path] + ([dataset] if dataset is not None else [])
    r = subprocess.run(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, timeout=120)
    if r.returncode != 0:
        return r.returncode, None, r.stderr
    lines = r.stdout.split("\n")
    rows, cols, is_complex = (int(w) for w in lines[0].split())
    values = [[float(w) for w in line.split()] for line in lines[1:1 + rows * cols]]
    if is_complex:
        flat = np.array([complex(v[0], v[1]) for v in values], dtype=np.complex128)
    else:
        flat = np.array([v[0] for v in values], dtype=np.float64)
    return 0, flat.reshape(rows, cols), r.stderr


def same_bits(a, b):
    """Equal shapes, kinds and every double's bits (so -0.0 is not 0.0)."""
    a = np.ascontiguousarray(a)
    b = np.ascontiguousarray(b)
    return a.shape == b.shape and a.dtype == b.dtype and np.array_equal(a.view(np.uint64),
                                                                         b.view(np.uint64))


def compare(path, expected, what, dataset=None):
    rc, got, err = read_with_tool(path, dataset)
    if not check(rc == 0, "%s: read (exit 0)" % what, err):
        return
    want = np.asarray(expected)
    want = want.astype(np.complex128 if np.iscomplexobj(want) else np.float64)
    detail = None if got.shape != want.shape else "largest difference %g" % np.max(np.abs(got - want))
    check(same_bits(got, want), "%s: %d × %d, every entry bit for bit as the reference reads it"
          % (what, want.shape[0], want.shape[1]), detail or "shape %s, expected %s" % (got.shape, want.shape))


def refused(path, what, words):
    rc, _, err = read_with_tool(path)
    check(rc == 2 and ("matrix file '%s'" % path) in err and all(w in err for w in words),
          "%s: refused with exit 2, naming the file and %s" % (what, ", ".join(words)),
          "exit %s: %s" % (rc, err))


def awkward(rng, shape):
    """Values whose digits a sloppy reader would change: wide exponents, thirds, -0.0."""
    x = rng.standard_normal(shape) * 10.0 ** rng.integers(-300, 300, shape)
    x.flat[0] = -0.0
    x.flat[-1] = 1.0 / 3.0
    return x


def check_numpy(d, rng):
    a = awkward(rng, (7, 5))
    np.save(os.path.join(d, "c.npy"), a)
    compare(os.path.join(d, "c.npy"), np.load(os.path.join(d, "c.npy")), "np.save float64, C order")
    np.save(os.path.join(d, "f.npy"), np.asfortranarray(a))
    check(np.load(os.path.join(d, "f.npy")).flags.f_contiguous, "numpy wrote f.npy in Fortran order")
    compare(os.path.join(d, "f.npy"), a, "np.save float64, Fortran order")
    z = awkward(rng, (4, 6)) + 1j * awkward(rng, (4, 6))
    np.save(os.path.join(d, "z.npy"), z)
    compare(os.path.join(d, "z.npy"), np.load(os.path.join(d, "z.npy")), "np.save complex128")
    np.save(os.path.join(d, "zf.npy"), np.asfortranarray(z.T))
    compare(os.path.join(d, "zf.npy"), z.T, "np.save complex128, Fortran order")
    n = rng.integers(-2 ** 31, 2 ** 31, (3, 8)).astype(np.int32)
    np.save(os.path.join(d, "n.npy"), n)
    compare(os.path.join(d, "n.npy"), n, "np.save int32")
    s = rng.standard_normal((5, 2)).astype(np.float32)
    np.save(os.path.join(d, "s.npy"), s)
    compare(os.path.join(d, "s.npy"), s.astype(np.float64), "np.save float32")
    b = a.astype(">f8")
    np.save(os.path.join(d, "be.npy"), b)
    compare(os.path.join(d, "be.npy"), a, "np.save big-endian float64")


def check_h5py(d, rng):
    a = awkward(rng, (6, 4))
    z = awkward(rng, (5, 5)) + 1j * awkward(rng, (5, 5))
    n = rng.integers(-2 ** 53, 2 ** 53, (3, 7)).astype(np.int64)
    path = os.path.join(d, "m.h5")
    with h5py.File(path, "w") as f:
        f["A"] = a
        f["Z"] = z
        f["N"] = n
        f.create_group("grp")["B"] = a.T
    with h5py.File(path, "r") as f:
        stored = f["Z"].id.get_type()
        names = [stored.get_member_name(k) for k in range(stored.get_nmembers())] \
            if isinstance(stored, h5py.h5t.TypeCompoundID) else []
        check(names == [b"r", b"i"], "h5py stores complex128 as a compound of r and i",
              str(stored))
        ref = {k: f[k][()] for k in ("A", "Z", "N", "grp/B")}
    compare(path, ref["A"], "h5py float64", "A")
    compare(path, ref["Z"], "h5py complex128 (compound r/i)", "Z")
    compare(path, ref["N"].astype(np.float64), "h5py int64", "N")
    compare(path, ref["grp/B"], "h5py float64 in a group", "/grp/B")
    single = os.path.join(d, "single.h5")
    with h5py.File(single, "w") as f:
        f.create_dataset("only", data=z, chunks=(2, 3), compression="gzip")
    compare(single, z, "h5py complex128, chunked and compressed, the root's only dataset")


def mmread_dense(path):
    m = scipy.io.mmread(path)
    return m.toarray() if scipy.sparse.issparse(m) else np.asarray(m)


def check_scipy(d, rng):
    cases = []
    a = awkward(rng, (4, 6))
    cases.append(("general.mtx", a, {}, "scipy mmwrite real general (array)"))
    s = awkward(rng, (5, 5))
    cases.append(("symmetric.mtx", s + s.T, {"symmetry": "symmetric"},
                  "scipy mmwrite real symmetric (array)"))
    h = awkward(rng, (4, 4)) + 1j * awkward(rng, (4, 4))
    h = h + h.conj().T
    cases.append(("hermitian.mtx", h, {"symmetry": "hermitian"},
                  "scipy mmwrite complex hermitian (array)"))
    sp = scipy.sparse.random(30, 20, density=0.1, random_state=7, format="coo")
    cases.append(("sparse.mtx", sp, {}, "scipy mmwrite sparse real general (coordinate)"))
    sym = scipy.sparse.random(12, 12, density=0.2, random_state=8)
    cases.append(("sparse-symmetric.mtx", (sym + sym.T).tocoo(), {"symmetry": "symmetric"},
                  "scipy mmwrite sparse real symmetric (coordinate)"))
    zs = scipy.sparse.random(9, 7, density=0.3, random_state=9, format="coo")
    zs = (zs + 1j * scipy.sparse.random(9, 7, density=0.3, random_state=10, format="coo")).tocoo()
    cases.append(("sparse-complex.mtx", zs, {}, "scipy mmwrite sparse complex general (coordinate)"))
    ints = scipy.sparse.coo_matrix(rng.integers(-50, 50, (6, 6)) * (rng.random((6, 6)) < 0.4))
    cases.append(("integer.mtx", ints, {"field": "integer"},
                  "scipy mmwrite sparse integer (coordinate)"))
    for name, matrix, options, what in cases:
        path = os.path.join(d, name)
        scipy.io.mmwrite(path, matrix, **options)
        with open(path) as f:
            banner = f.readline().strip()
        want = ("coordinate" if scipy.sparse.issparse(matrix) else "array")
        check(want in banner and options.get("symmetry", "general") in banner,
              "%s: scipy wrote the banner '%s'" % (name, banner))
        compare(path, mmread_dense(path), what)


def check_refusals(d):
    a = np.arange(12.0).reshape(3, 4)
    path = os.path.join(d, "cut.npy")
    np.save(path, a)
    with open(path, "rb") as f:
        data = f.read()
    with open(path, "wb") as f:
        f.write(data[:-10])
    refused(path, "a truncated .npy", ["truncated: expects 96 bytes of data, has 86"])
    path = os.path.join(d, "range.mtx")
    rh.write(path, "%%MatrixMarket matrix coordinate real general\n3 3 2\n1 1 1.0\n4 2 2.0\n")
    refused(path, "a .mtx entry out of range", ["line 4", "row index 4 is out of range 1..3"])
    path = os.path.join(d, "cut.h5")
    with h5py.File(path, "w") as f:
        f["A"] = np.ones((100, 100))
    size = os.path.getsize(path)
    with open(path, "r+b") as f:
        f.truncate(size // 2)
    refused(path, "an .h5 file cut short", ["is not a readable HDF5 file"])
    path = os.path.join(d, "two.h5")
    with h5py.File(path, "w") as f:
        f["A"] = a
        f["B"] = a
    refused(path, "an .h5 file with two datasets and none named", ["A, B", 'dataset = "A"'])


def main():
    rng = np.random.default_rng(20240611)
    with rh.WorkDir("matrix-files") as d:
        check_numpy(d, rng)
        check_h5py(d, rng)
        check_scipy(d, rng)
        check_refusals(d)
    checks.finish()


main()
