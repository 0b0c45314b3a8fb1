// Tests of the limit laws: closed-form values, moments, CDFs, Cauchy transforms, bad input.
// Check values: docs/check-values.md (cited as "ref §x.y"), which gives each one's source.
#include <gtest/gtest.h>

#include <cmath>
#include <complex>
#include <numbers>
#include <string>
#include <vector>

#include "freegap/analysis/limits/laws.hpp"
#include "freegap/errors.hpp"

namespace fa = freegap::analysis;
using cd = std::complex<double>;
constexpr double kPi = std::numbers::pi;

namespace {

// ∫ f(t) g(t) dt over [lo, hi] by composite Gauss–Legendre in θ (x = lo + (hi−lo)(1−cos θ)/2), a
// quadrature independent of the library's own CDF code (common practice).
template <class G>
std::complex<double> integrate_against(const fa::Law& law, double lo, double hi, G g) {
  constexpr int kPanels = 400;
  // 5-point Gauss–Legendre (Abramowitz & Stegun 1964, Table 25.4).
  const double nodes[5] = {0.0, -0.5384693101056831, 0.5384693101056831, -0.9061798459386640,
                           0.9061798459386640};
  const double weights[5] = {0.5688888888888889, 0.4786286704993665, 0.4786286704993665,
                             0.2369268850561891, 0.2369268850561891};
  std::complex<double> sum = 0.0;
  const double half = 0.5 * (hi - lo);
  for (int p = 0; p < kPanels; ++p) {
    const double a = kPi * p / kPanels;
    const double b = kPi * (p + 1) / kPanels;
    for (int i = 0; i < 5; ++i) {
      const double t = 0.5 * (a + b) + 0.5 * (b - a) * nodes[i];
      const double x = lo + half * (1.0 - std::cos(t));
      sum += 0.5 * (b - a) * weights[i] * law.density(x) * g(x) * half * std::sin(t);
    }
  }
  return sum;
}

void expect_moments(const fa::Law& law, const std::vector<double>& expected, double tol) {
  const std::vector<double> m = law.moments(static_cast<int>(expected.size()) - 1);
  ASSERT_EQ(m.size(), expected.size());
  for (std::size_t k = 0; k < expected.size(); ++k) {
    EXPECT_NEAR(m[k], expected[k], tol * std::max(1.0, std::abs(expected[k]))) << "k=" << k;
  }
}

template <class F>
void expect_input_error(F f, const std::string& message) {
  try {
    f();
    ADD_FAILURE() << "no InputError, expected: " << message;
  } catch (const freegap::InputError& e) {
    EXPECT_EQ(std::string(e.what()), message);
  }
}

}  // namespace

TEST(Laws, SemicircleMomentsAndCdf) {
  // Source: Catalan numbers C(2k,k)/(k+1), ref §1.1 (Nica & Speicher 2006, from memory).
  expect_moments(*fa::semicircle(), {1, 0, 1, 0, 2, 0, 5, 0, 14, 0, 42}, 1e-15);
  // Variance v scales m_{2k} by v^k (scaling, elementary).
  expect_moments(*fa::semicircle(2.0), {1, 0, 2, 0, 8, 0, 40}, 1e-15);
  const auto sc = fa::semicircle();
  EXPECT_NEAR(sc->density(0.0), 1.0 / kPi, 1e-16);  // √4/(2π)
  // Source: CDF F(x) = 1/2 + x√(4−x²)/(4π) + arcsin(x/2)/π, ref §1.1; F(1) = 1/2 + √3/(4π) +
  // 1/6.
  EXPECT_NEAR(sc->cdf(1.0), 0.5 + std::sqrt(3.0) / (4 * kPi) + 1.0 / 6.0, 1e-15);
  EXPECT_NEAR(sc->quantile(sc->cdf(0.7)), 0.7, 1e-12);
  EXPECT_EQ(sc->support().hi, 2.0);
}

