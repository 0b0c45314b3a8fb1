// The Szegő limit of Toeplitz matrices (laws.hpp, toeplitz_symbol_law): the law of the symbol
// f(θ) = c_0 + 2 Σ c_j cos(jθ) for θ uniform (Szegő 1920; Grenander & Szegő 1958), checked on
// other code paths: its moments against (1/2π)∫ fⁿ dθ by the trapezoid rule (exact for a
// trigonometric polynomial of degree below the number of points: Trefethen & Weideman 2014), its
// CDF against the share of a fine θ grid where f ≤ x, the exact moments (constant terms of the
// Laurent polynomial fⁿ) against the same integrals, and a circulant matrix's eigenvalues
// f(2πj/N) (Gray 2006, §3.1) against the law.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <numbers>
#include <string>
#include <vector>

#include "freegap/analysis/limits/laws.hpp"
#include "freegap/analysis/limits/limit.hpp"
#include "freegap/model.hpp"

namespace fa = freegap::analysis;

namespace {

double symbol(const std::vector<double>& c, double theta) {
  double f = c[0];
  for (std::size_t j = 1; j < c.size(); ++j) f += 2.0 * c[j] * std::cos(static_cast<double>(j) * theta);
  return f;
}

double trapezoid_moment(const std::vector<double>& c, int n, int points = 4096) {
  double sum = 0.0;
  for (int i = 0; i < points; ++i) {
    sum += std::pow(symbol(c, 2.0 * std::numbers::pi * i / points), n);
  }
  return sum / points;
}

const std::vector<std::vector<double>> kSymbols = {
    {0.0, 1.0}, {1.0, 0.5, 0.25}, {0.2, -0.7, 0.3, 0.15}, {-1.0, 0.0, 0.0, 0.0, 0.5}};

TEST(ToeplitzLimit, MomentsAreTheSymbolsMeanPowers) {
  for (const auto& c : kSymbols) {
    const auto law = fa::toeplitz_symbol_law(c);
    const auto m = law->moments(8);
    for (int n = 1; n <= 8; ++n) {
      const double want = trapezoid_moment(c, n);
      EXPECT_NEAR(m[n], want, 1e-10 * std::max(1.0, std::abs(want))) << "n = " << n << ", c_1 = " << c[1];
    }
  }
}

TEST(ToeplitzLimit, CdfIsTheShareOfAnglesBelow) {
  const int points = 200000;
  for (const auto& c : kSymbols) {
    const auto law = fa::toeplitz_symbol_law(c);
    std::vector<double> values(points);
    for (int i = 0; i < points; ++i) values[i] = symbol(c, 2.0 * std::numbers::pi * (i + 0.5) / points);
    std::sort(values.begin(), values.end());
    const auto s = law->support();
    EXPECT_NEAR(s.lo, values.front(), 1e-6);
    EXPECT_NEAR(s.hi, values.back(), 1e-6);
    for (double u : {0.05, 0.2, 0.37, 0.5, 0.81, 0.97}) {
      const double x = values[static_cast<std::size_t>(u * points)];
      // The grid's share is exact to 1/points plus the steepest step of F (bounded here).
      EXPECT_NEAR(law->cdf(x), u, 2e-4) << "u = " << u;
    }
  }
}

TEST(ToeplitzLimit, ExactMomentsOfTheDerivedLimit) {
  std::vector<freegap::declarations::MatrixSpec> specs = {
      freegap::model::parse_declaration("T=toeplitz:coefficients=0.2,-0.7,0.3,0.15")};
  const auto d = fa::derive_limit(freegap::expr::Expression("T", specs), 6);
  ASSERT_TRUE(d.law) << d.reason;
  ASSERT_EQ(d.exact_moments.size(), 7u) << d.moments_note;
  for (int n = 1; n <= 6; ++n) {
    EXPECT_NEAR(d.exact_moments[n], trapezoid_moment(kSymbols[2], n), 1e-12) << n;
  }
  EXPECT_NE(d.rule.find("Szegő"), std::string::npos) << d.rule;
}

TEST(ToeplitzLimit, CirculantEigenvaluesFollowTheLaw) {
  // The N values f(2πj/N) are the circulant's eigenvalues; their empirical CDF is within about
  // (number of monotone pieces of f)/N of the law at every point.
  const int n = 3000;
  const auto& c = kSymbols[2];
  const auto law = fa::toeplitz_symbol_law(c);
  std::vector<double> values(n);
  for (int j = 0; j < n; ++j) values[j] = symbol(c, 2.0 * std::numbers::pi * j / n);
  std::sort(values.begin(), values.end());
  double ks = 0.0;
  for (int i = 0; i < n; ++i) {
    const double f = law->cdf(values[i]);
    ks = std::max({ks, (i + 1.0) / n - f, f - static_cast<double>(i) / n});
  }
  EXPECT_LT(ks, 8.0 / n);
}

}  // namespace
