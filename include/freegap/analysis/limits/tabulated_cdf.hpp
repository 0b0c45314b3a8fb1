// A law's CDF tabulated once on a fine graded grid, for callers that evaluate F at very many points
// (the report's distances and their bootstrap replicates), where each F(x) of a law solved by
// subordination would cost a quadrature of its own.
#pragma once

#include <vector>

#include "freegap/analysis/limits/laws.hpp"

namespace freegap::analysis {

/// The CDF of a law on the graded grid x(θ) = lo + w(1 − cos θ)/2, θ = jπ/M, j = 0..M, interpolated
/// by cubic Hermite polynomials in θ with the exact derivative dF/dθ = f(x)·dx/dθ. In θ the
/// square-root edges of the support are smooth, so the interpolant is fourth order there (error
/// ~ h⁴, h = π/M); next to an interior edge of a support with gaps it is locally of order h^1.5 in
/// x (about 1e-6 with M = 8192 on a support of width 4). Atoms are added exactly.
///
/// The grid values are accumulated: F(x_j) = F(x_{j−1}) + ∫ f over [x_{j−1}, x_j] by the 4-point
/// Gauss–Lobatto rule in θ (exact for degree 5; it reuses the densities at the grid points, so a
/// step costs two new densities where a separate F(x_j) costs a quadrature of 16). Where the
/// integrand is not smooth — within three grid steps of a breakpoint (band edges, atoms, singular
/// points: `breakpoints`), or where a density failed — F(x_j) is taken from law.cdf() itself, and
/// so is every 256th value, so that no error of the rule travels far.
class TabulatedCdf {
 public:
  explicit TabulatedCdf(const Law& law, std::vector<double> breakpoints = {}, int m = 8192);
  /// F(x), atoms included, clamped to [0, 1].
  double cdf(double x) const;
  /// The smallest x with F(x) ≥ p, by bisection on cdf().
  double quantile(double p) const;
  /// The tabulated values F(x_j) without atoms, and the grid (for tests).
  const std::vector<double>& continuous_values() const { return values_; }
  double grid_point(std::size_t j) const;

 private:
  double x_of(double theta) const;
  double atoms_up_to(double x) const;
  /// Which grid steps (x_{j−1}, x_j] take F from the law: those near a breakpoint.
  std::vector<bool> direct_steps(std::vector<double> breakpoints, std::size_t m) const;
  Support support_;
  double lo_ = 0.0, w_ = 0.0, theta_step_ = 0.0;
  std::vector<double> values_, slopes_;
};

}  // namespace freegap::analysis
