// Closed-form and algebraic limit laws: densities, CDFs, Cauchy transforms, moments, supports.
#include "freegap/analysis/limits/laws.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>
#include <sstream>

#include "freegap/errors.hpp"
#include "freegap/text.hpp"
#include "laws_quadrature.hpp"

namespace freegap::analysis {

using cd = std::complex<double>;
constexpr double kPi = std::numbers::pi;

namespace {

void check_moment_order(int k) {
  if (k < 0) throw InputError("moments: order must be >= 0 (got " + std::to_string(k) + ")");
}

// Binomial coefficient in long double (exact for the sizes moments use).
long double binomial(int n, int k) {
  if (k < 0 || k > n) return 0.0L;
  k = std::min(k, n - k);
  long double value = 1.0L;
  for (int i = 1; i <= k; ++i) value = value * (n - k + i) / i;
  return value;
}

// sqrt(z − a)·sqrt(z − b) with principal roots: analytic off [a, b] and ~ z at infinity, the
// branch every closed-form Cauchy transform below needs.
cd edge_root(cd z, double a, double b) { return std::sqrt(z - a) * std::sqrt(z - b); }

// -------------------------------------------------------------------------------- semicircle
class Semicircle final : public Law {
 public:
  explicit Semicircle(double variance) : v_(variance), r_(2.0 * std::sqrt(variance)) {}
  double density(double x) const override {
    if (std::abs(x) >= r_) return 0.0;
    return std::sqrt(r_ * r_ - x * x) / (2.0 * kPi * v_);
  }
  double cdf(double x) const override {
    if (x <= -r_) return 0.0;
    if (x >= r_) return 1.0;
    return 0.5 + x * std::sqrt(r_ * r_ - x * x) / (4.0 * kPi * v_) + std::asin(x / r_) / kPi;
  }
  // G = (z − √(z² − 4v))/(2v) solves v G² − z G + 1 = 0 (Wigner 1955, from memory); the
  // rationalised form 2/(z + √·) avoids cancellation for large |z|.
  cd cauchy(cd z) const override { return 2.0 / (z + edge_root(z, -r_, r_)); }
  cd cauchy_derivative(cd z) const override { return -cauchy(z) / edge_root(z, -r_, r_); }
  std::vector<double> moments(int k) const override {
    check_moment_order(k);
    std::vector<double> m(k + 1, 0.0);
    for (int n = 0; n <= k; n += 2) {
      const int h = n / 2;
      m[n] = static_cast<double>(binomial(n, h) / (h + 1)) * std::pow(v_, h);
    }
    return m;
  }
  Support support() const override { return {-r_, r_, {}, {{-r_, r_}}}; }
  std::string describe() const override { return "semicircle(variance=" + text::readable(v_) + ")"; }

 private:
  double v_;
  double r_;
};

// -------------------------------------------------------------------------- Marchenko–Pastur
class MarchenkoPastur final : public Law {
 public:
  explicit MarchenkoPastur(double c)
      : c_(c), a_(std::pow(1.0 - std::sqrt(c), 2)), b_(std::pow(1.0 + std::sqrt(c), 2)) {}
  double density(double x) const override {
    if (x <= a_ || x >= b_) return 0.0;
    return std::sqrt((b_ - x) * (x - a_)) / (2.0 * kPi * c_ * x);
  }
  double cdf(double x) const override {
    if (x < 0.0) return 0.0;
    const double atom = c_ > 1.0 ? 1.0 - 1.0 / c_ : 0.0;
    if (x >= b_) return 1.0;
    return atom + detail::integrate_density([this](double t) { return density(t); }, a_, b_, x);
  }
  // G = (z + c − 1 − √((z−a)(z−b)))/(2cz) (Marchenko & Pastur 1967, from memory); the
  // rationalised 2/(z + c − 1 + √·) is used where it has the larger denominator.
  cd cauchy(cd z) const override {
    const cd s = edge_root(z, a_, b_);
    const cd plus = z + (c_ - 1.0) + s;
    const cd minus = z + (c_ - 1.0) - s;
    if (std::abs(plus) >= std::abs(minus)) return 2.0 / plus;
    return minus / (2.0 * c_ * z);
  }
  // m_n = Σ_j Nar(n, j) c^{j−1}, atom included (Nica & Speicher 2006, from memory).
  std::vector<double> moments(int k) const override {
    check_moment_order(k);
    std::vector<double> m(k + 1, 0.0);
    m[0] = 1.0;
    for (int n = 1; n <= k; ++n) {
      long double sum = 0.0L;
      for (int j = 1; j <= n; ++j) {
        sum +=
            binomial(n, j) * binomial(n, j - 1) / n * std::pow(static_cast<long double>(c_), j - 1);
      }
      m[n] = static_cast<double>(sum);
    }
    return m;
  }
  Support support() const override {
    if (c_ > 1.0) return {0.0, b_, {{0.0, 1.0 - 1.0 / c_}}, {{a_, b_}}};
    return {a_, b_, {}, {{a_, b_}}};
  }
  std::string describe() const override { return "marchenko_pastur(ratio=" + text::readable(c_) + ")"; }

