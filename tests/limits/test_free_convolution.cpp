// Tests of free additive / multiplicative convolution by subordination (Belinschi & Bercovici
// 2007).
// Check values: docs/check-values.md (cited as "ref §x.y"), which gives each one's source.
#include <gtest/gtest.h>

#include <cmath>
#include <complex>
#include <numbers>
#include <string>
#include <vector>

#include "freegap/analysis/limits/free_convolution.hpp"
#include "freegap/analysis/limits/laws.hpp"
#include "freegap/errors.hpp"

namespace fa = freegap::analysis;
using cd = std::complex<double>;
constexpr double kPi = std::numbers::pi;

namespace {

fa::LawPtr bernoulli() { return fa::atoms({{-1.0, 0.5}, {1.0, 0.5}}); }

double arcsine_density(double x) { return 1.0 / (kPi * std::sqrt(4.0 - x * x)); }

}  // namespace

TEST(FreeAdditive, BernoulliSquaredIsArcsine) {
  // Source: (½δ₋₁+½δ₁)^{⊞2} is the arcsine law 1/(π√(4−x²)) (ref §1.3; Nica & Speicher
  // 2006, from memory). Required: 1e−8 across (−1.99, 1.99), edges and the degenerate centre
  // included.
  const auto bb = fa::free_additive(bernoulli(), bernoulli());
  std::vector<double> xs;
  for (int i = 0; i <= 398; ++i) xs.push_back(-1.99 + 0.01 * i);
  for (double x : {-1.9999, -1.99999, 0.0, 1e-9, 1.99999, 1.9999}) xs.push_back(x);
  // One band: at x = 0 the real subordination map is the identity up to rounding, which must
  // not read as a gap (a stalled residual with a large Newton step is no fixed point).
  ASSERT_EQ(bb->support().bands.size(), 1u);
  const std::vector<double> grid = bb->densities(xs);
  for (std::size_t i = 0; i < xs.size(); ++i) {
    EXPECT_NEAR(grid[i], arcsine_density(xs[i]), 1e-8) << "x=" << xs[i];
    EXPECT_NEAR(bb->density(xs[i]), arcsine_density(xs[i]), 1e-8) << "cold x=" << xs[i];
  }
  // Ref §4a outputs (computed independently there): 0.1643745184 at 0.5, 0.5097037441 at 1.9.
  EXPECT_NEAR(bb->density(0.5), 0.1643745184, 1e-10);
  EXPECT_NEAR(bb->density(1.9), 0.5097037441, 1e-10);
  // Edges ±2 and no atoms: the atom masses ½ + ½ − 1 = 0 (Bercovici & Voiculescu 1998, from
  // memory).
  EXPECT_NEAR(bb->support().lo, -2.0, 1e-8);
  EXPECT_NEAR(bb->support().hi, 2.0, 1e-8);
  EXPECT_TRUE(bb->support().atoms.empty());
  // CDF: 1/2 + arcsin(x/2)/π; F(1) = 2/3, F(√3) = 5/6 (ref §1.3).
  EXPECT_NEAR(bb->cdf(1.0), 2.0 / 3.0, 1e-9);
  EXPECT_NEAR(bb->cdf(std::sqrt(3.0)), 5.0 / 6.0, 1e-9);
  EXPECT_NEAR(bb->cdf(-1.999), 0.5 + std::asin(-1.999 / 2) / kPi, 1e-9);
  EXPECT_NEAR(bb->cdf(2.5), 1.0, 1e-9);
  // Moments from added free cumulants: C(2k, k) (ref §1.3).
  const std::vector<double> m = bb->moments(10);
  const std::vector<double> expected{1, 0, 2, 0, 6, 0, 20, 0, 70, 0, 252};
  for (int k = 0; k <= 10; ++k) EXPECT_NEAR(m[k], expected[k], 1e-12) << k;
}

