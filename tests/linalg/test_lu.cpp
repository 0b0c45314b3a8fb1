// linalg::ComplexLU and linalg::inverse: LU with partial pivoting by LAPACK (zgetrf, zgetrs,
// zgetri), used by the limit solver for its Newton systems and resolvents.
//
// Tolerances: a solve by Gaussian elimination with partial pivoting has a backward error of
// order n·eps·(growth factor) (Higham 2002, "Accuracy and Stability of Numerical Algorithms",
// §9.3; the form recalled from memory). The matrices below are diagonally dominant or tiny, so
// the growth factor is at most 2, and the checks allow 64·n·eps relative to ‖A‖·‖x‖.
#include <gtest/gtest.h>

#include <cmath>
#include <complex>
#include <limits>

#include "freegap/linalg.hpp"

namespace {

namespace linalg = freegap::linalg;
using linalg::CMatrix;
using cd = std::complex<double>;

constexpr double kEps = std::numeric_limits<double>::epsilon();

// A fixed, diagonally dominant complex matrix with entries of every phase (invented for the test).
CMatrix dominant(int n) {
  CMatrix a(n, n);
  for (int i = 0; i < n; ++i) {
    for (int j = 0; j < n; ++j) {
      a(i, j) = cd(std::cos(1.0 + i + 2.0 * j), std::sin(3.0 * i - j)) / double(n);
    }
    a(i, i) += cd(2.0, 0.5 * i);
  }
  return a;
}

TEST(ComplexLU, SolvesToRoundingAndKeepsTheFactorsForMoreSolves) {
  for (int n : {1, 5, 50}) {
    const CMatrix a = dominant(n);
    linalg::ComplexLU lu;
    ASSERT_TRUE(lu.compute(a));
    for (int k = 0; k < 2; ++k) {  // the same factors answer two right-hand sides
      Eigen::VectorXcd x_true(n);
      for (int i = 0; i < n; ++i) x_true(i) = cd(i + 1.0 + k, 0.5 - i);
      const Eigen::VectorXcd b = a * x_true;
      const Eigen::VectorXcd x = lu.solve(b);
      const double bound = 64.0 * n * kEps * a.norm() * x_true.norm();
      EXPECT_LE((a * x - b).norm(), bound) << n;
      EXPECT_LE((x - x_true).norm(), 4.0 * bound) << n;  // well conditioned: κ ≤ 4 here
      // The vector solve is the one-column matrix solve, bit for bit (the same zgetrs call).
      const CMatrix as_matrix = lu.solve(CMatrix(b));
      EXPECT_EQ(x, Eigen::VectorXcd(as_matrix.col(0))) << n;
    }
  }
}

TEST(ComplexLU, InverseTimesTheMatrixIsTheIdentity) {
  for (int n : {2, 5, 9, 40}) {  // pencil sizes and Newton systems
    const CMatrix a = dominant(n);
    const CMatrix inv = linalg::inverse(a);
    const double err = (a * inv - CMatrix::Identity(n, n)).norm();
    EXPECT_LE(err, 64.0 * n * kEps * a.norm() * inv.norm()) << n;
  }
}

TEST(ComplexLU, PivotsPastAZeroLeadingEntry) {
  // [[0, i], [2, 1]] x = [i, 3] has x = (1, 1); without row exchanges the first pivot is 0.
  CMatrix a(2, 2);
  a << cd(0, 0), cd(0, 1), cd(2, 0), cd(1, 0);
  Eigen::VectorXcd b(2);
  b << cd(0, 1), cd(3, 0);
  linalg::ComplexLU lu(a);
  const Eigen::VectorXcd x = lu.solve(b);
  EXPECT_NEAR(std::abs(x(0) - 1.0), 0.0, 4 * kEps);
  EXPECT_NEAR(std::abs(x(1) - 1.0), 0.0, 4 * kEps);
}

TEST(ComplexLU, ExactlySingularGivesFalseAndNaNInsteadOfNumbers) {
  // Rank one with exactly representable entries: elimination leaves an exact 0 pivot.
  CMatrix a(2, 2);
  a << cd(1, 0), cd(2, 0), cd(2, 0), cd(4, 0);
  linalg::ComplexLU lu;
  EXPECT_FALSE(lu.compute(a));
  Eigen::VectorXcd b(2);
  b << cd(1, 0), cd(1, 0);
  EXPECT_FALSE(lu.solve(b).allFinite());
  EXPECT_FALSE(lu.inverse().allFinite());
  EXPECT_FALSE(linalg::inverse(CMatrix::Zero(3, 3)).allFinite());
}

TEST(ComplexLU, EmptyMatrix) {
  linalg::ComplexLU lu;
  EXPECT_TRUE(lu.compute(CMatrix(0, 0)));
  EXPECT_EQ(lu.solve(Eigen::VectorXcd(0)).size(), 0);
  EXPECT_EQ(lu.inverse().size(), 0);
}

}  // namespace
