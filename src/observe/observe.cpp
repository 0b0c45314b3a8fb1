// Per-trial spectral observations: histogram counts, accurate moments, extremes; exact merging.
#include "freegap/observe.hpp"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <iterator>
#include <limits>
#include <map>
#include <string>
#include <utility>

#include "freegap/errors.hpp"

namespace freegap::observe {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// Shortest text that reads back as the same double, for messages.
std::string number(double x) {
  char buffer[64];
  const auto result = std::to_chars(buffer, buffer + sizeof buffer, x);
  return std::string(buffer, result.ptr);
}

[[noreturn]] void refuse(const std::string& what) { throw InputError("observe: " + what); }

using NeumaierSum = CompensatedSum;  // see observe.hpp

void check_max_moment(int max_moment) {
  if (max_moment < 0 || max_moment > kMaxMomentLimit) {
    refuse("max_moment must be in 0.." + std::to_string(kMaxMomentLimit) + " (got " +
           std::to_string(max_moment) + ")");
  }
}

void check_bins_match(const Histogram& histogram, std::size_t bins) {
  if (histogram.counts.size() != bins) {
    refuse("histogram has " + std::to_string(histogram.counts.size()) + " bins, expected " +
           std::to_string(bins) + "; make it with empty_histogram for the same configuration");
  }
}

// The failure reason for a spectrum, or empty if every value is acceptable. The first offending
// value (by index) names the reason, so the reason does not depend on anything but the spectrum.
std::string spectrum_problem(std::span<const double> spectrum, SpectrumKind kind) {
  for (const double x : spectrum) {
    if (std::isnan(x)) return "spectrum contains NaN";
    if (std::isinf(x)) return x > 0 ? "spectrum contains +Inf" : "spectrum contains -Inf";
    if (kind == SpectrumKind::singular_values && x < 0) return "negative singular value";
  }
  return {};
}

TrialRecord failed_row(std::uint64_t trial, std::string reason) {
  TrialRecord row;
  row.trial = trial;
  row.failed = true;
  row.reason = std::move(reason);
  row.min = kNaN;
  row.max = kNaN;
  row.norm = kNaN;
  return row;
}

// observe_spectrum without re-validating the configuration (record_trial validated it once).
TrialRecord observe_validated(std::uint64_t trial, std::span<const double> spectrum,
                              const ObserveConfig& config, Histogram& into) {
  if (spectrum.empty()) refuse("trial " + std::to_string(trial) + " has an empty spectrum");
  check_bins_match(into, config.bins());
  const bool keep = config.keeps_spectrum(trial);

  std::string problem = spectrum_problem(spectrum, config.kind);
  std::vector<double> moments;
  if (problem.empty()) {
    moments = spectral_moments(spectrum, config.max_moment);
    for (std::size_t k = 0; k < moments.size(); ++k) {
      if (!std::isfinite(moments[k])) {
        // Reachable for max|x| above about 2^(1024/k); the trial is kept out of the sums rather
        // than carrying an Inf into every mean.
        problem = "moment " + std::to_string(k) +
                  " overflows double; rescale the expression or lower max_moment";
        break;
      }
    }
  }
  if (!problem.empty()) {
    TrialRecord row = failed_row(trial, std::move(problem));
    if (keep) row.spectrum.assign(spectrum.begin(), spectrum.end());
    return row;
  }

  TrialRecord row;
  row.trial = trial;
  row.moments = std::move(moments);
  const auto [lowest, highest] = std::minmax_element(spectrum.begin(), spectrum.end());
  row.min = *lowest;
  row.max = *highest;
  row.norm = std::max(std::fabs(row.min), std::fabs(row.max));
  if (keep) row.spectrum.assign(spectrum.begin(), spectrum.end());
  if (!config.extremes_only) add_counts(spectrum, config.bin_edges, into);
  return row;
}

// Position of `trial` in rows sorted by trial index.
std::vector<TrialRecord>::iterator find_slot(std::vector<TrialRecord>& rows, std::uint64_t trial) {
  if (rows.empty() || rows.back().trial < trial) return rows.end();  // the usual case: in order
  return std::lower_bound(rows.begin(), rows.end(), trial,
                          [](const TrialRecord& row, std::uint64_t t) { return row.trial < t; });
}

void refuse_duplicate(std::uint64_t trial) {
  refuse("trial " + std::to_string(trial) + " is recorded twice; each trial is observed once");
}

MeanWithError estimate(const std::vector<double>& values) {
  MeanWithError result;
  const auto n = static_cast<double>(values.size());
  if (values.empty()) return {kNaN, kNaN};
  result.mean = compensated_sum(values) / n;
  if (values.size() < 2) {
    result.standard_error = kNaN;
    return result;
  }
  NeumaierSum squares;
  for (const double v : values) squares.add((v - result.mean) * (v - result.mean));
  result.standard_error = std::sqrt(squares.value() / (n - 1.0) / n);
  return result;
}

}  // namespace