TEST(FreeAdditive, AveragedIterationThenNewtonConverges) {
  // Ref §4a (measured there): at ε = 1e−8 the averaged iteration + Newton converges for
  // Bernoulli ⊞ Bernoulli, x = 0 included (only Newton works there).
  const auto bb = fa::free_additive(bernoulli(), bernoulli());
  for (double x : {-1.5, -0.3, 0.0, 0.7, 1.95}) {
    const fa::SubordinationPoint p = bb->solve(cd(x, 1e-8));
    EXPECT_GT(p.omega1.imag(), 0.0);
    EXPECT_LE(p.newton_steps, 200);
    // Subordination identities: G = G_μ(ω1) = G_ν(ω2), ω1 + ω2 = z + 1/G (Belinschi & Bercovici
    // 2007).
    EXPECT_NEAR(std::abs(p.omega1 + p.omega2 - (p.z + 1.0 / p.cauchy)), 0.0, 1e-9) << x;
    EXPECT_NEAR(std::abs(bernoulli()->cauchy(p.omega2) - p.cauchy), 0.0, 1e-9 * std::abs(p.cauchy));
  }
}

TEST(FreeAdditive, SemicirclesAddVariances) {
  // Source: semicircle(a) ⊞ semicircle(b) = semicircle(a + b) (free cumulants κ₂ add; Voiculescu
  // 1986).
  const auto sum = fa::free_additive(fa::semicircle(1.0), fa::semicircle(2.0));
  const auto exact = fa::semicircle(3.0);
  for (double x = -3.4; x <= 3.4; x += 0.05) {
    EXPECT_NEAR(sum->density(x), exact->density(x), 1e-10) << x;
  }
  // Edge 2√(a+b) to 1e−8 (required by the issue; the edge solve reaches ~1e−14).
  EXPECT_NEAR(sum->support().hi, 2.0 * std::sqrt(3.0), 1e-8);
  EXPECT_NEAR(sum->support().lo, -2.0 * std::sqrt(3.0), 1e-8);
  for (double x : {-3.0, -1.0, 0.0, 0.4, 2.9}) EXPECT_NEAR(sum->cdf(x), exact->cdf(x), 1e-9) << x;
  const std::vector<double> m = sum->moments(8);
  const std::vector<double> e = exact->moments(8);
  for (int k = 0; k <= 8; ++k) EXPECT_NEAR(m[k], e[k], 1e-12 * std::max(1.0, e[k]));
  // Ref §4a: semicircle(1) ⊞ semicircle(1) = semicircle(2): 0.2250790790 at 0, 0.1052710998
  // at 2.5.
  const auto two = fa::free_additive(fa::semicircle(), fa::semicircle());
  EXPECT_NEAR(two->density(0.0), 0.2250790790, 1e-10);
  EXPECT_NEAR(two->density(2.5), 0.1052710998, 1e-10);
  // The Cauchy transform off the axis and its derivative.
  const cd z(0.4, 0.9);
  EXPECT_NEAR(std::abs(sum->cauchy(z) - exact->cauchy(z)), 0.0, 1e-13);
  EXPECT_NEAR(std::abs(sum->cauchy_derivative(z) - exact->cauchy_derivative(z)), 0.0, 1e-11);
}

