// The limit law of a self-adjoint polynomial in free variables: densities by Stieltjes inversion
// of the pencil's operator-valued Cauchy transform, edges by real-axis continuation, CDF from a
// graded Gauss–Legendre table, moments by a contour integral.
#include "freegap/analysis/limits/polynomial_limit.hpp"

#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>

#include "freegap/analysis/limits/moments.hpp"
#include "freegap/errors.hpp"
#include "freegap/text.hpp"
#include "freegap/stop.hpp"
#include "laws_quadrature.hpp"
#include "operator_valued.hpp"

namespace freegap::analysis {

using cd = std::complex<double>;
constexpr double kPi = std::numbers::pi;
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr int kPanelNodes = 8;
constexpr double kTolerance = 1e-12;

namespace {

// ‖P‖ ≤ Σ |c_w| Π ‖x_i‖ (the triangle inequality and submultiplicativity).
double norm_bound(const FreePolynomial& p) {
  double bound = 0.0;
  for (const auto& t : p.terms) {
    double term = std::abs(t.coefficient);
    for (int i : t.word) {
      const Support s = p.letters[i].law->support();
      term *= std::max(std::abs(s.lo), std::abs(s.hi));
    }
    bound += term;
  }
  return bound;
}

using State = OperatorValuedSolver::State;

// One solve at z with the other diagonal entries at iε_final: the averaged iteration at a
// distance s0 from the axis, then Newton continued down in s (s ← s/100) to the target.
SolveReport solve_chain(const OperatorValuedSolver& solver, cd z, double epsilon_final,
                        double scale, const PolynomialLimitOptions& options, State& state,
                        bool warm) {
  SolveReport rep;
  rep.z = z;
  const double y_final = z.imag();
  const auto finish = [&](const State& s) {
    const auto beta = solver.beta(z, epsilon_final);
    rep.cauchy = solver.cauchy(beta, s)(0, 0);
    rep.converged = std::isfinite(rep.cauchy.real()) && std::isfinite(rep.cauchy.imag()) &&
                    rep.cauchy.imag() <= 1e-9 * (1.0 + std::abs(rep.cauchy));
    if (!rep.converged) rep.reason = "the solution left the physical branch (Im G > 0)";
  };
  if (warm) {
    State trial = state;
    int steps = 0;
    const bool ok = solver.newton(solver.beta(z, epsilon_final), trial, options.max_newton_steps,
                                  kTolerance, steps);
    rep.newton_steps += steps;
    if (ok) {
      finish(trial);
      if (rep.converged) {
        state = trial;
        return rep;
      }
      rep.reason.clear();
    }
  }
  double s = std::max(1e-2 * scale, y_final);
  auto beta = solver.beta(cd(z.real(), std::max(y_final, s)), s);
  State current = solver.start(beta);
  int steps = 0;
  solver.average(beta, current, options.max_averaged_steps, 1e-10, steps);
  rep.averaged_steps += steps;
  // Newton continued towards the axis: s ← s/ratio, the ratio shrinking (down to 1.5) where a
  // step fails — near singular edges the solution moves fast as s decreases — and growing back.
  const double s_final = std::max(epsilon_final, y_final);
  double ratio = 100.0;
  double s_next = s;
  for (;;) {
    const bool last = s_next <= s_final * (1.0 + 1e-12);
    const double eps = last ? epsilon_final : s_next;
    beta = solver.beta(cd(z.real(), std::max(y_final, s_next)), eps);
    State trial = current;
    const bool ok = solver.newton(beta, trial, options.max_newton_steps, kTolerance, steps);
    rep.newton_steps += steps;
    if (ok) {
      current = trial;
      s = s_next;
      if (last) break;
      ratio = std::min(100.0, ratio * 2.0);
    } else {
      ratio = 1.0 + 0.5 * (ratio - 1.0);
      if (ratio < 1.2) {
        // Last resort: the averaged iteration at this distance (it always contracts there).
        trial = current;
        if (eps > 0.0 || y_final > 0.0) {
          solver.average(beta, trial, options.max_averaged_steps, 1e-12, steps);
          rep.averaged_steps += steps;
        }
        if (!solver.newton(beta, trial, options.max_newton_steps, kTolerance, steps)) {
          rep.newton_steps += steps;
          rep.converged = false;
          rep.reason = "neither Newton nor the averaged iteration converged at distance " +
                       text::readable(s_next) + " from the axis";
          rep.cauchy = cd(kNaN, kNaN);
          return rep;
        }
        rep.newton_steps += steps;
        current = trial;
        s = s_next;
        ratio = 2.0;
        if (last) break;
      }
    }
    s_next = std::max(s / ratio, s_final);
  }
  finish(current);
  if (rep.converged) state = current;
  return rep;
}

bool real_branch(const Eigen::MatrixXcd& G) {
  return G.imag().cwiseAbs().maxCoeff() <= 1e-8 * (1.0 + G.cwiseAbs().maxCoeff());
}

// The outer edge on one side: the real solution (ε = 0) continued from `from` (beyond the norm
// bound) towards the support with Newton and step halving; the edge is where it ends.
double find_edge(const OperatorValuedSolver& solver, double from, double direction, double scale,
                 const PolynomialLimitOptions& options) {
  State state;
  SolveReport first =
      solve_chain(solver, cd(from, 0.05 * scale), 0.0, scale, options, state, false);
  if (!first.converged) {
    throw NumericalError("polynomial limit: no solution beyond the norm bound at " +
                         text::readable(from));
  }
  int steps = 0;
  if (!solver.newton(solver.beta(cd(from, 0.0), 0.0), state, options.max_newton_steps, kTolerance,
                     steps)) {
    throw NumericalError("polynomial limit: no real-axis solution at " +
                         text::readable(from));
  }
  double x = from;
  double h = 0.05 * scale;
  double x_before = x, g_before = 0.0, g_last = 0.0;
  bool two = false;
  while (h > 1e-11 * scale) {
    const double next = x + direction * h;
    State trial = state;
    const auto beta = solver.beta(cd(next, 0.0), 0.0);
    bool ok = solver.newton(beta, trial, 30, kTolerance, steps);
    if (ok) {
      const auto G = solver.cauchy(beta, trial);
      const auto G0 = solver.cauchy(solver.beta(cd(x, 0.0), 0.0), state);
      // The physical branch: g(x) = ∫ dμ(t)/(x − t) has the sign of −direction outside the
      // support and g' = −∫ dμ/(x − t)² ≤ −g² (Cauchy–Schwarz), so the difference quotient is
      // at most −min(g², g0²); a spurious real solution inside the support fails this.
      const double g = G(0, 0).real(), g0 = G0(0, 0).real();
      const double slope = (g - g0) / (next - x);
      ok = real_branch(G) && -direction * g > 0.0 &&
           slope <= -(1.0 - 1e-6) * std::min(g * g, g0 * g0) + 1e-12;
    }
    if (ok) {
      const double g = solver.cauchy(beta, trial)(0, 0).real();
      two = x != from;
      x_before = x;
      g_before = g_last;
      g_last = g;
      x = next;
      state = trial;
      h *= 1.5;
    } else {
      h *= 0.5;
    }
  }
  // A singular edge (the density blows up like |x − e|^{−1/2}, e.g. free Poisson at 0) stops the
  // continuation early because g grows without bound; there g^{−2} is linear in x to first order,
  // so its zero through the last two points locates e (accepted only if it lies just ahead).
  if (two && std::abs(g_last) * scale > 30.0) {
    const double a = 1.0 / (g_before * g_before), b = 1.0 / (g_last * g_last);
    if (b < a) {
      const double e = x + (x - x_before) * b / (a - b);
      if ((e - x) * direction > 0.0 && std::abs(e - x) < 1e-3 * scale) return e;
    }
  }
  return x + direction * h;
}

}  // namespace

PolynomialLaw::PolynomialLaw(FreePolynomial polynomial, std::vector<double> exact_moments,
                             PolynomialLimitOptions options)
    : polynomial_(std::move(polynomial)),
      pencil_(linearize(polynomial_)),
      exact_moments_(std::move(exact_moments)),
      options_(options),
      solver_(std::make_unique<OperatorValuedSolver>(pencil_, polynomial_.letters)) {
  const double bound = norm_bound(polynomial_);
  scale_ = std::max(bound, 1e-6);
  const double from = bound * 1.05 + 0.05 * scale_;
  support_.hi = find_edge(*solver_, from, -1.0, scale_, options_);
  support_.lo = find_edge(*solver_, -from, 1.0, scale_, options_);
  // A positive P has its spectrum in [0, ∞); the edge search stops within rounding of the edge
  // (−8e-13 for X² before this), which must not read as negative eigenvalues.
  if (proven_positive(polynomial_) && support_.lo < 0.0) support_.lo = 0.0;
  // A point mass sits, in the cases we meet (a factor with an atom at 0, e.g. X B X with B
  // singular), at the constant term c_0 of P. Its mass is lim_{ε↓0} Re[iε G(c_0 + iε)] (Stieltjes
  // inversion at an atom, standard); it is accepted when two distances to the axis agree, which a
  // merely singular density (iεG ~ ε^{1−α} for f ~ |x − c_0|^{−α}) does not.
  double c0 = 0.0;
  for (const auto& t : polynomial_.terms) {
    if (t.word.empty()) c0 += t.coefficient.real();
  }
  const double width = support_.hi - support_.lo;
  if (c0 >= support_.lo - 1e-9 * width && c0 <= support_.hi + 1e-9 * width) {
    double masses[2] = {0.0, 0.0};
    const double distances[2] = {1e-4 * scale_, 1e-6 * scale_};
    for (int i = 0; i < 2; ++i) {
      State state;
      const SolveReport r =
          solve_chain(*solver_, cd(c0, distances[i]), 0.0, scale_, options_, state, false);
      masses[i] = r.converged ? (cd(0.0, distances[i]) * r.cauchy).real() : 0.0;
    }
    if (masses[1] > 1e-6 && std::abs(masses[0] - masses[1]) < 1e-3 * masses[1]) {
      support_.atoms.push_back({c0, masses[1]});
    }
  }
  // This solver finds the outer edges only: its continuous part is given as one band.
  if (support_.atoms.empty() || support_.atoms.front().weight < 1.0 - 1e-12) {
    support_.bands.push_back({support_.lo, support_.hi});
  }
}

PolynomialLaw::~PolynomialLaw() = default;

double PolynomialLaw::norm_limit() const {
  return std::max(std::abs(support_.lo), std::abs(support_.hi));
}

std::vector<DensityReport> PolynomialLaw::evaluate(std::span<const double> xs) const {
  std::vector<DensityReport> out;
  out.reserve(xs.size());
  State state;
  bool warm = false;
  double previous = 0.0;
  const double eps = options_.epsilon * scale_;
  for (double x : xs) {
    check_stop();
    DensityReport d;
    d.x = x;
    if (!(x > support_.lo && x < support_.hi)) {
      d.density = 0.0;
      d.converged = true;
      out.push_back(d);
      warm = false;
      continue;
    }
    const bool use_warm = warm && std::abs(x - previous) < 0.05 * scale_;
    const SolveReport r = solve_chain(*solver_, cd(x, eps), eps, scale_, options_, state, use_warm);
    d.averaged_steps = r.averaged_steps;
    d.newton_steps = r.newton_steps;
    d.converged = r.converged;
    d.reason = r.reason;
    d.density = r.converged ? std::max(0.0, -r.cauchy.imag() / kPi) : kNaN;
    warm = r.converged;
    previous = x;
    out.push_back(d);
  }
  return out;
}

double PolynomialLaw::density(double x) const {
  const double xs[1] = {x};
  return evaluate(xs)[0].density;
}

std::vector<double> PolynomialLaw::densities(std::span<const double> xs) const {
  std::vector<double> out;
  for (const auto& d : evaluate(xs)) out.push_back(d.density);
  return out;
}

SolveReport PolynomialLaw::solve(cd z) const {
  const bool lower = z.imag() < 0.0;
  const cd up = lower ? std::conj(z) : z;
  State state;
  SolveReport r;
  if (up.imag() > 0.0) {
    r = solve_chain(*solver_, up, 0.0, scale_, options_, state, false);
  } else {
    const double eps = options_.epsilon * scale_;
    r = solve_chain(*solver_, cd(up.real(), eps), eps, scale_, options_, state, false);
  }
  if (lower) {
    r.z = z;
    r.cauchy = std::conj(r.cauchy);
  }
  return r;
}

cd PolynomialLaw::cauchy(cd z) const { return solve(z).cauchy; }

std::vector<double> PolynomialLaw::solver_moments(int k) const {
  // m_j = (1/2πi) ∮ z^j G(z) dz on |z − c| = R around the support; the trapezoid rule converges
  // geometrically for this analytic periodic integrand (standard; e.g. Trefethen & Weideman 2014,
  // from memory). G(z̄) = conj G(z) halves the solves.
  const int K = 128;
  const double c = 0.5 * (support_.lo + support_.hi);
  const double R = 0.75 * (support_.hi - support_.lo) + 1e-3 * scale_;
  std::vector<double> m(k + 1, 0.0);
  State state;
  bool warm = false;
  for (int j = 0; j < K / 2; ++j) {
    const double theta = 2.0 * kPi * (j + 0.5) / K;
    const cd e = std::polar(1.0, theta);
    const cd z = c + R * e;
    const SolveReport r = solve_chain(*solver_, z, 0.0, scale_, options_, state, warm);
    if (!r.converged) {
      throw NumericalError(
          "polynomial limit: no convergence at z = " + text::readable(z.real()) + "+" +
          text::readable(z.imag()) + "i for the moments");
    }
    warm = true;
    cd power = 1.0;
    for (int q = 0; q <= k; ++q) {
      m[q] += 2.0 / K * (power * r.cauchy * R * e).real();
      power *= z;
    }
  }
  return m;
}

std::vector<double> PolynomialLaw::moments(int k) const {
  if (k < static_cast<int>(exact_moments_.size())) {
    return {exact_moments_.begin(), exact_moments_.begin() + k + 1};
  }
  return solver_moments(k);
}

void PolynomialLaw::build_table() const {
  // x = lo + w(1 − cos θ)/2 makes density·dx/dθ smooth at square-root and inverse-square-root
  // edges (the substitution of laws_quadrature's integrate_density); Gauss–Legendre panels in θ.
  const int P = std::max(4, options_.table_panels);
  const double lo = support_.lo, w = support_.hi - support_.lo;
  const auto& rule = detail::gauss_legendre(kPanelNodes);
  panel_theta_.resize(P + 1);
  for (int p = 0; p <= P; ++p) panel_theta_[p] = kPi * p / P;
  // The constant term c_0 is where an interior singularity of the density sits in the cases we
  // meet (A B A at 0, f ~ |x|^{−1/3}); as a panel end it is integrated well by Gauss–Legendre.
  double c0 = 0.0;
  for (const auto& t : polynomial_.terms) {
    if (t.word.empty()) c0 += t.coefficient.real();
  }
  if (c0 > support_.lo + 1e-6 * w && c0 < support_.hi - 1e-6 * w) {
    const double t0 = std::acos(std::clamp(1.0 - 2.0 * (c0 - lo) / w, -1.0, 1.0));
    // Panels graded geometrically towards t0 (5 halvings on each side), so that a singularity
    // there leaves only a tiny mass in the panels that touch it.
    const double h = kPi / P;
    for (int k = 0; k <= 5; ++k) {
      for (double side : {-1.0, 1.0}) {
        const double t = t0 + side * h * std::ldexp(1.0, -k);
        if (t > 0.0 && t < kPi) panel_theta_.push_back(t);
      }
    }
    panel_theta_.push_back(t0);
    std::sort(panel_theta_.begin(), panel_theta_.end());
    panel_theta_.erase(std::unique(panel_theta_.begin(), panel_theta_.end(),
                                   [](double a, double b) { return std::abs(a - b) < 1e-12; }),
                       panel_theta_.end());
  }
  const int panels = static_cast<int>(panel_theta_.size()) - 1;
  std::vector<double> xs;
  std::vector<double> jac;
  for (int p = 0; p < panels; ++p) {
    const double a = panel_theta_[p], b = panel_theta_[p + 1];
    for (int q = 0; q < kPanelNodes; ++q) {
      const double t = 0.5 * (a + b) + 0.5 * (b - a) * rule.nodes[q];
      xs.push_back(lo + 0.5 * w * (1.0 - std::cos(t)));
      jac.push_back(0.5 * w * std::sin(t));
    }
  }
  const auto ds = evaluate(xs);
  panel_integrand_.resize(xs.size());
  for (std::size_t i = 0; i < xs.size(); ++i) {
    // A node the solver could not settle (only ever within ~1e−8 of an edge) counts as 0.
    panel_integrand_[i] = ds[i].converged ? ds[i].density * jac[i] : 0.0;
  }
  panel_cumulative_.assign(panels + 1, 0.0);
  for (int p = 0; p < panels; ++p) {
    double sum = 0.0;
    for (int q = 0; q < kPanelNodes; ++q) {
      sum += rule.weights[q] * panel_integrand_[p * kPanelNodes + q];
    }
    panel_cumulative_[p + 1] =
        panel_cumulative_[p] + 0.5 * (panel_theta_[p + 1] - panel_theta_[p]) * sum;
  }
  mass_ = panel_cumulative_[panels];
}

double PolynomialLaw::continuous_mass() const {
  std::call_once(table_once_, [this] { build_table(); });
  return mass_;
}

double PolynomialLaw::cdf(double x) const {
  if (x <= support_.lo) return 0.0;
  if (x >= support_.hi) return 1.0;
  std::call_once(table_once_, [this] { build_table(); });
  const double w = support_.hi - support_.lo;
  const double theta = std::acos(std::clamp(1.0 - 2.0 * (x - support_.lo) / w, -1.0, 1.0));
  const int P = static_cast<int>(panel_theta_.size()) - 1;
  const int p = std::clamp(
      static_cast<int>(std::upper_bound(panel_theta_.begin(), panel_theta_.end(), theta) -
                       panel_theta_.begin()) -
          1,
      0, P - 1);
  const double a = panel_theta_[p], b = panel_theta_[p + 1];
  const auto& rule = detail::gauss_legendre(kPanelNodes);
  // ∫_a^θ of the degree-7 interpolant through the panel's nodes (Lagrange form), by the same rule.
  double nodes[kPanelNodes];
  for (int q = 0; q < kPanelNodes; ++q) nodes[q] = 0.5 * (a + b) + 0.5 * (b - a) * rule.nodes[q];
  double partial = 0.0;
  for (int r = 0; r < kPanelNodes; ++r) {
    const double t = 0.5 * (a + theta) + 0.5 * (theta - a) * rule.nodes[r];
    double value = 0.0;
    for (int q = 0; q < kPanelNodes; ++q) {
      double basis = 1.0;
      for (int l = 0; l < kPanelNodes; ++l) {
        if (l != q) basis *= (t - nodes[l]) / (nodes[q] - nodes[l]);
      }
      value += basis * panel_integrand_[p * kPanelNodes + q];
    }
    partial += rule.weights[r] * value;
  }
  partial *= 0.5 * (theta - a);
  double atoms = 0.0;
  for (const Atom& a : support_.atoms) {
    if (a.value <= x) atoms += a.weight;
  }
  return std::clamp(panel_cumulative_[p] + partial + atoms, 0.0, 1.0);
}

std::string PolynomialLaw::describe() const {
  std::string letters;
  for (const auto& l : polynomial_.letters) {
    if (!letters.empty()) letters += ", ";
    letters += l.name + " ~ " + l.law->describe();
  }
  return "limit of '" + polynomial_.text + "' in free " + letters + " (linearization, pencil " +
         std::to_string(pencil_.size) + "×" + std::to_string(pencil_.size) +
         "; operator-valued subordination), support [" + text::readable(support_.lo) + ", " +
         text::readable(support_.hi) + "]";
}

bool proven_positive(const FreePolynomial& polynomial) {
  for (const RealTerm& t : polynomial.terms) {
    if (t.coefficient.imag() != 0.0) return false;
    const double c = t.coefficient.real();
    const std::size_t n = t.word.size();
    if (n == 0) {
      if (!(c >= 0.0)) return false;
      continue;
    }
    if (!(c > 0.0)) return false;
    for (std::size_t i = 0; i < n / 2; ++i) {
      if (t.word[i] != t.word[n - 1 - i]) return false;
    }
    if (n % 2 == 1) {
      const FreeLetter& middle = polynomial.letters[static_cast<std::size_t>(t.word[n / 2])];
      if (!middle.law || !(middle.law->support().lo >= 0.0)) return false;
    }
  }
  return true;
}

std::shared_ptr<const PolynomialLaw> polynomial_limit(const expr::Expression& e,
                                                      PolynomialLimitOptions options) {
  FreePolynomial p = free_polynomial_of(e);
  if (p.letters.empty()) {
    throw InputError("expression '" + e.text() +
                     "' is a constant: its limit law is a single point mass, nothing to solve");
  }
  (void)linearize(p);  // refuses an oversized pencil before the exact moments' work
  std::vector<double> exact;
  if (options.exact_moment_order > 0) {
    try {
      for (const auto& v : limit_moments(e, options.exact_moment_order)) exact.push_back(v.value);
    } catch (const InputError&) {
      exact.clear();  // no exact moments for this model: the solver's stand alone
    }
  }
  return std::make_shared<const PolynomialLaw>(std::move(p), std::move(exact), options);
}

}  // namespace freegap::analysis
