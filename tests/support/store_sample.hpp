// Test helper for the store: a small run whose every unit is a deterministic function of
// (size, unit), so a test (or tests/store/check_run_file.py, which repeats the formula) can
// recompute exactly what any writer wrote. Used by tests/store/test_store.cpp and
// tests/tools/write_sample_run.cpp.
#pragma once

#include <cmath>
#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "freegap/observe.hpp"
#include "freegap/store.hpp"

namespace store_sample {

/// The spectrum of `trial` at size n: x_i = sin(1 + 0.37·i + 1.3·trial) · (1 + 0.01·(trial mod 7)),
/// except that trials with trial mod 17 = 3 hold a NaN (observe fails them).
inline std::vector<double> spectrum(std::int64_t n, std::uint64_t trial) {
  std::vector<double> x(static_cast<std::size_t>(n));
  const auto t = static_cast<double>(trial);
  const double scale = 1.0 + 0.01 * static_cast<double>(trial % 7);
  for (std::size_t i = 0; i < x.size(); ++i) {
    x[i] = std::sin(1.0 + 0.37 * static_cast<double>(i) + 1.3 * t) * scale;
  }
  if (trial % 17 == 3) x[trial % x.size()] = std::numeric_limits<double>::quiet_NaN();
  return x;
}

/// Trials with trial mod 13 = 5 fail without a spectrum, with this reason.
inline std::string failure_reason(std::uint64_t trial) {
  return "solver stopped after " + std::to_string(30 + trial % 5) + " sweeps";
}

inline freegap::store::SizeLayout layout(std::int64_t n, std::int64_t trials, std::int64_t per_unit,
                                         int max_moment, double half_width, std::int64_t bins,
                                         std::vector<std::uint64_t> keep) {
  freegap::store::SizeLayout s;
  s.n = n;
  s.trials = trials;
  s.trials_per_unit = per_unit;
  s.observe.bin_edges = freegap::observe::uniform_edges(-half_width, half_width, bins);
  s.observe.max_moment = max_moment;
  s.observe.kind = freegap::observe::SpectrumKind::eigenvalues;
  s.observe.keep_spectrum_trials = std::move(keep);
  return s;
}

/// The sample run: size 0 has N = 6, T = 23, B = 4 (6 units, the last one short), K = 4,
/// 10 bins on [−1.02, 1.02] (values up to 1.06 fall above), spectra kept for trials 0, 3 (NaN,
/// failed by observe), 5 (failed, no spectrum), 9 and 22; size 1 has N = 11, T = 10, B = 3,
/// K = 6, 7 bins on [−1.2, 1.2] and keeps nothing. `scale` multiplies T (crash tests use a
/// longer run).
inline freegap::store::RunHeader header(std::int64_t scale = 1) {
  freegap::store::RunHeader h;
  h.job_text = "# sample job for the store tests\nseed = 7\n";
  h.job_canonical = "seed=7\nsample\n";
  h.job_hash = "5a3c0f1e9b7d2c4a6e8f0b1d3c5e7a9b2d4f6a8c0e1b3d5f7a9c2e4b6d8f0a1c";
  h.expression = "A + B";
  h.spectrum = freegap::observe::SpectrumKind::eigenvalues;
  h.self_adjoint = true;
  h.sizes.push_back(layout(6, 23 * scale, 4, 4, 1.02, 10, {0, 3, 5, 9, 22}));
  h.sizes.push_back(layout(11, 10 * scale, 3, 6, 1.2, 7, {}));
  h.metadata = {{"seed", "7"}, {"job_name", "sample"}};
  return h;
}

/// Observes trials [begin, end) of a size into fresh observations.
inline freegap::observe::Observations observe_trials(const freegap::store::SizeLayout& s,
                                                     std::int64_t begin, std::int64_t end) {
  auto obs = freegap::observe::start_observations(s.observe);
  for (auto t = static_cast<std::uint64_t>(begin); t < static_cast<std::uint64_t>(end); ++t) {
    if (t % 13 == 5) {
      freegap::observe::record_failure(obs, t, failure_reason(t));
    } else {
      const auto x = spectrum(s.n, t);
      freegap::observe::record_trial(obs, t, x);
    }
  }
  return obs;
}

/// Unit `unit` of size `size_index`, exactly as every writer of the sample run writes it.
inline freegap::store::UnitResult unit(const freegap::store::RunHeader& h, std::size_t size_index,
                                       std::int64_t unit) {
  const auto& s = h.sizes[size_index];
  return {size_index, unit, observe_trials(s, s.unit_begin(unit), s.unit_end(unit)), {}, {}};
}

}  // namespace store_sample