void ObserveConfig::validate() const {
  if (extremes_only) {
    // Nothing but the extremes: a histogram, moments or kept spectra would need every value.
    if (!bin_edges.empty()) refuse("extremes_only observes no histogram; give no bin_edges");
    if (max_moment != 0) {
      refuse("extremes_only observes no moments; max_moment must be 0 (got " +
             std::to_string(max_moment) + ")");
    }
    if (!keep_spectrum_trials.empty()) {
      refuse("extremes_only keeps no spectra; give no keep_spectrum_trials");
    }
    return;
  }
  if (bin_edges.size() < 2) {
    refuse("bin_edges needs at least 2 edges (got " + std::to_string(bin_edges.size()) + ")");
  }
  if (static_cast<std::int64_t>(bins()) > kMaxBins) {
    refuse("at most " + std::to_string(kMaxBins) + " bins are allowed (got " +
           std::to_string(bins()) + ")");
  }
  for (std::size_t i = 0; i < bin_edges.size(); ++i) {
    if (!std::isfinite(bin_edges[i])) {
      refuse("bin edge " + std::to_string(i) + " is not finite (" + number(bin_edges[i]) + ")");
    }
    if (i > 0 && !(bin_edges[i - 1] < bin_edges[i])) {
      refuse("bin edges must be strictly increasing (edge " + std::to_string(i) + " = " +
             number(bin_edges[i]) + " after edge " + std::to_string(i - 1) + " = " +
             number(bin_edges[i - 1]) + ")");
    }
  }
  check_max_moment(max_moment);
  for (std::size_t i = 1; i < keep_spectrum_trials.size(); ++i) {
    if (!(keep_spectrum_trials[i - 1] < keep_spectrum_trials[i])) {
      refuse("keep_spectrum_trials must be strictly increasing (got " +
             std::to_string(keep_spectrum_trials[i]) + " after " +
             std::to_string(keep_spectrum_trials[i - 1]) + ")");
    }
  }
}

bool ObserveConfig::keeps_spectrum(std::uint64_t trial) const {
  return std::binary_search(keep_spectrum_trials.begin(), keep_spectrum_trials.end(), trial);
}

std::vector<double> uniform_edges(double low, double high, std::int64_t bins) {
  if (!std::isfinite(low) || !std::isfinite(high)) {
    refuse("histogram range must be finite (got low = " + number(low) + ", high = " + number(high) +
           ")");
  }
  if (!(low < high)) {
    refuse("histogram range needs low < high (got low = " + number(low) +
           ", high = " + number(high) + ")");
  }
  if (!std::isfinite(high - low)) {
    refuse("histogram range is too wide for double (high - low overflows)");
  }
  if (bins < 1 || bins > kMaxBins) {
    refuse("bins must be in 1.." + std::to_string(kMaxBins) + " (got " + std::to_string(bins) +
           ")");
  }
  std::vector<double> edges(static_cast<std::size_t>(bins) + 1);
  const double width = high - low;
  const auto b = static_cast<double>(bins);
  // low + width·(i/b) rather than low + i·(width/b): the fraction is correctly rounded, so the
  // midpoint of an even number of bins is exactly (low + high)/2 when that is representable.
  for (std::int64_t i = 0; i < bins; ++i) {
    edges[static_cast<std::size_t>(i)] = low + width * (static_cast<double>(i) / b);
  }
  edges.back() = high;
  for (std::size_t i = 1; i < edges.size(); ++i) {
    if (!(edges[i - 1] < edges[i])) {
      refuse("bins are too narrow for double on [" + number(low) + ", " + number(high) +
             "]; use fewer bins");
    }
  }
  return edges;
}

std::int64_t Histogram::total() const {
  std::int64_t sum = below + above;
  for (const std::int64_t c : counts) sum += c;
  return sum;
}

Histogram empty_histogram(const ObserveConfig& config) {
  config.validate();
  Histogram histogram;
  histogram.counts.assign(config.bins(), 0);
  return histogram;
}