TEST(FreeAdditive, ShiftByPointMassAndAtoms) {
  // μ ⊞ δ_a is μ shifted by a (elementary).
  const auto shifted = fa::free_additive(fa::marchenko_pastur(0.5), fa::atoms({{2.0, 1.0}}));
  EXPECT_NEAR(shifted->density(3.0), fa::marchenko_pastur(0.5)->density(1.0), 1e-10);
  EXPECT_NEAR(shifted->support().hi, 2.0 + fa::marchenko_pastur(0.5)->support().hi, 1e-8);
  // Atom of μ ⊞ ν at a1 + a2 with mass μ({a1}) + ν({a2}) − 1 (Bercovici & Voiculescu 1998, from
  // memory): 0.7 + 0.7 − 1 = 0.4 at 0 for (0.7δ₀ + 0.3δ₁)^{⊞2}.
  const auto p = fa::atoms({{0.0, 0.7}, {1.0, 0.3}});
  const auto pp = fa::free_additive(p, p);
  ASSERT_EQ(pp->support().atoms.size(), 1u);
  EXPECT_NEAR(pp->support().atoms[0].value, 0.0, 0.0);
  EXPECT_NEAR(pp->support().atoms[0].weight, 0.4, 1e-15);
  // The CDF jumps by the atom and reaches 1; the mean is 0.6 (moments add their first cumulant).
  EXPECT_NEAR(pp->cdf(0.0) - pp->cdf(-1e-9), 0.4, 1e-9);
  EXPECT_NEAR(pp->cdf(pp->support().hi), 1.0, 1e-8);
  EXPECT_NEAR(pp->moments(1)[1], 0.6, 1e-15);
}

TEST(FreeAdditive, EmpiricalSpectrumWithAtomsConverges) {
  // An empirical spectrum with repeated values (atoms of mass 0.3 and 0.2) ⊞ a semicircle: the
  // solver converges on a grid, the density integrates to 1 and its moments equal the exact ones
  // from added free cumulants (Voiculescu 1986). Deterministic spectrum (no randomness).
  std::vector<double> values;
  for (int i = 0; i < 30; ++i) values.push_back(-1.0);
  for (int i = 0; i < 20; ++i) values.push_back(2.0);
  for (int i = 0; i < 50; ++i) values.push_back(std::sin(0.37 * i));
  const auto e = fa::empirical(values);
  const auto law = fa::free_additive(e, fa::semicircle(0.25));
  const fa::Support s = law->support();
  std::vector<double> xs;
  const int n = 4000;
  for (int i = 0; i <= n; ++i) xs.push_back(s.lo + (s.hi - s.lo) * i / n);
  const std::vector<double> f = law->densities(xs);
  double mass = 0.0;
  double first = 0.0;
  double second = 0.0;
  for (int i = 0; i <= n; ++i) {
    const double w = (s.hi - s.lo) / n * ((i == 0 || i == n) ? 0.5 : 1.0);
    EXPECT_GE(f[i], 0.0);
    mass += w * f[i];
    first += w * f[i] * xs[i];
    second += w * f[i] * xs[i] * xs[i];
  }
  const std::vector<double> m = law->moments(2);
  EXPECT_NEAR(mass, 1.0, 1e-4);  // trapezoid on square-root edges: error ~ h^{1.5}
  EXPECT_NEAR(first, m[1], 1e-4);
  EXPECT_NEAR(second, m[2], 1e-4);
  EXPECT_NEAR(law->cdf(s.hi), 1.0, 1e-9);
  // Empirical ⊞ empirical, both with atoms: converges too, and the atom rule gives none here.
  const auto ee = fa::free_additive(e, fa::empirical(values));
  EXPECT_TRUE(ee->support().atoms.empty());  // 0.3 + 0.3 − 1 < 0
  EXPECT_NEAR(ee->cdf(ee->support().hi), 1.0, 1e-8);
  // m₂(e ⊞ e) = κ₂ + κ₁² = 2 Var(e) + (2 E e)² (free cumulants add; Voiculescu 1986).
  const std::vector<double> me = e->moments(2);
  EXPECT_NEAR(ee->moments(2)[2], 2.0 * (me[2] - me[1] * me[1]) + 4.0 * me[1] * me[1], 1e-12);
}