 private:
  double c_;
  double a_;
  double b_;
};

// ------------------------------------------------------------------------------------ arcsine
class Arcsine final : public Law {
 public:
  double density(double x) const override {
    if (std::abs(x) >= 2.0) return 0.0;
    return 1.0 / (kPi * std::sqrt(4.0 - x * x));
  }
  double cdf(double x) const override {
    if (x <= -2.0) return 0.0;
    if (x >= 2.0) return 1.0;
    return 0.5 + std::asin(x / 2.0) / kPi;
  }
  cd cauchy(cd z) const override { return 1.0 / edge_root(z, -2.0, 2.0); }
  cd cauchy_derivative(cd z) const override {
    const cd g = cauchy(z);
    return -z * g * g * g;
  }
  // m_{2k} = C(2k, k) (Nica & Speicher 2006, from memory).
  std::vector<double> moments(int k) const override {
    check_moment_order(k);
    std::vector<double> m(k + 1, 0.0);
    for (int n = 0; n <= k; n += 2) m[n] = static_cast<double>(binomial(n, n / 2));
    return m;
  }
  Support support() const override { return {-2.0, 2.0, {}, {{-2.0, 2.0}}}; }
  double quantile(double p) const override {
    if (!(p >= 0.0 && p <= 1.0)) return Law::quantile(p);
    return 2.0 * std::sin(kPi * (p - 0.5));
  }
  std::string describe() const override { return "arcsine"; }
};

// ------------------------------------------------------------------------------ Kesten–McKay
class KestenMcKay final : public Law {
 public:
  explicit KestenMcKay(int d) : d_(d), D_(2.0 * d), r_(2.0 * std::sqrt(2.0 * d - 1.0)) {}
  // f(x) = D√(4(D−1) − x²)/(2π(D² − x²)) (Kesten 1959; McKay 1981, from memory).
  double density(double x) const override {
    if (std::abs(x) >= r_) return 0.0;
    return D_ * std::sqrt(r_ * r_ - x * x) / (2.0 * kPi * (D_ * D_ - x * x));
  }
  double cdf(double x) const override {
    if (x <= -r_) return 0.0;
    if (x >= r_) return 1.0;
    return detail::integrate_density([this](double t) { return density(t); }, -r_, r_, x);
  }
  // G = ((D−2)z − D√(z² − 4(D−1)))/(2(D² − z²)), rationalised here to
  // 2(D−1)/((D−2)z + D√(z² − 4(D−1))) so the removable 0/0 at z = ±D disappears (derived here).
  cd cauchy(cd z) const override {
    return 2.0 * (D_ - 1.0) / ((D_ - 2.0) * z + D_ * edge_root(z, -r_, r_));
  }
  // Closed walks of length n at the root of the D-regular tree.
  std::vector<double> moments(int k) const override {
    check_moment_order(k);
    std::vector<long double> walks(k + 2, 0.0L);
    walks[0] = 1.0L;
    std::vector<double> m(k + 1, 0.0);
    m[0] = 1.0;
    for (int n = 1; n <= k; ++n) {
      std::vector<long double> next(k + 2, 0.0L);
      for (int j = 0; j <= k; ++j) {
        if (walks[j] == 0.0L) continue;
        if (j == 0) {
          next[1] += D_ * walks[0];
        } else {
          next[j - 1] += walks[j];
          next[j + 1] += (D_ - 1.0) * walks[j];
        }
      }
      walks = std::move(next);
      m[n] = static_cast<double>(walks[0]);
    }
    return m;
  }
  Support support() const override { return {-r_, r_, {}, {{-r_, r_}}}; }
  std::string describe() const override { return "kesten_mckay(d=" + std::to_string(d_) + ")"; }

