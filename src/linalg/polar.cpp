// The polar factor U = Z (Z^*Z)^(-1/2) of a square matrix without a full SVD.
//
// Method ("polar:newton-eig"):
//  1. Scaled Newton steps X ← (ζX + (ζX)^{-*})/2 from X = Z (Higham 1986, "Computing the polar
//     decomposition — with applications", SIAM J. Sci. Stat. Comput. 7). Every iterate has the
//     polar factor of Z: with Z = U H, X_k = U H_k, H_k = (ζH_{k-1} + (ζH_{k-1})^{-1})/2. A
//     singular value σ goes to f(ζσ), f(t) = (t + 1/t)/2; with the optimal ζ = (σ_max σ_min)^(-1/2)
//     (Byers & Xu 2008, "A new scaling for Newton's iteration for the polar decomposition and its
//     backward stability", SIAM J. Matrix Anal. Appl. 30) one step takes κ to (√κ + 1/√κ)/2.
//  2. Once κ(X)² is at most a small multiple of N, U = X (X^*X)^(-1/2) from the eigendecomposition
//     X^*X = V Λ V^* (zherk + zheevr): U = X (S S^*) with S = V Λ^(-1/4) (zherk + zhemm).
//
// Why this split (tests/benchmarks/RESULTS.md, 2026-12-04, one core): an inversion (zgetrf +
// zgetri) costs about 0.7 of a Haar QR sample, zherk + zheevr about 2 (N = 1000) or 1.5
// (N = 2000), a zgemm 0.6, a zherk 0.3. Newton alone needs 6–7 inversions for a Ginibre
// κ ≈ 2N (4.5–5× QR); the eigendecomposition alone on Z^*Z costs less but is only κ(Z)²·eps
// accurate (1e-9 to 1e-8 at N = 2000). One Newton step first makes that κ(X)²·eps ≈ κ(Z)·eps/4
// for one inversion more. QDWH (Nakatsukasa, Bai & Gygi 2010) needs a QR of a 2N×N matrix (2.8× QR
// measured) and then Cholesky steps of about 1.4× QR each: more work on one core.
//
// Accuracy of step 2. The computed X^*X is X^*X + E with ‖E‖ ≲ N·eps‖X‖² at worst, about eps‖X‖² in
// practice (Higham 2002, "Accuracy and Stability of Numerical Algorithms", §3.5), a relative
// perturbation of order κ(X)²·eps on the smallest eigenvalue; to first order the computed U is
// U(I + F) with ‖F‖ ≲ κ(X)²·eps, so both ‖U^*U − I‖ and the distance to the exact polar factor
// are of that order. We demand κ(X)² ≤ 4·kGramFactor·N before step 2 (checked on the computed
// eigenvalues), so both are O(N·eps). For comparison the polar factor itself is only determined to
// about κ(Z)·eps by Z's rounding (Higham 2008, "Functions of Matrices", Thm 8.9, recalled from
// memory: for square Z the absolute condition number of U is at most 1/σ_min, so a relative
// perturbation ε of Z moves U by up to about ε·κ(Z)).
#include <cblas.h>
#include <lapacke.h>

#include <algorithm>
#include <cmath>
#include <complex>
#include <limits>
#include <optional>
#include <string>
#include <type_traits>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "lapack_complex.hpp"

