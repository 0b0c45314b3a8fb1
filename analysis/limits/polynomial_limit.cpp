// The limit law of a self-adjoint polynomial in free variables: densities by Stieltjes inversion
// of the pencil's operator-valued Cauchy transform; bands and gaps by a two-distance test on a
// grid, their edges bisected (outer edges by real-axis continuation where it agrees); point
// masses from the residue of the Cauchy transform; CDF from graded Gauss–Legendre tables per
// band; moments by a contour integral.
#include "freegap/analysis/limits/polynomial_limit.hpp"

#include <Eigen/Dense>
#include <algorithm>
#include <atomic>
#include <cmath>
#include <exception>
#include <functional>
#include <limits>
#include <map>
#include <numbers>
#include <optional>
#include <thread>

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
// Points per chain of warm starts in solve_densities (a chunk for one thread): 32 keeps the cold
// first solves under a tenth of the work on the 400-point grid and the density tables.
constexpr std::size_t kDensityChunk = 32;
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

// The secant predictor: the solution is analytic in s, so its line through the solutions at the
// last two distances (s_before, s) starts Newton at s_next O((Δs)²) from the answer instead of
// O(Δs) (Euler–Newton continuation; Allgower & Georg 1990, from memory). With the exact Jacobian
// it cut the averaged iterations of 2 W1 W2 + 2 W2 W1 + W1 from 2.9 million to 57,000.
State predicted(const State& current, const State& before, double s_before, double s,
                double s_next) {
  State out = current;
  const double t = (s_next - s) / (s - s_before);
  for (std::size_t j = 0; j < out.unknowns.size(); ++j) {
    out.unknowns[j] += t * (current.unknowns[j] - before.unknowns[j]);
  }
  return out;
}

// The cold part of solve_chain: the averaged iteration at a distance s0 = 10⁻² of the scale from
// the axis, then Newton continued down in s (s ← s/ratio) to the target, with the secant
// predictor when `predict`. Returns the final state, or empty with rep's reason set.
std::optional<State> continue_down(const OperatorValuedSolver& solver, cd z, double epsilon_final,
                                   double scale, const PolynomialLimitOptions& options,
                                   bool predict, SolveReport& rep) {
  const double y_final = z.imag();
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
  State before;
  double s_before = 0.0;
  bool have_before = false;
  for (;;) {
    const bool last = s_next <= s_final * (1.0 + 1e-12);
    const double eps = last ? epsilon_final : s_next;
    beta = solver.beta(cd(z.real(), std::max(y_final, s_next)), eps);
    State trial = predict && have_before ? predicted(current, before, s_before, s, s_next)
                                         : current;
    bool ok = solver.newton(beta, trial, options.max_newton_steps, kTolerance, steps);
    rep.newton_steps += steps;
    if (!ok) {
      ratio = 1.0 + 0.5 * (ratio - 1.0);
      if (ratio >= 1.2) {
        s_next = std::max(s / ratio, s_final);
        continue;
      }
      // Last resort: the averaged iteration at this distance (it always contracts there).
      trial = current;
      if (eps > 0.0 || y_final > 0.0) {
        solver.average(beta, trial, options.max_averaged_steps, 1e-12, steps);
        rep.averaged_steps += steps;
      }
      ok = solver.newton(beta, trial, options.max_newton_steps, kTolerance, steps);
      rep.newton_steps += steps;
      if (!ok) {
        rep.reason = "neither Newton nor the averaged iteration converged at distance " +
                     text::readable(s_next) + " from the axis";
        return std::nullopt;
      }
      ratio = 1.0;  // doubled below to 2
    }
    before = std::move(current);
    s_before = s;
    have_before = true;
    current = std::move(trial);
    s = s_next;
    if (last) break;
    ratio = std::min(100.0, ratio * 2.0);
    s_next = std::max(s / ratio, s_final);
  }
  return current;
}

// One solve at z with the other diagonal entries at iε_final: Newton from `state` when `warm`,
// otherwise (or when that fails) continue_down, with the secant predictor and, where that fails,
// without it. Found by python.check_polynomial_bands: near the point mass 0.1 at 1 of P Q P + P
// the predicted continuation failed at x = 1.0031, which the band test then counts as inside (a
// spurious band around the point mass); the plain continuation converges there.
SolveReport solve_chain(const OperatorValuedSolver& solver, cd z, double epsilon_final,
                        double scale, const PolynomialLimitOptions& options, State& state,
                        bool warm) {
  SolveReport rep;
  rep.z = z;
  const auto finish = [&](const State& s) {
    const auto beta = solver.beta(z, epsilon_final);
    rep.cauchy = solver.cauchy(beta, s)(0, 0);
    rep.converged = std::isfinite(rep.cauchy.real()) && std::isfinite(rep.cauchy.imag()) &&
                    rep.cauchy.imag() <= 1e-9 * (1.0 + std::abs(rep.cauchy));
    if (!rep.converged) rep.reason = "the solution left the physical branch (Im G > 0)";
    if (rep.converged) state = s;
  };
  if (warm) {
    State trial = state;
    int steps = 0;
    const bool ok = solver.newton(solver.beta(z, epsilon_final), trial, options.max_newton_steps,
                                  kTolerance, steps);
    rep.newton_steps += steps;
    if (ok) {
      finish(trial);
      if (rep.converged) return rep;
      rep.reason.clear();
    }
  }
  for (const bool predict : {true, false}) {
    if (const auto s = continue_down(solver, z, epsilon_final, scale, options, predict, rep)) {
      finish(*s);
      if (rep.converged) return rep;
      // Ended on the mirror image (Im G > 0): next to the axis the equations at z and z̄ nearly
      // agree, and the solution at z̄ is the adjoint of the one at z, so Newton from the
      // adjoint of what was found lands on the physical solution.
      State mirrored = *s;
      for (auto& u : mirrored.unknowns) u = u.adjoint().eval();
      int steps = 0;
      const bool ok = solver.newton(solver.beta(z, epsilon_final), mirrored,
                                    options.max_newton_steps, kTolerance, steps);
      rep.newton_steps += steps;
      if (ok) {
        rep.reason.clear();
        finish(mirrored);
        if (rep.converged) return rep;
      }
    }
  }
  rep.converged = false;
  rep.cauchy = cd(kNaN, kNaN);
  return rep;
}

// Runs body(c) for every c < count on up to hardware_concurrency() threads (at most 8), this
// thread included. An exception from a chunk is rethrown after all threads have stopped: the one
// of the lowest chunk, so that the message does not depend on timing.
void for_each_chunk(std::size_t count, const std::function<void(std::size_t)>& body) {
  if (count == 0) return;
  const std::size_t threads = std::clamp<std::size_t>(std::thread::hardware_concurrency(), 1,
                                                      std::min<std::size_t>(8, count));
  std::atomic<std::size_t> next{0};
  std::atomic<bool> failed{false};
  std::vector<std::exception_ptr> errors(count);
  const auto work = [&] {
    for (std::size_t c = next++; c < count && !failed; c = next++) {
      try {
        body(c);
      } catch (...) {
        errors[c] = std::current_exception();
        failed = true;
      }
    }
  };
  std::vector<std::thread> pool;
  for (std::size_t i = 1; i < threads; ++i) pool.emplace_back(work);
  work();
  for (auto& t : pool) t.join();
  for (const auto& e : errors) {
    if (e) std::rethrow_exception(e);
  }
}

bool real_branch(const Eigen::MatrixXcd& G) {
  return G.imag().cwiseAbs().maxCoeff() <= 1e-8 * (1.0 + G.cwiseAbs().maxCoeff());
}

