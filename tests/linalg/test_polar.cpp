// linalg::polar_factor (scaled Newton + eigendecomposition) against the SVD polar factor, on
// Ginibre matrices of several sizes and seeds, on ill-conditioned matrices with a known polar
// factor, and on inputs that must take the SVD fallback.
//
// Tolerances (eps = 2^-52):
//  * Unitarity: ‖U^*U − I‖_max ≤ 64·N·eps. polar_factor accepts its last iterate X only when the
//    computed κ(X)² ≤ 32·N (src/linalg/polar.cpp), and the eigendecomposition step loses
//    unitarity of order κ(X)²·eps; the BLAS products add O(N·eps). c = 64 leaves a factor 2 over
//    that first-order estimate. Measured on the draws below: at most 16.5·N·eps (N ≤ 5), at
//    most 8.2·N·eps from N = 17.
//  * Distance to the reference: the polar factor of a square nonsingular Z has absolute
//    condition number 2/(σ_n + σ_{n−1}) ≤ 1/σ_n in the Frobenius norm for real Z, and at most
//    1/σ_n for complex Z (Higham 2008, "Functions of Matrices", Thm 8.9; recalled from memory),
//    so a relative backward error δ of a method moves U by at most κ(Z)·δ. Both methods here
//    have δ of a few eps at these sizes (their residual ‖Z − U H‖/‖Z‖ is O(eps)), so
//    ‖U − U_ref‖_max ≤ 32·κ(Z)·eps. Measured on the draws below: at most 7.6·κ(Z)·eps (N = 3),
//    0.57·κ(Z)·eps from N = 17.
#include <gtest/gtest.h>

#include <cmath>
#include <complex>
#include <limits>
#include <string>
#include <type_traits>

#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/rng.hpp"
#include "ginibre_helpers.hpp"

