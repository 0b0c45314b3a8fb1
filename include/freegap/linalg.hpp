// Thin LAPACK/BLAS wrappers: eigenvalues, singular values, QR, polar factor, products.
//
// Matrices are Eigen column-major objects; every routine hands their storage straight to
// LAPACKE/CBLAS (OpenBLAS). No dense linear algebra here is written as loops of our own.
// Routines that take a non-const reference overwrite it (LAPACK works in place; this saves a
// full N×N copy, which matters at N = 4000+: docs/performance.md §6).
#pragma once

#include <Eigen/Core>
#include <complex>
#include <functional>
#include <limits>
#include <span>
#include <string>
#include <vector>

namespace freegap::linalg {

using Index = Eigen::Index;
using CMatrix = Eigen::MatrixXcd;
using RMatrix = Eigen::MatrixXd;
using Vector = Eigen::VectorXd;

/// Which LAPACK driver computes eigenvalues of a Hermitian / real-symmetric matrix.
enum class EigenDriver {
  automatic,  ///< chosen by size through choose_eigen_driver (the one place the choice lives)
  classic,    ///< zheevd / dsyevd (tridiagonal reduction + dsterf when only eigenvalues are asked)
  two_stage,  ///< zheevd_2stage / dsyevd_2stage (band reduction first; eigenvalues only)
};

/// The driver used for `automatic`. Measured with OpenBLAS 0.3.21, one thread
/// (docs/performance.md §2): complex Hermitian two-stage/classic time ratio is
/// 0.91 at N = 500, 0.76 at 1000, 0.62 at 2000, 0.51 at 4000, so two-stage from N ≥ 400;
/// real symmetric two-stage is no faster (1.03 at N = 2000), so the classic driver throughout.
EigenDriver choose_eigen_driver(Index n, bool is_complex);
const char* driver_name(EigenDriver driver, bool is_complex);

/// Eigenvalues of a Hermitian matrix, ascending. Only the lower triangle is read; `a` is destroyed.
Vector eigenvalues(CMatrix& a, EigenDriver driver = EigenDriver::automatic);
/// Eigenvalues of a real symmetric matrix, ascending. Only the lower triangle is read; `a` is destroyed.
Vector eigenvalues(RMatrix& a, EigenDriver driver = EigenDriver::automatic);

/// Eigenvalues of the symmetric tridiagonal matrix with diagonal `diag` and off-diagonal `off`
/// (n − 1 entries), in place in `diag`, ascending (dsterf: Pal–Walker–Kahan QR, O(n²), no
/// vectors); `off` is destroyed. Returns LAPACK's info (0: success) for the caller's message.
int tridiagonal_eigenvalues(std::span<double> diag, std::span<double> off);

/// Eigenvalues of a general square complex matrix (zgeev, no vectors), in LAPACK's order.
/// `a` is destroyed. For non-normal models (circular law) and eigenangles of unitaries.
Eigen::VectorXcd eigenvalues_general(CMatrix& a);

/// Singular values, descending (zgesdd / dgesdd, no vectors). `a` is destroyed.
Vector singular_values(CMatrix& a);
Vector singular_values(RMatrix& a);

/// Haar unitary from a square complex Ginibre matrix Z, in place: Z = QR (zgeqrf + zungqr),
/// then Z ← Q·diag(r_ii/|r_ii|). Without the phase fix Q is not Haar distributed
/// (Mezzadri 2007, "How to generate random matrices from the classical compact groups").
/// Z may be N×r with r < N (thin QR): the result is then a Haar-distributed isometry, the law
/// of r columns of a Haar unitary, and equals the first r columns of the result for any N×N
/// Z whose first r columns are these (Householder QR treats columns left to right).
void haar_from_qr(CMatrix& z);
/// Haar orthogonal from a real Ginibre matrix (square, or N×r for r columns), in place
/// (dgeqrf + dorgqr, sign fix).
void haar_from_qr(RMatrix& z);

/// How haar_isometry orthonormalised its block.
enum class IsometryMethod { cholesky, householder };

/// An N×r Haar-distributed isometry from an N×r Ginibre block Z with 2r ≤ N, in place, by
/// Cholesky QR: R^*R = Z^*Z (zherk + zpotrf), Z ← Z R^(-1) (ztrsm). R's diagonal is positive,
/// so this is, up to rounding, the Q that haar_from_qr returns (its phase correction makes R's
/// diagonal positive; the factorisation with that property is unique for full-rank Z), in about
/// 0.6 of its time (docs/performance.md §3). Orthogonality is lost like κ(Z)²·eps (Yamamoto,
/// Nakatsukasa, Yanagisawa & Fukaya 2015); a Ginibre block with 2r ≤ N has κ near
/// (1 + √(r/N))/(1 − √(r/N)) ≤ 5.9 (Marchenko–Pastur edges). A block with 2r > N, a failed
/// Cholesky factorisation or a 1-norm condition estimate of R (ztrcon) above
/// isometry_condition_limit(r) goes to haar_from_qr instead, so every input gets orthonormal
/// columns to about 1e-14. The choice depends on Z alone, so results stay reproducible.
IsometryMethod haar_isometry(CMatrix& z);
IsometryMethod haar_isometry(RMatrix& z);
/// The largest 1-norm condition estimate of R that haar_isometry accepts: 4(r + 8). Measured on
/// Ginibre blocks N = 2r (docs/performance.md §3): the estimates stay below 1.5(r + 16) (at most
/// 29 at r = 3, 735 at r = 1000, 1690 at r = 2000), while square blocks give 33r and more.
inline double isometry_condition_limit(Index r) {
  return 4.0 * (static_cast<double>(r) + 8.0);
}

/// Name of the algorithm polar_factor uses, for records of how a sample was drawn.
inline constexpr const char* kPolarAlgorithm = "polar:newton-eig";

/// How polar_factor reached its result (for tests and diagnostics).
struct PolarReport {
  int newton_steps = 0;       ///< scaled Newton steps taken (matrix inversions)
  bool svd_fallback = false;  ///< the SVD computed it (singular Z, or no convergence in bound)
};

/// Polar factor U = Z (Z^*Z)^(-1/2) of a square nonsingular Z: one or more scaled Newton steps
/// X ← (ζX + (ζX)^{-*})/2 (Higham 1986), which keep the polar factor and take the condition
/// number κ to about √κ/2, then U = X (X^*X)^(-1/2) from the eigendecomposition of X^*X
/// (zherk + zheevr + 2 zgemm). About κ(Z)·eps accurate, unitary to about N·eps; falls back to
/// polar_factor_svd for a singular Z or when the bounded Newton phase does not end.
/// For a Ginibre Z it is exactly Haar distributed (Z ↦ VZ invariance).
/// `max_newton_steps` bounds the Newton phase (6 reach κ(X)² ≤ 8N from κ(Z) up to about 1e38;
/// a test lowers it to reach the fallback).
inline constexpr int kPolarMaxNewtonSteps = 6;
CMatrix polar_factor(CMatrix z, PolarReport* report = nullptr,
                     int max_newton_steps = kPolarMaxNewtonSteps);
RMatrix polar_factor(RMatrix z, PolarReport* report = nullptr,
                     int max_newton_steps = kPolarMaxNewtonSteps);

/// Polar factor through the SVD Z = W Σ V^*, U = W V^* (zgesdd 'A' + zgemm): the reference the
/// tests compare polar_factor with, and its fallback. About 1.5× the time of polar_factor.
CMatrix polar_factor_svd(CMatrix z);
RMatrix polar_factor_svd(RMatrix z);

/// How a factor enters a product (BLAS's op argument).
enum class Op { none, transpose, adjoint };

/// c ← alpha·op(a)·op(b) + beta·c through zgemm / dgemm. `c` must be sized already when beta ≠ 0;
/// otherwise it is resized.
void gemm(const CMatrix& a, Op op_a, const CMatrix& b, Op op_b, CMatrix& c,
          std::complex<double> alpha = 1.0, std::complex<double> beta = 0.0);
void gemm(const RMatrix& a, Op op_a, const RMatrix& b, Op op_b, RMatrix& c, double alpha = 1.0,
          double beta = 0.0);

/// y ← op(a)·x for one vector x of length op(a).cols() (zgemv / dgemv); y has op(a).rows()
/// entries. With `hermitian` (a square, self-adjoint), y ← a·x from a's lower triangle alone
/// (zhemv / dsymv: half the memory traffic); op is then irrelevant.
void gemv(const CMatrix& a, Op op, bool hermitian, const std::complex<double>* x,
          std::complex<double>* y);
void gemv(const RMatrix& a, Op op, bool symmetric, const double* x, double* y);
/// y ← op(a)·x for a real a and a complex x: the interleaved parts of x form a 2 × len real
/// matrix X and Yᵀ = Xᵀ·op(a)ᵀ is one dgemm (op = transpose or adjoint both mean aᵀ).
void gemv(const RMatrix& a, Op op, const std::complex<double>* x, std::complex<double>* y);

/// Hermitian rank-k update of the lower triangle: c ← alpha·a·a^* + beta·c (zherk), or with
/// `op = adjoint`, c ← alpha·a^*·a + beta·c. The strict upper triangle of c is left untouched;
/// call mirror_lower when a full matrix is needed.
void herk(const CMatrix& a, Op op, CMatrix& c, double alpha = 1.0, double beta = 0.0);
/// Real symmetric rank-k update of the lower triangle (dsyrk); `op = transpose` for aᵀ·a.
void syrk(const RMatrix& a, Op op, RMatrix& c, double alpha = 1.0, double beta = 0.0);

/// Asks the kernel to back [data, data + bytes) by transparent huge pages (madvise
/// MADV_HUGEPAGE on the whole 4 KiB pages inside it), for a buffer that nothing has touched yet.
/// Only large buffers (kHugePageMinBytes and more) are advised. Advice only: the contents and
/// every result stay the same; where the site's kernel has transparent huge pages set to
/// "never" (or lacks them) it does nothing. Why: a fresh N × N sample is mapped by the kernel a
/// 4 KiB page at a time on first touch, which cost 60 % of a GUE draw at N = 4000 on the
/// development machine (docs/performance.md §4, "Fresh pages").
void advise_huge_pages(void* data, std::size_t bytes);
inline constexpr std::size_t kHugePageMinBytes = std::size_t{8} << 20;

/// m.resize(rows, cols) (contents unspecified), then advise_huge_pages on its storage when the
/// size changed: for matrices about to be filled.
template <class Matrix>
void resize_fresh(Matrix& m, Index rows, Index cols) {
  if (m.rows() == rows && m.cols() == cols) return;
  m.resize(rows, cols);
  advise_huge_pages(m.data(), sizeof(typename Matrix::Scalar) * static_cast<std::size_t>(m.size()));
}

/// Copy the lower triangle onto the upper one (conjugated for complex matrices).
/// Takes a matrix or a Map of one.
void mirror_lower(Eigen::Ref<CMatrix> c);
void mirror_lower(Eigen::Ref<RMatrix> c);

/// Polar factor Z (Z^*Z)^(-1/2) = W V^* of an N×r matrix, r ≤ N (thin zgesdd / dgesdd + gemm).
/// For an N×r Ginibre Z it is a Haar-distributed isometry (its law is invariant under Z ↦ VZ
/// for unitary V, and the left-invariant law on the isometries is unique).
CMatrix polar_isometry(CMatrix z);
RMatrix polar_isometry(RMatrix z);

/// The smallest and largest eigenvalue of a Hermitian (real symmetric) operator known only by its
/// products with vectors, by the Lanczos method with full reorthogonalisation (Lanczos 1950;
/// Paige 1971; Parlett 1998, "The Symmetric Eigenvalue Problem", ch. 13 — from memory): the
/// extreme eigenvalues of the Lanczos tridiagonal matrix T_k approach those of the operator
/// from inside, converging fastest at the two ends of the spectrum.
///
/// Stopping rule, checked every step: for both extreme Ritz values θ with unit Ritz vectors y,
/// the cheap residual r = β_k·|e_k^T s| and the gap δ to the next Ritz value give the
/// Kato–Temple estimate r²/δ of |θ − λ|; the iteration stops when both are ≤ tolerance·scale
/// (scale = the larger |θ|, or 1), or when β_k vanishes (an invariant subspace: the Ritz values
/// are eigenvalues). Then y is formed, the operator applied to it once more, θ set to the
/// Rayleigh quotient y^*Ay and r = ‖Ay − θy‖ recomputed from y itself: A has an eigenvalue
/// within r of θ (the residual bound for Hermitian matrices). The run fails, with a reason,
/// when the recomputed estimate r²/δ exceeds 10·tolerance·scale or the iteration reaches
/// max_iterations first. Reorthogonalisation (classical Gram–Schmidt twice, zgemv/dgemv) keeps
/// the basis orthonormal to working accuracy, so no spurious copies of converged values appear.
/// The start vector is the caller's (a random one misses no eigenvector with probability 1).
struct LanczosSettings {
  double tolerance = 1e-12;  ///< relative error estimate to stop at
  int max_iterations = 1000;
};

struct LanczosResult {
  bool converged = false;
  std::string reason;  ///< why not, when not converged
  double min = 0.0, max = 0.0;
  int iterations = 0;
  /// ‖Ay − θy‖, recomputed (NaN when the iteration did not stop)
  double residual_min = std::numeric_limits<double>::quiet_NaN();
  double residual_max = std::numeric_limits<double>::quiet_NaN();
  /// min(r, r²/δ) with the recomputed r, or the last cheap estimates when it did not stop
  double estimate_min = std::numeric_limits<double>::quiet_NaN();
  double estimate_max = std::numeric_limits<double>::quiet_NaN();
};

/// `apply(in, out)` sets out = A·in for vectors of length n (out never aliases in).
using ComplexApply = std::function<void(const std::complex<double>* in, std::complex<double>* out)>;
using RealApply = std::function<void(const double* in, double* out)>;
LanczosResult lanczos_extremes(Index n, const ComplexApply& apply, Eigen::VectorXcd start,
                               const LanczosSettings& settings = {});
LanczosResult lanczos_extremes(Index n, const RealApply& apply, Eigen::VectorXd start,
                               const LanczosSettings& settings = {});

/// LU factorisation with partial pivoting of a square complex matrix (zgetrf), kept for solves
/// (zgetrs) and the inverse (zgetri). Meant for the small matrices of the limit solver (pencil
/// resolvents, Newton systems of a few hundred unknowns). LAPACK chooses pivots by |re| + |im|
/// (izamax), without square roots; measured 1.8x faster than Eigen's partial-pivot LU on 50x50
/// and 2x on inverses of 5x5 (2026-12-05, one core).
class ComplexLU {
 public:
  ComplexLU() = default;
  explicit ComplexLU(const CMatrix& a) { compute(a); }
  /// Factorises a copy of `a`; false when a pivot is exactly zero (solves then give NaN).
  bool compute(const CMatrix& a);
  CMatrix solve(const CMatrix& b) const;
  Eigen::VectorXcd solve(const Eigen::VectorXcd& b) const;
  CMatrix inverse() const;

 private:
  CMatrix lu_;
  std::vector<int> pivots_;
  bool singular_ = false;
};

/// The inverse of a square complex matrix by ComplexLU (NaN entries when exactly singular).
CMatrix inverse(const CMatrix& a);

/// Sets the number of threads OpenBLAS's own routines may use (at least 1), for the whole process.
void set_blas_threads(int threads);

/// The BLAS/LAPACK library actually linked, for benchmark and run-file context blocks.
std::string blas_description();

}  // namespace freegap::linalg
