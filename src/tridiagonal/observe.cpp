// One trial of a tridiagonal model observed without diagonalising, into the records and
// histogram that observe::observe_spectrum produces from a dense spectrum.
#include <algorithm>
#include <cmath>
#include <string>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/observe.hpp"
#include "freegap/tridiagonal.hpp"
#include "internal.hpp"

namespace freegap::tridiagonal {
namespace {

[[noreturn]] void refuse(const std::string& what) { throw InputError("tridiagonal: " + what); }

// All eigenvalues, ascending, by LAPACK dsterf (Pal–Walker–Kahan QR; O(N²)). Only for trials
// whose full spectrum the configuration keeps.
bool all_eigenvalues(const Tridiagonal& p, std::vector<double>& out, std::string& problem) {
  out.assign(p.diag.data(), p.diag.data() + p.diag.size());
  std::vector<double> e(p.off.data(), p.off.data() + p.off.size());
  const int info = linalg::tridiagonal_eigenvalues(out, e);
  if (info != 0) {
    problem = "eigenvalue solver failed (dsterf info = " + std::to_string(info) + ")";
    return false;
  }
  return true;
}

// Whether the counts C_j lie in 0..n and never decrease.
bool counts_monotone(const std::vector<std::int64_t>& c, Index n) {
  for (std::size_t j = 0; j < c.size(); ++j) {
    if (c[j] < 0 || c[j] > n || (j > 0 && c[j] < c[j - 1])) return false;
  }
  return true;
}

// Narrows the extremes' brackets to the bins the counts C_j at the edges put them in.
void narrow_by_counts(detail::GershgorinStart& start, const std::vector<std::int64_t>& c,
                      const std::vector<double>& edges, Index n) {
  const auto first_nonzero = std::find_if(c.begin(), c.end(), [](std::int64_t v) { return v > 0; });
  if (first_nonzero != c.end()) {
    const auto j = static_cast<std::size_t>(first_nonzero - c.begin());
    start.lower.hi = std::min(start.lower.hi, edges[j]);                 // λ_min < e_j
    if (j > 0) start.lower.lo = std::max(start.lower.lo, edges[j - 1]);  // λ_min ≥ e_{j−1}
  } else {
    start.lower.lo = std::max(start.lower.lo, edges.back());
  }
  const auto first_full = std::find(c.begin(), c.end(), static_cast<std::int64_t>(n));
  if (first_full != c.end()) {
    const auto j = static_cast<std::size_t>(first_full - c.begin());
    start.upper.hi = std::min(start.upper.hi, edges[j]);                 // λ_max < e_j
    if (j > 0) start.upper.lo = std::max(start.upper.lo, edges[j - 1]);  // λ_max ≥ e_{j−1}
  } else {
    start.upper.lo = std::max(start.upper.lo, edges.back());
  }
}

}  // namespace

observe::TrialRecord observe_matrix(std::uint64_t trial, const Tridiagonal& p,
                                    const observe::ObserveConfig& config, observe::Histogram& into,
                                    double extreme_tolerance) {
  config.validate();
  if (config.kind != observe::SpectrumKind::eigenvalues) {
    refuse("a tridiagonal model is self-adjoint; observe its eigenvalues (kind = eigenvalues)");
  }
  const std::size_t bins = config.bins();
  if (into.counts.size() != bins) {
    refuse("histogram has " + std::to_string(into.counts.size()) + " bins, expected " +
           std::to_string(bins) + "; make it with empty_histogram for the same configuration");
  }
  detail::check_shape(p);
  const Index n = p.size();
  const bool keep = config.keeps_spectrum(trial);

  // The same failure reasons, in the same order, as the dense path (observe.cpp).
  if (!p.diag.allFinite() || !p.off.allFinite()) {
    return observe::failed_trial(trial, "tridiagonal matrix contains NaN or Inf");
  }
  std::vector<double> m = moments(p, config.max_moment);
  for (std::size_t k = 0; k < m.size(); ++k) {
    if (!std::isfinite(m[k])) {
      return observe::failed_trial(
          trial, "moment " + std::to_string(k) +
                     " overflows double; rescale the expression or lower max_moment");
    }
  }

  // Histogram: C_j = #{λ < e_j} at the b + 1 edges; bin i holds C_{i+1} − C_i (e_i ≤ λ < e_{i+1}),
  // below C_0 (λ < e_0), above N − C_b (λ ≥ e_b): exactly observe::Histogram's rule.
  const detail::Prepared prepared = detail::prepare(p);
  const auto& edges = config.bin_edges;
  std::vector<std::int64_t> c(edges.size());
  detail::counts_with(prepared, edges.data(), edges.size(), c.data());
  if (!counts_monotone(c, n)) {
    return observe::failed_trial(trial, "Sturm counts are not monotone in x");
  }

  // Extremes: the histogram already brackets them to one bin when they fall inside the range.
  const auto [g_low, g_high] = gershgorin(p);
  if (!std::isfinite(g_low) || !std::isfinite(g_high)) {
    return observe::failed_trial(trial, "Gershgorin bound overflows double");
  }
  auto start = detail::start_brackets(p, extreme_tolerance);
  if (!edges.empty()) narrow_by_counts(start, c, edges, n);  // none when extremes_only
  if (!(start.lower.lo < start.lower.hi) || !(start.upper.lo < start.upper.hi)) {
    // The counts contradict the Gershgorin bounds: only possible through rounding at an edge
    // that lies within a few ulps of a bound; bisect from Gershgorin alone.
    start = detail::start_brackets(p, extreme_tolerance);
  }
  const Extremes x = detail::multisect(prepared, start.lower, start.upper, start.tolerance);

  observe::TrialRecord row;
  row.trial = trial;
  if (keep) {
    std::string problem;
    if (!all_eigenvalues(p, row.spectrum, problem)) {
      observe::TrialRecord failed = observe::failed_trial(trial, problem);
      return failed;
    }
  }
  row.moments = std::move(m);
  row.min = x.min;
  row.max = x.max;
  row.norm = std::max(std::fabs(x.min), std::fabs(x.max));

  if (c.empty()) return row;  // extremes_only: no histogram
  into.below += c.front();
  for (std::size_t i = 0; i < bins; ++i) into.counts[i] += c[i + 1] - c[i];
  into.above += n - c.back();
  return row;
}

observe::TrialRecord observe_tridiagonal_trial(const ModelSpec& spec, Index n, std::uint64_t seed,
                                   std::uint64_t trial, const observe::ObserveConfig& config,
                                   observe::Histogram& into, const TrialOptions& options) {
  if (!std::isfinite(options.scale) || !std::isfinite(options.shift)) {
    refuse("scale and shift of the expression must be finite");
  }
  config.validate();
  if (config.kind != observe::SpectrumKind::eigenvalues) {
    refuse("a tridiagonal model is self-adjoint; observe its eigenvalues (kind = eigenvalues)");
  }
  if (into.counts.size() != config.bins()) {
    refuse("histogram has " + std::to_string(into.counts.size()) + " bins, expected " +
           std::to_string(config.bins()) +
           "; make it with empty_histogram for the same configuration");
  }
  Tridiagonal t = sample(spec, n, seed, trial);
  if (options.scale != 1.0 || options.shift != 0.0) {
    // In place (the same arithmetic as affine()): no second copy of an N = 10^7 matrix.
    t.diag.array() = options.scale * t.diag.array() + options.shift;
    t.off *= options.scale;
  }
  return observe_matrix(trial, t, config, into, options.extreme_tolerance);
}

}  // namespace freegap::tridiagonal