TEST(FreeMultiplicative, FreePoissonSquaredIsFussCatalan) {
  // Source: π ⊠ π = Fuss–Catalan s = 2: moments 1, 3, 12, 55, right edge 27/4 (ref §1.5;
  // Penson & Życzkowski 2011).
  const auto pp = fa::free_multiplicative(fa::marchenko_pastur(1.0), fa::marchenko_pastur(1.0));
  const std::vector<double> m = pp->moments(8);
  const std::vector<double> expected{1, 1, 3, 12, 55, 273, 1428, 7752, 43263};
  for (int k = 0; k <= 8; ++k) EXPECT_NEAR(m[k], expected[k], 1e-10 * expected[k]) << k;
  EXPECT_NEAR(pp->support().hi, 6.75, 1e-8);
  EXPECT_EQ(pp->support().lo, 0.0);
  // Density values of §1.5 (computed independently there).
  EXPECT_NEAR(pp->density(0.5), 0.318309886183791, 1e-10);
  EXPECT_NEAR(pp->density(1.0), 0.178979127488028, 1e-10);
  EXPECT_NEAR(pp->density(6.0), 0.0150457656513178, 1e-10);
  const auto fc = fa::fuss_catalan(2);
  for (double x : {1e-8, 0.01, 1.0, 3.0, 6.7}) EXPECT_NEAR(pp->cdf(x), fc->cdf(x), 1e-9) << x;
  const cd z(2.0, 0.5);
  EXPECT_NEAR(std::abs(pp->cauchy(z) - fc->cauchy(z)), 0.0, 1e-12);
  EXPECT_NEAR(std::abs(pp->cauchy_derivative(z) - fc->cauchy_derivative(z)), 0.0, 1e-8);
}

TEST(FreeMultiplicative, FreePoissonTimesProjection) {
  // Source: ref §1.7 (derived there): π ⊠ (½δ₀ + ½δ₁) = ½δ₀ + ½·MP(1/2), moments ½·MP(1/2).
  const auto law =
      fa::free_multiplicative(fa::marchenko_pastur(1.0), fa::atoms({{0.0, 0.5}, {1.0, 0.5}}));
  ASSERT_EQ(law->support().atoms.size(), 1u);
  EXPECT_NEAR(law->support().atoms[0].weight, 0.5, 1e-15);  // Belinschi 2003, from memory
  const auto mp = fa::marchenko_pastur(0.5);
  for (double x : {0.1, 0.5, 1.0, 2.0, 2.8})
    EXPECT_NEAR(law->density(x), 0.5 * mp->density(x), 1e-8) << x;
  EXPECT_NEAR(law->support().hi, mp->support().hi, 1e-8);
  // Table of §1.7, ν = ½δ₀+½δ₁, c = 1: 1/2, 3/4, 11/8, 45/16.
  const std::vector<double> m = law->moments(4);
  EXPECT_NEAR(m[1], 0.5, 1e-14);
  EXPECT_NEAR(m[2], 0.75, 1e-14);
  EXPECT_NEAR(m[3], 11.0 / 8.0, 1e-14);
  EXPECT_NEAR(m[4], 45.0 / 16.0, 1e-13);
  EXPECT_NEAR(law->cdf(1.0), 0.5 + 0.5 * mp->cdf(1.0), 1e-9);
  // ν = ½δ₁ + ½δ₃ with MP(1/2): moments 2, 7, 31, 154 (§1.7 table).
  const auto two_point =
      fa::free_multiplicative(fa::marchenko_pastur(0.5), fa::atoms({{1.0, 0.5}, {3.0, 0.5}}));
  const std::vector<double> m2 = two_point->moments(4);
  EXPECT_NEAR(m2[1], 2.0, 1e-13);
  EXPECT_NEAR(m2[2], 7.0, 1e-13);
  EXPECT_NEAR(m2[3], 31.0, 1e-12);
  EXPECT_NEAR(m2[4], 154.0, 1e-11);
  EXPECT_GT(two_point->support().lo, 0.0);  // both factors bounded away from 0
  EXPECT_NEAR(two_point->cdf(two_point->support().hi), 1.0, 1e-9);
}

