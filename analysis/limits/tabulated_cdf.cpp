#include "freegap/analysis/limits/tabulated_cdf.hpp"

#include <algorithm>
#include <cmath>
#include <numbers>

namespace freegap::analysis {

namespace {

// Direct values of F this often along the grid (anchors; see the class comment).
constexpr std::size_t kAnchorEvery = 256;
// Grid steps on each side of a breakpoint whose F comes from the law.
constexpr std::ptrdiff_t kNearBreakpoint = 3;

}  // namespace

double TabulatedCdf::x_of(double theta) const { return lo_ + 0.5 * w_ * (1.0 - std::cos(theta)); }

double TabulatedCdf::grid_point(std::size_t j) const {
  return x_of(static_cast<double>(j) * theta_step_);
}

double TabulatedCdf::atoms_up_to(double x) const {
  double m = 0.0;
  for (const Atom& a : support_.atoms) {
    if (a.value <= x) m += a.weight;
  }
  return m;
}

std::vector<bool> TabulatedCdf::direct_steps(std::vector<double> breakpoints,
                                             std::size_t m) const {
  std::vector<bool> direct(m + 1, false);
  for (const Atom& a : support_.atoms) breakpoints.push_back(a.value);
  for (const Interval& band : support_.bands) {
    breakpoints.push_back(band.lo);
    breakpoints.push_back(band.hi);
  }
  const auto last = static_cast<std::ptrdiff_t>(m);
  for (const double b : breakpoints) {
    if (!std::isfinite(b)) continue;
    // The step k holding b: x_{k−1} < b ≤ x_k (θ of b on the grid's map).
    const double c = std::clamp(1.0 - 2.0 * (b - lo_) / w_, -1.0, 1.0);
    const auto k = static_cast<std::ptrdiff_t>(std::ceil(std::acos(c) / theta_step_));
    for (std::ptrdiff_t j = k - kNearBreakpoint; j <= k + kNearBreakpoint; ++j) {
      if (j >= 1 && j <= last) direct[static_cast<std::size_t>(j)] = true;
    }
  }
  for (std::size_t j = kAnchorEvery; j <= m; j += kAnchorEvery) direct[j] = true;
  direct[m] = true;
  return direct;
}

TabulatedCdf::TabulatedCdf(const Law& law, std::vector<double> breakpoints, int m)
    : support_(law.support()) {
  lo_ = support_.lo;
  w_ = support_.hi - support_.lo;
  theta_step_ = std::numbers::pi / m;
  const auto steps = static_cast<std::size_t>(m);
  std::vector<double> xs(steps + 1), inner(2 * steps);
  // The 4-point Gauss–Lobatto rule on [−1, 1]: nodes ±1 (weight 1/6) and ±1/√5 (weight 5/6)
  // (Lobatto's formula, Abramowitz & Stegun 1964 §25.4; recalled from memory, and checked by
  // TabulatedCdf.LobattoStepIsExactForQuintics against the exact integrals).
  const double node = 1.0 / std::sqrt(5.0);
  for (std::size_t j = 0; j <= steps; ++j) xs[j] = grid_point(j);
  for (std::size_t j = 0; j < steps; ++j) {
    const double mid = (static_cast<double>(j) + 0.5) * theta_step_;
    inner[2 * j] = x_of(mid - 0.5 * theta_step_ * node);
    inner[2 * j + 1] = x_of(mid + 0.5 * theta_step_ * node);
  }
  values_.assign(xs.size(), 0.0);
  slopes_.assign(xs.size(), 0.0);
  if (!(w_ > 0.0)) return;
  const std::vector<double> dens = law.densities(xs);
  const std::vector<double> inner_dens = law.densities(inner);
  // dF/dθ = f(x(θ))·(w/2)·sin θ.
  auto slope = [&](double f, double theta) { return f * 0.5 * w_ * std::sin(theta); };
  for (std::size_t j = 0; j <= steps; ++j) {
    const double f = std::isfinite(dens[j]) ? dens[j] : 0.0;
    slopes_[j] = slope(f, static_cast<double>(j) * theta_step_);
  }
  const std::vector<bool> direct = direct_steps(std::move(breakpoints), steps);
  values_[0] = law.cdf(xs[0]) - atoms_up_to(xs[0]);
  for (std::size_t j = 1; j <= steps; ++j) {
    const double mid = (static_cast<double>(j) - 0.5) * theta_step_;
    const double f1 = inner_dens[2 * j - 2], f2 = inner_dens[2 * j - 1];
    const bool finite = std::isfinite(dens[j - 1]) && std::isfinite(dens[j]) &&
                        std::isfinite(f1) && std::isfinite(f2);
    if (direct[j] || !finite) {
      values_[j] = law.cdf(xs[j]) - atoms_up_to(xs[j]);
      continue;
    }
    const double g1 = slope(f1, mid - 0.5 * theta_step_ * node);
    const double g2 = slope(f2, mid + 0.5 * theta_step_ * node);
    values_[j] = values_[j - 1] + 0.5 * theta_step_ *
                                      ((slopes_[j - 1] + slopes_[j]) / 6.0 + 5.0 * (g1 + g2) / 6.0);
  }
}

double TabulatedCdf::cdf(double x) const {
  if (!(w_ > 0.0)) return x >= lo_ ? 1.0 : 0.0;
  const double atoms = atoms_up_to(x);
  if (x <= lo_) return atoms;
  if (x >= lo_ + w_) return std::min(1.0, values_.back() + atoms);
  const double theta = std::acos(std::clamp(1.0 - 2.0 * (x - lo_) / w_, -1.0, 1.0));
  const auto j = std::min(static_cast<std::size_t>(theta / theta_step_), values_.size() - 2);
  const double t = theta / theta_step_ - static_cast<double>(j);
  const double h00 = (1 + 2 * t) * (1 - t) * (1 - t), h10 = t * (1 - t) * (1 - t);
  const double h01 = t * t * (3 - 2 * t), h11 = t * t * (t - 1);
  const double v = h00 * values_[j] + h10 * theta_step_ * slopes_[j] + h01 * values_[j + 1] +
                   h11 * theta_step_ * slopes_[j + 1];
  return std::clamp(v + atoms, 0.0, 1.0);
}

double TabulatedCdf::quantile(double p) const {
  double a = support_.lo, b = support_.hi;
  if (p <= 0.0) return a;
  for (int i = 0; i < 200 && b - a > 4e-16 * (1.0 + std::abs(a) + std::abs(b)); ++i) {
    const double mid = 0.5 * (a + b);
    (cdf(mid) >= p ? b : a) = mid;
  }
  return b;
}

}  // namespace freegap::analysis
