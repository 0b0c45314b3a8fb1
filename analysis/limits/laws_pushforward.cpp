// The law of p(X) for a real polynomial p of degree ≥ 2 and X with a known law: the image of a law
// under a polynomial (change of variables; common practice), exact up to root finding.
#include <Eigen/Eigenvalues>
#include <algorithm>
#include <cmath>
#include <limits>
#include <map>

#include "freegap/analysis/limits/laws.hpp"
#include "freegap/errors.hpp"
#include "freegap/text.hpp"
#include "laws_quadrature.hpp"

namespace freegap::analysis {

using cd = std::complex<double>;

namespace {

// p(x) by Horner; c[k] is the coefficient of x^k.
template <class T>
T evaluate(const std::vector<double>& c, T x) {
  T value = 0.0;
  for (std::size_t k = c.size(); k-- > 0;) value = value * x + c[k];
  return value;
}

std::vector<double> derivative(const std::vector<double>& c) {
  std::vector<double> d;
  for (std::size_t k = 1; k < c.size(); ++k) d.push_back(static_cast<double>(k) * c[k]);
  while (!d.empty() && d.back() == 0.0) d.pop_back();
  return d;
}

// The real roots of q in [lo, hi], sorted, each to the resolution of doubles: q is monotone
// between consecutive roots of q′ (found the same way), so each sign change there is bracketed
// and bisected. A root where q only touches 0 is a root of q′ and is kept when q is 0 there.
std::vector<double> real_roots(const std::vector<double>& q, double lo, double hi) {
  if (q.size() < 2) return {};
  if (q.size() == 2) {
    const double r = -q[0] / q[1];
    return (r >= lo && r <= hi) ? std::vector<double>{r} : std::vector<double>{};
  }
  std::vector<double> breaks{lo};
  for (double r : real_roots(derivative(q), lo, hi)) breaks.push_back(r);
  breaks.push_back(hi);
  std::vector<double> roots;
  for (std::size_t i = 0; i + 1 < breaks.size(); ++i) {
    double a = breaks[i], b = breaks[i + 1];
    double fa = evaluate(q, a);
    const double fb = evaluate(q, b);
    if (fa == 0.0) {
      roots.push_back(a);
      continue;
    }
    if (!(fa * fb < 0.0)) continue;
    for (int it = 0; it < 200; ++it) {
      const double mid = 0.5 * (a + b);
      if (!(mid > a && mid < b)) break;
      const double fm = evaluate(q, mid);
      if (fm == 0.0) {
        a = b = mid;
        break;
      }
      if ((fm < 0.0) == (fa < 0.0)) {
        a = mid;
        fa = fm;
      } else {
        b = mid;
      }
    }
    roots.push_back(0.5 * (a + b));
  }
  if (evaluate(q, hi) == 0.0) roots.push_back(hi);
  std::sort(roots.begin(), roots.end());
  roots.erase(std::unique(roots.begin(), roots.end()), roots.end());
  return roots;
}

// "x^3 − 2·x + 1": the polynomial in plain notation.
std::string polynomial_text(const std::vector<double>& c) {
  std::string out;
  for (std::size_t k = c.size(); k-- > 0;) {
    if (c[k] == 0.0) continue;
    const double a = std::abs(c[k]);
    out += out.empty() ? (c[k] < 0.0 ? "−" : "") : (c[k] < 0.0 ? " − " : " + ");
    const std::string x = k == 0 ? "" : k == 1 ? "x" : "x^" + std::to_string(k);
    if (k == 0 || a != 1.0) out += text::readable(a) + (k == 0 ? "" : "·");
    out += x;
  }
  return out.empty() ? "0" : out;
}

class Pushforward final : public Law {
 public:
  Pushforward(LawPtr law, std::vector<double> c)
      : law_(std::move(law)), c_(std::move(c)), dc_(derivative(c_)), ddc_(derivative(dc_)),
        inner_(law_->support()) {
    // The continuous part of X, split at the critical points of p into monotone segments.
    const double scale = std::max({1.0, std::abs(inner_.lo), std::abs(inner_.hi)});
    for (const Interval& band : inner_.bands) {
      if (!(band.hi > band.lo)) continue;
      std::vector<double> cuts{band.lo};
      for (double r : real_roots(dc_, band.lo, band.hi)) {
        if (r > cuts.back() + 1e-15 * scale && r < band.hi - 1e-15 * scale) cuts.push_back(r);
      }
      cuts.push_back(band.hi);
      for (std::size_t i = 1; i + 1 < cuts.size(); ++i) critical_values_.push_back(evaluate(c_, cuts[i]));
      for (std::size_t i = 0; i + 1 < cuts.size(); ++i) {
        Segment s;
        s.a = cuts[i];
        s.b = cuts[i + 1];
        s.pa = evaluate(c_, s.a);
        s.pb = evaluate(c_, s.b);
        s.increasing = s.pb >= s.pa;
        s.fa = continuous_cdf(s.a);
        s.fb = continuous_cdf(s.b);
        segments_.push_back(s);
      }
    }
    // Atoms map to atoms, equal images merged.
    std::map<double, double> image;
    for (const Atom& a : inner_.atoms) image[evaluate(c_, a.value)] += a.weight;
    for (const auto& [value, mass] : image) support_.atoms.push_back({value, mass});
    // Bands: the images of the segments, overlapping ones merged.
    std::vector<Interval> pieces;
    for (const Segment& s : segments_) pieces.push_back({std::min(s.pa, s.pb), std::max(s.pa, s.pb)});
    std::sort(pieces.begin(), pieces.end(),
              [](const Interval& l, const Interval& r) { return l.lo < r.lo; });
    for (const Interval& p : pieces) {
      if (!support_.bands.empty() && p.lo <= support_.bands.back().hi) {
        support_.bands.back().hi = std::max(support_.bands.back().hi, p.hi);
      } else {
        support_.bands.push_back(p);
      }
    }
    bool first = true;
    auto cover = [&](double lo, double hi) {
      support_.lo = first ? lo : std::min(support_.lo, lo);
      support_.hi = first ? hi : std::max(support_.hi, hi);
      first = false;
    };
    for (const Interval& b : support_.bands) cover(b.lo, b.hi);
    for (const Atom& a : support_.atoms) cover(a.value, a.value);
  }

