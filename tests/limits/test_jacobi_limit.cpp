// The eigenvalue law of periodic Jacobi matrices (laws.hpp, periodic_jacobi_law) on other code
// paths: period 1 against the arcsine law's closed form and the Toeplitz law of the same
// symbol a + 2b cos θ; period 2's band edges against the roots of its discriminant
// Δ(x) = ((x − a_0)(x − a_1) − b_0² − b_1²)/(b_0 b_1) = ±2, i.e. (x − a_0)(x − a_1) = (b_0 ± b_1)²
// (elementary); the eigenvalues of a large sampled matrix against the CDF and the Cauchy
// transform; the law's moments against the exact walk counts; and X + J (X a GUE) sampled
// against its derived limit.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <complex>
#include <numbers>
#include <vector>

#include "freegap/analysis/limits/laws.hpp"
#include "freegap/analysis/limits/limit.hpp"
#include "freegap/ensembles.hpp"
#include "freegap/linalg.hpp"
#include "freegap/model.hpp"

namespace fa = freegap::analysis;

namespace {

// The sorted eigenvalues of the sampled N × N matrix of declaration `text` (model's syntax).
std::vector<double> sampled_eigenvalues(const std::string& text, long n) {
  const freegap::ensembles::Sampler sampler(freegap::model::parse_declaration(text));
  Eigen::MatrixXd j = sampler.draw(n, 1, 0).real;
  const Eigen::VectorXd e = freegap::linalg::eigenvalues(j);
  return {e.data(), e.data() + e.size()};
}

// Kolmogorov distance between sorted values and a CDF.
double kolmogorov(const std::vector<double>& sorted, const fa::Law& law) {
  const auto n = static_cast<double>(sorted.size());
  double worst = 0.0;
  for (std::size_t i = 0; i < sorted.size(); ++i) {
    const double f = law.cdf(sorted[i]);
    worst = std::max({worst, std::abs(f - static_cast<double>(i + 1) / n), std::abs(f - static_cast<double>(i) / n)});
  }
  return worst;
}

TEST(JacobiLimit, PeriodOneIsTheArcsineOfItsSymbol) {
  const double a = 0.5, b = 0.75;  // arcsine on [a − 2b, a + 2b] = [−1, 2]
  const auto law = fa::periodic_jacobi_law({a}, {b});
  const auto toeplitz = fa::toeplitz_symbol_law({a, b});
  const auto s = law->support();
  EXPECT_NEAR(s.lo, -1.0, 1e-14);
  EXPECT_NEAR(s.hi, 2.0, 1e-14);
  for (const double x : {-0.9, -0.2, 0.5, 1.3, 1.99}) {
    // Arcsine law on [a − 2b, a + 2b]: F(x) = 1/2 + asin((x − a)/(2b))/π (closed form).
    EXPECT_NEAR(law->cdf(x), 0.5 + std::asin((x - a) / (2 * b)) / std::numbers::pi, 1e-13) << x;
    EXPECT_NEAR(law->density(x), 1.0 / (std::numbers::pi * std::sqrt(4 * b * b - (x - a) * (x - a))), 1e-12);
  }
  for (const std::complex<double> z : {std::complex<double>(0.3, 0.2), {2.5, 0.0}, {-3.0, 0.0},
                                       {1.0, -0.7}, {0.5, 1e-3}}) {
    // G(z) = 1/√((z − a)² − 4b²) with G ~ 1/z: the Toeplitz law computes it as a pushforward.
    EXPECT_LT(std::abs(law->cauchy(z) - toeplitz->cauchy(z)), 1e-10) << z;
  }
}

TEST(JacobiLimit, PeriodTwoBandsAreTheDiscriminantsRoots) {
  const double a0 = 0.0, a1 = 1.5, b0 = 1.0, b1 = 0.4;
  const auto law = fa::periodic_jacobi_law({a0, a1}, {b0, b1});
  // (x − a0)(x − a1) = c² has the roots (a0 + a1)/2 ± √((a1 − a0)²/4 + c²).
  const auto roots = [&](double c) {
    const double r = std::sqrt((a1 - a0) * (a1 - a0) / 4 + c * c);
    return std::pair{(a0 + a1) / 2 - r, (a0 + a1) / 2 + r};
  };
  const auto [outer_lo, outer_hi] = roots(b0 + b1);
  const auto [inner_lo, inner_hi] = roots(b0 - b1);
  const auto s = law->support();
  ASSERT_EQ(s.bands.size(), 2u);
  EXPECT_NEAR(s.bands[0].lo, outer_lo, 1e-13);
  EXPECT_NEAR(s.bands[0].hi, inner_lo, 1e-13);
  EXPECT_NEAR(s.bands[1].lo, inner_hi, 1e-13);
  EXPECT_NEAR(s.bands[1].hi, outer_hi, 1e-13);
  EXPECT_NEAR(law->cdf((inner_lo + inner_hi) / 2), 0.5, 1e-14);  // mass 1/p per band
  EXPECT_EQ(law->density((inner_lo + inner_hi) / 2), 0.0);
}

TEST(JacobiLimit, SampledEigenvaluesFollowTheLaw) {
  const long n = 1500;
  const auto values = sampled_eigenvalues("J=jacobi:diagonal=0,1,-0.5:off_diagonal=1,0.5,0.8", n);
  const auto law = fa::periodic_jacobi_law({0.0, 1.0, -0.5}, {1.0, 0.5, 0.8});
  // A truncation of the periodic operator: the eigenvalue count in any interval is off by at most
  // a few per band (interlacing under a rank-p change; common practice), so the Kolmogorov
  // distance is O(p/N); bound 2p/N.
  EXPECT_LT(kolmogorov(values, *law), 6.0 / n);
  const std::complex<double> z(0.3, 0.5);
  std::complex<double> g = 0.0;
  for (const double v : values) g += 1.0 / (z - v);
  g /= static_cast<double>(n);
  // |G_N − G| ≤ (Kolmogorov distance) · (total variation of t ↦ 1/(z − t)) ≤ (2p/N)·(2/Im z).
  EXPECT_LT(std::abs(g - law->cauchy(z)), 12.0 / n / 0.5);
  // The law's moments: the trapezoid rule over the Bloch matrices against the exact walk counts
  // of the infinite periodic matrix (moments.cpp), through the derived limit of J alone.
  const auto d = [&] {
    std::vector<freegap::declarations::MatrixSpec> specs = {
        freegap::model::parse_declaration("J=jacobi:diagonal=0,1,-0.5:off_diagonal=1,0.5,0.8")};
    return fa::derive_limit(freegap::expr::Expression("J", specs, {}), 8);
  }();
  ASSERT_TRUE(d.law) << d.reason;
  ASSERT_EQ(d.exact_moments.size(), 9u) << d.moments_note;
  const auto m = d.law->moments(8);
  for (int k = 1; k <= 8; ++k) EXPECT_NEAR(m[k], d.exact_moments[k], 1e-12 * std::max(1.0, std::abs(m[k]))) << k;
}

TEST(JacobiLimit, SumWithAGueMatchesSampledSpectra) {
  std::vector<freegap::declarations::MatrixSpec> specs = {
      freegap::model::parse_declaration("X=gue"),
      freegap::model::parse_declaration("J=jacobi:diagonal=0,1.5:off_diagonal=1,0.4")};
  const auto d = fa::derive_limit(freegap::expr::Expression("X + J", specs, {}), 4);
  ASSERT_TRUE(d.law) << d.reason;
  // 8 trials at N = 600 (seed 5), pooled: 4800 eigenvalues. Kolmogorov distance below the 1 %
  // point of the one-sample test for independent values, 1.63/√4800 (Massey 1951; conservative
  // for eigenvalues), plus 2/N for the finite-N bias.
  freegap::model::Model model;
  model.matrices = specs;
  model.expression = "X + J";
  model.force_dense = true;
  const freegap::model::SizeRunner runner(model, 600);
  std::vector<double> pooled;
  for (std::uint64_t t = 0; t < 8; ++t) {
    const auto out = runner.run(5, t);
    ASSERT_FALSE(out.failed) << out.reason;
    pooled.insert(pooled.end(), out.spectrum.data(), out.spectrum.data() + out.spectrum.size());
  }
  std::sort(pooled.begin(), pooled.end());
  EXPECT_LT(kolmogorov(pooled, *d.law), 1.63 / std::sqrt(4800.0) + 2.0 / 600);
  EXPECT_NE(d.rule.find("periodic Jacobi"), std::string::npos) << d.rule;
}

}  // namespace