// The outer edge on one side: the real solution (ε = 0) continued from `from` (beyond the norm
// bound) towards the support with Newton and step halving; the edge is where it ends. It can walk
// on through a band on a spurious real solution, so locate_bands uses it only where it ends
// inside the bracket the two-distance test found.
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
  // A walk to an edge takes about 80 steps (h grows by 1.5 per step taken and halves per step
  // refused, down to 1e-12 of the scale; measured on the catalogue). One that creeps on is given
  // up, and the sharpened edge stands: in the catalogue, 1.5 X D X − 0.5 (D X + X D) with D a
  // Haar-rotated atomic law took 548 steps and stopped 7.7e-6 inside its upper edge 0.1194626
  // (the density is 0.04 at 0.11946), and −B³ + ½(AB + BA) with Haar-rotated atomic A, B took
  // 6,755 steps (20 s) towards its point mass 0.01 at 0.136048, which sits at a band's edge.
  for (int walked = 0; h > 1e-12 * scale; ++walked) {
    if (walked == 300) {
      throw NumericalError("polynomial limit: the real-axis continuation from " +
                           text::readable(from) + " did not settle on an edge in 300 steps");
    }
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

// Where the continuous part lives, seen from two distances to the axis. Outside the support
// −Im G(x + iε) = ε ∫ dμ(t)/((x − t)² + ε²) falls in proportion to ε; inside it tends to the
// density (Stieltjes inversion); near an atom it grows like 1/ε. With f = −Im G/π at ε₁ and
// ε₂ = ε₁/100, a point is in a band when (100 f₂ − f₁)/99 exceeds 1 % of f₁ and the rounding
// floor, and f₂ ≤ 3 f₁ (a two-distance test of Stieltjes inversion; docs/check-values.md §4d′).
// The solves take Λ(z) = diag(z, 0, …, 0) exactly: a regularised Λ_ε's O(ε) error spoils the
// linearity in ε. The test tells the two sides of an edge apart down to about ε₁ from it. Unlike the real-axis continuation of
// find_edge, it cannot walk through a band on a spurious real solution: found by
// python.check_limit_catalogue, where 0.5 (U D U^* X + X U D U^*) + 2 X − 0.5 (W X + X W) got the
// support [−0.70, 0.70] instead of about [−2.197, 2.197].
class BandProbe {
 public:
  struct OverBudget {};

  BandProbe(const OperatorValuedSolver& solver, double scale, const PolynomialLimitOptions& options,
            double near_distance, long long budget)
      : solver_(solver),
        scale_(scale),
        options_(options),
        near_(near_distance * scale),
        budget_(budget) {}

  /// Whether x is in a band, continuing from `start` (the state of a point nearby) when given;
  /// the nearer distance is continued from the farther one's solution. Throws OverBudget when
  /// the probe's work (all points; see spend) passes its budget.
  bool inside(double x, const State* start) {
    const double e2 = near_, e1 = 100.0 * e2;
    if (start != nullptr) far_state_ = *start;
    const SolveReport far_solve =
        solve_chain(solver_, cd(x, e1), 0.0, scale_, options_, far_state_, start != nullptr);
    spend(far_solve);
    // A point the solver cannot settle lies in or at the support (outside it the equation is a
    // contraction far from the axis and Newton continues it): counted as inside.
    if (!far_solve.converged) return true;
    State near_state = far_state_;
    const SolveReport near_solve =
        solve_chain(solver_, cd(x, e2), 0.0, scale_, options_, near_state, true);
    spend(near_solve);
    if (!near_solve.converged) return true;
    const double f1 = -far_solve.cauchy.imag() / kPi, f2 = -near_solve.cauchy.imag() / kPi;
    // Im G(x + iε) = −ε G'(x) + O(ε³) outside, so (100 f₂ − f₁)/99 removes the part linear in
    // ε (Richardson) and leaves the density inside, ~0 outside.
    const double density = (100.0 * f2 - f1) / 99.0;
    return density > std::max(1e-9 / scale_, 1e-2 * f1) && f2 <= 3.0 * f1;
  }
  /// The solution at the farther distance of the last probe.
  const State& state() const { return far_state_; }
  double resolution() const { return 100.0 * near_; }

 private:
  void spend(const SolveReport& r) {
    // An averaged step costs one evaluation of the map, about the unknowns' count d; a Newton
    // step with its analytic Jacobian, about one too.
    const long long d = solver_.unknowns();
    work_ += (r.averaged_steps + r.newton_steps) * d;
    if (work_ > budget_) throw OverBudget{};
  }

  const OperatorValuedSolver& solver_;
  double scale_;
  PolynomialLimitOptions options_;
  double near_;
  long long budget_;
  long long work_ = 0;
  State far_state_;
};

// An edge between a point outside a band and one inside it, with their solutions.
struct Bracket {
  double out = 0.0, in = 0.0;
  State out_state, in_state;
  double middle() const { return 0.5 * (out + in); }
};

// Bisection on the two-distance test down to the probe's resolution, each probe continued from
// the nearer end's solution.
void bisect(BandProbe& probe, Bracket& b) {
  while (std::abs(b.in - b.out) > probe.resolution()) {
    check_stop();
    const double mid = b.middle();
    const bool nearer_out = std::abs(mid - b.out) < std::abs(mid - b.in);
    if (probe.inside(mid, nearer_out ? &b.out_state : &b.in_state)) {
      b.in = mid;
      b.in_state = probe.state();
    } else {
      b.out = mid;
      b.out_state = probe.state();
    }
  }
}

// An edge found at the coarse resolution, sharpened with the fine probe (distances from the
// options) inside a bracket a few coarse resolutions wide whose ends the fine probe confirms.
// Near a singular point the fine solves can be slow: past the fine budget the coarse edge stands.
double sharpen(const OperatorValuedSolver& solver, Bracket coarse, double scale,
               const PolynomialLimitOptions& options) {
  BandProbe fine(solver, scale, options, options.epsilon, options.scan_work / 2);
  const double direction = coarse.in > coarse.out ? 1.0 : -1.0;
  const double reach = 4.0 * std::abs(coarse.in - coarse.out) + 1e-9 * scale;
  Bracket b;
  b.out = coarse.middle() - direction * reach;
  b.in = coarse.middle() + direction * reach;
  try {
    if (fine.inside(b.out, &coarse.out_state)) return coarse.middle();
    b.out_state = fine.state();
    if (!fine.inside(b.in, &coarse.in_state)) return coarse.middle();
    b.in_state = fine.state();
    bisect(fine, b);
  } catch (const BandProbe::OverBudget&) {
    return coarse.middle();
  }
  return b.middle();
}

// The bands of the continuous part inside [−from, from]: the two-distance test at the coarse
// distances (10⁻⁴ and 10⁻⁶ of the scale, where solves near atoms and singular points stay cheap)
// on a grid of `scan_points` points (offset by the golden ratio so that no round number, where
// atoms and the constant term sit, is a node); each run of inside points is bisected to its two
// edges, which are then sharpened at the fine distances.
//
// Seen from the grid's spacing h, an atom of mass m within h/2 of a node puts at least 0.8 m into
// h·(−Im G(x + ih)), which a continuous density f only reaches as πhf: the nodes where that is a
// local maximum above 10⁻⁷ go into `atom_candidates`.
std::vector<Interval> locate_bands(const OperatorValuedSolver& solver, double from, double scale,
                                   const PolynomialLimitOptions& options, bool positive,
                                   std::vector<double>& atom_candidates) {
  BandProbe probe(solver, scale, options, 1e-6, options.scan_work);
  const int M = std::max(64, options.scan_points);
  const double h = 2.0 * from / M;
  std::vector<double> xs(M), q(M, 0.0);
  std::vector<char> in(M);
  std::vector<State> states(M);
  std::vector<std::pair<Bracket, Bracket>> brackets;
  State high;
  try {
    for (int i = 0; i < M; ++i) {
      check_stop();
      xs[i] = -from + h * (i + 0.3819660112501051);
      in[i] = probe.inside(xs[i], i > 0 ? &states[i - 1] : nullptr);
      states[i] = probe.state();
      const SolveReport r = solve_chain(solver, cd(xs[i], h), 0.0, scale, options, high, i > 0);
      if (r.converged) q[i] = -h * r.cauchy.imag();
    }
    for (int i = 0; i < M; ++i) {
      const double left = i > 0 ? q[i - 1] : 0.0, right = i + 1 < M ? q[i + 1] : 0.0;
      if (q[i] > 1e-7 && q[i] >= left && q[i] >= right) atom_candidates.push_back(xs[i]);
    }
    for (int i = 0; i < M;) {
      if (!in[i]) {
        ++i;
        continue;
      }
      int j = i;
      while (j + 1 < M && in[j + 1]) ++j;
      Bracket lo{i > 0 ? xs[i - 1] : xs[0] - h, xs[i], i > 0 ? states[i - 1] : states[0], states[i]};
      Bracket hi{j + 1 < M ? xs[j + 1] : xs[M - 1] + h, xs[j], j + 1 < M ? states[j + 1] : states[j],
                 states[j]};
      bisect(probe, lo);
      bisect(probe, hi);
      if (hi.middle() - lo.middle() > 2.0 * probe.resolution()) {  // narrower: an atom's trace
        brackets.push_back({lo, hi});
      }
      i = j + 1;
    }
  } catch (const BandProbe::OverBudget&) {
    throw NumericalError("polynomial limit: the search for the support's bands spent its work "
                         "budget (" + std::to_string(options.scan_work) +
                         " units of solver work): near the real axis this law's "
                         "fixed point converges too slowly to locate its bands");
  }
  if (brackets.empty()) {
    throw NumericalError("polynomial limit: no point of the continuous part found on a grid of " +
                         std::to_string(M) + " points over [" + text::readable(-from) + ", " +
                         text::readable(from) + "]");
  }
  // The outer edges: the real-axis continuation from beyond the norm bound (precise, also at
  // singular edges) when it ends within the coarse bracket and the fixed point has real solutions
  // there; otherwise, and for every interior edge, the coarse edge sharpened.
  const auto outer = [&](const Bracket& b, double start, double direction) {
    if (solver.real_axis_solvable()) {
      try {
        const double e = find_edge(solver, start, direction, scale, options);
        if (std::abs(e - b.middle()) <= 3.0 * probe.resolution()) return e;
      } catch (const NumericalError&) {
        // no real solution from there: the sharpened edge stands
      }
    }
    return sharpen(solver, b, scale, options);
  };
  std::vector<Interval> bands;
  for (std::size_t k = 0; k < brackets.size(); ++k) {
    const auto& [lo, hi] = brackets[k];
    // A positive P whose coarse lower edge is within the coarse resolution of 0 has its edge at 0
    // (its spectrum lies in [0, ∞)); solves there are slow when the density is singular at 0.
    const bool at_zero = positive && k == 0 && lo.middle() <= 3.0 * probe.resolution();
    const double a = at_zero  ? 0.0
                     : k == 0 ? outer(lo, -from, 1.0)
                              : sharpen(solver, lo, scale, options);
    const double b = k + 1 == brackets.size() ? outer(hi, from, -1.0)
                                              : sharpen(solver, hi, scale, options);
    bands.push_back({a, b});
  }
  return bands;
}

// A point mass near `x` (within the grid's spacing h): near an atom a of mass m,
// G(z) = m/(z − a) + r(z) with r bounded, so two solves z₁ = x + iε and z₂ = x + 2iε give
// m ≈ (z₁ − z₂)/(1/G₁ − 1/G₂) and a ≈ z₁ − m/G₁ (the pole of G by its residue; standard complex
// analysis), with errors O(ε r/m). Repeated from the new a with ε ← ε/10 down to 10⁻⁵ of the
// scale (closer, the solver's answer near an atom is no longer reliable: at 10⁻⁶ it gave 0.17
// for a mass of 0.3). Accepted when the last two estimates agree to 10⁻³, are real to 10⁻²
// (the imaginary part is O(ε r/m): 1.3e-3 relative for the mass 0.1 at 1 of P Q P + P, 0.011
// from a band), stay within h of x, and ε·(−Im G(a + iε)) equals m to 10⁻³ at the last ε (the
// decisive test: a merely singular density gives ε^{1−α} there instead, a regular point ~ε).
// `estimate` gets the last location when the iteration reached its finest distance, accepted or
// not (contour_atom then decides).
std::optional<Atom> refine_atom(const OperatorValuedSolver& solver, double x, double h,
                                double scale, const PolynomialLimitOptions& options,
                                double* estimate = nullptr) {
  State state;
  bool warm = false;
  double a = x, m_before = -1.0;
  const double finest = 1e-5 * scale;
  std::vector<double> levels;
  for (double e = h; e > finest; e *= 0.1) levels.push_back(e);
  // The finest distance twice: its first solve re-centres on the estimate of the level before,
  // which can be off by more than the distance (S W S with S singular: 2.5e-4 at 4.4e-4, so the
  // last two estimates differed by 2e-3 and the point mass 0.3 at 0 was missed).
  levels.push_back(finest);
  levels.push_back(finest);
  for (std::size_t level = 0; level < levels.size(); ++level) {
    const double eps = levels[level];
    check_stop();
    const cd z1(a, eps), z2(a, 2.0 * eps);
    const SolveReport r2 = solve_chain(solver, z2, 0.0, scale, options, state, warm);
    const SolveReport r1 = solve_chain(solver, z1, 0.0, scale, options, state, r2.converged);
    if (!r1.converged || !r2.converged) return std::nullopt;
    warm = true;
    const cd m = (z1 - z2) / (1.0 / r1.cauchy - 1.0 / r2.cauchy);
    if (!(m.real() > 1e-7)) return std::nullopt;
    a = (z1 - m / r1.cauchy).real();
    if (std::abs(a - x) > h) return std::nullopt;
    if (level + 1 == levels.size()) {
      if (estimate != nullptr) *estimate = a;
      const SolveReport r = solve_chain(solver, cd(a, eps), 0.0, scale, options, state, true);
      const double q = r.converged ? -eps * r.cauchy.imag() : 0.0;
      if (std::abs(m.imag()) <= 1e-2 * m.real() && std::abs(q - m.real()) <= 1e-3 * m.real() &&
          std::abs(m.real() - m_before) <= 1e-3 * m.real()) {
        return Atom{a, m.real()};
      }
      return std::nullopt;
    }
    m_before = m.real();
  }
  return std::nullopt;
}

// The mass of [a, b] from the Cauchy transform alone: −(1/π) Im ∫ G(t + i0) dt over [a, b]
// (Stieltjes inversion) equals the same integral along the upper half of the circle through a and
// b, by Cauchy's theorem (G is analytic in the upper half-plane), where G is smooth and the solver
// fast: (1/π) ∫_0^π Re[G(c + r e^{iθ}) r e^{iθ}] dθ. Point masses inside count in full (m/(z − a)
// gives m). Composite Gauss–Legendre in θ, its panels halved towards each end down to
// `grade_b` (θ = 0, at b) and `grade_a` (θ = π, at a): there the circle meets the real axis, and
// the support may be that close. Empty when a solve fails. With `first_moment`, also
// ∫ t dμ(t) over [a, b] by the same contour (z G(z) in place of G(z)).
std::optional<double> arc_mass(const OperatorValuedSolver& solver, double a, double b,
                               double grade_a, double grade_b, double scale,
                               const PolynomialLimitOptions& options, int middle_panels = 6,
                               double* first_moment = nullptr) {
  const double c = 0.5 * (a + b), r = 0.5 * (b - a);
  std::vector<double> cuts{0.0, kPi};
  const auto graded = [&](double grade, double from, double toward) {
    for (double t = std::min(kPi / 8, grade); t < kPi / 8; t *= 2.0) {
      cuts.push_back(from + toward * t);
    }
    cuts.push_back(from + toward * kPi / 8);
  };
  graded(std::max(grade_b, 1e-9), 0.0, 1.0);
  graded(std::max(grade_a, 1e-9), kPi, -1.0);
  for (int k = 1; k < middle_panels; ++k) {
    cuts.push_back(kPi / 8 + k * (0.75 * kPi / middle_panels));
  }
  std::sort(cuts.begin(), cuts.end());
  const auto& rule = detail::gauss_legendre(kPanelNodes);
  State state;
  bool warm = false;
  double sum = 0.0, first = 0.0;
  for (std::size_t p = 0; p + 1 < cuts.size(); ++p) {
    const double lo = cuts[p], hi = cuts[p + 1];
    if (hi - lo <= 0.0) continue;
    for (int q = 0; q < kPanelNodes; ++q) {
      check_stop();
      const double theta = 0.5 * (lo + hi) + 0.5 * (hi - lo) * rule.nodes[q];
      const cd e = std::polar(1.0, theta);
      const SolveReport s = solve_chain(solver, c + r * e, 0.0, scale, options, state, warm);
      if (!s.converged) return std::nullopt;
      warm = true;
      sum += 0.5 * (hi - lo) * rule.weights[q] * (s.cauchy * r * e).real();
      first += 0.5 * (hi - lo) * rule.weights[q] * ((c + r * e) * s.cauchy * r * e).real();
    }
  }
  if (first_moment != nullptr) *first_moment = first / kPi;
  return sum / kPi;
}

// A point mass near `estimate` from contour integrals over a circle around it that meets no band
// (arc_mass): its mass M₀ = (1/2πi)∮G and its location M₁/M₀, M₁ = (1/2πi)∮ z G (the residue
// theorem), exact to the solver's accuracy. This decides where a band nearby spoils the residue
// estimates of refine_atom: found in the catalogue, −B³ + ½(AB + BA) with A, B Haar-rotated
// atomic laws has the point mass 0.05 at −5.882 (where eigenspaces of A and B of dimensions 0.89
// and 0.16 meet: projections in general position meet in dimension p + q − 1; for sums this is
// Bercovici & Voiculescu 1998, from memory) 1.2e-3 from a band, and the residue estimates kept an
// imaginary part of 3 % down to 10⁻⁵ of the scale.
std::optional<Atom> contour_atom(const OperatorValuedSolver& solver,
                                 const std::vector<Interval>& bands, double estimate, double scale,
                                 const PolynomialLimitOptions& options) {
  double room = 0.05 * scale;
  for (const Interval& b : bands) {
    if (estimate >= b.lo && estimate <= b.hi) return std::nullopt;
    room = std::min({room, std::abs(estimate - b.lo), std::abs(estimate - b.hi)});
  }
  if (room < 1e-6 * scale) return std::nullopt;
  const double rho = 0.5 * room;
  double first = 0.0;
  const auto m =
      arc_mass(solver, estimate - rho, estimate + rho, 0.5, 0.5, scale, options, 6, &first);
  if (!m || !(*m > 1e-7) || *m > 1.0 + 1e-9) return std::nullopt;
  const double a = first / *m;
  if (std::abs(a - estimate) > 0.5 * rho) return std::nullopt;
  return Atom{a, *m};
}

// An isolated point mass's weight from the contour integral over a circle around it that meets
// no band and no other point mass (arc_mass): exact to the solver's accuracy, where the residue
// estimate of refine_atom is off by O(ε r/m) (1.7e-5 relative for the 0.3 at 0 of S W S with S
// singular). A point mass in or on a band keeps its estimate; the band's contour mass, which
// subtracts it, then carries the difference. A weight whose extrapolation settled to 1e-9
// (weigh_point_mass; `settled` holds their places) is kept: near a band's edge the contour's
// circle is small and meets the axis where G changes fast (the 0.01 of −B³ + ½(AB + BA), 8.9e-6
// above an edge, came out as 0.009999 against the extrapolation's 0.0100000001).
void exact_atom_weights(const OperatorValuedSolver& solver, Support& support, double scale,
                        const PolynomialLimitOptions& options, const std::vector<double>& settled) {
  for (std::size_t k = 0; k < support.atoms.size(); ++k) {
    Atom& atom = support.atoms[k];
    if (std::find(settled.begin(), settled.end(), atom.value) != settled.end()) continue;
    double room = 0.05 * scale;
    for (const Interval& b : support.bands) {
      if (atom.value >= b.lo && atom.value <= b.hi) room = 0.0;
      room = std::min({room, std::abs(atom.value - b.lo), std::abs(atom.value - b.hi)});
    }
    for (std::size_t j = 0; j < support.atoms.size(); ++j) {
      if (j != k) room = std::min(room, std::abs(support.atoms[j].value - atom.value));
    }
    if (room < 1e-6 * scale) continue;
    const double rho = 0.5 * room;
    const auto m = arc_mass(solver, atom.value - rho, atom.value + rho, 0.5, 0.5, scale, options);
    if (m && std::abs(*m - atom.weight) <= 1e-3 * atom.weight) atom.weight = *m;
  }
}

// Point masses that linear algebra forces, at exact places. Take an eigenspace E_i of each letter
// (value a_i, share w_i) and their intersection E. On E every word acts as the product of its
// letters' values, so P acts as the scalar p(a_1, …, a_k), the polynomial evaluated on numbers.
// And dim E ≥ Σ dim E_i − (k − 1)N (dim(V ∩ W) ≥ dim V + dim W − N; elementary). So p(a) is a
// point mass of weight at least Σ w_i − (k − 1) wherever that is positive; intersections for
// different values are orthogonal, so the bounds of equal p(a) add. For a free sum of two atomic
// laws the weight is exactly this bound (Bercovici & Voiculescu 1998, from memory); for other
// polynomials more mass can sit there, so the weight is measured (weigh_point_mass).
std::vector<Atom> forced_atoms(const FreePolynomial& p) {
  const std::size_t k = p.letters.size();
  std::vector<std::vector<Atom>> atoms(k);
  for (std::size_t i = 0; i < k; ++i) {
    if (!p.letters[i].law) return {};
    atoms[i] = p.letters[i].law->support().atoms;
    if (atoms[i].empty()) return {};
    // Heaviest first: the search below stops at the first value whose share leaves no room.
    std::sort(atoms[i].begin(), atoms[i].end(),
              [](const Atom& x, const Atom& y) { return x.weight > y.weight; });
  }
  std::vector<double> value(k, 0.0);
  std::vector<Atom> out;
  const auto evaluate = [&] {
    double v = 0.0;
    for (const RealTerm& t : p.terms) {
      double product = t.coefficient.real();
      for (const int j : t.word) product *= value[static_cast<std::size_t>(j)];
      v += product;
    }
    return v;
  };
  // Depth-first over one value per letter; `deficit` = Σ (1 − w_i) so far, which must stay < 1.
  const auto visit = [&](const auto& self, std::size_t i, double deficit) -> void {
    if (i == k) {
      out.push_back({evaluate(), 1.0 - deficit});
      return;
    }
    for (const Atom& a : atoms[i]) {
      const double d = deficit + (1.0 - a.weight);
      if (d >= 1.0 - 1e-12) break;
      value[i] = a.value;
      self(self, i + 1, d);
    }
  };
  visit(visit, 0, 0.0);
  std::sort(out.begin(), out.end(), [](const Atom& x, const Atom& y) { return x.value < y.value; });
  std::vector<Atom> merged;
  for (const Atom& a : out) {
    const double tolerance = 1e-12 * (1.0 + std::abs(a.value));
    if (!merged.empty() && std::abs(a.value - merged.back().value) <= tolerance) {
      merged.back().weight += a.weight;
    } else {
      merged.push_back(a);
    }
  }
  return merged;
}

// The weight of a point mass at a known place a: w(ε) = ε·(−Im G(a + iε)) is m plus the
// continuous part's share, O(ε^{1−α}) where the density is O(|x − a|^{−α}), once ε is small
// against the distance to the nearest band edge or point mass. ε runs down from 10⁻⁵ of the scale
// by factors of 4; Aitken's Δ² on each three consecutive values removes the leading power,
// whatever it is, and the weight is taken when two extrapolations agree to 10⁻¹⁰. The sequence
// stops where a value jumps (measured: below about 10⁻⁷ of the scale the solve can settle on a
// branch that misses the point mass: 0.009 in place of 0.05). Measured: 0.05 at −1.938 of
// A V B V^* + V B V^* A to 4e-11 (the residue of the band's table had been 9e-4 off); 0.01 at
// 0.136048 of −B³ + ½(AB + BA), 1.4e-5 from a band's edge, to 1e-10 at ε = 1.5e-9 of the scale.
// Returns the weight and the last two extrapolations' difference.
std::optional<std::pair<double, double>> weigh_point_mass(const OperatorValuedSolver& solver,
                                                          double a, double scale,
                                                          const PolynomialLimitOptions& options) {
  std::vector<double> w, extrapolated;
  for (double eps = 1e-5 * scale; eps >= 1e-9 * scale; eps *= 0.25) {
    check_stop();
    State state;
    const SolveReport r = solve_chain(solver, cd(a, eps), 0.0, scale, options, state, false);
    if (!r.converged) break;
    const double value = -eps * r.cauchy.imag();
    const std::size_t n = w.size();
    if (n >= 2 && std::abs(value - w[n - 1]) > 2.0 * std::abs(w[n - 1] - w[n - 2])) break;
    w.push_back(value);
    if (n + 1 < 3) continue;
    const double d1 = w[n - 1] - w[n - 2], d2 = w[n] - w[n - 1];
    extrapolated.push_back(std::abs(d2 - d1) > 1e-300 ? w[n] - d2 * d2 / (d2 - d1) : w[n]);
    const std::size_t e = extrapolated.size();
    if (e >= 2 && std::abs(extrapolated[e - 1] - extrapolated[e - 2]) <= 1e-10) break;
  }
  const std::size_t e = extrapolated.size();
  if (e < 2 || !(extrapolated[e - 1] > 0.0)) return std::nullopt;
  return std::pair{extrapolated[e - 1], std::abs(extrapolated[e - 1] - extrapolated[e - 2])};
}

// Whether x, beside a point mass `atom`, lies in a band. Near a point mass the solves on the
// axis (the pencil's ε) can settle on a branch that smears the point mass over a width ~3e-7,
// independent of ε: A V B V^* + V B V^* A then showed a band of density ~4e-9/u² around its 0.05
// at −1.938 and from 2e-4 below it, where NumPy (N = 2000) has no eigenvalue within 5.4e-4 below
// or above it. Here G is solved at x + iη with η = max(|u|/100, 3·10⁻⁷ of the scale) and η/3
// (u = x − a), above that width, and the point mass's own share m η/(π(u² + η²)) is taken out:
// what remains is the continuous density smoothed over η, which is ∝ η in a gap (ratio 1/3) and
// settles in a band (ratio → 1; at a square-root edge the two meet where the distance is ~η,
// which bounds the accuracy of an edge found this way).
std::optional<bool> inside_beside(const OperatorValuedSolver& solver, double x, const Atom& atom,
                                  double scale, const PolynomialLimitOptions& options) {
  const double u = std::abs(x - atom.value);
  // Two cold solves (a warm start from η kept the smeared branch at η/3), on two threads.
  double f[2];
  bool converged[2];
  for_each_chunk(2, [&](std::size_t k) {
    const double eta = std::max(1e-2 * u, 3e-7 * scale) / (k == 0 ? 1.0 : 3.0);
    State state;
    const SolveReport r = solve_chain(solver, cd(x, eta), 0.0, scale, options, state, false);
    converged[k] = r.converged;
    f[k] = -r.cauchy.imag() / kPi - atom.weight * eta / (kPi * (u * u + eta * eta));
  });
  if (!converged[0] || !converged[1]) return std::nullopt;
  return f[1] > 0.0 && f[1] > 0.65 * f[0];
}

// The part of a band on one side of a point mass (direction ±1), probed at distances growing by
// 2 from 10⁻⁵ of the scale up to `extent`: the distance of the first point inside (then bisected
// against the last point outside to a third of the test's resolution), +∞ when every probe is
// outside, or empty when a solve fails.
std::optional<double> first_inside(const OperatorValuedSolver& solver, const Atom& atom,
                                   double direction, double extent, double scale,
                                   const PolynomialLimitOptions& options) {
  double outside = 0.0;
  for (double d = 1e-5 * scale;; d = std::min(2.0 * d, extent)) {
    check_stop();
    const auto in = inside_beside(solver, atom.value + direction * d, atom, scale, options);
    if (!in) return std::nullopt;
    if (*in) {
      double lo = outside, hi = d;
      // No finer than a third of the test's own resolution η there (inside_beside).
      while (hi - lo > 0.3 * std::max(1e-2 * hi, 3e-7 * scale)) {
        const double mid = 0.5 * (lo + hi);
        const auto m = inside_beside(solver, atom.value + direction * mid, atom, scale, options);
        if (!m) return std::nullopt;
        (*m ? hi : lo) = mid;
      }
      return hi;
    }
    outside = d;
    if (d >= extent) return std::numeric_limits<double>::infinity();
  }
}

// The constant term c_0 of P: where a point mass or an interior singularity of the density sits
// in the cases we meet (X B X with B singular; A B A with B = ±1).
double constant_term(const FreePolynomial& p) {
  double c0 = 0.0;
  for (const auto& t : p.terms) {
    if (t.word.empty()) c0 += t.coefficient.real();
  }
  return c0;
}

// A point c where the density blows up like C±|x − c|^{−α±} on either side (A B A with B = ±1 at
// 0: α = 1/3), seen from the densities at c ∓ δ, 2δ, 4δ: the exponent log₂(f(δ)/f(2δ)) on a side
// above 0.05 and within 0.15 of log₂(f(2δ)/f(4δ)) (a power law); a smooth density gives |α| of
// order δ f′/f. The window [c − δ, c + δ] is then left to a contour (arc_mass) and, inside it,
// to the law f = C d^{−α}(1 + b d) fitted on each side from the three points: α = 2r₁ − r₂ and
// b δ = (r₂ − r₁) ln 2 with r₁, r₂ the two log-ratios (Richardson on their O(δ) term; the plain
// log-ratio's exponent was off by 1.6e-3 and the CDF at 10⁻⁶ from 0 by 4e-7).
struct PowerLaw {
  double coefficient = 0.0, exponent = 0.0, slope = 0.0;
  double density(double d) const {
    return coefficient * std::pow(d, -exponent) * (1.0 + slope * d);
  }
  double mass(double d) const {  // ∫_0^d
    return coefficient * (std::pow(d, 1.0 - exponent) / (1.0 - exponent) +
                          slope * std::pow(d, 2.0 - exponent) / (2.0 - exponent));
  }
};

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
  std::vector<double> atom_candidates;
  support_.bands = locate_bands(*solver_, from, scale_, options_, proven_positive(polynomial_),
                                atom_candidates);
  support_.lo = support_.bands.front().lo;
  support_.hi = support_.bands.back().hi;
  // A positive P has its spectrum in [0, ∞); the edge search stops within rounding of the edge
  // (−8e-13 for X² before this), which must not read as negative eigenvalues.
  if (proven_positive(polynomial_) && support_.lo < 0.0) {
    support_.lo = 0.0;
    support_.bands.front().lo = std::max(0.0, support_.bands.front().lo);
  }
  const std::vector<double> settled = locate_point_masses(std::move(atom_candidates), from);
  trim_bands_beside_atoms();
  exact_atom_weights(*solver_, support_, scale_, options_, settled);
  // A weight the contour integral settled is no longer uncertain.
  std::erase_if(uncertain_weights_, [&](const UncertainWeight& u) {
    return std::none_of(support_.atoms.begin(), support_.atoms.end(), [&](const Atom& a) {
      return a.value == u.atom.value && a.weight == u.atom.weight;
    });
  });
  // The tables now, not lazily: a point mass only they reveal (find_hidden_atom) belongs to the
  // support that every later question sees. Its weight is good to about 1e-3 (measured: 9e-4 for
  // a known 0.05 before weigh_point_mass took that case over).
  std::call_once(table_once_, [this] { build_table(); });
  for (const BandTable& t : tables_) {
    if (!t.hidden_atom) continue;
    support_.atoms.push_back(*t.hidden_atom);
    uncertain_weights_.push_back({*t.hidden_atom, 1e-3});
  }
  std::sort(support_.atoms.begin(), support_.atoms.end(),
            [](const Atom& x, const Atom& y) { return x.value < y.value; });
  if (!support_.atoms.empty()) {
    support_.lo = std::min(support_.lo, support_.atoms.front().value);
    support_.hi = std::max(support_.hi, support_.atoms.back().value);
  }
}