void add_counts(std::span<const double> values, const std::vector<double>& bin_edges,
                Histogram& into) {
  if (bin_edges.size() < 2) refuse("bin_edges needs at least 2 edges");
  const std::size_t b = bin_edges.size() - 1;
  check_bins_match(into, b);
  for (const double x : values) {
    if (std::isnan(x)) refuse("cannot count NaN in a histogram");
  }
  const double first = bin_edges.front();
  const double last = bin_edges.back();
  // For uniform edges t = (x − e_0)·b/(e_b − e_0) lands in the right bin up to rounding; the
  // comparisons against the stored edges below then settle the bin by the documented rule exactly.
  const double per_unit = static_cast<double>(b) / (last - first);
  const auto top = static_cast<double>(b - 1);
  for (const double x : values) {
    if (x < first) {
      ++into.below;
      continue;
    }
    if (x >= last) {
      ++into.above;
      continue;
    }
    const double t = (x - first) * per_unit;
    // `!(t < top)` also catches NaN (an infinite edge span), sending it to the search below.
    std::size_t g = !(t < top) ? b - 1 : static_cast<std::size_t>(t);
    if (bin_edges[g] <= x) {
      if (!(x < bin_edges[g + 1])) {
        if (g + 2 <= b && x < bin_edges[g + 2]) {
          ++g;
        } else {
          g = static_cast<std::size_t>(std::upper_bound(bin_edges.begin(), bin_edges.end(), x) -
                                       bin_edges.begin()) -
              1;
        }
      }
    } else if (g > 0 && bin_edges[g - 1] <= x) {
      --g;
    } else {
      g = static_cast<std::size_t>(std::upper_bound(bin_edges.begin(), bin_edges.end(), x) -
                                   bin_edges.begin()) -
          1;
    }
    ++into.counts[g];
  }
}

void merge_into(Histogram& into, const Histogram& from) {
  check_bins_match(from, into.counts.size());
  for (std::size_t i = 0; i < into.counts.size(); ++i) into.counts[i] += from.counts[i];
  into.below += from.below;
  into.above += from.above;
}

double compensated_sum(std::span<const double> values) {
  NeumaierSum sum;
  for (const double v : values) sum.add(v);
  return sum.value();
}

std::vector<double> spectral_moments(std::span<const double> x, int max_moment) {
  check_max_moment(max_moment);
  if (x.empty()) refuse("cannot take moments of an empty spectrum");
  double largest = 0.0;
  for (const double v : x) {
    if (!std::isfinite(v)) refuse("cannot take moments of a non-finite value (" + number(v) + ")");
    largest = std::max(largest, std::fabs(v));
  }
  const auto k_max = static_cast<std::size_t>(max_moment);
  std::vector<double> moments(k_max + 1, 0.0);
  moments[0] = 1.0;
  if (k_max == 0 || largest == 0.0) return moments;

  // Scale by 2^e with max|x| = f·2^e, 1/2 ≤ f < 1: multiplying by a power of two is exact, every
  // scaled |y_i| < 1 with the largest ≥ 1/2, so y^k for k ≤ 64 stays above 2^-64 for the dominant
  // terms and nothing overflows before the final, single rescaling.
  int e = 0;
  std::frexp(largest, &e);

  // Per order k: Neumaier sum of the leading parts of y_i^k, plain sum of their (tiny) tails.
  std::vector<NeumaierSum> heads(k_max + 1);
  std::vector<double> tails(k_max + 1, 0.0);
  for (const double v : x) {
    const double y = std::ldexp(v, -e);
    // y^k = hi + lo kept as an unevaluated sum. hi·y = p + err exactly, with err from one FMA
    // (the error-free product of Ogita, Rump & Oishi 2005, "Accurate sum and dot product", SIAM J.
    // Sci. Comput. 26); lo follows the compensated power of Graillat 2009, "Accurate floating-
    // point product and exponentiation", IEEE Trans. Comput. 58 (both from memory). The relative
    // error of hi + lo is O(k²u²) instead of the (k−1)u of repeated multiplication.
    double hi = y;
    double lo = 0.0;
    for (std::size_t k = 1; k <= k_max; ++k) {
      heads[k].add(hi);
      tails[k] += lo;
      if (k == k_max) break;
      const double p = hi * y;
      const double err = std::fma(hi, y, -p);
      lo = std::fma(lo, y, err);
      hi = p;
    }
  }
  const auto n = static_cast<double>(x.size());
  for (std::size_t k = 1; k <= k_max; ++k) {
    const double scaled_mean = (heads[k].sum + (heads[k].compensation + tails[k])) / n;
    moments[k] = std::ldexp(scaled_mean, static_cast<int>(k) * e);
  }
  return moments;
}

