// linalg::haar_isometry: Cholesky QR of N×r Ginibre blocks (2r ≤ N) against the phase-corrected
// Householder QR of the same block (linalg::haar_from_qr, Mezzadri 2007), and the fall-back to
// Householder where Cholesky QR would lose orthogonality.
//
// Tolerances (eps = 2^-52). Cholesky QR loses orthogonality like κ₂(Z)²·eps to first order
// (Yamamoto, Nakatsukasa, Yanagisawa & Fukaya 2015; the form of their bound recalled from
// memory, its constants not), and Q = Z R^(-1) moves by the same order from the Householder Q
// (R's relative error is O(κ₂(Z)²·eps) through the Gram matrix). Both checks use
// 16·κ₂(Z)²·eps + 64·r·eps, κ₂(Z) from the singular values of the block. Measured over the draws
// below: at most 4.6·κ₂²·eps for the orthogonality and 2.5·κ₂²·eps for the distance (real 6 × 3).
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <string>

#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/rng.hpp"
#include "ginibre_helpers.hpp"

namespace {

namespace linalg = freegap::linalg;
using linalg::CMatrix;
using linalg::Index;
using linalg::IsometryMethod;
using linalg::RMatrix;

constexpr double kEps = std::numeric_limits<double>::epsilon();
constexpr std::uint64_t kSeed = 20261205;

template <class M>
M ginibre(Index n, Index r, std::uint64_t trial) {
  freegap::rng::Stream stream({kSeed, "isometry test", static_cast<std::uint64_t>(n * 1000 + r),
                               trial});
  return freegap::testing::ginibre_from<M>(stream, n, r);
}

using freegap::testing::condition_number;
using freegap::testing::orthogonality_error;

template <class M>
class HaarIsometry : public ::testing::Test {};
using Kinds = ::testing::Types<CMatrix, RMatrix>;
TYPED_TEST_SUITE(HaarIsometry, Kinds);

// Blocks with 2r ≤ N, from 2 × 1 (where κ₂ varies most from draw to draw) to 400 × 200. A draw
// on the Cholesky route has the Householder Q with the phase correction, within the bound; a
// draw that falls back is ill-conditioned (κ₂ > 10) and gets Householder's bits. From 33 × 16 on
// no draw falls back (the condition estimates stay far below the limit there).
TYPED_TEST(HaarIsometry, CholeskyQrIsThePhaseCorrectedHouseholderQ) {
  using M = TypeParam;
  struct Shape { Index n, r; int trials; };
  double worst_orth = 0.0, worst_dist = 0.0;
  for (const Shape s : {Shape{2, 1, 2000}, Shape{4, 2, 2000}, Shape{6, 3, 2000},
                        Shape{11, 5, 500}, Shape{33, 16, 200}, Shape{100, 50, 20},
                        Shape{400, 200, 3}, Shape{400, 7, 3}}) {
    int fallbacks = 0;
    for (int t = 0; t < s.trials; ++t) {
      const M z = ginibre<M>(s.n, s.r, static_cast<std::uint64_t>(t));
      M q = z, reference = z;
      const IsometryMethod method = linalg::haar_isometry(q);
      linalg::haar_from_qr(reference);
      const double k = condition_number(z);
      const std::string where = std::to_string(s.n) + "x" + std::to_string(s.r) + " trial " +
                                std::to_string(t) + " kappa " + std::to_string(k);
      if (method == IsometryMethod::householder) {
        ++fallbacks;
        ASSERT_GT(k, 10.0) << where;
        ASSERT_EQ((q - reference).cwiseAbs().maxCoeff(), 0.0) << where;
        continue;
      }
      const double unit = k * k * kEps;
      const double bound = 16.0 * unit + 64.0 * double(s.r) * kEps;
      const double orth = orthogonality_error(q), dist = (q - reference).cwiseAbs().maxCoeff();
      ASSERT_LE(orth, bound) << where;
      ASSERT_LE(dist, bound) << where;
      worst_orth = std::max(worst_orth, orth / unit);
      worst_dist = std::max(worst_dist, dist / unit);
    }
    if (s.n >= 33) {
      EXPECT_EQ(fallbacks, 0) << s.n << "x" << s.r;
    }
    EXPECT_LE(fallbacks * 50, s.trials) << s.n << "x" << s.r;  // at most 2 % of the draws
    std::printf("%ldx%ld: %d of %d draws fell back\n", long(s.n), long(s.r), fallbacks, s.trials);
  }
  std::printf("worst orthogonality %.2f kappa^2 eps, distance %.2f kappa^2 eps\n", worst_orth,
              worst_dist);
}

// More than half the columns, or a block whose condition estimate is beyond the limit: the
// Householder route, with orthonormal columns all the same.
TYPED_TEST(HaarIsometry, FallsBackToHouseholderWhereCholeskyWouldLoseOrthogonality) {
  using M = TypeParam;
  M wide = ginibre<M>(10, 6, 0), reference = wide;
  EXPECT_EQ(linalg::haar_isometry(wide), IsometryMethod::householder);
  linalg::haar_from_qr(reference);
  EXPECT_EQ((wide - reference).cwiseAbs().maxCoeff(), 0.0);  // the same routine, the same bits

  // Two columns 1e-6 apart: κ₂ ≈ 1e6, so Cholesky QR would lose orthogonality to about 1e-4;
  // the 1-norm condition estimate (≈ 1e6) is far above the limit 4(r + 8) = 48.
  M close = ginibre<M>(20, 4, 1);
  close.col(3) = close.col(2) + 1e-6 * close.col(0);
  ASSERT_GT(condition_number(close), 1e5);
  M q = close;
  EXPECT_EQ(linalg::haar_isometry(q), IsometryMethod::householder);
  EXPECT_LE(orthogonality_error(q), 64.0 * 4.0 * kEps);

  // Rank deficient: zpotrf / dpotrf fails or the estimate is infinite; Householder still gives
  // orthonormal columns.
  M singular = ginibre<M>(20, 4, 2);
  singular.col(3) = singular.col(1);
  EXPECT_EQ(linalg::haar_isometry(singular), IsometryMethod::householder);
  EXPECT_LE(orthogonality_error(singular), 64.0 * 4.0 * kEps);

  M none(5, 0);
  EXPECT_EQ(linalg::haar_isometry(none), IsometryMethod::cholesky);  // nothing to do
  M tall_not(3, 4);
  EXPECT_THROW(linalg::haar_isometry(tall_not), freegap::InputError);
}

}  // namespace