TEST(Laws, MarchenkoPasturValuesMomentsAtom) {
  const auto half = fa::marchenko_pastur(0.5);
  // Source: ref §1.2 (computed independently there from the Marchenko–Pastur density).
  EXPECT_NEAR(half->support().lo, 0.085786437626905, 1e-14);
  EXPECT_NEAR(half->support().hi, 2.9142135623731, 1e-13);
  EXPECT_NEAR(half->density(1.0), 0.421084399347792, 1e-14);
  EXPECT_NEAR(fa::marchenko_pastur(1.0)->density(1.0), 0.275664447710896, 1e-14);
  // Source: Narayana moments, ref §1.2 table (c = 1/2 and c = 2, atom included).
  expect_moments(*half, {1, 1, 1.5, 2.75, 45.0 / 8, 197.0 / 16, 903.0 / 32}, 1e-14);
  const auto two = fa::marchenko_pastur(2.0);
  expect_moments(*two, {1, 1, 3, 11, 45, 197, 903, 4279, 20793}, 1e-14);
  // Atom 1 − 1/c at 0 for c > 1 (Marchenko & Pastur 1967, from memory).
  ASSERT_EQ(two->support().atoms.size(), 1u);
  EXPECT_DOUBLE_EQ(two->support().atoms[0].weight, 0.5);
  EXPECT_DOUBLE_EQ(two->cdf(0.0), 0.5);
  EXPECT_NEAR(two->cdf(two->support().hi), 1.0, 1e-12);
  // G(z) ~ atom/z near 0: z·G(z) → 1/2 (elementary).
  const cd near0(1e-9, 1e-9);
  EXPECT_NEAR(std::abs(near0 * two->cauchy(near0) - 0.5), 0.0, 1e-6);
}

TEST(Laws, ArcsineValues) {
  const auto a = fa::arcsine();
  // Source: ref §1.3 (computed independently there): f(1), f(1.9), F(√2) = 3/4, F(1.9).
  EXPECT_NEAR(a->density(1.0), 0.183776298473931, 1e-15);
  EXPECT_NEAR(a->density(1.9), 0.509703744125178, 1e-15);
  EXPECT_NEAR(a->cdf(std::sqrt(2.0)), 0.75, 1e-15);
  EXPECT_NEAR(a->cdf(1.9), 0.89891737589574, 1e-14);
  EXPECT_NEAR(a->quantile(5.0 / 6.0), std::sqrt(3.0), 1e-14);
  expect_moments(*a, {1, 0, 2, 0, 6, 0, 20, 0, 70, 0, 252}, 1e-15);  // C(2k, k), §1.3
}

TEST(Laws, KestenMcKay) {
  const auto km = fa::kesten_mckay(2);
  // Source: ref §1.4 table (closed walks on the 4-regular tree, computed independently).
  expect_moments(*km, {1, 0, 4, 0, 28, 0, 232, 0, 2092, 0, 19864, 0, 195352}, 1e-15);
  EXPECT_NEAR(km->support().hi, 3.46410161513775, 1e-13);
  EXPECT_NEAR(km->density(0.0), 0.137832223855448, 1e-14);
  expect_moments(*fa::kesten_mckay(3), {1, 0, 6, 0, 66, 0, 876, 0, 12786}, 1e-15);
  EXPECT_NEAR(fa::kesten_mckay(3)->density(0.0), 0.11862709056953, 1e-13);
  // d = 1 is the arcsine law (ref §1.4, first row).
  EXPECT_NEAR(fa::kesten_mckay(1)->density(1.3), fa::arcsine()->density(1.3), 1e-15);
  EXPECT_NEAR(fa::kesten_mckay(1)->cdf(1.3), fa::arcsine()->cdf(1.3), 1e-12);
  EXPECT_NEAR(km->cdf(0.0), 0.5, 1e-13);  // symmetry
}

