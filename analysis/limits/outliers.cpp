// Outliers of finite-rank perturbations (outliers.hpp): the form of the expression, then one
// equation F(ρ) = 1/θ per spike on each side of the bulk's support, F = G (additive) or
// T = zG − 1 (multiplicative), both decreasing off the support.
#include "freegap/analysis/limits/outliers.hpp"

#include <algorithm>
#include <cmath>
#include <complex>
#include <limits>
#include <set>
#include <string>

#include "freegap/errors.hpp"
#include "freegap/text.hpp"

namespace freegap::analysis {

namespace {

using declarations::DiagonalLawKind;
using declarations::Kind;
using declarations::MatrixSpec;
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

bool is_spiked(const MatrixSpec& m) {
  return m.kind == Kind::diagonal && m.diagonal.kind == DiagonalLawKind::spiked;
}
// Laws invariant under conjugation by unitary (complex) or orthogonal (real) matrices: then so is
// every polynomial in independent copies.
bool rotation_invariant(Kind k) {
  return k == Kind::gue || k == Kind::goe || k == Kind::wishart_complex || k == Kind::wishart_real;
}
bool wigner(Kind k) { return k == Kind::gue || k == Kind::goe || k == Kind::wigner_rademacher; }
bool wishart(Kind k) { return k == Kind::wishart_complex || k == Kind::wishart_real; }

struct Form {
  bool multiplicative = false;
  std::vector<double> theta;
  std::string rule;
};

// U D₁⋯D_k U^* (or U^* … U) with U Haar and the D_i deterministic: a term whose law is
// invariant under conjugation by any unitary (orthogonal for a Haar orthogonal U), independent of
// the rest.
bool haar_conjugation(const std::vector<std::pair<int, bool>>& w, const std::vector<MatrixSpec>& d,
                      int spike) {
  if (w.size() < 3 || w.front().first != w.back().first || w.front().second == w.back().second) {
    return false;
  }
  if (!declarations::is_unitary(d[static_cast<std::size_t>(w.front().first)].kind)) return false;
  return std::all_of(w.begin() + 1, w.end() - 1, [&](const auto& l) {
    const Kind k = d[static_cast<std::size_t>(l.first)].kind;
    return l.first != spike && !declarations::is_random(k);
  });
}

// P = X + c·S with S in no other term and X rotation invariant: a polynomial in GUE, GOE and
// Wishart matrices and Haar conjugations U D U^* of deterministic matrices (or a·W + b of one
// Wigner W).
bool additive_form(const std::vector<expr::Monomial>& terms, const std::vector<MatrixSpec>& d,
                   int spike, Form& form, std::string& why) {
  double c = 0.0;
  std::set<int> rest, conjugators;  // conjugators: Haar matrices seen only in U D U^* terms
  std::set<int> spike_rotations;    // V of a term V S V^*: the spike rotated (same outliers)
  bool nonlinear_rest = false;
  for (const auto& t : terms) {
    const bool has = std::any_of(t.letters.begin(), t.letters.end(),
                                 [&](const auto& l) { return l.first == spike; });
    const bool rotated = has && t.letters.size() == 3 && t.letters[1].first == spike &&
                         haar_conjugation(t.letters, d, -1);
    if (has && (t.letters.size() == 1 || rotated)) {
      c += t.coefficient.real();  // real: outlier_prediction checked
      if (rotated) spike_rotations.insert(t.letters.front().first);
    } else if (has) {
      return false;  // S inside a product: not this form
    } else if (haar_conjugation(t.letters, d, spike)) {
      conjugators.insert(t.letters.front().first);
    } else {
      for (const auto& l : t.letters) rest.insert(l.first);
      nonlinear_rest = nonlinear_rest || t.letters.size() > 1;
    }
  }
  const MatrixSpec& s = d[static_cast<std::size_t>(spike)];
  if (spike_rotations.size() > 1 ||
      std::any_of(spike_rotations.begin(), spike_rotations.end(),
                  [&](int v) { return rest.count(v) || conjugators.count(v); })) {
    why = "the spike's Haar rotation also rotates other terms (or differs between terms), so the "
          "spike is not independent of the rest";
    return true;
  }
  if (rest.empty() && conjugators.empty()) {
    why = "the expression has no random matrix beside '" + s.name + "': its eigenvalues are fixed";
    return true;
  }
  const bool invariant = std::all_of(rest.begin(), rest.end(), [&](int i) {
    return rotation_invariant(d[static_cast<std::size_t>(i)].kind);
  });
  const bool one_wigner = rest.size() == 1 && conjugators.empty() && !nonlinear_rest &&
                          wigner(d[static_cast<std::size_t>(*rest.begin())].kind);
  if (!invariant && !one_wigner) {
    for (const int i : rest) {
      const MatrixSpec& m = d[static_cast<std::size_t>(i)];
      if (!rotation_invariant(m.kind)) {
        why = "'" + m.name + "' (" + std::string(declarations::kind_name(m.kind)) +
              ") beside the spike is not invariant under rotations; outliers of such sums need "
              "the subordination functions of the whole model, not computed yet";
        return true;
      }
    }
  }
  for (const double v : s.diagonal.spikes) form.theta.push_back(c * (v - s.diagonal.base));
  form.rule = "additive spike: each outlier ρ solves G(ρ) = 1/θ, θ = " + text::readable(c) +
              "·(spike − " + text::readable(s.diagonal.base) +
              "), G the Cauchy transform of the bulk law (Benaych-Georges & Nadakuditi 2011; for "
              "Wigner matrices Péché 2006, Féral & Péché 2007, Capitaine, Donati-Martin & Féral "
              "2009)";
  return true;
}

// P = c·S X S with X one Wishart matrix, c > 0 and S's base b ≠ 0.
bool multiplicative_form(const std::vector<expr::Monomial>& terms,
                         const std::vector<MatrixSpec>& d, int spike, Form& form,
                         std::string& why) {
  if (terms.size() != 1 || terms[0].letters.size() != 3) return false;
  const auto& w = terms[0].letters;
  if (w[0].first != spike || w[2].first != spike || w[1].first == spike) return false;
  const MatrixSpec& s = d[static_cast<std::size_t>(spike)];
  const MatrixSpec& x = d[static_cast<std::size_t>(w[1].first)];
  if (!wishart(x.kind) || !(terms[0].coefficient.real() > 0.0) || s.diagonal.base == 0.0) {
    why = "S X S is predicted for a Wishart X, a positive coefficient and a spiked S with a "
          "non-zero base (a population covariance S² = I + finite rank, up to scale)";
    return true;
  }
  form.multiplicative = true;
  for (const double v : s.diagonal.spikes) {
    const double r = v / s.diagonal.base;
    form.theta.push_back(r * r - 1.0);
  }
  form.rule = "spiked sample covariance: each outlier ρ solves T(ρ) = 1/θ, T(z) = z·G(z) − 1, "
              "θ = (spike/" + text::readable(s.diagonal.base) +
              ")² − 1 (Benaych-Georges & Nadakuditi 2011; Baik, Ben Arous & Péché 2005 and Baik & "
              "Silverstein 2006 for the Marchenko–Pastur bulk)";
  return true;
}

// F(x) for real x off the support: G, or T = xG − 1.
struct Transform {
  const Law& law;
  bool multiplicative;
  double scale;
  double operator()(double x) const {
    std::complex<double> g = kNaN;
    try {
      g = law.cauchy({x, 0.0});
    } catch (const NumericalError&) {
    }
    if (!std::isfinite(g.real())) g = law.cauchy({x, 1e-13 * scale});  // just above the axis
    if (!std::isfinite(g.real())) throw NumericalError("the Cauchy transform failed at " + text::readable(x));
    return multiplicative ? x * g.real() - 1.0 : g.real();
  }
};

// F at the support's edge `edge`, approached from the side `sign`, from F at the offsets δ, 4δ,
// 16δ (common practice): at a square-root edge F(e + δ) ≈ F(e) − C√δ, so the steps between them
// double and F(e) ≈ 2F(δ) − F(4δ); where they do not grow (a logarithmic or power divergence, as at
// a hard edge of a uniform or arcsine law) F is infinite there and every spike separates.
double edge_value(const Transform& f, double edge, double sign, double delta) {
  const double f1 = f(edge + sign * delta), f2 = f(edge + sign * 4.0 * delta),
               f3 = f(edge + sign * 16.0 * delta);
  const double d1 = f2 - f1, d2 = f3 - f2;
  if (d1 == 0.0) return f1;
  const double ratio = d2 / d1;
  if (std::abs(ratio - 2.0) < 0.2) return f1 - d1;
  if (ratio > 0.0 && ratio < 1.2) return sign * std::numeric_limits<double>::infinity();
  return f1;
}

// The root of F(x) = target between a (F(a) on the target's far side) and the direction `step`,
// F decreasing: bracket by doubling, then bisection to rounding.
double solve_side(const Transform& f, double a, double step, double target) {
  double near = a, far = a + step;
  for (int i = 0; i < 200 && (step > 0 ? f(far) > target : f(far) < target); ++i) {
    near = far;
    step *= 2.0;
    far = a + step;
  }
  for (int i = 0; i < 200; ++i) {
    const double mid = 0.5 * (near + far);
    if (mid == near || mid == far) break;
    ((step > 0) == (f(mid) > target) ? near : far) = mid;
  }
  return 0.5 * (near + far);
}

void solve_outliers(const Law& bulk, const Form& form, const MatrixSpec& s,
                    OutlierPrediction& out) {
  const Support sup = bulk.support();
  const double scale = std::max({sup.hi - sup.lo, std::abs(sup.hi), std::abs(sup.lo), 1e-300});
  const double delta = 1e-12 * scale;
  const Transform f{bulk, form.multiplicative, scale};
  const double at_high = edge_value(f, sup.hi, 1.0, delta);  // F at the edges, from outside
  const bool left_room = !form.multiplicative || sup.lo > 0.0;
  const double at_low = left_room ? edge_value(f, sup.lo, -1.0, delta) : kNaN;
  out.largest = sup.hi;
  out.smallest = sup.lo;
  for (std::size_t i = 0; i < form.theta.size(); ++i) {
    PredictedOutlier p;
    p.spike = s.diagonal.spikes[i];
    p.theta = form.theta[i];
    p.location = kNaN;
    if (p.theta > 0.0) {
      p.threshold = 1.0 / at_high;
      p.separates = at_high > 1.0 / p.theta;
      if (p.separates) p.location = solve_side(f, sup.hi + delta, scale, 1.0 / p.theta);
    } else if (p.theta < 0.0 && left_room) {
      p.threshold = 1.0 / at_low;
      p.separates = at_low < 1.0 / p.theta;
      if (p.separates) {
        const double step = form.multiplicative ? -(sup.lo - 2.0 * delta) : -scale;
        p.location = solve_side(f, sup.lo - delta, step, 1.0 / p.theta);
      }
    } else {
      p.threshold = kNaN;
    }
    if (p.separates) {
      out.largest = std::max(out.largest, p.location);
      out.smallest = std::min(out.smallest, p.location);
    }
    out.outliers.push_back(p);
  }
}

}  // namespace

OutlierPrediction predict_outliers(const expr::Expression& expression, const Law& bulk) {
  OutlierPrediction out;
  out.largest = out.smallest = kNaN;
  const auto& d = expression.declared();
  std::vector<int> spiked;
  for (std::size_t i = 0; i < d.size(); ++i) {
    if (is_spiked(d[i])) spiked.push_back(static_cast<int>(i));
  }
  if (spiked.empty()) return out;
  out.spiked = true;
  if (expression.spectrum() != expr::Spectrum::eigenvalues) {
    out.reason = "outliers are predicted for eigenvalues of self-adjoint expressions";
    return out;
  }
  if (spiked.size() > 1) {
    out.reason = "outliers are predicted for one spiked matrix per expression";
    return out;
  }
  const std::vector<expr::Monomial> terms = expression.expansion();
  if (!expr::real_coefficients(terms)) {
    out.reason = "outliers are predicted for real coefficients only (the expression has the "
                 "imaginary unit)";
    return out;
  }
  Form form;
  std::string why;
  const bool known = additive_form(terms, d, spiked[0], form, why) ||
                     multiplicative_form(terms, d, spiked[0], form, why);
  if (!known || !why.empty()) {
    out.reason = why.empty() ? "no outlier rule for this expression (predicted: X + c·S with X "
                               "invariant under rotations or one Wigner matrix, and c·S X S with X "
                               "a Wishart matrix)"
                             : why;
    return out;
  }
  try {
    solve_outliers(bulk, form, d[static_cast<std::size_t>(spiked[0])], out);
  } catch (const NumericalError& e) {
    out.outliers.clear();
    out.largest = out.smallest = kNaN;
    out.reason = std::string("the bulk's Cauchy transform could not be evaluated off its support: ") +
                 e.what();
    return out;
  }
  out.rule = form.rule;
  return out;
}

}  // namespace freegap::analysis