 private:
  int d_;
  double D_;
  double r_;
};

// ------------------------------------------------------------------------------------- atoms
class Atoms final : public Law {
 public:
  explicit Atoms(std::vector<Atom> points, std::string name)
      : points_(std::move(points)), name_(std::move(name)) {
    cumulative_.reserve(points_.size());
    double sum = 0.0;
    for (const Atom& a : points_) cumulative_.push_back(sum += a.weight);
    values_.reserve(points_.size());
    masses_.reserve(points_.size());
    for (const Atom& a : points_) {
      values_.push_back(a.value);
      masses_.push_back(a.weight);
    }
  }
  double density(double) const override { return 0.0; }
  double cdf(double x) const override {
    auto it = std::upper_bound(points_.begin(), points_.end(), x,
                               [](double v, const Atom& a) { return v < a.value; });
    if (it == points_.begin()) return 0.0;
    return std::min(1.0, cumulative_[std::distance(points_.begin(), it) - 1]);
  }
  // 1/(z − a) = conj(z − a)/|z − a|² in real arithmetic: the library's complex division guards
  // against overflow at several times the cost, and these sums dominate the solvers' time for
  // laws of many atoms (z − a is never near overflow here). At an atom the sum is infinite, as
  // the Cauchy transform is.
  cd cauchy(cd z) const override {
    const double zr = z.real(), di = z.imag(), di2 = di * di;
    const std::size_t n = values_.size();
    const double* v = values_.data();
    const double* w = masses_.data();
    double re = 0.0, im = 0.0;
#pragma omp simd reduction(+ : re, im)
    for (std::size_t i = 0; i < n; ++i) {
      const double dr = zr - v[i];
      const double q = w[i] / (dr * dr + di2);
      re += dr * q;
      im += q;
    }
    return {re, 0.0 - di * im};  // signed zeros and NaN at an atom as the plain sum gives them
  }
  cd cauchy_derivative(cd z) const override {
    // −Σ w/(z − a)² = −Σ w conj(z − a)²/|z − a|⁴.
    double re = 0.0, im = 0.0;
    for (const Atom& a : points_) {
      const double dr = z.real() - a.value, di = z.imag();
      const double n = dr * dr + di * di;
      const double s = a.weight / (n * n);
      re -= (dr * dr - di * di) * s;
      im += 2.0 * dr * di * s;
    }
    return {re, im};
  }
  // Both sums in one pass, one division per atom: with q = w/|z − a|², G = Σ q·conj(z − a) and
  // G' = −Σ (q/|z − a|²)·conj(z − a)².
  std::pair<cd, cd> cauchy_with_derivative(cd z) const override {
    const double zr = z.real(), di = z.imag(), di2 = di * di;
    const std::size_t n = values_.size();
    const double* v = values_.data();
    const double* w = masses_.data();
    double gr = 0.0, gi = 0.0, dr_sum = 0.0, di_sum = 0.0;
#pragma omp simd reduction(+ : gr, gi, dr_sum, di_sum)
    for (std::size_t i = 0; i < n; ++i) {
      const double dr = zr - v[i];
      const double norm = dr * dr + di2;
      const double inv = 1.0 / norm;
      const double q = w[i] * inv;
      gr += dr * q;
      gi += q;
      const double p = q * inv;
      dr_sum += (dr * dr - di2) * p;
      di_sum += dr * p;
    }
    // Signed zeros and NaNs as the term-by-term sums give them (the solvers' branch choices and
    // their checks at an atom see them): 0 − x and 0 + x turn an exact −0 into +0, and 0·∞ at
    // an atom stays NaN.
    return {cd(gr, 0.0 - di * gi), cd(0.0 - dr_sum, 0.0 + 2.0 * di * di_sum)};
  }
  std::vector<double> moments(int k) const override {
    check_moment_order(k);
    std::vector<double> m(k + 1, 0.0);
    for (const Atom& a : points_) {
      double power = a.weight;
      for (int n = 0; n <= k; ++n, power *= a.value) m[n] += power;
    }
    return m;
  }
  Support support() const override {
    return {points_.front().value, points_.back().value, points_, {}};
  }
  double quantile(double p) const override {
    if (!(p >= 0.0 && p <= 1.0)) return Law::quantile(p);
    for (std::size_t i = 0; i < points_.size(); ++i) {
      if (cumulative_[i] >= p - 1e-15) return points_[i].value;
    }
    return points_.back().value;
  }
  std::string describe() const override { return name_; }

 private:
  std::vector<Atom> points_;
  std::vector<double> cumulative_;
  std::vector<double> values_, masses_;  ///< points_ split, for the fused sums
  std::string name_;
};

// ----------------------------------------------------------------------------------- uniform
class Uniform final : public Law {
 public:
  Uniform(double a, double b) : a_(a), b_(b) {}
  double density(double x) const override { return (x > a_ && x < b_) ? 1.0 / (b_ - a_) : 0.0; }
  double cdf(double x) const override { return std::clamp((x - a_) / (b_ - a_), 0.0, 1.0); }
  // G = log((z − a)/(z − b))/(b − a); the ratio is negative real only for z ∈ (a, b).
  cd cauchy(cd z) const override { return std::log((z - a_) / (z - b_)) / (b_ - a_); }
  cd cauchy_derivative(cd z) const override {
    return (1.0 / (z - a_) - 1.0 / (z - b_)) / (b_ - a_);
  }
  std::vector<double> moments(int k) const override {
    check_moment_order(k);
    std::vector<double> m(k + 1, 1.0);
    // E X^n = Σ_{j=0}^n a^j b^{n−j}/(n+1), which avoids the cancellation in (b^{n+1} − a^{n+1}).
    for (int n = 1; n <= k; ++n) {
      double sum = 0.0;
      for (int j = 0; j <= n; ++j) sum += std::pow(a_, j) * std::pow(b_, n - j);
      m[n] = sum / (n + 1);
    }
    return m;
  }
  Support support() const override { return {a_, b_, {}, {{a_, b_}}}; }
  double quantile(double p) const override {
    if (!(p >= 0.0 && p <= 1.0)) return Law::quantile(p);
    return a_ + p * (b_ - a_);
  }
  std::string describe() const override {
    return "uniform(" + text::readable(a_) + ", " + text::readable(b_) + ")";
  }