TEST(FreeMultiplicative, SingularFactorTabulatesItsCdf) {
  // law(S²) ⊠ MP(1) with S² = 0, 1, 4 in shares 0.3, 0.3, 0.4 (S W S): a point mass 0.3 at 0
  // (the kernel of S, elementary) and, beside it, what was shown as a band [0, 5e-9] of mass
  // about 1e-33. Its CDF table asked for 1e-13 of that mass, below the density's rounding, and
  // every panel went 24 halvings deep: `freegap limit -o` ran for over ten minutes.
  const auto law = fa::free_multiplicative(fa::atoms({{0.0, 0.3}, {1.0, 0.3}, {4.0, 0.4}}),
                                           fa::marchenko_pastur(1.0));
  ASSERT_FALSE(law->support().atoms.empty());
  EXPECT_NEAR(law->support().atoms[0].weight, 0.3, 1e-12);
  // The sliver [0, 5e-9] was the point mass's trace, not a band: one band, away from 0.
  ASSERT_EQ(law->support().bands.size(), 1u);
  EXPECT_GT(law->support().bands[0].lo, 0.04);
  EXPECT_NEAR(law->cdf(0.01), 0.3, 1e-9);  // nothing continuous between the two
  EXPECT_NEAR(law->cdf(law->support().hi), 1.0, 1e-9);
  EXPECT_NEAR(law->moments(1)[1], 1.9, 1e-12);  // E[S²] E[W] (free independence)
}

TEST(FreeCompoundPoisson, SignSandwichLosesNoMassAtItsSingularPoint) {
  // A B A with A semicircular and B = ±1 (ref §1.6): the free compound Poisson law with jumps ±1
  // of weight ½. Its square is π ⊠ π (Fuss–Catalan, ref §1.5) and it is symmetric, so
  // F(y) = ½ + ½ F_FC(y²) for y ≥ 0; its edge is 3√3/2 and f(1), f(0.5) are tabulated in §1.6.
  // At 0 the density grows like |y|^(−1/3) (§1.6′): before the CDF table was split there, it lost
  // 2e-8 of the mass on each side of 0.
  const auto law = fa::free_compound_poisson({{-1.0, 0.5}, {1.0, 0.5}});
  const fa::Support s = law->support();
  EXPECT_TRUE(s.atoms.empty());
  ASSERT_EQ(s.bands.size(), 1u);
  EXPECT_NEAR(s.hi, 1.5 * std::sqrt(3.0), 1e-12);
  EXPECT_NEAR(s.lo, -1.5 * std::sqrt(3.0), 1e-12);
  EXPECT_NEAR(law->density(1.0), 0.178979127488028, 1e-12);
  EXPECT_NEAR(law->density(-0.5), 0.273069656441587, 1e-12);
  EXPECT_NEAR(law->cdf(0.0), 0.5, 1e-9);
  EXPECT_NEAR(law->cdf(s.hi), 1.0, 1e-9);
  const auto fc = fa::fuss_catalan(2);
  for (double y : {1e-6, 1e-3, 0.1, 1.0, 2.0, 2.5}) {
    EXPECT_NEAR(law->cdf(y), 0.5 + 0.5 * fc->cdf(y * y), 1e-9) << y;
    EXPECT_NEAR(law->cdf(-y), 0.5 - 0.5 * fc->cdf(y * y), 1e-9) << y;
  }
  // The |y|^(−1/3) law near 0 is resolved down to 1e-12 (f·|y|^(1/3) settles to 4 digits).
  const double c8 = law->density(1e-8) * std::cbrt(1e-8);
  const double c12 = law->density(-1e-12) * std::cbrt(1e-12);
  EXPECT_NEAR(c12 / c8, 1.0, 1e-4);
}