TEST(Laws, AtomsAndEmpirical) {
  const auto b = fa::atoms({{1.0, 0.25}, {-1.0, 0.75}});
  EXPECT_DOUBLE_EQ(b->cdf(-1.0), 0.75);
  EXPECT_DOUBLE_EQ(b->cdf(0.99), 0.75);
  EXPECT_DOUBLE_EQ(b->cdf(1.0), 1.0);
  EXPECT_DOUBLE_EQ(b->quantile(0.5), -1.0);
  EXPECT_DOUBLE_EQ(b->quantile(0.9), 1.0);
  expect_moments(*b, {1, -0.5, 1, -0.5}, 1e-16);
  EXPECT_EQ(b->density(0.3), 0.0);
  const cd z(0.2, 0.3);
  // |G| ≈ 1 here: a few units of rounding (the sum is done in real arithmetic).
  EXPECT_NEAR(std::abs(b->cauchy(z) - (0.25 / (z - 1.0) + 0.75 / (z + 1.0))), 0.0, 1e-15);
  const cd derivative = -(0.25 / ((z - 1.0) * (z - 1.0)) + 0.75 / ((z + 1.0) * (z + 1.0)));
  EXPECT_NEAR(std::abs(b->cauchy_derivative(z) - derivative), 0.0, 1e-15);
  const std::vector<double> values{3.0, 1.0, 3.0, 2.0};
  const auto e = fa::empirical(values);
  ASSERT_EQ(e->support().atoms.size(), 3u);  // the repeated 3 is merged
  EXPECT_DOUBLE_EQ(e->mass_at(3.0), 0.5);
  EXPECT_DOUBLE_EQ(e->moments(1)[1], 2.25);
}

TEST(Laws, UniformQuarterCircleCircular) {
  const auto u = fa::uniform(-1.0, 3.0);
  expect_moments(*u, {1, 1, 7.0 / 3.0, 5.0}, 1e-15);  // (b^{n+1} − a^{n+1})/((n+1)(b−a))
  EXPECT_DOUBLE_EQ(u->quantile(0.25), 0.0);
  const auto q = fa::quarter_circle();
  // Source: ref §1.9 (computed independently): E s = 8/(3π), E s³, E s⁵; even moments 1,
  // 2, 5.
  expect_moments(*q, {1, 0.848826363156775, 1, 1.35812218105084, 2, 3.10427927097335, 5}, 1e-14);
  EXPECT_NEAR(q->cdf(2.0), 1.0, 1e-15);
  const auto c = fa::circular();
  EXPECT_TRUE(c->radial());
  EXPECT_DOUBLE_EQ(c->cdf(0.5), 0.25);
  // E|λ|^{2k} = 1/(k+1), E|λ| = 2/3 (ref §1.9, elementary).
  const std::vector<double> m = c->moments(4);
  EXPECT_DOUBLE_EQ(m[1], 2.0 / 3.0);
  EXPECT_DOUBLE_EQ(m[2], 0.5);
  EXPECT_DOUBLE_EQ(m[4], 1.0 / 3.0);
}

TEST(Laws, FussCatalan) {
  const auto fc = fa::fuss_catalan(2);
  // Source: ref §1.5 (Penson & Życzkowski 2011; values computed independently there).
  expect_moments(*fc, {1, 1, 3, 12, 55, 273, 1428, 7752, 43263}, 1e-15);
  EXPECT_DOUBLE_EQ(fc->support().hi, 6.75);
  EXPECT_NEAR(fc->density(0.5), 0.318309886183791, 1e-14);
  EXPECT_NEAR(fc->density(1.0), 0.178979127488028, 1e-14);
  EXPECT_NEAR(fc->density(2.0), 0.0938604825721638, 1e-14);
  EXPECT_NEAR(fc->density(4.0), 0.0404931379511671, 1e-14);
  EXPECT_NEAR(fc->density(6.0), 0.0150457656513178, 1e-14);
  expect_moments(*fa::fuss_catalan(3), {1, 1, 4, 22, 140, 969, 7084}, 1e-15);
  EXPECT_NEAR(fa::fuss_catalan(3)->support().hi, 256.0 / 27.0, 1e-14);
  // s = 1 is the free Poisson law MP(1) (ref §1.5, first row).
  EXPECT_NEAR(fa::fuss_catalan(1)->density(1.7), fa::marchenko_pastur(1.0)->density(1.7), 1e-14);
  EXPECT_NEAR(fa::fuss_catalan(1)->cdf(1.7), fa::marchenko_pastur(1.0)->cdf(1.7), 1e-12);
}

