// The two-projection model c + s·P + t·U P U^* (include/freegap/tridiagonal.hpp): the β-Jacobi
// corner against dense Haar corners, the 2×2-block algebra against dense matrices, the
// tridiagonal matrix's eigenvalues (Sturm counts, bisection, band moments) against LAPACK, and the
// N = 10^6 spectrum of B + U B U^* against the arcsine law. Fixed seeds; stochastic tolerances
// are stated critical values or multiples of standard errors of stated sample sizes.
#include <gtest/gtest.h>
#include <lapacke.h>

#include <algorithm>
#include <cmath>
#include <numbers>
#include <string>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/observe.hpp"
#include "freegap/tridiagonal.hpp"
#include "stat_helpers.hpp"

namespace {

namespace tri = freegap::tridiagonal;
namespace ens = freegap::ensembles;
namespace obs = freegap::observe;
using freegap::testing::ks_two_sample;
using freegap::testing::ks_two_sample_critical_001;
using Eigen::Index;

constexpr std::uint64_t kSeed = 20261204;

tri::TwoProjectionSpec spec(double beta, Index rank, double s, double t, double shift) {
  tri::TwoProjectionSpec p;
  p.beta = beta;
  p.rank = rank;
  p.s = s;
  p.t = t;
  p.shift = shift;
  p.name = "U";
  return p;
}

// The Haar sampler of the dense path (corrected QR), as a complex matrix (real ones promoted).
Eigen::MatrixXcd dense_haar(double beta, Index n, std::uint64_t trial) {
  ens::MatrixSpec m;
  m.name = "U";
  m.kind = beta == 2.0 ? ens::Kind::haar_unitary : ens::Kind::haar_orthogonal;
  const ens::Sample s = ens::Sampler(m).draw(n, kSeed, trial);
  if (s.storage == ens::Sample::Storage::complex_dense) return s.complex;
  return s.real.cast<std::complex<double>>();
}

// Singular values of an upper bidiagonal matrix by LAPACK dbdsqr (no vectors), descending.
std::vector<double> bidiagonal_singular_values(const Eigen::VectorXd& d, const Eigen::VectorXd& e) {
  std::vector<double> dd(d.data(), d.data() + d.size());
  std::vector<double> ee(e.data(), e.data() + e.size());
  const auto m = static_cast<lapack_int>(dd.size());
  if (m == 0) return dd;
  ee.resize(static_cast<std::size_t>(m));  // dbdsqr wants room for m − 1 (+ workspace)
  const lapack_int info =
      LAPACKE_dbdsqr(LAPACK_COL_MAJOR, 'U', m, 0, 0, 0, dd.data(), ee.data(), nullptr, 1,
                     nullptr, 1, nullptr, 1);
  EXPECT_EQ(info, 0);
  return dd;
}

std::vector<double> squares(const std::vector<double>& x) {
  std::vector<double> out;
  for (const double v : x) out.push_back(v * v);
  return out;
}

// ---- the β-Jacobi corner against dense Haar corners ---------------------------------------------

struct CornerCase {
  double beta;
  Index n, k;
  int trials;
};

// Pooled squared singular values of the k×k corner, model against dense QR Haar samples, by the
// two-sample KS statistic (common practice) at level 0.001 (critical value 1.949·√((a + b)/(ab)),
// stat_helpers.hpp). Values pooled within a trial are not independent; eigenvalues repel, so the
// pooled empirical CDF fluctuates less than an iid sample of that size and the iid critical value
// is conservative. Measured when written: 0.008 (N = 200, both β), 0.003–0.010 (N = 1000). Power,
// measured by breaking the model once: with b = N − k in place of N − 2k the statistics were
// 0.10–0.24 and every case failed; errors of order 1/N in the parameters (b + 2, or β = 2's
// exponents for β = 1) move the bulk too little for this test and are caught by the edge test
// below (statistics 0.16–0.24 against 0.071).
void expect_corner_law(const CornerCase& c) {
  std::vector<double> model, dense;
  for (int trial = 0; trial < c.trials; ++trial) {
    const auto corner = tri::sample_jacobi_corner(c.beta, c.k, c.n, kSeed, 1000 + trial, "U");
    for (const double v : squares(bidiagonal_singular_values(corner.cos_diag, corner.cos_super))) {
      model.push_back(v);
    }
    const Eigen::MatrixXcd u = dense_haar(c.beta, c.n, static_cast<std::uint64_t>(trial));
    Eigen::MatrixXcd block = u.topLeftCorner(c.k, c.k);
    const Eigen::VectorXd sv = freegap::linalg::singular_values(block);
    for (Index i = 0; i < sv.size(); ++i) dense.push_back(sv[i] * sv[i]);
  }
  const double na = static_cast<double>(model.size()), nb = static_cast<double>(dense.size());
  const double d = ks_two_sample(model, dense);
  ::testing::Test::RecordProperty("ks_beta" + std::to_string(static_cast<int>(c.beta)) + "_n" +
                                      std::to_string(c.n) + "_k" + std::to_string(c.k),
                                  std::to_string(d));
  EXPECT_LT(d, ks_two_sample_critical_001(na, nb))
      << "beta " << c.beta << ", N = " << c.n << ", k = " << c.k << ": " << na << " and " << nb
      << " values";
}

// N = 200, k = 60: 40 trials, 2400 values a side (critical value 0.056).
TEST(JacobiCorner, UnitaryCornerMatchesDenseHaarAt200) { expect_corner_law({2.0, 200, 60, 40}); }
TEST(JacobiCorner, OrthogonalCornerMatchesDenseHaarAt200) { expect_corner_law({1.0, 200, 60, 40}); }
// N = 1000, k = 500 (a = 0, b = 0: the square corner) and k = 250: 4 trials, 2000 / 1000 values.
TEST(JacobiCorner, UnitaryCornerMatchesDenseHaarAt1000) {
  expect_corner_law({2.0, 1000, 500, 4});
  expect_corner_law({2.0, 1000, 250, 4});
}
TEST(JacobiCorner, OrthogonalCornerMatchesDenseHaarAt1000) {
  expect_corner_law({1.0, 1000, 500, 4});
  expect_corner_law({1.0, 1000, 250, 4});
}

// The largest squared singular value of the corner (an edge statistic the pooled test barely
// sees): 1500 trials at N = 40, k = 12 on each side, KS at level 0.001 (critical value 0.071).
TEST(JacobiCorner, LargestValueMatchesDenseHaar) {
  for (const double beta : {2.0, 1.0}) {
    std::vector<double> model, dense;
    for (int trial = 0; trial < 1500; ++trial) {
      const auto corner = tri::sample_jacobi_corner(beta, 12, 40, kSeed, 5000 + trial, "U");
      model.push_back(squares(bidiagonal_singular_values(corner.cos_diag, corner.cos_super))[0]);
      Eigen::MatrixXcd block = dense_haar(beta, 40, trial).topLeftCorner(12, 12);
      const double top = freegap::linalg::singular_values(block).maxCoeff();
      dense.push_back(top * top);
    }
    const double d = ks_two_sample(model, dense);
    RecordProperty(beta == 2.0 ? "ks_largest_beta2" : "ks_largest_beta1", std::to_string(d));
    EXPECT_LT(d, ks_two_sample_critical_001(1500, 1500)) << beta;
  }
}

// The sine block: B11ᵀB11 + B21ᵀB21 = I entry by entry (the construction in tridiagonal.hpp).
TEST(JacobiCorner, CosineAndSineBlocksAreComplementary) {
  const auto c = tri::sample_jacobi_corner(1.0, 30, 70, kSeed, 3, "U");
  const Index m = 30;
  Eigen::MatrixXd b11 = Eigen::MatrixXd::Zero(m, m), b21 = Eigen::MatrixXd::Zero(m, m);
  for (Index j = 0; j < m; ++j) {
    b11(j, j) = c.cos_diag[j];
    b21(j, j) = -c.sin_diag[j];
    if (j + 1 < m) {
      b11(j, j + 1) = -c.cos_super[j];
      b21(j, j + 1) = -c.sin_super[j];
    }
  }
  const Eigen::MatrixXd sum = b11.transpose() * b11 + b21.transpose() * b21;
  EXPECT_LT((sum - Eigen::MatrixXd::Identity(m, m)).cwiseAbs().maxCoeff(), 1e-14);
}

// ---- the 2×2-block algebra against dense matrices -----------------------------------------------

// λ± = ((s + t) ± √((s − t)² + 4stσ²))/2 for each singular value σ of the m×m corner (m =
// min(k, N − k), the lower-right one when k > N/2), plus N − 2m eigenvalues 0 (k ≤ N/2) or s + t
// (k > N/2), then + c: the header's formulas, written out here apart from the model's code.
std::vector<double> mapped_spectrum(const tri::TwoProjectionSpec& p, Index n,
                                    const std::vector<double>& sigma) {
  std::vector<double> out;
  const double s = p.s, t = p.t;
  for (const double v : sigma) {
    const double root = std::sqrt((s - t) * (s - t) + 4.0 * s * t * v * v);
    out.push_back(p.shift + 0.5 * ((s + t) + root));
    out.push_back(p.shift + 0.5 * ((s + t) - root));
  }
  const double rest = 2 * p.rank > n ? s + t : 0.0;
  for (Index i = static_cast<Index>(out.size()); i < n; ++i) out.push_back(p.shift + rest);
  std::sort(out.begin(), out.end());
  return out;
}

// c + sP + tUPU^* formed densely from a dense Haar U: LAPACK eigenvalues against the corner's
// singular values mapped through λ± (both signs of st, k below and above N/2, both β).
TEST(TwoProjectionAlgebra, BlockEigenvaluesMatchDenseMatrix) {
  const Index n = 60;
  for (const double beta : {2.0, 1.0}) {
    for (const Index k : {Index{17}, Index{30}, Index{44}}) {
      for (const auto& [s, t] : {std::pair{1.5, 0.75}, std::pair{2.0, -1.25}}) {
        const auto p = spec(beta, k, s, t, 0.3);
        const Eigen::MatrixXcd u = dense_haar(beta, n, static_cast<std::uint64_t>(k));
        Eigen::MatrixXcd proj = Eigen::MatrixXcd::Zero(n, n);
        for (Index i = 0; i < k; ++i) proj(i, i) = 1.0;
        const Eigen::MatrixXcd q = u * proj * u.adjoint();
        Eigen::MatrixXcd m = s * proj + t * q;
        m.diagonal().array() += 0.3;
        const Eigen::VectorXd ev = freegap::linalg::eigenvalues(m);
        const Index c = std::min(k, n - k);
        Eigen::MatrixXcd block = k <= n / 2 ? u.topLeftCorner(c, c) : u.bottomRightCorner(c, c);
        const Eigen::VectorXd sv = freegap::linalg::singular_values(block);
        const auto expected = mapped_spectrum(p, n, std::vector<double>(sv.data(), sv.data() + c));
        for (Index i = 0; i < n; ++i) {
          EXPECT_NEAR(ev[i], expected[static_cast<std::size_t>(i)], 1e-12)
              << "beta " << beta << ", k " << k << ", s " << s << ", t " << t << ", i " << i;
        }
      }
    }
  }
}

// ---- the tridiagonal matrix against LAPACK on the same sample -----------------------------------

struct SameSample {
  tri::TwoProjectionSpec p;
  Index n;
};

// The sampled corner's singular values by LAPACK dbdsqr, mapped through λ±: the spectrum the
// tridiagonal matrix of the same sample must have.
std::vector<double> lapack_spectrum(const SameSample& c, std::uint64_t trial) {
  const Index m = tri::canonical(c.p, c.n).rank;
  const auto corner = tri::sample_jacobi_corner(c.p.beta, m, c.n, kSeed, trial, c.p.name);
  return mapped_spectrum(c.p, c.n, bidiagonal_singular_values(corner.cos_diag, corner.cos_super));
}

void expect_same_spectrum(const SameSample& c) {
  const std::uint64_t trial = 7;
  const std::vector<double> expected = lapack_spectrum(c, trial);
  const double scale = std::max(std::fabs(expected.front()), std::fabs(expected.back()));
  // Extremes by bisection, the full spectrum by dsterf and the moments from the band, through
  // the trial observation the runner uses (every value kept).
  obs::ObserveConfig config;
  config.bin_edges = obs::uniform_edges(expected.front() - 0.5, expected.back() + 0.5, 50);
  config.max_moment = 6;
  config.keep_spectrum_trials = {trial};
  auto hist = obs::empty_histogram(config);
  const auto row = tri::observe_two_projection_trial(c.p, c.n, kSeed, trial, config, hist);
  ASSERT_FALSE(row.failed) << row.reason;
  EXPECT_LE(std::fabs(row.min - expected.front()), 1e-10 * scale);
  EXPECT_LE(std::fabs(row.max - expected.back()), 1e-10 * scale);
  ASSERT_EQ(row.spectrum.size(), expected.size());
  double worst = 0.0;
  for (std::size_t i = 0; i < expected.size(); ++i) {
    worst = std::max(worst, std::fabs(row.spectrum[i] - expected[i]));
  }
  EXPECT_LE(worst, 1e-10 * scale) << "largest eigenvalue difference";
  const auto moments = obs::spectral_moments(expected, 6);
  for (int k = 1; k <= 6; ++k) {
    EXPECT_NEAR(row.moments[k], moments[k], 1e-10 * std::pow(scale, k)) << "moment " << k;
  }
  // Histogram by Sturm counts against the counts of the LAPACK values (no value lies within
  // 1e-9 of an edge in these samples, so the counts must be equal).
  obs::Histogram direct = obs::empty_histogram(config);
  obs::add_counts(expected, config.bin_edges, direct);
  EXPECT_EQ(hist, direct);
  // Sturm counts at points between the sorted LAPACK values count exactly the values below.
  const tri::Tridiagonal t = tri::sample(c.p, c.n, kSeed, trial);
  std::vector<double> points;
  std::vector<std::int64_t> want;
  for (std::size_t i = 0; i + 1 < expected.size(); i += 97) {
    if (expected[i + 1] - expected[i] < 1e-8 * scale) continue;
    points.push_back(0.5 * (expected[i] + expected[i + 1]));
    want.push_back(static_cast<std::int64_t>(i) + 1);
  }
  EXPECT_EQ(tri::counts_below(t, points), want);
}

TEST(TwoProjectionSturm, EigenvaluesEqualLapackOfTheSameSample) {
  // B + U B U^* with B = ±1 (s = t = 2, c = −2), both β, N = 2000.
  expect_same_spectrum({spec(2.0, 1000, 2.0, 2.0, -2.0), 2000});
  expect_same_spectrum({spec(1.0, 1000, 2.0, 2.0, -2.0), 2000});
  // st < 0 (the sine block), k > N/2 (the complement), odd N.
  expect_same_spectrum({spec(2.0, 700, 1.5, -0.5, 0.25), 1999});
  expect_same_spectrum({spec(1.0, 1300, -3.0, 1.0, 1.0), 2001});
  expect_same_spectrum({spec(2.0, 1, 1.0, 2.0, 0.0), 500});
}

TEST(TwoProjectionSturm, EigenvaluesEqualLapackAtTenThousand) {
  expect_same_spectrum({spec(2.0, 3000, 1.0, 0.5, 0.0), 10000});
  expect_same_spectrum({spec(1.0, 7000, 2.0, -1.0, -1.0), 10000});
}

TEST(TwoProjectionSturm, RefusesBadSpecs) {
  EXPECT_THROW(tri::sample(spec(4.0, 3, 1.0, 1.0, 0.0), 10, kSeed, 0), freegap::InputError);
  EXPECT_THROW(tri::sample(spec(2.0, 11, 1.0, 1.0, 0.0), 10, kSeed, 0), freegap::InputError);
  EXPECT_THROW(tri::sample(spec(2.0, 3, 0.0, 1.0, 0.0), 10, kSeed, 0), freegap::InputError);
  EXPECT_THROW(tri::sample(spec(2.0, 3, 1.0, NAN, 0.0), 10, kSeed, 0), freegap::InputError);
  // Rank 0 and N: no corner, every eigenvalue c (or c + s + t).
  const auto zero = tri::sample(spec(2.0, 0, 1.0, 1.0, 0.5), 10, kSeed, 0);
  EXPECT_EQ(tri::extremes(zero, 1e-12).min, 0.5);
  const auto full = tri::sample(spec(2.0, 10, 1.0, 1.0, 0.5), 10, kSeed, 0);
  EXPECT_EQ(tri::extremes(full, 1e-12).max, 2.5);
}

// The draw order is part of the interface (the header): the same (seed, name, N, trial) gives the
// same corner, and another trial or name another one.
TEST(TwoProjectionSturm, DeterministicInItsKey) {
  const auto a = tri::sample_jacobi_corner(2.0, 50, 120, kSeed, 4, "U");
  const auto b = tri::sample_jacobi_corner(2.0, 50, 120, kSeed, 4, "U");
  const auto c = tri::sample_jacobi_corner(2.0, 50, 120, kSeed, 5, "U");
  const auto d = tri::sample_jacobi_corner(2.0, 50, 120, kSeed, 4, "V");
  EXPECT_EQ(a.cos_diag, b.cos_diag);
  EXPECT_EQ(a.sin_super, b.sin_super);
  EXPECT_NE(a.cos_diag, c.cos_diag);
  EXPECT_NE(a.cos_diag, d.cos_diag);
}

// ---- N = 10^6: the arcsine law of B + U B U^*, B = ±1 with equal weights ------------------------

// The free additive convolution of two symmetric Bernoulli laws is the arcsine law on [−2, 2]
// with CDF F(x) = 1/2 + arcsin(x/2)/π (Source: Voiculescu 1986, "Addition of certain
// non-commuting random variables", J. Funct. Anal. 66; Nica & Speicher 2006, "Lectures on the
// Combinatorics of Free Probability", the free convolution of two Bernoulli laws; from memory).
// One trial at N = 10^6 per β: the Kolmogorov distance, over 4001 points, between #{λ < x}/N and
// F must be below 5e-5. At this N the distance of one sample is of order 10^-5 or less
// (eigenvalue counts of such ensembles fluctuate by O(√log N) and the mean density differs from
// the limit by O(1/N), from memory); measured when written: 3e-6 (β = 2) and 4e-6 (β = 1), so
// the bound leaves a margin of more than 10. Power: b = N − k in place of N − 2k gave 0.12.
TEST(TwoProjectionLimit, ArcsineAtOneMillion) {
  const Index n = 1000000;
  for (const double beta : {2.0, 1.0}) {
    const tri::Tridiagonal t = tri::sample(spec(beta, n / 2, 2.0, 2.0, -2.0), n, kSeed, 0);
    std::vector<double> points;
    for (int i = 0; i <= 4000; ++i) points.push_back(-2.0 + 4.0 * i / 4000.0);
    const auto below = tri::counts_below(t, points);
    double distance = 0.0;
    for (std::size_t i = 0; i < points.size(); ++i) {
      const double f = 0.5 + std::asin(std::clamp(points[i] / 2.0, -1.0, 1.0)) / std::numbers::pi;
      distance = std::max(distance, std::fabs(static_cast<double>(below[i]) / n - f));
    }
    EXPECT_LT(distance, 5e-5) << "beta " << beta;
    RecordProperty(beta == 2.0 ? "kolmogorov_beta2" : "kolmogorov_beta1", std::to_string(distance));
  }
}

}  // namespace