  // At a critical value p(c) (p′(c) = 0 inside a band of X) the density is infinite; there, and
  // within rounding of it, the mean of the values δ to either side is reported (large and finite,
  // as the subordination laws report a singular point), so the value does not depend on which
  // side of p(c) a rounded y falls.
  double density(double y) const override {
    const double scale = std::max(1.0, support_.hi - support_.lo);
    const double delta = 1e-12 * scale;
    for (const double v : critical_values_) {
      if (std::abs(y - v) <= 1e-14 * scale) return 0.5 * (raw_density(v - delta) + raw_density(v + delta));
    }
    const double f = raw_density(y);
    if (std::isfinite(f)) return f;
    return 0.5 * (raw_density(y - delta) + raw_density(y + delta));
  }

  double cdf(double y) const override {
    double total = 0.0;
    for (const Atom& a : support_.atoms) {
      if (a.value <= y) total += a.weight;
    }
    for (const Segment& s : segments_) {
      const double low = std::min(s.pa, s.pb), high = std::max(s.pa, s.pb);
      if (y >= high) {
        total += s.fb - s.fa;
      } else if (y > low) {
        const double x = inverse(s, y);
        total += s.increasing ? continuous_cdf(x) - s.fa : s.fb - continuous_cdf(x);
      }
    }
    return std::clamp(total, 0.0, 1.0);
  }

  // G_Y(z) = E 1/(z − p(X)) = Σ_k G_X(r_k)/p′(r_k) over the roots r_k of p(x) = z (partial
  // fractions of 1/(z − p(x)); common practice).
  cd cauchy(cd z) const override { return cauchy_with_derivative(z).first; }
  cd cauchy_derivative(cd z) const override { return cauchy_with_derivative(z).second; }
  std::pair<cd, cd> cauchy_with_derivative(cd z) const override {
    cd g = 0.0, dg = 0.0;
    for (const cd& r : roots_at(z)) {
      const cd d1 = evaluate(dc_, r);
      const cd d2 = evaluate(ddc_, r);
      const auto [gx, dgx] = law_->cauchy_with_derivative(r);
      g += gx / d1;
      // d r/d z = 1/p′(r): the derivative of G_X(r)/p′(r) along z.
      dg += dgx / (d1 * d1) - gx * d2 / (d1 * d1 * d1);
    }
    return {g, dg};
  }

  // E p(X)^n: the coefficients of p^n against X's moments.
  std::vector<double> moments(int k) const override {
    if (k < 0) throw InputError("moments: order must be >= 0 (got " + std::to_string(k) + ")");
    const int degree = static_cast<int>(c_.size()) - 1;
    const std::vector<double> mx = law_->moments(degree * k);
    std::vector<double> m(k + 1, 0.0);
    std::vector<long double> power{1.0L};  // coefficients of p^n
    for (int n = 0; n <= k; ++n) {
      long double sum = 0.0L;
      for (std::size_t j = 0; j < power.size(); ++j) sum += power[j] * mx[j];
      m[n] = static_cast<double>(sum);
      std::vector<long double> next(power.size() + c_.size() - 1, 0.0L);
      for (std::size_t i = 0; i < power.size(); ++i) {
        for (std::size_t j = 0; j < c_.size(); ++j) next[i + j] += power[i] * c_[j];
      }
      power = std::move(next);
    }
    return m;
  }

  Support support() const override { return support_; }

  std::string describe() const override {
    return "law of " + polynomial_text(c_) + " for x ~ " + law_->describe();
  }

 private:
  struct Segment {
    double a = 0.0, b = 0.0;    // a monotone piece of a band of X
    double pa = 0.0, pb = 0.0;  // p(a), p(b)
    double fa = 0.0, fb = 0.0;  // X's continuous CDF at a and b
    bool increasing = true;
  };