std::vector<double> PolynomialLaw::locate_point_masses(std::vector<double> candidates,
                                                       double from) {
  std::vector<double> settled;
  const auto known = [&](double x) {
    return std::any_of(support_.atoms.begin(), support_.atoms.end(),
                       [&](const Atom& k) { return std::abs(k.value - x) < 1e-6 * scale_; });
  };
  // First those the dimension count forces (forced_atoms), at their exact places.
  for (const Atom& forced : forced_atoms(polynomial_)) {
    const auto measured = weigh_point_mass(*solver_, forced.value, scale_, options_);
    Atom atom = forced;  // the lower bound, where the solver cannot weigh it
    double uncertainty = 1e-3;
    if (measured && measured->first >= forced.weight - 1e-6) {
      atom.weight = measured->first;
      uncertainty = measured->second;
    }
    support_.atoms.push_back(atom);
    if (uncertainty <= 1e-9) settled.push_back(atom.value);
    if (uncertainty > 1e-8) uncertain_weights_.push_back({atom, uncertainty});
  }
  // Then by refine_atom: at the constant term c_0 of P, where one sits in the common case (a
  // factor with an atom at 0, e.g. X B X with B singular; placed exactly there), then from the
  // scan's candidates (for example where two projections overlap).
  const double c0 = constant_term(polynomial_);
  const double h = 2.0 * from / std::max(64, options_.scan_points);
  if (!known(c0)) {
    if (auto atom = refine_atom(*solver_, c0, h, scale_, options_);
        atom && std::abs(atom->value - c0) <= 1e-6 * scale_) {
      support_.atoms.push_back({c0, atom->weight});
    }
  }
  // A point mass next to a band is no local maximum of the scan (the band's own mass rises
  // towards it): each edge is a candidate too. Found in the catalogue: −B³ + ½(AB + BA) with A, B
  // Haar-rotated atomic laws has the point mass 0.05 at −5.882, 1.2e-3 from a band (contour_atom
  // finds it when the dimension count does not).
  for (const Interval& band : support_.bands) {
    candidates.push_back(band.lo);
    candidates.push_back(band.hi);
  }
  for (double x : candidates) {
    if (std::abs(x - c0) < 2.0 * h || known(x)) continue;
    double estimate = kNaN;
    auto atom = refine_atom(*solver_, x, h, scale_, options_, &estimate);
    if (!atom && std::isfinite(estimate)) {
      atom = contour_atom(*solver_, support_.bands, estimate, scale_, options_);
    }
    if (atom && !known(atom->value)) support_.atoms.push_back(*atom);
  }
  std::sort(support_.atoms.begin(), support_.atoms.end(),
            [](const Atom& x, const Atom& y) { return x.value < y.value; });
  return settled;
}