namespace {

namespace linalg = freegap::linalg;
using linalg::CMatrix;
using linalg::Index;
using linalg::RMatrix;

constexpr double kEps = std::numeric_limits<double>::epsilon();
constexpr std::uint64_t kSeed = 20261204;

template <class M>
M ginibre(Index n, std::uint64_t trial, const char* name = "polar test") {
  freegap::rng::Stream stream({kSeed, name, static_cast<std::uint64_t>(n), trial});
  return freegap::testing::ginibre_from<M>(stream, n, n);
}

template <class M>
double unitarity_error(const M& u) {
  return freegap::testing::orthogonality_error(u);
}

using freegap::testing::condition_number;

// Z = W diag(σ) V^* with W, V Haar and σ_k = κ^(-k/(n-1)): condition number κ, exact polar
// factor W V^*.
template <class M>
M ill_conditioned(Index n, double kappa, M& exact) {
  M w = ginibre<M>(n, 1, "left"), v = ginibre<M>(n, 2, "right");
  linalg::haar_from_qr(w);
  linalg::haar_from_qr(v);
  linalg::Vector sigma(n);
  for (Index k = 0; k < n; ++k) sigma(k) = std::pow(kappa, -double(k) / double(n - 1));
  M left = w * sigma.asDiagonal(), z;
  linalg::gemm(left, linalg::Op::none, v, linalg::Op::adjoint, z);
  linalg::gemm(w, linalg::Op::none, v, linalg::Op::adjoint, exact);
  return z;
}

template <class M>
class PolarFactor : public ::testing::Test {};
using Kinds = ::testing::Types<CMatrix, RMatrix>;
TYPED_TEST_SUITE(PolarFactor, Kinds);

// Ginibre inputs, N from 1 (no Newton step) to 200 (one or two), three seeds each.
TYPED_TEST(PolarFactor, AgreesWithTheSvdOnGinibreMatrices) {
  using M = TypeParam;
  int newton_paths = 0;
  for (Index n : {1, 2, 3, 5, 17, 64, 200}) {
    for (std::uint64_t trial = 0; trial < 3; ++trial) {
      const M z = ginibre<M>(n, trial);
      linalg::PolarReport report;
      const M u = linalg::polar_factor(z, &report);
      const M reference = linalg::polar_factor_svd(z);
      const double kappa = condition_number(z);
      const std::string where = "N=" + std::to_string(n) + " trial=" + std::to_string(trial);
      EXPECT_FALSE(report.svd_fallback) << where;
      EXPECT_LE(unitarity_error(u), 64.0 * double(n) * kEps) << where;
      EXPECT_LE((u - reference).cwiseAbs().maxCoeff(), 32.0 * kappa * kEps) << where;
      newton_paths += report.newton_steps > 0;
    }
  }
  EXPECT_GE(newton_paths, 9);  // at least the N ≥ 17 draws took the Newton path
}

// κ = 1e10 needs more than one Newton step (κ → 5e4 → 112 → 5.3); the exact factor is known.
TYPED_TEST(PolarFactor, IllConditionedInputTakesMoreNewtonSteps) {
  using M = TypeParam;
  const Index n = 40;
  const double kappa = 1e10;
  M exact;
  const M z = ill_conditioned<M>(n, kappa, exact);
  linalg::PolarReport report;
  const M u = linalg::polar_factor(z, &report);
  EXPECT_FALSE(report.svd_fallback);
  EXPECT_GE(report.newton_steps, 2);
  EXPECT_LE(report.newton_steps, 4);
  EXPECT_LE(unitarity_error(u), 64.0 * double(n) * kEps);
  // Rounding Z itself perturbs it by O(eps) relatively, so the exact factor of the stored Z is
  // within about κ·eps of W V^*: compare both methods with W V^* at 32·κ·eps.
  EXPECT_LE((u - exact).cwiseAbs().maxCoeff(), 32.0 * kappa * kEps);
  EXPECT_LE((linalg::polar_factor_svd(z) - exact).cwiseAbs().maxCoeff(), 32.0 * kappa * kEps);
}

// A zero column makes Z exactly singular: the LU factorisation stops and the SVD answers.
TYPED_TEST(PolarFactor, SingularInputFallsBackToTheSvd) {
  using M = TypeParam;
  const Index n = 6;
  M z = ginibre<M>(n, 7);
  z.col(2).setZero();
  linalg::PolarReport report;
  const M u = linalg::polar_factor(z, &report);
  EXPECT_TRUE(report.svd_fallback);
  EXPECT_EQ(report.newton_steps, 0);
  EXPECT_TRUE(u == linalg::polar_factor_svd(z));
  EXPECT_LE(unitarity_error(u), 64.0 * double(n) * kEps);
}

// κ = 1e10 needs 3 Newton steps; with the bound lowered to 1 the iteration stops and the SVD
// answers.
TYPED_TEST(PolarFactor, NewtonBoundReachedFallsBackToTheSvd) {
  using M = TypeParam;
  const Index n = 40;
  M exact;
  const M z = ill_conditioned<M>(n, 1e10, exact);
  linalg::PolarReport report;
  const M u = linalg::polar_factor(z, &report, 1);
  EXPECT_TRUE(report.svd_fallback);
  EXPECT_EQ(report.newton_steps, 1);
  EXPECT_TRUE(u == linalg::polar_factor_svd(z));
}

// Singular values spread evenly in logarithm from 1 to 1e-300 (N = 30), at the edge of double
// range: within the default bound of Newton steps, or by the fallback, the answer is the exact
// polar factor of this positive diagonal, I.
TYPED_TEST(PolarFactor, ExtremeConditionNumberStillGivesTheFactor) {
  using M = TypeParam;
  const Index n = 30;
  M z = M::Zero(n, n);
  for (Index k = 0; k < n; ++k) z(k, k) = std::pow(10.0, -300.0 * double(k) / double(n - 1));
  linalg::PolarReport report;
  const M u = linalg::polar_factor(z, &report);
  EXPECT_LE(report.newton_steps, linalg::kPolarMaxNewtonSteps);
  EXPECT_LE((u - M::Identity(n, n)).cwiseAbs().maxCoeff(), 64.0 * double(n) * kEps);
}

TYPED_TEST(PolarFactor, EmptyAndNonSquareInputs) {
  using M = TypeParam;
  EXPECT_EQ(linalg::polar_factor(M(0, 0)).size(), 0);
  EXPECT_THROW(linalg::polar_factor(M(M::Zero(2, 3))), freegap::InputError);
}

}  // namespace
