// linalg::lanczos_extremes against LAPACK's eigenvalues of the same dense matrices (the operator
// is the matrix itself through a BLAS matrix–vector product), on random Hermitian and real
// symmetric matrices, a matrix with a prescribed spectrum whose extremes are multiple, and the
// failures it must report.
//
// Tolerances: the iteration stops when its error estimate min(r, r²/δ) (Kato–Temple with the
// Ritz gap δ) is ≤ tol·scale and accepts a recomputed estimate up to 10·tol·scale; LAPACK's
// eigenvalues are backward stable, within about N·eps·‖A‖ of the exact ones (common practice:
// Anderson et al. 1999, "LAPACK Users' Guide", §4.7 error bounds, recalled from memory). So
// |θ − λ_LAPACK| ≤ 10·tol·scale + N·eps·scale is asserted, and the rigorous residual bound
// (some eigenvalue lies within r of θ; Parlett 1998, Thm 4.5.1, recalled from memory) is checked
// against the extreme eigenvalue itself: |θ − λ| ≤ r + N·eps·scale.
#include <gtest/gtest.h>

#include <cmath>
#include <complex>
#include <limits>
#include <string>

#include "freegap/linalg.hpp"
#include "freegap/rng.hpp"

namespace {

namespace linalg = freegap::linalg;
namespace rng = freegap::rng;
using linalg::CMatrix;
using linalg::Index;
using linalg::RMatrix;
using Complex = std::complex<double>;

constexpr double kEps = std::numeric_limits<double>::epsilon();

CMatrix random_hermitian(Index n, std::uint64_t trial) {
  rng::Stream s({7, "A", static_cast<std::uint64_t>(n), trial});
  CMatrix a(n, n);
  for (Index j = 0; j < n; ++j) {
    for (Index i = 0; i < n; ++i) a(i, j) = s.complex_normal();
  }
  CMatrix h = (a + a.adjoint()) / std::sqrt(2.0 * static_cast<double>(n));
  return h;
}

RMatrix random_symmetric(Index n, std::uint64_t trial) {
  rng::Stream s({7, "S", static_cast<std::uint64_t>(n), trial});
  RMatrix a(n, n);
  for (Index j = 0; j < n; ++j) {
    for (Index i = 0; i < n; ++i) a(i, j) = s.normal();
  }
  RMatrix h = (a + a.transpose()) / std::sqrt(2.0 * static_cast<double>(n));
  return h;
}

template <class M>
void expect_agrees(const M& a, const linalg::LanczosResult& r, double tol, const std::string& what) {
  M copy = a;
  const linalg::Vector w = linalg::eigenvalues(copy);
  const double scale = std::max(std::abs(w(0)), std::abs(w(w.size() - 1)));
  const double lapack = static_cast<double>(a.rows()) * kEps * scale;
  ASSERT_TRUE(r.converged) << what << ": " << r.reason;
  EXPECT_LE(std::abs(r.min - w(0)), 10 * tol * scale + lapack) << what;
  EXPECT_LE(std::abs(r.max - w(w.size() - 1)), 10 * tol * scale + lapack) << what;
  EXPECT_LE(std::abs(r.min - w(0)), r.residual_min + lapack) << what;
  EXPECT_LE(std::abs(r.max - w(w.size() - 1)), r.residual_max + lapack) << what;
  EXPECT_LE(r.estimate_min, 10 * tol * scale) << what;
  EXPECT_LE(r.estimate_max, 10 * tol * scale) << what;
}

linalg::LanczosResult run_on(const CMatrix& a, const linalg::LanczosSettings& settings,
                             std::uint64_t trial) {
  rng::Stream s({7, "start", static_cast<std::uint64_t>(a.rows()), trial});
  Eigen::VectorXcd start(a.rows());
  s.fill_complex_normal({start.data(), static_cast<std::size_t>(a.rows())});
  const linalg::ComplexApply apply = [&](const Complex* in, Complex* out) {
    linalg::gemv(a, linalg::Op::none, true, in, out);
  };
  return linalg::lanczos_extremes(a.rows(), apply, start, settings);
}

linalg::LanczosResult run_on(const RMatrix& a, const linalg::LanczosSettings& settings,
                             std::uint64_t trial) {
  rng::Stream s({7, "start", static_cast<std::uint64_t>(a.rows()), trial});
  Eigen::VectorXd start(a.rows());
  s.fill_normal({start.data(), static_cast<std::size_t>(a.rows())});
  const linalg::RealApply apply = [&](const double* in, double* out) {
    linalg::gemv(a, linalg::Op::none, true, in, out);
  };
  return linalg::lanczos_extremes(a.rows(), apply, start, settings);
}

TEST(Lanczos, ExtremesOfRandomHermitianMatricesAgreeWithLapack) {
  for (const Index n : {1, 2, 7, 60, 400}) {
    for (std::uint64_t trial = 0; trial < 5; ++trial) {
      const CMatrix a = random_hermitian(n, trial);
      const auto r = run_on(a, {}, trial);
      expect_agrees(a, r, 1e-12, "complex N = " + std::to_string(n));
      EXPECT_LE(r.iterations, n);
    }
  }
}

TEST(Lanczos, ExtremesOfRandomSymmetricMatricesAgreeWithLapack) {
  for (const Index n : {3, 50, 300}) {
    for (std::uint64_t trial = 0; trial < 5; ++trial) {
      const RMatrix a = random_symmetric(n, trial);
      expect_agrees(a, run_on(a, {}, trial), 1e-12, "real N = " + std::to_string(n));
    }
  }
}

TEST(Lanczos, LooserToleranceStopsEarlierAndStaysWithinIt) {
  const CMatrix a = random_hermitian(300, 1);
  const auto tight = run_on(a, {1e-12, 1000}, 1);
  const auto loose = run_on(a, {1e-6, 1000}, 1);
  expect_agrees(a, loose, 1e-6, "tolerance 1e-6");
  EXPECT_LT(loose.iterations, tight.iterations);
}

TEST(Lanczos, MultipleExtremesAndFewDistinctValuesEndInAnInvariantSubspace) {
  // Q diag(d) Q^* with d = −3 (×40), 0.5 (×100), 2 (×60): three distinct eigenvalues, so the
  // Krylov space of a generic start vector is invariant after 3 steps and its Ritz values are
  // the eigenvalues.
  const Index n = 200;
  CMatrix q = random_hermitian(n, 9);  // any matrix; its Q factor is unitary
  linalg::haar_from_qr(q);
  Eigen::VectorXd d(n);
  for (Index i = 0; i < n; ++i) d(i) = i < 40 ? -3.0 : i < 140 ? 0.5 : 2.0;
  const CMatrix a = q * d.asDiagonal() * q.adjoint();
  const auto r = run_on(a, {}, 3);
  ASSERT_TRUE(r.converged) << r.reason;
  EXPECT_LE(r.iterations, 4);
  EXPECT_NEAR(r.min, -3.0, 1e-12);
  EXPECT_NEAR(r.max, 2.0, 1e-12);
}

TEST(Lanczos, TooFewStepsFailWithTheReasonAndTheLastEstimates) {
  const CMatrix a = random_hermitian(300, 2);
  const auto r = run_on(a, {1e-12, 5}, 2);
  EXPECT_FALSE(r.converged);
  EXPECT_EQ(r.iterations, 5);
  EXPECT_EQ(r.reason.rfind("Lanczos did not converge in 5 steps (error estimates ", 0), 0u)
      << r.reason;
  EXPECT_TRUE(std::isfinite(r.estimate_min) && r.estimate_min > 0);
  EXPECT_TRUE(std::isnan(r.residual_min));
}

TEST(Lanczos, ZeroOrWrongStartAndNonFiniteProductsAreReported) {
  const CMatrix a = random_hermitian(10, 0);
  const linalg::ComplexApply apply = [&](const Complex* in, Complex* out) {
    linalg::gemv(a, linalg::Op::none, true, in, out);
  };
  auto r = linalg::lanczos_extremes(10, apply, Eigen::VectorXcd::Zero(10));
  EXPECT_FALSE(r.converged);
  EXPECT_EQ(r.reason, "Lanczos: the start vector is zero or not finite");
  r = linalg::lanczos_extremes(10, apply, Eigen::VectorXcd::Ones(9));
  EXPECT_EQ(r.reason, "Lanczos: the start vector does not have length N");
  const linalg::ComplexApply bad = [](const Complex*, Complex* out) {
    for (int i = 0; i < 10; ++i) out[i] = std::numeric_limits<double>::quiet_NaN();
  };
  r = linalg::lanczos_extremes(10, bad, Eigen::VectorXcd::Ones(10));
  EXPECT_FALSE(r.converged);
  EXPECT_EQ(r.reason, "Lanczos: a product with the expression was not finite at step 1");
}

TEST(Gemv, RealMatrixOnComplexVectorEqualsTheComplexProduct) {
  const RMatrix a = RMatrix::Random(5, 3);
  const Eigen::VectorXcd x = Eigen::VectorXcd::Random(3), xt = Eigen::VectorXcd::Random(5);
  Eigen::VectorXcd y(5), yt(3);
  linalg::gemv(a, linalg::Op::none, x.data(), y.data());
  linalg::gemv(a, linalg::Op::adjoint, xt.data(), yt.data());
  EXPECT_LE((y - a.cast<Complex>() * x).norm(), 1e-14);
  EXPECT_LE((yt - a.transpose().cast<Complex>() * xt).norm(), 1e-14);
}

}  // namespace