TrialRecord observe_spectrum(std::uint64_t trial, std::span<const double> spectrum,
                          const ObserveConfig& config, Histogram& into) {
  config.validate();
  return observe_validated(trial, spectrum, config, into);
}

TrialRecord failed_trial(std::uint64_t trial, std::string reason) {
  if (reason.empty()) {
    refuse("trial " + std::to_string(trial) + " failed without a reason; give a short reason");
  }
  return failed_row(trial, std::move(reason));
}

Observations start_observations(ObserveConfig config) {
  Observations obs;
  obs.histogram = empty_histogram(config);  // validates
  obs.config = std::move(config);
  return obs;
}

void record_trial(Observations& obs, std::uint64_t trial, std::span<const double> spectrum) {
  const auto slot = find_slot(obs.trials, trial);
  if (slot != obs.trials.end() && slot->trial == trial) refuse_duplicate(trial);
  const auto index = slot - obs.trials.begin();
  // observe_validated throws, if at all, before it counts anything.
  TrialRecord row = observe_validated(trial, spectrum, obs.config, obs.histogram);
  obs.trials.insert(obs.trials.begin() + index, std::move(row));
}

void record_failure(Observations& obs, std::uint64_t trial, std::string reason) {
  TrialRecord row = failed_trial(trial, std::move(reason));
  const auto slot = find_slot(obs.trials, trial);
  if (slot != obs.trials.end() && slot->trial == trial) refuse_duplicate(trial);
  obs.trials.insert(slot, std::move(row));
}

void merge_into(Observations& into, const Observations& from) {
  if (!(into.config == from.config)) {
    refuse(
        "cannot merge observations made with different configurations (bins, max_moment, "
        "spectrum kind or kept trials differ)");
  }
  // First find any duplicate, so a refused merge leaves `into` untouched (docs/design.md rule 6).
  {
    auto a = into.trials.begin();
    auto b = from.trials.begin();
    while (a != into.trials.end() && b != from.trials.end()) {
      if (a->trial == b->trial) refuse_duplicate(a->trial);
      if (a->trial < b->trial) {
        ++a;
      } else {
        ++b;
      }
    }
  }
  check_bins_match(from.histogram, into.histogram.counts.size());
  std::vector<TrialRecord> rows;
  rows.reserve(into.trials.size() + from.trials.size());
  auto a = into.trials.begin();
  auto b = from.trials.begin();
  while (a != into.trials.end() && b != from.trials.end()) {
    if (a->trial < b->trial) {
      rows.push_back(std::move(*a++));
    } else {
      rows.push_back(*b++);
    }
  }
  rows.insert(rows.end(), std::make_move_iterator(a), std::make_move_iterator(into.trials.end()));
  rows.insert(rows.end(), b, from.trials.end());
  merge_into(into.histogram, from.histogram);
  into.trials = std::move(rows);
}

Summary summarize(const Observations& obs) {
  Summary summary;
  summary.trials = static_cast<std::int64_t>(obs.trials.size());
  std::map<std::string, std::int64_t> reasons;
  std::vector<std::vector<double>> moments(static_cast<std::size_t>(obs.config.max_moment) + 1);
  std::vector<double> mins, maxs, norms;
  for (const TrialRecord& row : obs.trials) {
    if (row.failed) {
      ++summary.failed;
      ++reasons[row.reason];
      continue;
    }
    for (std::size_t k = 0; k < moments.size() && k < row.moments.size(); ++k) {
      moments[k].push_back(row.moments[k]);
    }
    mins.push_back(row.min);
    maxs.push_back(row.max);
    norms.push_back(row.norm);
  }
  summary.failure_reasons.assign(reasons.begin(), reasons.end());
  for (const auto& values : moments) summary.moments.push_back(estimate(values));
  summary.min = estimate(mins);
  summary.max = estimate(maxs);
  summary.norm = estimate(norms);
  summary.smallest = mins.empty() ? kNaN : *std::min_element(mins.begin(), mins.end());
  summary.largest = maxs.empty() ? kNaN : *std::max_element(maxs.begin(), maxs.end());
  return summary;
}

}  // namespace freegap::observe
