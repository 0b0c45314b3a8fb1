// Tests of TabulatedCdf: the report's CDF table, accumulated step by step with the 4-point
// Gauss–Lobatto rule between the grid points and taken from the law itself near breakpoints.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <numbers>
#include <random>
#include <vector>

#include "freegap/analysis/limits/free_convolution.hpp"
#include "freegap/analysis/limits/laws.hpp"
#include "freegap/analysis/limits/tabulated_cdf.hpp"

namespace fa = freegap::analysis;
constexpr double kPi = std::numbers::pi;

namespace {

// The largest |table − F| over the grid points j = 0, stride, 2·stride, ... and the last.
template <class F>
double grid_error(const fa::TabulatedCdf& table, F exact, std::size_t stride) {
  double worst = 0.0;
  const std::size_t m = table.continuous_values().size() - 1;
  for (std::size_t j = 0; j <= m; j = (j + stride > m && j < m) ? m : j + stride) {
    const double x = table.grid_point(j);
    worst = std::max(worst, std::abs(table.cdf(x) - exact(x)));
  }
  return worst;
}

}  // namespace

TEST(TabulatedCdf, SemicircleAndArcsineEqualTheirClosedFormCdfs) {
  // Sources: F(x) = 1/2 + x√(4 − x²)/(4π) + arcsin(x/2)/π for the semicircle of variance 1
  // (Wigner 1955; the integral of its density, common practice) and F(x) = 1/2 + arcsin(x/2)/π
  // for the arcsine law on [−2, 2] (its density 1/(π√(4 − x²)) integrated, common practice).
  // Nearly every grid value is accumulated by the Lobatto rule (a direct value every 256th step
  // and near the edges), so these check the accumulation: 1e-12 at every grid point, and 1e-10
  // between them (the cubic Hermite interpolant in θ, error ~ h⁴ with h = π/8192).
  auto semicircle = [](double x) {
    x = std::clamp(x, -2.0, 2.0);
    return 0.5 + x * std::sqrt(4.0 - x * x) / (4.0 * kPi) + std::asin(0.5 * x) / kPi;
  };
  auto arcsine = [](double x) { return 0.5 + std::asin(std::clamp(0.5 * x, -1.0, 1.0)) / kPi; };
  const fa::TabulatedCdf sc(*fa::semicircle(1.0));
  const fa::TabulatedCdf as(*fa::arcsine());
  EXPECT_LT(grid_error(sc, semicircle, 1), 1e-12);
  EXPECT_LT(grid_error(as, arcsine, 1), 1e-12);
  std::mt19937_64 rng(20261204);
  std::uniform_real_distribution<double> u(-2.0, 2.0);
  double worst = 0.0;
  for (int i = 0; i < 2000; ++i) {
    const double x = u(rng);
    worst = std::max({worst, std::abs(sc.cdf(x) - semicircle(x)), std::abs(as.cdf(x) - arcsine(x))});
  }
  EXPECT_LT(worst, 1e-10);
}

TEST(TabulatedCdf, FreeSumsWithGapsAndNestingEqualTheLawsOwnCdf) {
  // The accumulated table against the law's own CDF (adaptive Gauss–Legendre per band, its
  // documented accuracy ~1e-10) at every 13th grid point: a support with a gap (uniform ⊞ two
  // atoms, the model of issue 16) and a sum of three free terms (atoms ⊞ 1.5·MP(1/4) ⊞ MP(1/2),
  // whose every density is a nested subordination solve). Tolerance 1e-9.
  const auto gapped = fa::free_additive(fa::uniform(-1.0, 1.0), fa::atoms({{0.0, 0.6}, {3.0, 0.4}}));
  ASSERT_GE(gapped->support().bands.size(), 2u);
  const auto inner = fa::free_additive(fa::atoms({{0.58, 0.85}, {1.92, 0.15}}),
                                       fa::affine(fa::marchenko_pastur(0.25), 1.5, 0.0));
  const auto nested = fa::free_additive(inner, fa::marchenko_pastur(0.5));
  for (const auto& law : {gapped, nested}) {
    const fa::TabulatedCdf table(*law, law->singular_points());
    EXPECT_LT(grid_error(table, [&](double x) { return law->cdf(x); }, 13), 1e-9)
        << law->describe();
  }
}