// A band that holds a point mass (more than 10⁻⁶ of the scale from either edge) may reach it
// only through the smeared branch (inside_beside): where every probe on one side of the point
// mass is outside, that side goes and the band's edge moves to the first point inside on the
// other side. A band with nothing inside on either side (within 10⁻² of the scale) is dropped. A
// point mass at a band's edge or outside it leaves the band as the scan found it.
void PolynomialLaw::trim_bands_beside_atoms() {
  const double reach = 1e-2 * scale_;
  for (const Atom& atom : support_.atoms) {
    for (std::size_t k = 0; k < support_.bands.size(); ++k) {
      Interval& band = support_.bands[k];
      const double below = atom.value - band.lo, above = band.hi - atom.value;
      if (below <= 1e-6 * scale_ || above <= 1e-6 * scale_) continue;
      const auto left =
          first_inside(*solver_, atom, -1.0, std::min(below, reach), scale_, options_);
      const auto right =
          first_inside(*solver_, atom, 1.0, std::min(above, reach), scale_, options_);
      if (!left || !right) continue;
      const bool left_empty = std::isinf(*left) && below <= reach;
      const bool right_empty = std::isinf(*right) && above <= reach;
      if (left_empty && right_empty) {
        support_.bands.erase(support_.bands.begin() + static_cast<std::ptrdiff_t>(k));
        --k;
        continue;
      }
      if (left_empty && std::isfinite(*right)) band.lo = atom.value + *right;
      if (right_empty && std::isfinite(*left)) band.hi = atom.value - *left;
    }
  }
  // With no band left the support is its point masses (the constructor widens to them).
  support_.lo = support_.bands.empty() ? std::numeric_limits<double>::infinity()
                                       : support_.bands.front().lo;
  support_.hi = support_.bands.empty() ? -std::numeric_limits<double>::infinity()
                                       : support_.bands.back().hi;
}