 private:
  double a_;
  double b_;
};

// ---------------------------------------------------------------------------- quarter circle
class QuarterCircle final : public Law {
 public:
  double density(double x) const override {
    if (x <= 0.0 || x >= 2.0) return 0.0;
    return std::sqrt(4.0 - x * x) / kPi;
  }
  double cdf(double x) const override {
    if (x <= 0.0) return 0.0;
    if (x >= 2.0) return 1.0;
    return (0.5 * x * std::sqrt(4.0 - x * x) + 2.0 * std::asin(x / 2.0)) / kPi;
  }
  // The quarter circle is the law of |S|, S standard semicircular, so
  // G(z) = G_S(z) + ∫_0^2 2t ρ_S(t)/(z² − t²) dt = G_S(z) + (4 − 2a·atan(2/a))/(2π), a = √(z² − 4)
  // (derived here; a·atan(2/a) is even in a, so the branch of a does not matter).
  cd cauchy(cd z) const override {
    if (z.imag() == 0.0 && z.real() < 0.0) {
      // Both terms have a cut on (−2, 0) that cancels in the sum; step just off the axis.
      return cauchy(cd(z.real(), 1e-15 * (1.0 + std::abs(z.real())))).real();
    }
    const cd gs = 2.0 / (z + edge_root(z, -2.0, 2.0));
    const cd a = std::sqrt(z * z - 4.0);
    return gs + (4.0 - 2.0 * a * std::atan(2.0 / a)) / (2.0 * kPi);
  }
  // E s^k = 2^{k+1} Γ((k+1)/2) Γ(3/2) / (π Γ(k/2 + 2)) (a Beta integral, derived here).
  std::vector<double> moments(int k) const override {
    check_moment_order(k);
    std::vector<double> m(k + 1);
    for (int n = 0; n <= k; ++n) {
      m[n] = std::exp((n + 1) * std::log(2.0) + std::lgamma(0.5 * (n + 1)) + std::lgamma(1.5) -
                      std::lgamma(0.5 * n + 2.0)) /
             kPi;
    }
    for (int n = 0; n <= k; n += 2) m[n] = static_cast<double>(binomial(n, n / 2) / (n / 2 + 1));
    return m;
  }
  Support support() const override { return {0.0, 2.0, {}, {{0.0, 2.0}}}; }
  std::string describe() const override { return "quarter_circle"; }
};

// ------------------------------------------------------------------------------ Fuss–Catalan
class FussCatalan final : public Law {
 public:
  explicit FussCatalan(int s)
      : s_(s), edge_(std::pow(s + 1.0, s + 1.0) / std::pow(static_cast<double>(s), s)) {}