// Every law's Cauchy transform must match ∫ f(t)/(z − t) dt (Stieltjes inversion's other side),
// and its moments must match ∫ t^k f(t) dt — checked by an independent quadrature.
TEST(Laws, CauchyTransformsAndMomentsMatchQuadrature) {
  const std::vector<fa::LawPtr> laws{fa::semicircle(1.5),
                                     fa::marchenko_pastur(0.5),
                                     fa::kesten_mckay(2),
                                     fa::uniform(-1.0, 2.0),
                                     fa::quarter_circle(),
                                     fa::arcsine(),
                                     fa::affine(fa::semicircle(), 2.0, 1.0),
                                     fa::affine(fa::marchenko_pastur(0.3), -1.0, 0.5)};
  for (const auto& law : laws) {
    const fa::Support s = law->support();
    for (const cd z : {cd(0.3, 0.7), cd(-2.5, 0.1), cd(s.hi + 0.5, 0.0), cd(1.0, -0.4)}) {
      const cd numeric =
          integrate_against(*law, s.lo, s.hi, [&](double t) { return 1.0 / (z - t); });
      const cd closed = law->cauchy(z);
      EXPECT_NEAR(std::abs(closed - numeric), 0.0, 1e-9 * std::abs(numeric))
          << law->describe() << " z=" << z;
      const cd h = 1e-5;
      const cd fd = (law->cauchy(z + h) - law->cauchy(z - h)) / (2.0 * h);
      EXPECT_NEAR(std::abs(law->cauchy_derivative(z) - fd), 0.0, 1e-6 * std::abs(fd) + 1e-9)
          << law->describe();
    }
    const std::vector<double> m = law->moments(4);
    for (int k = 1; k <= 4; ++k) {
      const double numeric =
          integrate_against(*law, s.lo, s.hi, [&](double t) { return std::pow(t, k); }).real();
      EXPECT_NEAR(m[k], numeric, 1e-6 * std::max(1.0, std::abs(numeric))) << law->describe();
    }
    EXPECT_NEAR(law->cdf(s.hi), 1.0, 1e-12) << law->describe();
    EXPECT_NEAR(law->cdf(law->quantile(0.3)), 0.3, 1e-10) << law->describe();
  }
}

TEST(Laws, FussCatalanCauchyBranchNearTheAxis) {
  // Stieltjes inversion of the continued root must give the parametrised density (§1.5).
  const auto fc = fa::fuss_catalan(2);
  for (double x : {0.2, 1.0, 3.0, 6.5}) {
    EXPECT_NEAR(-fc->cauchy(cd(x, 1e-11)).imag() / kPi, fc->density(x), 1e-8) << x;
  }
  EXPECT_LT(fc->cauchy(cd(-1.0, 0.0)).real(), 0.0);  // G < 0 left of the support
  // Far from the support G(z) = Σ m_n z^{−n−1} with the Fuss–Catalan moments (§1.5).
  for (int s : {2, 3}) {
    const auto law = fa::fuss_catalan(s);
    const std::vector<double> m = law->moments(80);
    for (const cd z : {cd(30.0, 5.0), cd(-25.0, -2.0), cd(0.0, 40.0)}) {
      cd series = 0.0;
      for (int n = 80; n >= 0; --n) series = series / z + m[n];
      series /= z;
      EXPECT_NEAR(std::abs(law->cauchy(z) - series), 0.0, 1e-13) << s << " " << z;
    }
  }
}

TEST(Laws, AffineImage) {
  const auto y = fa::affine(fa::semicircle(), 2.0, 1.0);  // 2X + 1
  expect_moments(*y, {1, 1, 5, 13, 57}, 1e-14);           // E(2X+1)^n from m = 1,0,1,0,2
  EXPECT_DOUBLE_EQ(y->support().lo, -3.0);
  EXPECT_DOUBLE_EQ(y->support().hi, 5.0);
  EXPECT_NEAR(y->cdf(2.0), fa::semicircle()->cdf(0.5), 1e-15);
  EXPECT_NEAR(y->density(2.0), 0.5 * fa::semicircle()->density(0.5), 1e-16);
  const auto flipped = fa::affine(fa::marchenko_pastur(2.0), -1.0, 0.0);
  EXPECT_DOUBLE_EQ(flipped->cdf(0.0), 1.0);
  EXPECT_NEAR(flipped->cdf(-1e-9), 0.5, 1e-6);  // the atom at 0 sits at the top now
}