PolynomialLaw::~PolynomialLaw() = default;

double PolynomialLaw::norm_limit() const {
  return std::max(std::abs(support_.lo), std::abs(support_.hi));
}

std::vector<DensityReport> PolynomialLaw::solve_densities(std::span<const double> xs) const {
  // Chunks of kDensityChunk consecutive points, each a chain of warm starts from a cold first
  // point, spread over threads: a chunk's results depend on its points alone, so they are the
  // same for any number of threads.
  std::vector<DensityReport> out(xs.size());
  const std::size_t chunks = (xs.size() + kDensityChunk - 1) / kDensityChunk;
  for_each_chunk(chunks, [&](std::size_t c) {
    const std::size_t begin = c * kDensityChunk, end = std::min(xs.size(), begin + kDensityChunk);
    solve_chunk(xs.subspan(begin, end - begin), std::span(out).subspan(begin, end - begin));
  });
  return out;
}

void PolynomialLaw::solve_chunk(std::span<const double> xs, std::span<DensityReport> out) const {
  State state;
  bool warm = false;
  double previous = 0.0;
  const double eps = options_.epsilon * scale_;
  for (std::size_t k = 0; k < xs.size(); ++k) {
    check_stop();
    const double x = xs[k];
    DensityReport& d = out[k];
    d.x = x;
    const bool in_band = std::any_of(support_.bands.begin(), support_.bands.end(),
                                     [x](const Interval& b) { return x > b.lo && x < b.hi; });
    if (!in_band) {
      d.density = 0.0;
      d.converged = true;
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
  }
}

std::vector<DensityReport> PolynomialLaw::evaluate(std::span<const double> xs) const {
  // A singular point may have a window (build_table): there the density is its fitted power law,
  // not a solve (which takes ~10⁵ iterations at the singular point).
  std::call_once(table_once_, [this] { build_table(); });
  const auto windowed = [](const BandTable& t) { return t.window >= 0; };
  if (std::none_of(tables_.begin(), tables_.end(), windowed)) return solve_densities(xs);
  std::vector<DensityReport> out(xs.size());
  std::vector<double> to_solve;
  std::vector<std::size_t> solved_at;
  for (std::size_t i = 0; i < xs.size(); ++i) {
    const double x = xs[i];
    const auto in = std::find_if(tables_.begin(), tables_.end(), [x](const BandTable& t) {
      return t.window >= 0 && x > t.window_lo && x < t.window_hi;
    });
    if (in == tables_.end()) {
      to_solve.push_back(x);
      solved_at.push_back(i);
      continue;
    }
    // At the centre the density is infinite: shown is the power law at the distance ε.
    const double distance = std::max(std::abs(x - in->centre), options_.epsilon * scale_);
    const bool left = x < in->centre;
    out[i].x = x;
    const PowerLaw law = left ? PowerLaw{in->left_c, in->left_alpha, in->left_b}
                              : PowerLaw{in->right_c, in->right_alpha, in->right_b};
    out[i].density = in->window_scale * law.density(distance);
    out[i].converged = true;
  }
  const auto solved = solve_densities(to_solve);
  for (std::size_t k = 0; k < solved.size(); ++k) out[solved_at[k]] = solved[k];
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

// The fitted laws' mass over [window_lo, x] for x in the window (before window_scale).
double PolynomialLaw::window_mass(const BandTable& t, double x) {
  const PowerLaw left{t.left_c, t.left_alpha, t.left_b};
  const PowerLaw right{t.right_c, t.right_alpha, t.right_b};
  const double left_part = left.mass(t.centre - t.window_lo);
  return x < t.centre ? left_part - left.mass(t.centre - x) : left_part + right.mass(x - t.centre);
}

void PolynomialLaw::add_singular_window(BandTable& table, double centre, bool left_side,
                                        bool right_side, double beyond) const {
  // The circle of the window's contour keeps the distance δ from the singular point: G is smooth
  // along it, and three panels of Gauss–Legendre suffice (one middle panel). At a band's end
  // (one side only) the circle crosses the axis `beyond` the end instead, in the gap.
  const double w = table.width, delta = 1e-4 * w;
  if ((left_side && centre - 8.0 * delta <= table.lo) ||
      (right_side && centre + 8.0 * delta >= table.lo + w)) {
    return;
  }
  std::vector<double> xs;
  if (left_side) xs.insert(xs.end(), {centre - 4 * delta, centre - 2 * delta, centre - delta});
  if (right_side) xs.insert(xs.end(), {centre + delta, centre + 2 * delta, centre + 4 * delta});
  const auto ds = solve_densities(xs);
  for (const auto& d : ds) {
    if (!d.converged || !(d.density > 0.0)) return;
  }
  // Log-ratios near (δ against 2δ) and far (2δ against 4δ) on each side present.
  const std::size_t r0 = left_side ? 3 : 0;
  const double left = left_side ? std::log2(ds[2].density / ds[1].density) : 0.0,
               left_far = left_side ? std::log2(ds[1].density / ds[0].density) : 0.0,
               right = right_side ? std::log2(ds[r0].density / ds[r0 + 1].density) : 0.0,
               right_far = right_side ? std::log2(ds[r0 + 1].density / ds[r0 + 2].density) : 0.0;
  const auto power = [](double near, double far) {
    return near > 0.05 && std::abs(near - far) < 0.15;
  };
  if (!(left_side && power(left, left_far)) && !(right_side && power(right, right_far))) return;
  table.centre = centre;
  table.window_lo = centre - (left_side ? delta : 0.0);
  table.window_hi = centre + (right_side ? delta : 0.0);
  const auto fit = [&](double near, double far, double f, double& c, double& alpha, double& b) {
    alpha = std::clamp(2.0 * near - far, -0.5, 0.95);
    b = (far - near) * std::log(2.0) / delta;
    c = f * std::pow(delta, alpha) / (1.0 + b * delta);
  };
  if (left_side) fit(left, left_far, ds[2].density, table.left_c, table.left_alpha, table.left_b);
  if (right_side) {
    fit(right, right_far, ds[r0].density, table.right_c, table.right_alpha, table.right_b);
  }
  // Panels halved towards the window from a coarse panel's width away; none inside it.
  const double t0 = table.theta_of(centre);
  double gap = kPi;
  for (const double t : table.theta) {
    if (std::abs(t - t0) > 1e-12) gap = std::min(gap, std::abs(t - t0));
  }
  double reach = std::numeric_limits<double>::infinity();
  if (left_side) reach = std::min(reach, centre - table.x_of(std::max(0.0, t0 - gap)));
  if (right_side) reach = std::min(reach, table.x_of(std::min(kPi, t0 + gap)) - centre);
  for (double d = delta; d < reach; d *= 2.0) {
    if (left_side) table.theta.push_back(table.theta_of(centre - d));
    if (right_side) table.theta.push_back(table.theta_of(centre + d));
  }
  const double t_lo = table.theta_of(table.window_lo), t_hi = table.theta_of(table.window_hi);
  std::erase_if(table.theta, [&](double t) { return t > t_lo && t < t_hi; });
  std::sort(table.theta.begin(), table.theta.end());
  table.theta.erase(std::unique(table.theta.begin(), table.theta.end()), table.theta.end());
  table.window = static_cast<int>(std::find(table.theta.begin(), table.theta.end(), t_lo) -
                                  table.theta.begin());
  const double modelled = window_mass(table, table.window_hi);
  const double a = left_side ? table.window_lo : centre - beyond;
  const double b = right_side ? table.window_hi : centre + beyond;
  const auto exact = arc_mass(*solver_, a, b, kPi, kPi, scale_, options_, 1);
  if (exact && *exact > 0.5 * modelled && *exact < 2.0 * modelled) {
    table.window_scale = *exact / modelled;
  }
}

// The nearest band edge or point mass below and above band `band` (±∞ where there is none); a
// point mass counts when it lies at least `apart` beyond the band's edge.
std::pair<double, double> PolynomialLaw::neighbours(std::size_t band, double apart) const {
  const auto& bands = support_.bands;
  const Interval& own = bands[band];
  double before = band > 0 ? bands[band - 1].hi : -std::numeric_limits<double>::infinity();
  double after =
      band + 1 < bands.size() ? bands[band + 1].lo : std::numeric_limits<double>::infinity();
  for (const Atom& a : support_.atoms) {
    if (a.value <= own.lo - apart) before = std::max(before, a.value);
    if (a.value >= own.hi + apart) after = std::min(after, a.value);
  }
  return {before, after};
}

// A band's end where the density blows up (2 W1 W2 + 2 W2 W1 + W1 ends at 0 like |x|^{−1/2}):
// the computed edge is only good to ~1e-8 of the scale there (8.6e-7 past 0), and the table's
// graded panels assume the singularity at that edge, so its integral overshot by 9e-5. The end
// gets a one-sided window (add_singular_window) whose contour crosses the axis in the gap beyond
// the edge, where nothing is; the upper end is tried first (one window per band). Tried only at an
// end within 10⁻³ of the band's width from the constant term, where such ends sit in the cases we
// meet (as interior singular points do): each try costs three solves near the edge.
void PolynomialLaw::add_end_window(BandTable& table, std::size_t band) const {
  const Interval& own = support_.bands[band];
  const auto [before, after] = neighbours(band, 0.0);
  const double delta = 1e-4 * table.width;
  if (after - own.hi > 2e-2 * delta) {
    add_singular_window(table, own.hi, true, false, std::min(delta, 0.5 * (after - own.hi)));
  }
  if (table.window < 0 && own.lo - before > 2e-2 * delta) {
    add_singular_window(table, own.lo, false, true, std::min(delta, 0.5 * (own.lo - before)));
  }
}

void PolynomialLaw::set_exact_mass(BandTable& table, std::size_t band) const {
  // The contour crosses the axis halfway to the next band or point mass on each side (or 5 % of
  // the scale beyond an outer edge), so that nothing singular lies closer to where it crosses.
  const Interval& own = support_.bands[band];
  const auto [before, after] = neighbours(band, 1e-9 * scale_);
  const double pad = 0.05 * scale_;
  const double L = std::isfinite(before) ? 0.5 * (before + own.lo) : own.lo - pad;
  const double R = std::isfinite(after) ? 0.5 * (own.hi + after) : own.hi + pad;
  const double r = 0.5 * (R - L);
  double first = 0.0;
  const auto mass = arc_mass(*solver_, L, R, 0.5 * (own.lo - L) / r, 0.5 * (R - own.hi) / r,
                             scale_, options_, 6, &first);
  if (!mass) return;
  double inside = *mass;
  for (const Atom& a : support_.atoms) {
    if (a.value > L && a.value < R) {
      inside -= a.weight;
      first -= a.weight * a.value;
    }
  }
  table.exact_mass = inside;
  table.exact_first = first;
}

// A point mass at a band's edge (or inside it) is no local maximum of the scan, and the residue
// estimates of refine_atom do not settle there: −B³ + ½(AB + BA) with Haar-rotated atomic A, B
// has 0.01 at 0.136048 within 1.5e-5 of a band's computed edge, and A V B V^* + V B V^* A has
// 0.05 at −1.938 on its band's lower edge (eigenspaces of A and B of dimensions 0.89 and 0.16
// meet in 0.05). The band's contour mass counts it, its density table does not: their difference
// d and the difference of their first moments put a point mass d at a = Δ(first moment)/d. It is
// accepted when ε·(−Im G(a + iε)) equals d to 10 % at ε = 10⁻⁵ and 10⁻⁶ of the scale (a point
// mass gives d at every ε; a table's shortfall near a singular point of the density, up to a few
// 1e-4, gives ε^{1−α} there instead, a regular point ~ε).
void PolynomialLaw::find_hidden_atom(BandTable& table, double table_first) const {
  const double d = table.exact_mass - table.table_mass;
  if (!(table.exact_mass > 0.0) || !(d > 1e-6)) return;
  const double a = (table.exact_first - table_first) / d;
  if (!(a >= table.lo - 1e-6 * scale_ && a <= table.lo + table.width + 1e-6 * scale_)) return;
  for (const double eps : {1e-5 * scale_, 1e-6 * scale_}) {
    State state;
    const SolveReport r = solve_chain(*solver_, cd(a, eps), 0.0, scale_, options_, state, false);
    if (!r.converged || !(std::abs(-eps * r.cauchy.imag() - d) <= 0.1 * d)) return;
  }
  table.hidden_atom = Atom{a, d};
}

// Panels graded geometrically towards `centre` (5 halvings of a panel on each side), so that a
// singularity there leaves only a tiny mass in the panels that touch it.
void PolynomialLaw::grade_towards(BandTable& table, double centre) {
  const double t0 = table.theta_of(centre);
  const double h = kPi / static_cast<double>(table.theta.size() - 1);
  for (int k = 0; k <= 5; ++k) {
    for (double side : {-1.0, 1.0}) {
      const double t = t0 + side * h * std::ldexp(1.0, -k);
      if (t > 0.0 && t < kPi) table.theta.push_back(t);
    }
  }
  table.theta.push_back(t0);
  std::sort(table.theta.begin(), table.theta.end());
  table.theta.erase(std::unique(table.theta.begin(), table.theta.end(),
                                [](double a, double b) { return std::abs(a - b) < 1e-12; }),
                    table.theta.end());
}

double PolynomialLaw::integrate_band(BandTable& table, const std::vector<DensityReport>& ds,
                                     const std::vector<double>& jac, std::size_t node,
                                     const Atom* without) const {
  const auto& rule = detail::gauss_legendre(kPanelNodes);
  const std::size_t panels = table.theta.size() - 1;
  const double eps = options_.epsilon * scale_;
  double first = 0.0;  // ∫ x f(x) dx by the table (the window's part at its centre)
  table.integrand.assign(panels * kPanelNodes, 0.0);
  table.cumulative.assign(panels + 1, 0.0);
  for (std::size_t p = 0; p < panels; ++p) {
    if (static_cast<int>(p) == table.window) {
      table.cumulative[p + 1] =
          table.cumulative[p] + table.window_scale * window_mass(table, table.window_hi);
      first += table.centre * (table.cumulative[p + 1] - table.cumulative[p]);
      continue;
    }
    double sum = 0.0;
    for (int q = 0; q < kPanelNodes; ++q, ++node) {
      // A node the solver could not settle (only ever within ~1e−8 of an edge) counts as 0.
      double f = ds[node].converged ? ds[node].density : 0.0;
      if (without != nullptr) {
        // The point mass's own share of −Im G(x + iε)/π: m ε/(π((x − a)² + ε²)).
        const double u = ds[node].x - without->value;
        f = std::max(0.0, f - without->weight * eps / (kPi * (u * u + eps * eps)));
      }
      const double v = f * jac[node];
      table.integrand[p * kPanelNodes + q] = v;
      sum += rule.weights[q] * v;
      first += 0.5 * (table.theta[p + 1] - table.theta[p]) * rule.weights[q] * v * ds[node].x;
    }
    table.cumulative[p + 1] =
        table.cumulative[p] + 0.5 * (table.theta[p + 1] - table.theta[p]) * sum;
  }
  table.table_mass = table.cumulative.back();
  return first;
}

void PolynomialLaw::fill_tables(const std::vector<DensityReport>& ds,
                                const std::vector<double>& jac) const {
  std::size_t node = 0;
  mass_ = 0.0;
  for (std::size_t band = 0; band < tables_.size(); ++band) {
    BandTable& table = tables_[band];
    const double first = integrate_band(table, ds, jac, node, nullptr);
    set_exact_mass(table, band);
    find_hidden_atom(table, first);
    if (table.hidden_atom) {
      // The table again without the point mass's share of the densities near it (9e-4 of the
      // mass for the 0.05 of A V B V^* + V B V^* A), and its weight from what remains.
      (void)integrate_band(table, ds, jac, node, &*table.hidden_atom);
      table.hidden_atom->weight = table.exact_mass - table.table_mass;
      table.exact_mass = table.table_mass;
    }
    node += (table.theta.size() - 1 - (table.window >= 0 ? 1 : 0)) * kPanelNodes;
    mass_ += table.table_mass;
    if (table.exact_mass > 0.0 && table.table_mass > 0.0) {
      const double f = table.exact_mass / table.table_mass;
      for (double& v : table.integrand) v *= f;
      for (double& v : table.cumulative) v *= f;
      table.window_scale *= f;
    }
  }
}

void PolynomialLaw::build_table() const {
  // Per band, x = lo + w(1 − cos θ)/2 makes density·dx/dθ smooth at square-root and
  // inverse-square-root edges (the substitution of laws_quadrature's integrate_density);
  // Gauss–Legendre panels in θ. A singular point at the constant term gets a window
  // (add_singular_window), and each band's table is scaled to its contour mass (set_exact_mass);
  // continuous_mass() keeps the tables' own total, so that a shortfall (a point mass the table
  // cannot show, a coarse edge) still gets the limit's mass note.
  double total_width = 0.0;
  for (const Interval& band : support_.bands) total_width += band.hi - band.lo;
  const double c0 = constant_term(polynomial_);
  std::vector<double> xs, jac;
  tables_.clear();
  for (const Interval& band : support_.bands) {
    BandTable table;
    table.lo = band.lo;
    table.width = band.hi - band.lo;
    const double w = table.width;
    const int P = std::max(8, static_cast<int>(std::lround(std::max(4, options_.table_panels) *
                                                           w / total_width)));
    for (int p = 0; p <= P; ++p) table.theta.push_back(kPi * p / P);
    if (c0 > band.lo + 1e-6 * w && c0 < band.hi - 1e-6 * w) {
      grade_towards(table, c0);
      add_singular_window(table, c0, true, true, 0.0);
    }
    const double from_c0 = std::min(std::abs(c0 - band.lo), std::abs(c0 - band.hi));
    if (table.window < 0 && from_c0 <= 1e-3 * w) {
      add_end_window(table, static_cast<std::size_t>(&band - support_.bands.data()));
    }
    tables_.push_back(std::move(table));
  }
  // Panels split where the density has more structure than 8 nodes resolve, up to 5 times
  // (split_unresolved_panels); nodes already solved are not solved again.
  std::map<double, DensityReport> solved;
  std::vector<DensityReport> ds;
  for (int round = 0;; ++round) {
    table_nodes(xs, jac);
    std::vector<double> fresh;
    for (const double x : xs) {
      if (!solved.contains(x)) fresh.push_back(x);
    }
    const auto more = solve_densities(fresh);
    for (std::size_t k = 0; k < fresh.size(); ++k) solved[fresh[k]] = more[k];
    ds.clear();
    for (const double x : xs) ds.push_back(solved.at(x));
    if (round == 5 || !split_unresolved_panels(ds, jac, c0)) break;
  }
  fill_tables(ds, jac);
}

void PolynomialLaw::table_nodes(std::vector<double>& xs, std::vector<double>& jac) const {
  const auto& rule = detail::gauss_legendre(kPanelNodes);
  xs.clear();
  jac.clear();
  for (const BandTable& table : tables_) {
    const double w = table.width;
    for (std::size_t p = 0; p + 1 < table.theta.size(); ++p) {
      if (static_cast<int>(p) == table.window) continue;
      const double a = table.theta[p], b = table.theta[p + 1];
      for (int q = 0; q < kPanelNodes; ++q) {
        const double t = 0.5 * (a + b) + 0.5 * (b - a) * rule.nodes[q];
        xs.push_back(table.x_of(t));
        jac.push_back(0.5 * w * std::sin(t));
      }
    }
  }
}

// A panel is split in two when the Legendre expansion of density·dx/dθ through its 8 nodes
// keeps more than 1e-10 of mass in its two highest terms (the discrete Legendre transform by the
// same rule; a resolved smooth integrand has them at rounding level; common practice for
// adaptive spectral quadrature). Found in the catalogue: model 30 (1.5 X A X − ½(AX + XA)) has a
// density rising to a shoulder within 0.02 of its upper edge, which the 48 panels missed by
// 3e-4 of mass. Panels next to a singular point (the window, or graded towards the constant
// term) or a point mass are left as they are: their integrand is not polynomial at any width.
bool PolynomialLaw::split_unresolved_panels(const std::vector<DensityReport>& ds,
                                            const std::vector<double>& jac, double c0) const {
  const auto& rule = detail::gauss_legendre(kPanelNodes);
  // Within 10⁻³ of the scale of a point mass the density is distorted by it and the solves cost
  // up to 10⁵ iterations each (A V B V^* + V B V^* A: its band starts 4.4e-4 above the point
  // mass 0.05 at −1.938, and splitting there took three more rounds of 0.9 s per node).
  const auto near_point_mass = [&](double lo, double hi) {
    return std::any_of(support_.atoms.begin(), support_.atoms.end(), [&](const Atom& m) {
      return m.value > lo - 1e-3 * scale_ && m.value < hi + 1e-3 * scale_;
    });
  };
  std::size_t node = 0;
  bool split = false;
  for (BandTable& table : tables_) {
    double coarse = 0.0;  // the band's first, uniform panel width: the largest one
    for (std::size_t p = 0; p + 1 < table.theta.size(); ++p) {
      coarse = std::max(coarse, table.theta[p + 1] - table.theta[p]);
    }
    const bool graded = c0 > table.lo && c0 < table.lo + table.width;
    const double t0 = graded ? table.theta_of(c0) : -10.0;
    const double window_lo = table.window >= 0 ? table.theta[table.window] : -10.0;
    std::vector<double> added;
    for (std::size_t p = 0; p + 1 < table.theta.size(); ++p) {
      if (static_cast<int>(p) == table.window) continue;
      const double a = table.theta[p], b = table.theta[p + 1];
      double c[kPanelNodes] = {};
      for (int q = 0; q < kPanelNodes; ++q, ++node) {
        const double v = (ds[node].converged ? ds[node].density : 0.0) * jac[node];
        double before = 1.0, legendre = rule.nodes[q];  // P_0 and P_1 at the node
        c[0] += 0.5 * rule.weights[q] * v;
        for (int k = 1; k < kPanelNodes; ++k) {
          c[k] += 0.5 * (2 * k + 1) * rule.weights[q] * legendre * v;
          const double next = ((2 * k + 1) * rule.nodes[q] * legendre - k * before) / (k + 1);
          before = legendre;
          legendre = next;
        }
      }
      const bool near_singular = std::abs(0.5 * (a + b) - t0) < 2.0 * coarse ||
                                 std::abs(a - window_lo) < 2.0 * coarse ||
                                 near_point_mass(table.x_of(a), table.x_of(b));
      const double tail =
          0.5 * (b - a) * (std::abs(c[kPanelNodes - 2]) + std::abs(c[kPanelNodes - 1]));
      if (!near_singular && tail > 1e-10 && b - a > 1e-9) added.push_back(0.5 * (a + b));
    }
    if (added.empty()) continue;
    split = true;
    table.theta.insert(table.theta.end(), added.begin(), added.end());
    std::sort(table.theta.begin(), table.theta.end());
    if (table.window >= 0) {
      table.window = static_cast<int>(
          std::find(table.theta.begin(), table.theta.end(), window_lo) - table.theta.begin());
    }
  }
  return split;
}

double PolynomialLaw::continuous_mass() const {
  std::call_once(table_once_, [this] { build_table(); });
  return mass_;
}

std::vector<double> PolynomialLaw::band_masses() const {
  std::call_once(table_once_, [this] { build_table(); });
  std::vector<double> out;
  for (const BandTable& t : tables_) out.push_back(t.exact_mass);
  return out;
}

namespace {

// ∫_a^θ of the degree-7 interpolant through a panel's nodes (Lagrange form), by the same rule.
double panel_partial(const double* integrand, double a, double b, double theta) {
  const auto& rule = detail::gauss_legendre(kPanelNodes);
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
      value += basis * integrand[q];
    }
    partial += rule.weights[r] * value;
  }
  return partial * 0.5 * (theta - a);
}

}  // namespace