  // On the support the boundary value w = zG of w^{s+1} = z(w − 1) has argument α ∈ (0, π/(s+1)),
  // and the triangle 0, 1, w gives (law of sines, derived here; the same parametrisation as
  // Haagerup & Möller 2012 and Neuschel 2014, from memory)
  //   x(α) = sin^{s+1}((s+1)α) / (sin α · sin^s(sα)),   f(x(α)) = sin((s+1)α) sin α / (π x
  //   sin(sα)).
  double x_of(double alpha) const {
    return std::pow(std::sin((s_ + 1) * alpha), s_ + 1) /
           (std::sin(alpha) * std::pow(std::sin(s_ * alpha), s_));
  }
  double f_of(double alpha, double x) const {
    return std::sin((s_ + 1) * alpha) * std::sin(alpha) / (kPi * x * std::sin(s_ * alpha));
  }
  // x(α) decreases from the edge (α → 0) to 0 (α → π/(s+1)); bisection on log x.
  double alpha_of(double x) const {
    double lo = 0.0;
    double hi = kPi / (s_ + 1);
    for (int i = 0; i < 200 && hi - lo > 1e-17; ++i) {
      const double mid = 0.5 * (lo + hi);
      if (x_of(mid) > x) {
        lo = mid;
      } else {
        hi = mid;
      }
    }
    return 0.5 * (lo + hi);
  }
  double density(double x) const override {
    if (x <= 0.0 || x >= edge_) return 0.0;
    return f_of(alpha_of(x), x);
  }
  // F(x) = ∫_{α(x)}^{π/(s+1)} f(x(α)) |x'(α)| dα; the integrand is smooth, even where f blows up at
  // 0.
  double cdf(double x) const override {
    if (x <= 0.0) return 0.0;
    if (x >= edge_) return 1.0;
    const double sp = s_ + 1.0;
    auto integrand = [&](double alpha) {
      const double sa = std::sin(alpha);
      const double ssa = std::sin(s_ * alpha);
      const double spa = std::sin(sp * alpha);
      const double cot_a = std::cos(alpha) / sa;
      const double cot_sa = std::cos(s_ * alpha) / ssa;
      // f·|x'| = (sin α / (π sin sα)) · |(s+1)² cos((s+1)α) − sin((s+1)α)(cot α + s² cot sα)|.
      return sa / (kPi * ssa) *
             std::abs(sp * sp * std::cos(sp * alpha) - spa * (cot_a + s_ * s_ * cot_sa));
    };
    return detail::integrate(integrand, alpha_of(x), kPi / sp, 1e-15);
  }
  // G = w/z with w^{s+1} − z w + z = 0 (w(1/z) = Σ FC_s(n) z^{−n}; Młotkowski 2010, from memory).
  // The right root is followed by continuation down the vertical line from far above z, where
  // w ≈ 1; the branch points (z = 0 and z = edge) are real, so the path never crosses them.
  cd cauchy(cd z) const override {
    if (z.imag() < 0.0) return std::conj(cauchy(std::conj(z)));
    const double target = z.imag();
    double y = std::max({4.0 * edge_, 4.0 * std::abs(z.real()), target});
    cd w = newton(cd(z.real(), y), 1.0);
    while (y > target) {
      double next = std::max(target, 0.5 * y);
      if (next < 1e-3 * y) next = target;  // already tiny: step straight there
      cd candidate;
      bool ok = false;
      for (int tries = 0; tries < 60 && !ok; ++tries) {
        ok = try_newton(cd(z.real(), next), w, candidate);
        if (!ok) next = 0.5 * (y + next);
      }
      if (!ok)
        throw NumericalError("fuss_catalan: root continuation failed at z = " + text::readable(z.real()));
      w = candidate;
      y = next;
    }
    return w / z;
  }
  cd cauchy_derivative(cd z) const override {
    const cd g = cauchy(z);
    const cd w = g * z;
    const cd dw = (w - 1.0) / ((s_ + 1.0) * std::pow(w, s_) - z);  // implicit differentiation
    return dw / z - w / (z * z);
  }
  // FC_s(n) = C((s+1)n, n)/(sn + 1).
  std::vector<double> moments(int k) const override {
    check_moment_order(k);
    std::vector<double> m(k + 1);
    for (int n = 0; n <= k; ++n) {
      m[n] =
          static_cast<double>(binomial((s_ + 1) * n, n) / (static_cast<long double>(s_) * n + 1));
    }
    return m;
  }
  Support support() const override { return {0.0, edge_, {}, {{0.0, edge_}}}; }
  std::string describe() const override { return "fuss_catalan(s=" + std::to_string(s_) + ")"; }