TEST(Laws, PolynomialImageOfASemicircleSquaredIsMarchenkoPastur) {
  // X² for a standard semicircular X is the free Poisson law of rate 1, i.e. Marchenko–Pastur of
  // ratio 1 (Nica & Speicher 2006, from memory; both density formulas give √(4 − y)/(2π√y)).
  const auto y = fa::polynomial_image(fa::semicircle(), {0.0, 0.0, 1.0});
  const auto mp = fa::marchenko_pastur(1.0);
  EXPECT_EQ(y->support().lo, 0.0);
  EXPECT_DOUBLE_EQ(y->support().hi, 4.0);
  ASSERT_EQ(y->support().bands.size(), 1u);  // the images of [−2, 0] and [0, 2] coincide
  for (double x : {1e-12, 1e-6, 0.01, 0.5, 1.0, 2.5, 3.9, 4.0 - 1e-9}) {
    EXPECT_NEAR(y->density(x), mp->density(x), 1e-10 * std::max(1.0, mp->density(x))) << x;
    EXPECT_NEAR(y->cdf(x), mp->cdf(x), 1e-12) << x;
  }
  EXPECT_EQ(y->cdf(4.0), 1.0);
  // G off the axis, above and below it and close to the singular edge 0.
  for (cd z : {cd(1.0, 0.5), cd(-0.5, 1e-3), cd(3.0, -0.2), cd(1e-4, 1e-6), cd(6.0, 0.0)}) {
    EXPECT_LT(std::abs(y->cauchy(z) - mp->cauchy(z)), 1e-10 * std::abs(mp->cauchy(z))) << z;
    const cd h(0.0, 1e-5 * std::max(std::abs(z.imag()), 1e-3));
    const cd slope = (mp->cauchy(z + h) - mp->cauchy(z - h)) / (2.0 * h);
    EXPECT_LT(std::abs(y->cauchy_derivative(z) - slope), 1e-5 * std::abs(slope)) << z;
  }
  expect_moments(*y, {1, 1, 2, 5, 14, 42}, 1e-12);  // Catalan numbers
}