TEST(FreeCompoundPoisson, UnequalSignsHaveAGapEndingAtZero) {
  // Jumps −1 (weight 0.3) and +1 (weight 0.7), i.e. A B A with that B (ref §1.6′): the support is
  // [−1.96855774485826, −0.0102275267282972] ∪ [0, 3.17878527158672], with masses 0.3 and 0.7
  // and an inverse-square-root edge at 0 (values computed for this test with numpy's polyroots
  // and scipy's quad; the edge at 0 came out at −6.8e-9 and made the CDF hang before it was
  // snapped to the singular point).
  const auto law = fa::free_compound_poisson({{-1.0, 0.3}, {1.0, 0.7}});
  const fa::Support s = law->support();
  ASSERT_EQ(s.bands.size(), 2u);
  EXPECT_NEAR(s.bands[0].lo, -1.96855774485826, 1e-10);
  EXPECT_NEAR(s.bands[0].hi, -0.0102275267282972, 1e-10);
  EXPECT_EQ(s.bands[1].lo, 0.0);
  EXPECT_NEAR(s.bands[1].hi, 3.17878527158672, 1e-10);
  EXPECT_NEAR(law->cdf(-0.005), 0.3, 1e-9);
  EXPECT_NEAR(law->cdf(s.hi), 1.0, 1e-9);
  EXPECT_NEAR(law->density(-0.5), 0.20666931630942983, 1e-11);
  EXPECT_NEAR(law->density(0.5), 0.33272016916450575, 1e-11);
  EXPECT_EQ(law->density(-1e-6), 0.0);
  // f(x)·√x → 0.2013177763 as x → 0+ (scipy, same cubic).
  EXPECT_NEAR(law->density(1e-6) * 1e-3, 0.20131777632969522, 1e-8);
  // Free cumulants Σ p tⁿ: 0.4, 1, 0.4, 1 (Nica & Speicher 2006, from memory).
  const std::vector<double> k = fa::free_cumulants(law->moments(4));
  EXPECT_NEAR(k[1], 0.4, 1e-13);
  EXPECT_NEAR(k[2], 1.0, 1e-13);
  EXPECT_NEAR(k[3], 0.4, 1e-13);
  EXPECT_NEAR(k[4], 1.0, 1e-13);
  EXPECT_THROW(fa::free_compound_poisson({{1.0, 0.7}, {2.0, 0.7}}), freegap::InputError);
}

TEST(FreeCumulants, BernoulliAndRoundTrip) {
  // Source: free cumulants of the symmetric Bernoulli law 0, 1, 0, −1, 0, 2, 0, −5 (reference
  // §1.3).
  const std::vector<double> m = bernoulli()->moments(8);
  const std::vector<double> k = fa::free_cumulants(m);
  const std::vector<double> expected{0, 0, 1, 0, -1, 0, 2, 0, -5};
  for (int n = 1; n <= 8; ++n) EXPECT_NEAR(k[n], expected[n], 1e-14) << n;
  const std::vector<double> back = fa::moments_from_free_cumulants(k);
  for (int n = 0; n <= 8; ++n) EXPECT_NEAR(back[n], m[n], 1e-14) << n;
  // MP(c) has κ_n = c^{n−1} (ref §1.2).
  const std::vector<double> kmp = fa::free_cumulants(fa::marchenko_pastur(0.5)->moments(6));
  for (int n = 1; n <= 6; ++n) EXPECT_NEAR(kmp[n], std::pow(0.5, n - 1), 1e-13) << n;
}

TEST(FreeConvolution, BadInputGetsClearErrors) {
  try {
    fa::free_multiplicative(fa::marchenko_pastur(1.0), fa::semicircle());
    ADD_FAILURE() << "expected InputError";
  } catch (const freegap::InputError& e) {
    EXPECT_EQ(std::string(e.what()),
              "free_multiplicative: the second law semicircle(variance=1) must lie on [0, inf) "
              "(its support starts at -2)");
  }
  try {
    fa::free_additive(fa::circular(), fa::semicircle());
    ADD_FAILURE() << "expected InputError";
  } catch (const freegap::InputError& e) {
    EXPECT_EQ(std::string(e.what()),
              "free_additive: a radial law (circular) has no free additive convolution here");
  }
  EXPECT_THROW(fa::free_additive(nullptr, fa::semicircle()), freegap::InputError);
}
