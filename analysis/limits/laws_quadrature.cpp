// Gauss–Legendre rules and the adaptive integrators used for CDFs and moments checks.
#include "laws_quadrature.hpp"

#include <sstream>

#include <algorithm>
#include <cmath>
#include <map>
#include <mutex>
#include <numbers>

namespace freegap::analysis::detail {

const GaussRule& gauss_legendre(int n) {
  static std::mutex mutex;
  static std::map<int, GaussRule> cache;
  std::lock_guard<std::mutex> lock(mutex);
  auto found = cache.find(n);
  if (found != cache.end()) return found->second;
  GaussRule rule;
  rule.nodes.resize(n);
  rule.weights.resize(n);
  // Newton on the three-term recurrence of P_n, started at the Chebyshev-like guesses
  // cos(π(i + 3/4)/(n + 1/2)) (standard practice; Golub & Welsch 1969 give the eigenvalue route).
  for (int i = 0; i < n; ++i) {
    double x = std::cos(std::numbers::pi * (i + 0.75) / (n + 0.5));
    double dp = 1.0;
    for (int iteration = 0; iteration < 100; ++iteration) {
      double p0 = 1.0;
      double p1 = x;
      for (int k = 2; k <= n; ++k) {
        const double p2 = ((2.0 * k - 1.0) * x * p1 - (k - 1.0) * p0) / k;
        p0 = p1;
        p1 = p2;
      }
      dp = n * (x * p1 - p0) / (x * x - 1.0);
      const double step = p1 / dp;
      x -= step;
      if (std::abs(step) < 1e-16) break;
    }
    rule.nodes[i] = x;
    rule.weights[i] = 2.0 / ((1.0 - x * x) * dp * dp);
  }
  return cache.emplace(n, std::move(rule)).first->second;
}

namespace {

double panel(const std::function<double(double)>& f, double a, double b) {
  const GaussRule& rule = gauss_legendre(20);
  const double half = 0.5 * (b - a);
  const double mid = 0.5 * (a + b);
  double sum = 0.0;
  for (std::size_t i = 0; i < rule.nodes.size(); ++i) {
    sum += rule.weights[i] * f(mid + half * rule.nodes[i]);
  }
  return sum * half;
}

double adapt(const std::function<double(double)>& f, double a, double b, double whole, double tol,
             int depth) {
  const double mid = 0.5 * (a + b);
  const double left = panel(f, a, mid);
  const double right = panel(f, mid, b);
  if (depth <= 0 || std::abs(left + right - whole) <= tol) return left + right;
  return adapt(f, a, mid, left, 0.5 * tol, depth - 1) +
         adapt(f, mid, b, right, 0.5 * tol, depth - 1);
}

}  // namespace

double integrate(const std::function<double(double)>& f, double a, double b, double tol,
                 int max_depth) {
  if (!(b > a)) return 0.0;
  return adapt(f, a, b, panel(f, a, b), tol, max_depth);
}

double integrate_density(const std::function<double(double)>& f, double lo, double hi, double x,
                         double tol) {
  if (x <= lo) return 0.0;
  if (x >= hi) x = hi;
  const double half = 0.5 * (hi - lo);
  // x − lo = 2·half·sin²(θ/2): no cancellation near the lower edge.
  const double theta = 2.0 * std::asin(std::sqrt(std::clamp((x - lo) / (2.0 * half), 0.0, 1.0)));
  auto integrand = [&](double t) {
    const double s = std::sin(0.5 * t);
    return f(lo + 2.0 * half * s * s) * half * std::sin(t);
  };
  return integrate(integrand, 0.0, theta, tol);
}

}  // namespace freegap::analysis::detail