 private:
  bool try_newton(cd z, cd start, cd& out) const {
    cd w = start;
    for (int i = 0; i < 40; ++i) {
      const cd ws = std::pow(w, s_);
      const cd p = ws * w - z * w + z;
      const cd dp = (s_ + 1.0) * ws - z;
      const cd step = p / dp;
      w -= step;
      if (!std::isfinite(w.real()) || !std::isfinite(w.imag())) return false;
      if (std::abs(step) <= 1e-15 * std::abs(w)) {
        // Reject a jump to another branch: continuation steps move w only a little.
        if (std::abs(w - start) > 0.25 * std::abs(start)) return false;
        out = w;
        return true;
      }
    }
    return false;
  }
  cd newton(cd z, cd start) const {
    cd out;
    if (!try_newton(z, start, out)) throw NumericalError("fuss_catalan: Newton failed");
    return out;
  }
  int s_;
  double edge_;
};

// ---------------------------------------------------------------------------------- circular
class Circular final : public Law {
 public:
  double density(double r) const override { return (r > 0.0 && r < 1.0) ? 2.0 * r : 0.0; }
  double cdf(double r) const override {
    if (r <= 0.0) return 0.0;
    return r >= 1.0 ? 1.0 : r * r;
  }
  // ∫_0^1 2r/(z − r) dr = −2 + 2z log(z/(z − 1)).
  cd cauchy(cd z) const override { return -2.0 + 2.0 * z * std::log(z / (z - 1.0)); }
  std::vector<double> moments(int k) const override {
    check_moment_order(k);
    std::vector<double> m(k + 1);
    for (int j = 0; j <= k; ++j) m[j] = 2.0 / (j + 2.0);
    return m;
  }
  Support support() const override { return {0.0, 1.0, {}, {{0.0, 1.0}}}; }
  double quantile(double p) const override {
    if (!(p >= 0.0 && p <= 1.0)) return Law::quantile(p);
    return std::sqrt(p);
  }
  std::string describe() const override { return "circular (law of |λ|)"; }
  bool radial() const override { return true; }
};

// ------------------------------------------------------------------------------------ affine
class Affine final : public Law {
 public:
  Affine(LawPtr law, double a, double b) : law_(std::move(law)), a_(a), b_(b) {}
  const LawPtr& inner() const { return law_; }
  double scale() const { return a_; }
  double shift() const { return b_; }
  double density(double x) const override { return law_->density((x - b_) / a_) / std::abs(a_); }
  double cdf(double x) const override {
    const double y = (x - b_) / a_;
    if (a_ > 0.0) return law_->cdf(y);
    return std::clamp(1.0 - law_->cdf(y) + law_->mass_at(y), 0.0, 1.0);
  }
  cd cauchy(cd z) const override { return law_->cauchy((z - b_) / a_) / a_; }
  cd cauchy_derivative(cd z) const override {
    return law_->cauchy_derivative((z - b_) / a_) / (a_ * a_);
  }
  std::vector<double> moments(int k) const override {
    const std::vector<double> inner = law_->moments(k);
    std::vector<double> m(k + 1, 0.0);
    for (int n = 0; n <= k; ++n) {
      long double sum = 0.0L;
      for (int j = 0; j <= n; ++j) {
        sum += binomial(n, j) * std::pow(static_cast<long double>(a_), j) *
               std::pow(static_cast<long double>(b_), n - j) * inner[j];
      }
      m[n] = static_cast<double>(sum);
    }
    return m;
  }
  Support support() const override {
    Support inner = law_->support();
    Support out;
    out.lo = std::min(a_ * inner.lo, a_ * inner.hi) + b_;
    out.hi = std::max(a_ * inner.lo, a_ * inner.hi) + b_;
    for (const Atom& atom : inner.atoms) out.atoms.push_back({a_ * atom.value + b_, atom.weight});
    std::sort(out.atoms.begin(), out.atoms.end(),
              [](const Atom& l, const Atom& r) { return l.value < r.value; });
    for (const Interval& band : inner.bands) {
      out.bands.push_back({std::min(a_ * band.lo, a_ * band.hi) + b_,
                           std::max(a_ * band.lo, a_ * band.hi) + b_});
    }
    std::sort(out.bands.begin(), out.bands.end(),
              [](const Interval& l, const Interval& r) { return l.lo < r.lo; });
    return out;
  }
  double quantile(double p) const override {
    if (a_ > 0.0 && p >= 0.0 && p <= 1.0) return a_ * law_->quantile(p) + b_;
    return Law::quantile(p);
  }
  // Plain notation: "2·(semicircle(variance=1)) + 1", with a factor 1 and a shift 0 left out.
  std::string describe() const override {
    std::string out = law_->describe();
    if (a_ == -1.0) {
      out = "−(" + out + ")";
    } else if (a_ != 1.0) {
      out = text::readable(a_) + "·(" + out + ")";
    }
    if (b_ > 0.0) out += " + " + text::readable(b_);
    if (b_ < 0.0) out += " − " + text::readable(-b_);
    return out;
  }
  bool radial() const override { return law_->radial(); }

 private:
  LawPtr law_;
  double a_;
  double b_;
};

// The law of √Y for Y ~ law on [0, ∞): singular values of a matrix whose squared singular values
// have that law. CDF F(t²), density 2t·f(t²), atoms at √a; even moments are Y's, odd ones (and the
// Cauchy transform) by quadrature of the continuous part with the edge-smoothing substitution.
class SquareRoot final : public Law {
 public:
  explicit SquareRoot(LawPtr law) : law_(std::move(law)), inner_(law_->support()) {
    lo_ = std::sqrt(std::max(inner_.lo, 0.0));
    hi_ = std::sqrt(std::max(inner_.hi, 0.0));
    for (const Atom& a : inner_.atoms) atom_mass_ += a.weight;
  }
  double density(double t) const override {
    return t <= 0.0 ? 0.0 : 2.0 * t * law_->density(t * t);
  }
  double cdf(double t) const override { return t < 0.0 ? 0.0 : law_->cdf(t * t); }
  cd cauchy(cd z) const override {
    cd g = 0.0;
    for (const Atom& a : inner_.atoms) g += a.weight / (z - std::sqrt(a.value));
    return g + continuous([z](double t) { return 1.0 / (z - t); });
  }
  std::vector<double> moments(int k) const override {
    check_moment_order(k);
    const std::vector<double> inner = law_->moments(k / 2);
    std::vector<double> m(k + 1, 0.0);
    for (int j = 0; j <= k; ++j) {
      if (j % 2 == 0) {
        m[j] = inner[j / 2];
        continue;
      }
      double sum = 0.0;
      for (const Atom& a : inner_.atoms) sum += a.weight * std::pow(std::sqrt(a.value), j);
      m[j] = sum + continuous([j](double t) { return cd(std::pow(t, j), 0.0); }).real();
    }
    return m;
  }
  Support support() const override {
    Support out;
    out.lo = lo_;
    out.hi = hi_;
    for (const Atom& a : inner_.atoms) out.atoms.push_back({std::sqrt(std::max(a.value, 0.0)), a.weight});
    for (const Interval& band : inner_.bands) {
      out.bands.push_back({std::sqrt(std::max(band.lo, 0.0)), std::sqrt(std::max(band.hi, 0.0))});
    }
    return out;
  }
  double quantile(double p) const override {
    if (p >= 0.0 && p <= 1.0) return std::sqrt(std::max(law_->quantile(p), 0.0));
    return Law::quantile(p);
  }
  std::string describe() const override { return "sqrt(" + law_->describe() + ")"; }

