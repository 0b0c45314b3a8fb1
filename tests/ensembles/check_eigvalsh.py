"""Cross-check freegap's samplers and eigenvalue step against an outside reference library.

Reference: numpy.linalg.eigvalsh from Debian's python3-numpy (run with /usr/bin/python3). It
calls LAPACK's *heevd/*syevd through its own wrapper and memory layout, so agreement checks
freegap's storage order, triangle convention, normalisation of the dumped matrix and the
driver choice, not just LAPACK against itself.

Usage: /usr/bin/python3 check_eigvalsh.py <build_dir>
The dump tool is <build_dir>/tests/dump_matrices (tests/tools/dump_matrices.cpp documents the
file format). Exit status is non-zero on any failed comparison.
"""

import os
import subprocess
import sys
import tempfile

# One BLAS thread, as freegap runs (one rank per core). Set before numpy loads OpenBLAS.
os.environ["OPENBLAS_NUM_THREADS"] = "1"

import numpy as np  # noqa: E402

MAGIC = b"FGDUMP01"
REAL_DENSE, COMPLEX_DENSE, REAL_DIAGONAL, REAL_VECTOR = 0, 1, 2, 3

# Eigenvalues of the same matrix from two LAPACK call paths differ by rounding only: backward
# stable reduction gives |Δλ| ≲ c·N·ε·‖A‖ (Wilkinson's bound); 1e-10 relative to max|λ| leaves a
# margin of ~10^3 over N·ε at N = 200.
EIG_TOL = 1e-10
# Q from Householder QR is unitary to a few ε·√N; 1e-12 is loose enough for N = 200.
UNITARY_TOL = 1e-12

failures = []


def read_dump(path):
    with open(path, "rb") as f:
        raw = f.read()
    if raw[:8] != MAGIC:
        raise ValueError(f"{path}: not a freegap dump")
    storage, rows, cols = np.frombuffer(raw[8:32], dtype="<u8")
    data = np.frombuffer(raw[32:], dtype="<f8")
    if storage == COMPLEX_DENSE:
        assert data.size == 2 * rows * cols, path
        return data.view("<c16").reshape((int(rows), int(cols)), order="F")
    if storage == REAL_DENSE:
        assert data.size == rows * cols, path
        return data.reshape((int(rows), int(cols)), order="F")
    assert data.size == rows, path
    return data.copy()


def write_dump(path, a):
    a = np.asfortranarray(a)
    storage = COMPLEX_DENSE if np.iscomplexobj(a) else REAL_DENSE
    header = np.array([storage, a.shape[0], a.shape[1]], dtype="<u8")
    payload = a.astype("<c16" if storage == COMPLEX_DENSE else "<f8").ravel(order="F")
    with open(path, "wb") as f:
        f.write(MAGIC + header.tobytes() + payload.tobytes())


def run_tool(tool, args):
    result = subprocess.run([tool] + args, capture_output=True, text=True)
    if result.returncode != 0:
        raise RuntimeError(f"{' '.join([tool] + args)} failed:\n{result.stdout}{result.stderr}")


def check(label, ok, detail):
    print(f"{'ok  ' if ok else 'FAIL'} {label}: {detail}")
    if not ok:
        failures.append(label)


def compare_eigenvalues(label, matrix, prefix):
    """numpy.linalg.eigvalsh(matrix) against both freegap eigenvalue files at prefix."""
    reference = np.linalg.eigvalsh(matrix)  # ascending, like LAPACK
    scale = max(np.max(np.abs(reference)), np.finfo(float).tiny)
    for driver in ("classic", "two_stage"):
        ours = read_dump(f"{prefix}.eig_{driver}.bin")
        if ours.shape != reference.shape:
            check(f"{label} [{driver}]", False, f"shape {ours.shape} vs {reference.shape}")
            continue
        err = np.max(np.abs(ours - reference)) / scale
        check(f"{label} [{driver}]", err <= EIG_TOL,
              f"N={matrix.shape[0]}, max|λ_freegap − λ_numpy|/max|λ| = {err:.2e} "
              f"(tolerance {EIG_TOL:g})")