TEST(Laws, PolynomialImageSplitsAtCriticalPointsAndMapsAtoms) {
  // X³ − 2X for X uniform on [−2, 2]: p′ = 3x² − 2 vanishes at ±√(2/3), where p = ∓(4/3)√(2/3);
  // the CDF is X's CDF at the three preimages (common practice: change of variables):
  // P(p(X) ≤ 0) = P(X ≤ −√2) + P(0 ≤ X ≤ √2) = (2 − √2)/4 + √2/4 = 1/2.
  const auto y = fa::polynomial_image(fa::uniform(-2.0, 2.0), {0.0, -2.0, 0.0, 1.0});
  EXPECT_DOUBLE_EQ(y->support().lo, -4.0);
  EXPECT_DOUBLE_EQ(y->support().hi, 4.0);
  EXPECT_NEAR(y->cdf(0.0), 0.5, 1e-15);
  const double v = 4.0 / 3.0 * std::sqrt(2.0 / 3.0);  // the critical value
  // p(x) ≤ −v holds on [−2, −2√(2/3)] (x³ − 2x + v = (x − √(2/3))²(x + 2√(2/3))) and at √(2/3).
  // At a critical value the CDF has a square-root step (infinite density): a rounding δ of y
  // moves it by about √δ, so 1e-9 here.
  EXPECT_NEAR(y->cdf(-v), (2.0 - 2.0 * std::sqrt(2.0 / 3.0)) / 4.0, 1e-9);
  // Density at y = 1: three preimages, each contributing (1/4)/|3x² − 2|.
  double expected = 0.0;
  for (double x : {-1.6180339887498949, -0.6180339887498949, 1.0}) {  // roots of x³ − 2x − 1
    expected += 0.25 / std::abs(3.0 * x * x - 2.0);
  }
  EXPECT_NEAR(y->density(-1.0), expected, 1e-12);  // p is odd: f(−1) = f(1)
  EXPECT_NEAR(y->density(1.0), expected, 1e-12);
  // A critical value: finite, large, never inf, and the same whichever side of it the rounding of
  // v fell (its neighbours 1e-15 away give the same value).
  EXPECT_TRUE(std::isfinite(y->density(v)));
  EXPECT_GT(y->density(v), 1e3);
  EXPECT_EQ(y->density(v), y->density(std::nextafter(v, 0.0)));
  EXPECT_EQ(y->density(v), y->density(std::nextafter(v, 10.0)));
  EXPECT_EQ(y->density(-v), y->density(std::nextafter(-v, 0.0)));
  // Atoms map to atoms, equal images merged: x² on atoms −1, 1 (and a semicircle part).
  const auto atoms = fa::polynomial_image(fa::atoms({{-1.0, 0.25}, {1.0, 0.25}, {2.0, 0.5}}),
                                          {0.0, 0.0, 1.0});
  ASSERT_EQ(atoms->support().atoms.size(), 2u);
  EXPECT_DOUBLE_EQ(atoms->support().atoms[0].weight, 0.5);
  EXPECT_DOUBLE_EQ(atoms->support().atoms[1].value, 4.0);
  // MP(2) has an atom ½ at 0: W² − W keeps it at 0 and its continuous part sums to ½.
  const auto w = fa::polynomial_image(fa::marchenko_pastur(2.0), {0.0, -1.0, 1.0});
  ASSERT_EQ(w->support().atoms.size(), 1u);
  EXPECT_DOUBLE_EQ(w->support().atoms[0].value, 0.0);
  EXPECT_NEAR(w->support().atoms[0].weight, 0.5, 1e-15);
  EXPECT_NEAR(w->cdf(w->support().hi), 1.0, 1e-15);
  EXPECT_EQ(w->cdf(-0.25 - 1e-12), 0.0);  // nothing below the minimum −¼ of y² − y
  // Below 0 (the atom excluded): the continuous part of X on (0, 1], where x² − x ≤ 0.
  EXPECT_NEAR(w->cdf(-1e-300), fa::marchenko_pastur(2.0)->cdf(1.0) - 0.5, 1e-12);
  // Degree 1 is the affine law; a radial law is refused.
  EXPECT_DOUBLE_EQ(fa::polynomial_image(fa::semicircle(), {1.0, 2.0})->support().hi, 5.0);
  expect_input_error([] { fa::polynomial_image(fa::circular(), {0.0, 0.0, 1.0}); },
                     "polynomial_image: a radial law (circular (law of |λ|)) has no image here");
}

TEST(Laws, BadInputGetsClearErrors) {
  expect_input_error([] { fa::semicircle(0.0); },
                     "semicircle: variance must be a finite number > 0 (got 0)");
  expect_input_error([] { fa::marchenko_pastur(-1.0); },
                     "marchenko_pastur: ratio must be a finite number > 0 (got -1)");
  expect_input_error(
      [] {
        fa::atoms({{0.0, 0.5}, {1.0, 0.4}});
      },
      "atoms: weights must sum to 1 (got 0.9)");
  expect_input_error(
      [] {
        fa::atoms({{0.0, 1.5}, {1.0, -0.5}});
      },
      "atoms: weights must be finite and >= 0 (got -0.5)");
  expect_input_error([] { fa::empirical(std::vector<double>{}); },
                     "empirical: needs at least one value");
  expect_input_error([] { fa::uniform(1.0, 1.0); }, "uniform: needs finite a < b (got 1, 1)");
  expect_input_error([] { fa::kesten_mckay(0); },
                     "kesten_mckay: d must be >= 1 (degree 2d; got 0)");
  expect_input_error([] { fa::fuss_catalan(0); }, "fuss_catalan: s must be >= 1 (got 0)");
  expect_input_error([] { fa::affine(fa::semicircle(), 0.0, 1.0); },
                     "affine: needs finite a != 0 and finite b (got a=0, b=1)");
  expect_input_error(
      [] { fa::affine(fa::circular(), 1.0, 1.0); },
      "affine: a radial law (circular (law of |λ|)) only takes a scale a > 0 and b = 0");
  expect_input_error([] { fa::semicircle()->quantile(1.5); },
                     "quantile: probability must lie in [0, 1] (got 1.5)");
}