 private:
  // ∫ g(t) f_√Y(t) dt over the continuous part: Gauss–Legendre in θ with t = lo + w(1 − cos θ)/2,
  // which removes square-root and inverse-power edge behaviour (a 400-point rule; the integrands
  // here are smooth in θ, so the error is far below what finite-N comparisons resolve).
  template <class G>
  cd continuous(G g) const {
    if (atom_mass_ >= 1.0 - 1e-15 || !(hi_ > lo_)) return 0.0;
    const auto& rule = detail::gauss_legendre(400);
    const double w = hi_ - lo_;
    cd sum = 0.0;
    for (std::size_t i = 0; i < rule.nodes.size(); ++i) {
      const double theta = 0.5 * kPi * (rule.nodes[i] + 1.0);
      const double t = lo_ + 0.5 * w * (1.0 - std::cos(theta));
      const double jac = 0.25 * kPi * w * std::sin(theta);
      sum += rule.weights[i] * jac * density(t) * g(t);
    }
    return sum;
  }
  LawPtr law_;
  Support inner_;
  double lo_ = 0.0, hi_ = 0.0, atom_mass_ = 0.0;
};

}  // namespace

// ------------------------------------------------------------------------------- Law defaults
cd Law::cauchy_derivative(cd z) const {
  const double h = z.imag() != 0.0 ? 1e-4 * std::abs(z.imag()) : 1e-6 * (1.0 + std::abs(z));
  return (cauchy(z + h) - cauchy(z - h)) / (2.0 * h);
}

std::pair<cd, cd> Law::cauchy_with_derivative(cd z) const { return {cauchy(z), cauchy_derivative(z)}; }

double Law::quantile(double p) const {
  if (!(p >= 0.0 && p <= 1.0)) {
    throw InputError("quantile: probability must lie in [0, 1] (got " + text::readable(p) + ")");
  }
  const Support s = support();
  double lo = s.lo;
  double hi = s.hi;
  if (p <= 0.0) return lo;
  // Invariant: cdf(lo) < p ≤ cdf(hi) (up to the start); stop at the resolution of doubles.
  for (int i = 0; i < 200 && hi - lo > 4.0 * std::numeric_limits<double>::epsilon() *
                                           std::max(1.0, std::abs(lo) + std::abs(hi));
       ++i) {
    const double mid = 0.5 * (lo + hi);
    if (cdf(mid) >= p) {
      hi = mid;
    } else {
      lo = mid;
    }
  }
  return hi;
}

std::vector<double> Law::densities(std::span<const double> xs) const {
  std::vector<double> out;
  out.reserve(xs.size());
  for (double x : xs) out.push_back(density(x));
  return out;
}

double Law::mass_at(double x) const {
  for (const Atom& a : support().atoms) {
    if (std::abs(a.value - x) <= 1e-12 * (1.0 + std::abs(x))) return a.weight;
  }
  return 0.0;
}

// ----------------------------------------------------------------------------------- factories
LawPtr semicircle(double variance) {
  if (!(variance > 0.0) || !std::isfinite(variance)) {
    throw InputError("semicircle: variance must be a finite number > 0 (got " + text::readable(variance) +
                     ")");
  }
  return std::make_shared<Semicircle>(variance);
}

LawPtr marchenko_pastur(double ratio) {
  if (!(ratio > 0.0) || !std::isfinite(ratio)) {
    throw InputError("marchenko_pastur: ratio must be a finite number > 0 (got " + text::readable(ratio) +
                     ")");
  }
  return std::make_shared<MarchenkoPastur>(ratio);
}

LawPtr arcsine() { return std::make_shared<Arcsine>(); }

LawPtr kesten_mckay(int d) {
  if (d < 1) {
    throw InputError("kesten_mckay: d must be >= 1 (degree 2d; got " + std::to_string(d) + ")");
  }
  return std::make_shared<KestenMcKay>(d);
}

namespace {

LawPtr make_atoms(std::vector<Atom> points, const char* who, std::string name) {
  if (points.empty()) throw InputError(std::string(who) + ": needs at least one point");
  double total = 0.0;
  for (const Atom& a : points) {
    if (!std::isfinite(a.value)) throw InputError(std::string(who) + ": values must be finite");
    if (!(a.weight >= 0.0) || !std::isfinite(a.weight)) {
      throw InputError(std::string(who) + ": weights must be finite and >= 0 (got " +
                       text::readable(a.weight) + ")");
    }
    total += a.weight;
  }
  if (std::abs(total - 1.0) > 1e-9) {
    throw InputError(std::string(who) + ": weights must sum to 1 (got " + text::readable(total) + ")");
  }
  std::sort(points.begin(), points.end(),
            [](const Atom& l, const Atom& r) { return l.value < r.value; });
  std::vector<Atom> merged;
  for (const Atom& a : points) {
    if (a.weight == 0.0) continue;
    if (!merged.empty() && merged.back().value == a.value) {
      merged.back().weight += a.weight;
    } else {
      merged.push_back({a.value, a.weight});
    }
  }
  for (Atom& a : merged) a.weight /= total;  // remove the last rounding of the sum
  return std::make_shared<Atoms>(std::move(merged), std::move(name));
}

}  // namespace

LawPtr atoms(std::vector<Atom> points) {
  std::ostringstream name;
  name.precision(12);
  name << "atoms(";
  for (std::size_t i = 0; i < points.size() && i < 6; ++i) {
    name << (i ? ", " : "") << points[i].value << ":" << points[i].weight;
  }
  if (points.size() > 6) name << ", ...";
  name << ")";
  return make_atoms(std::move(points), "atoms", name.str());
}

LawPtr empirical(std::span<const double> values) {
  if (values.empty()) throw InputError("empirical: needs at least one value");
  std::vector<Atom> points;
  points.reserve(values.size());
  const double w = 1.0 / static_cast<double>(values.size());
  for (double v : values) points.push_back({v, w});
  return make_atoms(std::move(points), "empirical",
                    "empirical(n=" + std::to_string(values.size()) + ")");
}

LawPtr uniform(double a, double b) {
  if (!std::isfinite(a) || !std::isfinite(b) || !(a < b)) {
    throw InputError("uniform: needs finite a < b (got " + text::readable(a) + ", " + text::readable(b) + ")");
  }
  return std::make_shared<Uniform>(a, b);
}

LawPtr quarter_circle() { return std::make_shared<QuarterCircle>(); }

LawPtr fuss_catalan(int s) {
  if (s < 1) throw InputError("fuss_catalan: s must be >= 1 (got " + std::to_string(s) + ")");
  return std::make_shared<FussCatalan>(s);
}

LawPtr circular() { return std::make_shared<Circular>(); }

LawPtr square_root(LawPtr law) {
  if (!law) throw InputError("square_root: law is null");
  const Support s = law->support();
  // A positive operator's law computed numerically may start a rounding error below 0 (the
  // polynomial solver's edges): up to 1e-6 of the support's scale that is taken as 0.
  if (law->radial() || s.lo < -1e-6 * std::max(1.0, std::abs(s.hi))) {
    throw InputError("square_root: needs a law on [0, inf) (got " + law->describe() + ")");
  }
  return std::make_shared<SquareRoot>(std::move(law));
}

std::vector<double> densities_or_nan(const Law& law, std::span<const double> xs) {
  try {
    return law.densities(xs);
  } catch (const NumericalError&) {
  }
  std::vector<double> out;
  out.reserve(xs.size());
  for (double x : xs) {
    try {
      out.push_back(law.density(x));
    } catch (const NumericalError&) {
      out.push_back(std::numeric_limits<double>::quiet_NaN());
    }
  }
  return out;
}

LawPtr affine(LawPtr law, double a, double b) {
  if (!law) throw InputError("affine: law is null");
  if (!std::isfinite(a) || !std::isfinite(b) || a == 0.0) {
    throw InputError("affine: needs finite a != 0 and finite b (got a=" + text::readable(a) +
                     ", b=" + text::readable(b) + ")");
  }
  if (law->radial() && (a <= 0.0 || b != 0.0)) {
    throw InputError("affine: a radial law (" + law->describe() +
                     ") only takes a scale a > 0 and b = 0");
  }
  if (a == 1.0 && b == 0.0) return law;
  // a·(a′X + b′) + b = (a a′)X + (a b′ + b): one affine map, so that a law prints as one.
  if (const auto* inner = dynamic_cast<const Affine*>(law.get())) {
    return affine(inner->inner(), a * inner->scale(), a * inner->shift() + b);
  }
  return std::make_shared<Affine>(std::move(law), a, b);
}

}  // namespace freegap::analysis