double PolynomialLaw::cdf(double x) const {
  if (x < support_.lo) return 0.0;
  if (x >= support_.hi) return 1.0;
  std::call_once(table_once_, [this] { build_table(); });
  double total = 0.0;
  for (const Atom& a : support_.atoms) {
    if (a.value <= x) total += a.weight;
  }
  for (const BandTable& table : tables_) {
    if (x <= table.lo) break;
    if (x >= table.lo + table.width) {
      total += table.cumulative.back();
      continue;
    }
    const double theta = table.theta_of(x);
    const int P = static_cast<int>(table.theta.size()) - 1;
    const int p = std::clamp(
        static_cast<int>(std::upper_bound(table.theta.begin(), table.theta.end(), theta) -
                         table.theta.begin()) -
            1,
        0, P - 1);
    if (p == table.window) {
      // Inside a singular point's window: the fitted laws, scaled to its contour mass (the
      // solver does not converge within ~1e-5 of the band's width from the point itself).
      total += table.cumulative[p] + table.window_scale * window_mass(table, x);
      break;
    }
    total += table.cumulative[p] + panel_partial(&table.integrand[p * kPanelNodes],
                                                 table.theta[p], table.theta[p + 1], theta);
    break;
  }
  return std::clamp(total, 0.0, 1.0);
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
