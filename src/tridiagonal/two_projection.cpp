// The two-projection model c·I + s·P + t·Q, Q = U P U^* with U Haar, as one N×N symmetric
// tridiagonal matrix with the same eigenvalues (include/freegap/tridiagonal.hpp has the algebra):
// the corner of U from the β-Jacobi bidiagonal model of Edelman & Sutton (2008), its Golub–Kahan
// form scaled and shifted, and a decoupled constant block.
#include <algorithm>
#include <cmath>
#include <string>

#include "freegap/errors.hpp"
#include "freegap/rng.hpp"
#include "freegap/tridiagonal.hpp"
#include "internal.hpp"

namespace freegap::tridiagonal {
namespace {

using detail::number;

[[noreturn]] void refuse(const TwoProjectionSpec& spec, const std::string& what) {
  throw InputError("two-projection model '" + spec.name + "': " + what);
}

// cos θ and sin θ with cos² θ ~ Beta(p, q), both from the two gamma variates
// (X/(X + Y) ~ Beta(p, q) for independent X ~ Gamma(p), Y ~ Gamma(q): common practice), so that
// neither is formed as √(1 − x²) of the other (no cancellation near 0 or 1).
std::pair<double, double> beta_angle(rng::Stream& stream, double p, double q) {
  const double x = gamma_variate(stream, p);
  const double y = gamma_variate(stream, q);
  const double total = x + y;
  return {std::sqrt(x / total), std::sqrt(y / total)};
}

}  // namespace

void validate(const TwoProjectionSpec& spec, Index n) {
  if (spec.beta != 1.0 && spec.beta != 2.0) {
    refuse(spec, "beta must be 1 (Haar orthogonal) or 2 (Haar unitary), got " + number(spec.beta));
  }
  if (n < 1 || n >= (Index{1} << 32)) {
    refuse(spec, "size N must be in 1..2^32 - 1 (got " + std::to_string(n) + ")");
  }
  if (spec.rank < 0 || spec.rank > n) {
    refuse(spec, "the projection's rank must be in 0..N = " + std::to_string(n) + " (got " +
                     std::to_string(spec.rank) + ")");
  }
  for (const double v : {spec.s, spec.t, spec.shift}) {
    if (!std::isfinite(v)) {
      refuse(spec, "s, t and the shift must be finite (got " + number(v) + ")");
    }
  }
  if (spec.s == 0.0 || spec.t == 0.0) {
    refuse(spec, "s and t must be nonzero (got s = " + number(spec.s) + ", t = " +
                     number(spec.t) + "); with one of them 0 the matrix is a multiple of a "
                     "projection and needs no model");
  }
}

JacobiCorner sample_jacobi_corner(double beta, Index corner, Index n, std::uint64_t seed,
                                  std::uint64_t trial, const std::string& name) {
  if (corner < 0 || 2 * corner > n) {
    throw InputError("Jacobi corner: the corner size must be in 0..N/2 (got " +
                     std::to_string(corner) + " at N = " + std::to_string(n) + ")");
  }
  rng::Stream stream({seed, name, static_cast<std::uint64_t>(n), trial});
  const Index m = corner;
  JacobiCorner out;
  out.cos_diag.resize(m);
  out.sin_diag.resize(m);
  out.cos_super.resize(std::max<Index>(m - 1, 0));
  out.sin_super.resize(std::max<Index>(m - 1, 0));
  // Edelman & Sutton (2008) with a = 0, b = N − 2m: for k = m, m − 1, …, 1 the angle θ_k with
  // cos² θ_k ~ Beta(β/2·(a + k), β/2·(b + k)), and (k ≥ 1, after θ_{k+1}) φ_k with
  // cos² φ_k ~ Beta(β/2·k, β/2·(a + b + 1 + k)). Row j of the corner holds k = m − j.
  const double h = 0.5 * beta;
  const double b = static_cast<double>(n - 2 * m);
  double previous_sin = 0.0, previous_cos = 0.0;  // s_{k+1}, c_{k+1} from the row above
  for (Index j = 0; j < m; ++j) {
    const double k = static_cast<double>(m - j);
    const auto [c, s] = beta_angle(stream, h * k, h * (b + k));
    double cp = 0.0, sp = 1.0;  // c'_k, s'_k; s'_m = 1 (no φ_m)
    if (j > 0) {
      const auto angle = beta_angle(stream, h * k, h * (b + 1.0 + k));
      cp = angle.first;
      sp = angle.second;
      out.cos_super[j - 1] = previous_sin * cp;  // B11_{j−1,j} = −s_{k+1} c'_k
      out.sin_super[j - 1] = previous_cos * cp;  // B21_{j−1,j} = −c_{k+1} c'_k
    }
    out.cos_diag[j] = c * sp;  // B11_jj = c_k s'_k
    out.sin_diag[j] = s * sp;  // B21_jj = −s_k s'_k
    previous_sin = s;
    previous_cos = c;
  }
  return out;
}

Tridiagonal two_projection_matrix(const TwoProjectionSpec& spec, const JacobiCorner& corner,
                                  Index n) {
  validate(spec, n);
  const TwoProjectionSpec c = canonical(spec, n);
  const Index m = c.rank;
  if (corner.cos_diag.size() != m) {
    refuse(spec, "the corner has size " + std::to_string(corner.cos_diag.size()) +
                     ", expected min(k, N − k) = " + std::to_string(m));
  }
  Tridiagonal t;
  t.diag.setConstant(n, c.shift);
  t.off.setZero(n - 1);
  // The block [[s·I, w·B],[w·Bᵀ, t·I]] (st > 0, w = √(st), B the cosine corner) or
  // [[(s + t)·I, w·B'],[w·B'ᵀ, 0]] (st < 0, w = √(−st), B' the sine corner), in the order
  // column 0, row 0, column 1, row 1, … that makes the Golub–Kahan form tridiagonal.
  const double st = c.s * c.t;
  const bool positive = st > 0.0;
  const double w = std::sqrt(std::fabs(st));
  const Eigen::VectorXd& d = positive ? corner.cos_diag : corner.sin_diag;
  const Eigen::VectorXd& e = positive ? corner.cos_super : corner.sin_super;
  const double column_value = positive ? c.t : 0.0;
  const double row_value = positive ? c.s : c.s + c.t;
  for (Index j = 0; j < m; ++j) {
    t.diag[2 * j] += column_value;
    t.diag[2 * j + 1] += row_value;
    t.off[2 * j] = w * d[j];
    if (j + 1 < m) t.off[2 * j + 1] = w * e[j];
  }
  return t;
}

TwoProjectionSpec canonical(const TwoProjectionSpec& spec, Index n) {
  TwoProjectionSpec c = spec;
  if (2 * spec.rank > n) {
    // c + sP + tQ = (c + s + t) − s(I − P) − t·U(I − P)U^*: the complement has rank N − k.
    c.rank = n - spec.rank;
    c.shift = spec.shift + spec.s + spec.t;
    c.s = -spec.s;
    c.t = -spec.t;
  }
  return c;
}

Tridiagonal sample(const TwoProjectionSpec& spec, Index n, std::uint64_t seed,
                   std::uint64_t trial) {
  validate(spec, n);
  const Index m = canonical(spec, n).rank;
  return two_projection_matrix(spec, sample_jacobi_corner(spec.beta, m, n, seed, trial, spec.name),
                               n);
}

observe::TrialRecord observe_two_projection_trial(const TwoProjectionSpec& spec, Index n,
                                                  std::uint64_t seed, std::uint64_t trial,
                                                  const observe::ObserveConfig& config,
                                                  observe::Histogram& into,
                                                  double extreme_tolerance) {
  config.validate();
  if (config.kind != observe::SpectrumKind::eigenvalues) {
    refuse(spec, "the matrix is self-adjoint; observe its eigenvalues (kind = eigenvalues)");
  }
  if (into.counts.size() != config.bins()) {
    refuse(spec, "histogram has " + std::to_string(into.counts.size()) + " bins, expected " +
                     std::to_string(config.bins()) +
                     "; make it with empty_histogram for the same configuration");
  }
  return observe_matrix(trial, sample(spec, n, seed, trial), config, into, extreme_tolerance);
}

}  // namespace freegap::tridiagonal