def check_self_adjoint_structure(label, a):
    """The dumped matrix is exactly Hermitian / symmetric (freegap mirrors the lower triangle)."""
    asym = np.max(np.abs(a - a.conj().T))
    check(f"{label} self-adjoint", asym == 0.0, f"max|A − A^*| = {asym:.1e} (must be exactly 0)")


def main():
    if len(sys.argv) != 2:
        print("usage: check_eigvalsh.py <build_dir>", file=sys.stderr)
        return 2
    tool = os.path.join(sys.argv[1], "tests", "dump_matrices")
    if not os.access(tool, os.X_OK):
        print(f"missing {tool}; build the project first", file=sys.stderr)
        return 1
    n = 200
    key = ["--n", str(n), "--seed", "20261202", "--trial", "3", "--name", "A"]
    with tempfile.TemporaryDirectory(prefix="freegap_eigvalsh_") as tmp:
        cases = [
            ("GUE (complex Hermitian)", ["--kind", "gue"]),
            ("GOE (real symmetric)", ["--kind", "goe"]),
            ("complex Wishart c=1/2", ["--kind", "wishart_complex", "--ratio", "0.5"]),
        ]
        for label, kind_args in cases:
            prefix = os.path.join(tmp, kind_args[1])
            run_tool(tool, ["sample"] + kind_args + key + ["--out", prefix])
            a = read_dump(prefix + ".matrix.bin")
            check(f"{label} shape", a.shape == (n, n), f"{a.shape}")
            check(f"{label} dtype", np.iscomplexobj(a) == (kind_args[1] != "goe"), f"{a.dtype}")
            check_self_adjoint_structure(label, a)
            compare_eigenvalues(label, a, prefix)
        # Normalisation spot checks with a standard error (so a wrong 1/√N or 1/M would show):
        # GUE: E|X_ij|^2 = 1/N off the diagonal. N·|X_ij|^2 is Exp(1) (mean 1, sd 1), so the
        # mean over the n(n−1)/2 independent strictly-lower entries has standard error
        # 1/√(n(n−1)/2).
        g = read_dump(os.path.join(tmp, "gue.matrix.bin"))
        off = g[np.tril_indices(n, -1)]
        m = np.mean(n * np.abs(off) ** 2)
        se = 1.0 / np.sqrt(off.size)
        check("GUE off-diagonal variance", abs(m - 1.0) < 5 * se,
              f"mean N|X_ij|^2 = {m:.4f}, expected 1 ± {5 * se:.4f} (5 standard errors)")

        # Haar unitary: U^*U = I, then a Hermitian matrix U + U^* built here in numpy, written
        # back, and diagonalised by freegap from that file.
        prefix = os.path.join(tmp, "haar")
        run_tool(tool, ["sample", "--kind", "haar_unitary", "--haar", "qr"] + key
                 + ["--out", prefix])
        u = read_dump(prefix + ".matrix.bin")
        dev = np.max(np.abs(u.conj().T @ u - np.eye(n)))
        check("Haar unitary (QR) U^*U = I", dev <= UNITARY_TOL,
              f"max|U^*U − I| = {dev:.2e} (tolerance {UNITARY_TOL:g})")
        h = u + u.conj().T
        write_dump(prefix + "_sum.matrix.bin", h)
        run_tool(tool, ["eig", "--in", prefix + "_sum.matrix.bin", "--out", prefix + "_sum"])
        compare_eigenvalues("U + U^* from a Haar unitary", h, prefix + "_sum")
        # U's eigenvalues lie on the unit circle, so those of U + U^* are 2cos θ ∈ [−2, 2].
        ev = read_dump(prefix + "_sum.eig_classic.bin")
        check("U + U^* spectrum in [−2, 2]", np.all(np.abs(ev) <= 2 + 1e-12),
              f"min {ev.min():.6f}, max {ev.max():.6f}")

    if failures:
        print(f"{len(failures)} comparison(s) failed: {', '.join(failures)}")
        return 1
    print("all comparisons passed")
    return 0


if __name__ == "__main__":
    sys.exit(main())
