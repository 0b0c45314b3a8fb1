// Private quadrature helpers shared by the law and free-convolution sources (not installed).
#pragma once

#include <functional>
#include <string>
#include <vector>

namespace freegap::analysis::detail {

/// Gauss–Legendre nodes and weights on [−1, 1] (Newton on P_n from the Chebyshev guesses).
struct GaussRule {
  std::vector<double> nodes;
  std::vector<double> weights;
};
const GaussRule& gauss_legendre(int n);

/// ∫_a^b f adaptively: a 20-point Gauss–Legendre panel is split in two until both halves agree
/// with it to tol (absolute). Converges for integrands smooth inside (a, b).
double integrate(const std::function<double(double)>& f, double a, double b, double tol = 1e-14,
                 int max_depth = 40);

/// ∫_lo^x f for a density f on [lo, hi] with square-root or inverse-square-root edges: the
/// substitution x = lo + (hi − lo)(1 − cos θ)/2 makes the integrand smooth at both edges.
double integrate_density(const std::function<double(double)>& f, double lo, double hi, double x,
                         double tol = 1e-14);

}  // namespace freegap::analysis::detail
