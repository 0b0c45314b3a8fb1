// Tridiagonal β-Hermite and β-Laguerre models (Dumitriu & Edelman 2002) and the gamma/chi
// variates they need, drawn from one rng::Stream per (seed, name, N, trial).
#include <algorithm>
#include <cmath>
#include <limits>
#include <string>

#include "freegap/ensembles.hpp"
#include "freegap/errors.hpp"
#include "freegap/rng.hpp"
#include "freegap/tridiagonal.hpp"
#include "internal.hpp"

namespace freegap::tridiagonal {
namespace {

using detail::number;

std::string label(const ModelSpec& spec) { return "tridiagonal model '" + spec.name + "'"; }

}  // namespace

void validate(const ModelSpec& spec) {
  if (!std::isfinite(spec.beta) || !(spec.beta > 0.0)) {
    throw InputError(label(spec) + ": beta must be a finite number > 0 (got " + number(spec.beta) +
                     ")");
  }
  if (spec.family == Family::laguerre && (!std::isfinite(spec.ratio) || !(spec.ratio > 0.0))) {
    throw InputError(label(spec) + ": ratio c = N/M must be a finite number > 0 (got " +
                     number(spec.ratio) + ")");
  }
}

double gamma_variate(rng::Stream& stream, double shape) {
  if (!std::isfinite(shape) || !(shape > 0.0)) {
    throw InputError("gamma variate: shape must be a finite number > 0 (got " + number(shape) +
                     ")");
  }
  if (shape < 1.0) {
    // Marsaglia & Tsang (2000), end of §6: Gamma(α) = Gamma(α + 1)·U^(1/α) for α < 1.
    const double g = gamma_variate(stream, shape + 1.0);
    return g * std::pow(stream.uniform(), 1.0 / shape);
  }
  // Marsaglia & Tsang (2000), "A simple method for generating gamma variables", ACM TOMS 26(3):
  // d = α − 1/3, c = 1/√(9d); x ~ N(0,1), v = (1 + c x)³ accepted with the squeeze
  // u < 1 − 0.0331 x⁴ or the full test log u < x²/2 + d(1 − v + log v); returns d·v.
  // 1 − v + log v is formed from t = c x with log1p, so the cancellation for large d (χ degrees
  // up to βN ≈ 10^7) costs no accuracy.
  const double d = shape - 1.0 / 3.0;
  const double c = 1.0 / std::sqrt(9.0 * d);
  for (;;) {
    const double x = stream.normal();
    const double t = c * x;
    if (t <= -1.0) continue;
    const double v = (1.0 + t) * (1.0 + t) * (1.0 + t);
    const double u = stream.uniform();
    const double x2 = x * x;
    if (u < 1.0 - 0.0331 * x2 * x2) return d * v;
    const double one_minus_v_plus_log_v = -t * (3.0 + t * (3.0 + t)) + 3.0 * std::log1p(t);
    if (std::log(u) < 0.5 * x2 + d * one_minus_v_plus_log_v) return d * v;
  }
}

double chi_square_variate(rng::Stream& stream, double k) {
  return 2.0 * gamma_variate(stream, 0.5 * k);
}

Tridiagonal sample(const ModelSpec& spec, Index n, std::uint64_t seed, std::uint64_t trial) {
  validate(spec);
  if (n < 1) {
    throw InputError(label(spec) + ": size N must be at least 1 (got " + std::to_string(n) + ")");
  }
  rng::Stream stream({seed, spec.name, static_cast<std::uint64_t>(n), trial});
  const double beta = spec.beta;
  Tridiagonal t;
  t.diag.resize(n);
  t.off.resize(n - 1);

  if (spec.family == Family::hermite) {
    // Dumitriu & Edelman (2002): H_β = (1/√2)·tridiag(N(0,2); χ_{β(N−1)}, …, χ_β). Scaled by
    // √(2/β)/√N so that β = 2 is GUE/√N and β = 1 is GOE(§0)/√N exactly in law; the off-diagonal
    // is then χ_{β(N−1−i)}/√(βN) ≈ 1 in the bulk: semicircle on [−2, 2].
    const double diag_scale = std::sqrt(2.0 / beta) / std::sqrt(static_cast<double>(n));
    const double off_scale = 1.0 / std::sqrt(beta * static_cast<double>(n));
    for (Index i = 0; i < n; ++i) t.diag[i] = diag_scale * stream.normal();
    for (Index i = 0; i + 1 < n; ++i) {
      const double k = beta * static_cast<double>(n - 1 - i);
      t.off[i] = off_scale * std::sqrt(chi_square_variate(stream, k));
    }
    return t;
  }

  // β-Laguerre, Dumitriu & Edelman (2002): L = B Bᵀ, B lower bidiagonal m×m, B_ii = χ_{2a−βi},
  // B_{i+1,i} = χ_{β(m−1−i)}, needing a > β(m−1)/2. For XX^* with X N×M, m = N and 2a = βM, so
  // this holds iff M ≥ N. For N > M the nonzero spectrum of XX^* is that of the M×M X^*X: the
  // same model with N and M swapped, followed by N − M exact zeros.
  const Index m_cols = ensembles::companion_size(n, spec.ratio);
  if (m_cols < 1) {
    throw InputError(label(spec) + ": N/ratio = " + number(static_cast<double>(n) / spec.ratio) +
                     " rounds to 0 columns; use a smaller ratio or a larger N");
  }
  const Index m = std::min(n, m_cols);    // rows of B
  const Index big = std::max(n, m_cols);  // the other dimension
  // W = XX^*/M: real Wishart is L/M (β = 1), complex Wishart L/(2M) (β = 2, Dumitriu & Edelman's
  // "2 × complex Wishart"); in general L/(βM), so E tr W = 1 for every β.
  const double inv = 1.0 / (beta * static_cast<double>(m_cols));
  double previous_sub = 0.0;  // B_{i,i−1}²
  for (Index i = 0; i < m; ++i) {
    const double a = chi_square_variate(stream, beta * static_cast<double>(big - i));  // B_ii²
    t.diag[i] = (a + previous_sub) * inv;
    if (i + 1 < m) {
      const double b = chi_square_variate(stream, beta * static_cast<double>(m - 1 - i));
      t.off[i] = std::sqrt(a * b) * inv;  // B_ii·B_{i+1,i}
      previous_sub = b;
    }
  }
  for (Index i = m; i < n; ++i) t.diag[i] = 0.0;
  for (Index i = std::max<Index>(m - 1, 0); i + 1 < n; ++i) t.off[i] = 0.0;
  return t;
}

Tridiagonal affine(const Tridiagonal& t, double scale, double shift) {
  Tridiagonal out;
  out.diag = (scale * t.diag.array() + shift).matrix();
  out.off = scale * t.off;
  return out;
}

}  // namespace freegap::tridiagonal