namespace freegap::linalg {

namespace {

constexpr double kEps = std::numeric_limits<double>::epsilon();
// Step 2 runs once κ(X)² ≤ kGramFactor·N is predicted and is accepted up to 4× that (the
// prediction uses norm estimates from below). A Ginibre Z has κ of about 2–3·N, one Newton step
// gives κ(X)² ≈ κ(Z)/4 ≈ 0.6N; a second step is needed when κ(Z) > 4·kGramFactor·N, i.e. when
// √N·σ_min < 1/(2·kGramFactor) (σ_max ≈ 2√N). For a real Ginibre Z that has probability about
// 1/(2·kGramFactor) (P(√N·σ_min < x) ≈ x for small x), for a complex one about
// 1/(2·kGramFactor)² (N·σ_min² is Exp(1)) (Edelman 1988, "Eigenvalues and condition numbers of
// random matrices"; recalled from memory).
constexpr double kGramFactor = 8.0;
// The bound on the Newton steps (kPolarMaxNewtonSteps = 6 by default): each takes κ to about
// √κ/2 at worst, so 6 steps reach κ(X)² ≤ 8N from any κ(Z) below about 1e38, far beyond what an
// inversion in double precision can mean.
// Power-iteration steps for the norm estimates that set ζ (a lower bound after any number; ζ only
// changes the speed, the check on the computed eigenvalues keeps the accuracy).
constexpr int kPowerSteps = 6;

using detail::lp;

// In-place inverse by LU (zgetrf + zgetri); false when singular to working precision.
bool invert(CMatrix& a) {
  const lapack_int n = static_cast<lapack_int>(a.rows());
  std::vector<lapack_int> ipiv(static_cast<std::size_t>(n));
  if (LAPACKE_zgetrf(LAPACK_COL_MAJOR, n, n, lp(a.data()), n, ipiv.data()) != 0) return false;
  return LAPACKE_zgetri(LAPACK_COL_MAJOR, n, lp(a.data()), n, ipiv.data()) == 0;
}
bool invert(RMatrix& a) {
  const lapack_int n = static_cast<lapack_int>(a.rows());
  std::vector<lapack_int> ipiv(static_cast<std::size_t>(n));
  if (LAPACKE_dgetrf(LAPACK_COL_MAJOR, n, n, a.data(), n, ipiv.data()) != 0) return false;
  return LAPACKE_dgetri(LAPACK_COL_MAJOR, n, a.data(), n, ipiv.data()) == 0;
}

// Eigenvalues (ascending) and eigenvectors of the Hermitian matrix whose lower triangle `a`
// holds (zheevr: MRRR, Dhillon & Parlett 2004; the fastest full eigendecomposition here).
bool eigen_decompose(CMatrix& a, Vector& w, CMatrix& v) {
  const lapack_int n = static_cast<lapack_int>(a.rows());
  std::vector<lapack_int> support(2 * static_cast<std::size_t>(n));
  lapack_int found = 0;
  w.resize(n);
  resize_fresh(v, n, n);
  const lapack_int info =
      LAPACKE_zheevr(LAPACK_COL_MAJOR, 'V', 'A', 'L', n, lp(a.data()), n, 0.0, 0.0, 0, 0, 0.0,
                     &found, w.data(), lp(v.data()), n, support.data());
  return info == 0 && found == n;
}
bool eigen_decompose(RMatrix& a, Vector& w, RMatrix& v) {
  const lapack_int n = static_cast<lapack_int>(a.rows());
  std::vector<lapack_int> support(2 * static_cast<std::size_t>(n));
  lapack_int found = 0;
  w.resize(n);
  resize_fresh(v, n, n);
  const lapack_int info = LAPACKE_dsyevr(LAPACK_COL_MAJOR, 'V', 'A', 'L', n, a.data(), n, 0.0,
                                         0.0, 0, 0, 0.0, &found, w.data(), v.data(), n,
                                         support.data());
  return info == 0 && found == n;
}

void gram(const CMatrix& x, CMatrix& g) { herk(x, Op::adjoint, g); }
void gram(const RMatrix& x, RMatrix& g) { syrk(x, Op::transpose, g); }

// y ← op(a)·x (zgemv / dgemv).
void gemv(const CMatrix& a, bool adjoint, const Eigen::VectorXcd& x, Eigen::VectorXcd& y) {
  const std::complex<double> one = 1.0, zero = 0.0;
  const blasint n = static_cast<blasint>(a.rows());
  y.resize(a.rows());
  cblas_zgemv(CblasColMajor, adjoint ? CblasConjTrans : CblasNoTrans, n, n, &one, a.data(), n,
              x.data(), 1, &zero, y.data(), 1);
}
void gemv(const RMatrix& a, bool adjoint, const Eigen::VectorXd& x, Eigen::VectorXd& y) {
  const blasint n = static_cast<blasint>(a.rows());
  y.resize(a.rows());
  cblas_dgemv(CblasColMajor, adjoint ? CblasTrans : CblasNoTrans, n, n, 1.0, a.data(), n,
              x.data(), 1, 0.0, y.data(), 1);
}

// A fixed, generic unit probe vector (no random stream: the sampler's streams stay untouched).
template <class M>
Eigen::Matrix<typename M::Scalar, Eigen::Dynamic, 1> probe(Index n) {
  Eigen::Matrix<typename M::Scalar, Eigen::Dynamic, 1> p(n);
  for (Index i = 0; i < n; ++i) {
    const double t = static_cast<double>(i) + 1.0;
    if constexpr (std::is_same_v<typename M::Scalar, double>) {
      p(i) = std::cos(1.7 * t) + 0.5;
    } else {
      p(i) = std::complex<double>(std::cos(1.7 * t) + 0.5, std::sin(2.3 * t));
    }
  }
  return p / p.norm();
}

// ‖a‖₂ from below: power iteration on a^*a from the probe vector (O(N²) per step).
template <class M>
double norm2_estimate(const M& a) {
  auto v = probe<M>(a.rows());
  decltype(v) w;
  double estimate = 0.0;
  for (int k = 0; k < kPowerSteps; ++k) {
    gemv(a, false, v, w);
    estimate = std::max(estimate, w.stableNorm());
    gemv(a, true, w, v);
    const double size = v.stableNorm();
    if (!(size > 0.0) || !std::isfinite(size)) break;
    v /= size;
  }
  return estimate;
}

// u ← x·p for Hermitian p of which the lower triangle is set (zhemm / dsymm).
void times_hermitian(const CMatrix& x, const CMatrix& p, CMatrix& u) {
  const std::complex<double> one = 1.0, zero = 0.0;
  const blasint n = static_cast<blasint>(x.rows());
  resize_fresh(u, x.rows(), x.rows());
  cblas_zhemm(CblasColMajor, CblasRight, CblasLower, n, n, &one, p.data(), n, x.data(), n, &zero,
              u.data(), n);
}
void times_hermitian(const RMatrix& x, const RMatrix& p, RMatrix& u) {
  const blasint n = static_cast<blasint>(x.rows());
  resize_fresh(u, x.rows(), x.rows());
  cblas_dsymm(CblasColMajor, CblasRight, CblasLower, n, n, 1.0, p.data(), n, x.data(), n, 0.0,
              u.data(), n);
}

// Step 2: U = X P with P = (X^*X)^(-1/2) = S S^*, X^*X = V Λ V^*, S = V Λ^(-1/4) (P by zherk and
// U by zhemm: 1.5 N³ multiply-adds where two zgemm would take 2 N³). Empty when the computed
// κ(X)² = λ_max/λ_min exceeds `limit` (then `kappa2` holds it, +∞ if not positive definite,
// NaN if the eigensolver failed).
template <class M>
std::optional<M> finish_by_eigen(const M& x, double limit, double& kappa2) {
  M g, v;
  Vector w;
  gram(x, g);
  if (!eigen_decompose(g, w, v)) {
    kappa2 = std::numeric_limits<double>::quiet_NaN();  // the eigensolver failed
    return std::nullopt;
  }
  const Index n = x.rows();
  kappa2 = w(0) > 0.0 ? w(n - 1) / w(0) : std::numeric_limits<double>::infinity();
  if (!(kappa2 <= limit)) return std::nullopt;
  const Vector scale = w.array().pow(-0.25).matrix();
  v = v * scale.asDiagonal();  // S, column scaling, O(N^2)
  if constexpr (std::is_same_v<M, CMatrix>) {
    herk(v, Op::none, g);  // lower triangle of S S^*
  } else {
    syrk(v, Op::none, g);
  }
  v = M();  // freed first: at most Z, X, P and U live at once (src/study/study.cpp counts them)
  M u;
  times_hermitian(x, g, u);
  return u;
}

// x ← a·x + b·inverse^* in blocks, so that the transposed read stays in cache (O(N²)).
template <class M>
void newton_combine(M& x, const M& inverse, double a, double b) {
  const Index n = x.rows(), block = 64;
  for (Index j0 = 0; j0 < n; j0 += block) {
    for (Index i0 = 0; i0 < n; i0 += block) {
      const Index nj = std::min(block, n - j0), ni = std::min(block, n - i0);
      x.block(i0, j0, ni, nj) =
          a * x.block(i0, j0, ni, nj) + b * inverse.block(j0, i0, nj, ni).adjoint();
    }
  }
}

// A cheap (O(N²)) guard against a gross failure, e.g. eigenvectors that lost orthogonality:
// ‖U^*U p − p‖₂ for the unit probe p against 64·(N + 1)·eps, the unitarity the tests demand
// (tests/linalg/test_polar.cpp). Failing it costs only the SVD's time, never a wrong sample.
template <class M>
bool passes_probe(const M& u) {
  const auto p = probe<M>(u.rows());
  std::remove_const_t<decltype(p)> y, back;
  gemv(u, false, p, y);
  gemv(u, true, y, back);
  return (back - p).norm() <= 64.0 * static_cast<double>(u.rows() + 1) * kEps;
}

// Steps 1 and 2; empty when Z is singular to working precision or the bound is reached.
template <class M>
std::optional<M> polar_newton_eig(const M& z, int max_steps, PolarReport& report) {
  const Index n = z.rows();
  const double limit = kGramFactor * static_cast<double>(n);
  M x;  // fresh pages advised before the copy touches them (linalg::resize_fresh)
  resize_fresh(x, n, n);
  x = z;
  double kappa2 = std::numeric_limits<double>::infinity();  // predicted κ(X)²
  bool tried_without_newton = false;
  for (;;) {
    if (kappa2 <= limit) {
      std::optional<M> u = finish_by_eigen(x, 4.0 * limit, kappa2);
      if (u) return passes_probe(*u) ? std::move(u) : std::nullopt;
      if (std::isnan(kappa2)) return std::nullopt;
    }
    if (report.newton_steps >= max_steps) return std::nullopt;
    M inverse;
    resize_fresh(inverse, n, n);
    inverse = x;
    if (!invert(inverse) || !inverse.allFinite()) return std::nullopt;
    const double big = norm2_estimate(x), small_inv = norm2_estimate(inverse);
    const double kappa = std::max(1.0, big * small_inv);
    if (kappa * kappa <= limit && report.newton_steps == 0 && !tried_without_newton) {
      tried_without_newton = true;  // well conditioned already (e.g. N = 1): no Newton step
      kappa2 = kappa * kappa;
      continue;
    }
    const double zeta = std::sqrt(small_inv / big);  // (σ_max σ_min)^(-1/2), estimated
    newton_combine(x, inverse, 0.5 * zeta, 0.5 / zeta);
    ++report.newton_steps;
    const double next = 0.5 * (std::sqrt(kappa) + 1.0 / std::sqrt(kappa));
    kappa2 = next * next;
  }
}

template <class M>
M polar_factor_impl(M z, PolarReport* report, int max_steps) {
  if (z.rows() != z.cols()) {
    throw InputError("polar_factor: matrix is " + std::to_string(z.rows()) + "x" +
                     std::to_string(z.cols()) + ", expected a square matrix");
  }
  PolarReport local;
  PolarReport& r = report ? *report : local;
  r = PolarReport{};
  if (z.rows() == 0) return z;
  if (std::optional<M> u = polar_newton_eig(z, max_steps, r)) return std::move(*u);
  r.svd_fallback = true;
  return polar_factor_svd(std::move(z));
}

}  // namespace

CMatrix polar_factor(CMatrix z, PolarReport* report, int max_newton_steps) {
  return polar_factor_impl(std::move(z), report, max_newton_steps);
}

RMatrix polar_factor(RMatrix z, PolarReport* report, int max_newton_steps) {
  return polar_factor_impl(std::move(z), report, max_newton_steps);
}

}  // namespace freegap::linalg