  // X's CDF without its atoms.
  double continuous_cdf(double x) const {
    double f = law_->cdf(x);
    for (const Atom& a : inner_.atoms) {
      if (a.value <= x) f -= a.weight;
    }
    return f;
  }

  // The x in [s.a, s.b] with p(x) = y (p(a) < y < p(b) or the reverse): bisection to the
  // resolution of doubles.
  double inverse(const Segment& s, double y) const {
    double a = s.a, b = s.b;
    for (int it = 0; it < 200; ++it) {
      const double mid = 0.5 * (a + b);
      if (!(mid > a && mid < b)) break;
      const bool below = evaluate(c_, mid) < y;
      if (below == s.increasing) {
        a = mid;
      } else {
        b = mid;
      }
    }
    return 0.5 * (a + b);
  }

  // Σ f_X(x)/|p′(x)| over the preimages of y inside the segments (change of variables).
  double raw_density(double y) const {
    double f = 0.0;
    for (const Segment& s : segments_) {
      if (!(y > std::min(s.pa, s.pb) && y < std::max(s.pa, s.pb))) continue;
      const double x = inverse(s, y);
      f += law_->density(x) / std::abs(evaluate(dc_, x));
    }
    return f;
  }

  // The d complex roots of p(x) − z: eigenvalues of the companion matrix, each polished by two
  // Newton steps.
  std::vector<cd> roots_at(cd z) const {
    const int degree = static_cast<int>(c_.size()) - 1;
    Eigen::MatrixXcd companion = Eigen::MatrixXcd::Zero(degree, degree);
    const double lead = c_.back();
    for (int i = 1; i < degree; ++i) companion(i, i - 1) = 1.0;
    for (int i = 0; i < degree; ++i) {
      const cd coefficient = i == 0 ? cd(c_[0]) - z : cd(c_[static_cast<std::size_t>(i)]);
      companion(i, degree - 1) = -coefficient / lead;
    }
    Eigen::ComplexEigenSolver<Eigen::MatrixXcd> solver(companion, false);
    std::vector<cd> roots(solver.eigenvalues().data(), solver.eigenvalues().data() + degree);
    for (cd& r : roots) {
      for (int it = 0; it < 2; ++it) {
        const cd d1 = evaluate(dc_, r);
        if (d1 == 0.0) break;
        r -= (evaluate(c_, r) - z) / d1;
      }
    }
    return roots;
  }

  LawPtr law_;
  std::vector<double> c_, dc_, ddc_;
  Support inner_;
  Support support_;
  std::vector<Segment> segments_;
  std::vector<double> critical_values_;  // p at the critical points inside X's bands
};

}  // namespace

LawPtr polynomial_image(LawPtr law, std::vector<double> coefficients) {
  if (!law) throw InputError("polynomial_image: law is null");
  while (!coefficients.empty() && coefficients.back() == 0.0) coefficients.pop_back();
  for (double c : coefficients) {
    if (!std::isfinite(c)) throw InputError("polynomial_image: coefficients must be finite");
  }
  if (coefficients.size() < 3) {
    if (coefficients.size() == 2) return affine(std::move(law), coefficients[1], coefficients[0]);
    return atoms({{coefficients.empty() ? 0.0 : coefficients[0], 1.0}});
  }
  if (law->radial()) {
    throw InputError("polynomial_image: a radial law (" + law->describe() + ") has no image here");
  }
  const Support s = law->support();
  if (s.bands.empty()) {
    // A law of atoms alone: its image is a law of atoms (exact).
    std::map<double, double> image;
    for (const Atom& a : s.atoms) image[evaluate(coefficients, a.value)] += a.weight;
    std::vector<Atom> points;
    for (const auto& [value, mass] : image) points.push_back({value, mass});
    return atoms(std::move(points));
  }
  return std::make_shared<Pushforward>(std::move(law), std::move(coefficients));
}

std::vector<double> toeplitz_symbol_polynomial(const std::vector<double>& coefficients) {
  const std::size_t k = coefficients.empty() ? 0 : coefficients.size() - 1;
  std::vector<double> out(k + 1, 0.0);
  if (coefficients.empty()) return out;
  out[0] = coefficients[0];
  std::vector<double> previous = {2.0}, current = {0.0, 1.0};  // S_0 = 2, S_1 = x
  for (std::size_t j = 1; j <= k; ++j) {
    for (std::size_t i = 0; i < current.size(); ++i) out[i] += coefficients[j] * current[i];
    std::vector<double> next(current.size() + 1, 0.0);  // S_{j+1} = x S_j − S_{j−1}
    for (std::size_t i = 0; i < current.size(); ++i) next[i + 1] += current[i];
    for (std::size_t i = 0; i < previous.size(); ++i) next[i] -= previous[i];
    previous = std::move(current);
    current = std::move(next);
  }
  return out;
}

LawPtr toeplitz_symbol_law(const std::vector<double>& coefficients) {
  return polynomial_image(arcsine(), toeplitz_symbol_polynomial(coefficients));
}

}  // namespace freegap::analysis
