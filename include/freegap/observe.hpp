// Per-trial spectral observations (histogram counts, moments, extremes, norm) that merge exactly.
//
// What is observed, for one trial whose spectrum is x_1..x_N (N ≥ 1):
//   - histogram counts on fixed bins; values below the first edge and at or above the last edge
//     are counted apart (see Histogram for the exact bin rule);
//   - moments m_k = (1/N) Σ_i x_i^k for k = 0..K. For eigenvalues of a self-adjoint P this is
//     (1/N) Tr P^k. For singular values s_i of any other P it is (1/N) Σ_i s_i^k, the k-th moment
//     of the singular-value distribution (for even k = 2j it equals (1/N) Tr (P^* P)^j; odd k
//     has no trace formula);
//   - the smallest and the largest value, and the operator norm max_i |x_i|.
//
// Raw rows stored, statistics derived when read (docs/building.md habits 3–4): the histogram holds
// integer counts, which add exactly; every trial keeps its own row, and rows are kept in trial
// order. So any split of the trials across ranks, merged in any order, gives bit-identical
// Observations, and summarize() — a pure function of them — gives bit-identical statistics.
//
// A trial whose spectrum holds NaN or ±Inf, whose solver failed, or whose observations cannot be
// represented in double is recorded as failed with a short reason and contributes nothing to the
// histogram or the statistics (docs/design.md rule 2).
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <limits>
#include <span>
#include <string>
#include <utility>
#include <vector>

namespace freegap::observe {

/// What the numbers handed to observe_spectrum are. Both are observed the same way; singular values
/// must also be ≥ 0 (a negative one fails the trial).
enum class SpectrumKind {
  eigenvalues,      ///< real eigenvalues of a self-adjoint expression
  singular_values,  ///< singular values of any other expression
};

/// The largest moment order accepted. Far beyond what finite-N comparisons use; it bounds the
/// size of a trial row.
inline constexpr int kMaxMomentLimit = 64;
/// The largest number of bins accepted; a guard against a typo allocating gigabytes.
inline constexpr std::int64_t kMaxBins = 10'000'000;

/// What to observe. Plain data; validate() checks it (observe_spectrum and start_observations call
/// it, so a bad configuration is refused before anything is counted).
struct ObserveConfig {
  /// b + 1 strictly increasing, finite bin edges e_0 < e_1 < ... < e_b (b ≥ 1). Uniform bins are
  /// made by uniform_edges(). Empty when extremes_only.
  std::vector<double> bin_edges;
  /// Observe only the smallest and largest value and the norm: no histogram (no bin edges),
  /// max_moment = 0 and no kept spectra. A trial may then hand in just its two extremes (what
  /// an iterative solver finds, model::Path::krylov) instead of its whole spectrum.
  bool extremes_only = false;
  /// K: moments m_0..m_K are kept (m_0 = 1). 0..kMaxMomentLimit.
  int max_moment = 8;
  SpectrumKind kind = SpectrumKind::eigenvalues;
  /// Trials whose full spectrum is kept in their row (as handed in, same order); strictly
  /// increasing trial indices. Empty: keep none.
  std::vector<std::uint64_t> keep_spectrum_trials;

  /// Throws InputError naming the key and the rule it breaks.
  void validate() const;
  /// The number of bins b.
  std::size_t bins() const { return bin_edges.empty() ? 0 : bin_edges.size() - 1; }
  bool keeps_spectrum(std::uint64_t trial) const;
  /// Member-wise; edges compare as numbers. Observations merge only under equal configurations.
  friend bool operator==(const ObserveConfig&, const ObserveConfig&) = default;
};

/// Edges of `bins` equal bins on [low, high]: e_i = low + (high − low)·(i / bins), with e_bins =
/// high exactly. Throws InputError unless low and high are finite, low < high, high − low is
/// finite, 1 ≤ bins ≤ kMaxBins, and the rounded edges are strictly increasing.
std::vector<double> uniform_edges(double low, double high, std::int64_t bins);

/// Integer counts on the bins of an ObserveConfig. The bin rule, the same for every bin:
///   bin i counts e_i ≤ x < e_{i+1}   (half-open; a value exactly on an interior edge goes to
///                                     the upper bin),
///   below counts x < e_0, above counts x ≥ e_b (so a value exactly on the top edge is "above").
/// Counts add exactly, so histograms merge in any order.
struct Histogram {
  std::vector<std::int64_t> counts;  ///< one per bin
  std::int64_t below = 0;
  std::int64_t above = 0;

  /// counts + below + above: every value ever added.
  std::int64_t total() const;
  friend bool operator==(const Histogram&, const Histogram&) = default;
};

/// A zeroed histogram for the bins of `config` (validates it).
Histogram empty_histogram(const ObserveConfig& config);

/// Adds values to `into` by the bin rule above (−Inf counts below, +Inf above). O(1) per value for
/// uniform edges (bin index by arithmetic, then checked against the stored edges so rounding cannot
/// move a value across an edge), O(log b) otherwise. Throws InputError if a value is NaN or if
/// `into` does not have one count per bin; nothing is counted then.
void add_counts(std::span<const double> values, const std::vector<double>& bin_edges,
                Histogram& into);

/// Adds the counts of `from` to `into`. Throws InputError if the bin counts differ.
void merge_into(Histogram& into, const Histogram& from);

/// How an iterative solver found a trial's extremes (model::Path::krylov): what a reader needs to
/// trust them. Every field is NaN for a trial whose whole spectrum was computed by LAPACK.
struct Certificate {
  double iterations = std::numeric_limits<double>::quiet_NaN();  ///< Lanczos steps taken
  /// ‖P y − θ y‖ of the unit Ritz vector y of the smallest (largest) Ritz value θ, recomputed
  /// from y itself: P has an eigenvalue within this distance of θ (a rigorous bound).
  double residual_min = std::numeric_limits<double>::quiet_NaN();
  double residual_max = std::numeric_limits<double>::quiet_NaN();
  /// r²/δ, δ the distance from θ to the next Ritz value: the error estimate the iteration
  /// stopped on (the Kato–Temple bound with δ for the unknown gap of P).
  double estimate_min = std::numeric_limits<double>::quiet_NaN();
  double estimate_max = std::numeric_limits<double>::quiet_NaN();
  /// The five numbers in this order (the run file's per-trial row, a unit message's fields).
  static constexpr int kColumns = 5;
  std::array<double, kColumns> row() const {
    return {iterations, residual_min, residual_max, estimate_min, estimate_max};
  }
  static Certificate from_row(const double* r) { return {r[0], r[1], r[2], r[3], r[4]}; }
};

/// The observations of one trial. Failed trials keep their index and reason; their moments are
/// empty and their extremes NaN.
struct TrialRecord {
  std::uint64_t trial = 0;
  bool failed = false;
  std::string reason;            ///< why it failed; empty when it did not
  std::vector<double> moments;   ///< m_0..m_K, indexed by k (m_0 = 1); empty if failed
  double min = 0.0;              ///< smallest value of the spectrum
  double max = 0.0;              ///< largest value of the spectrum
  double norm = 0.0;             ///< operator norm max_i |x_i|
  std::vector<double> spectrum;  ///< the full spectrum if the trial is selected (failed or not)
  Certificate certificate;       ///< set by the caller for a trial of the Krylov path
};

/// m_0..m_K of x, m_k = (1/N) Σ_i x_i^k, accurate to a few units in the last place relative to
/// (1/N) Σ_i |x_i|^k for every k ≤ 64:
///   - x is scaled by the power of two 2^e just above max|x| (exact), so the powers neither
///     overflow nor underflow before the sum and the result is 2^(k·e)·(mean of scaled powers);
///   - the powers are computed as unevaluated sums hi + lo with an error-free product by FMA
///     (Ogita, Rump & Oishi 2005; compensated powers as in Graillat 2009), so y^40 carries
///     no 40-fold rounding error;
///   - the sum is Neumaier's (1974) compensated summation, so cancellation between large terms of
///     opposite sign (odd moments) does not swamp the small ones.
/// A moment too large for double comes back as ±Inf. Throws InputError if x is empty, holds a
/// non-finite value, or max_moment is outside 0..kMaxMomentLimit.
std::vector<double> spectral_moments(std::span<const double> x, int max_moment);

/// Neumaier's (1974) compensated sum of `values`, in the given order.
double compensated_sum(std::span<const double> values);

/// A running compensated sum: Neumaier (1974), "Rundungsfehleranalyse einiger Verfahren zur
/// Summation endlicher Summen", ZAMM 54 — Kahan's compensated sum with the branch that also
/// catches the rounding error when the new term is larger than the running sum. Error
/// ≤ 2u|S| + O(n u²) Σ|a_i| (u = 2^-53), so it no longer grows with the number of terms.
struct CompensatedSum {
  double sum = 0.0;
  double compensation = 0.0;

  void add(double a) {
    const double t = sum + a;
    // Both branches are the exact rounding error of sum + a (Fast2Sum needs the larger
    // operand first).
    if ((sum < 0 ? -sum : sum) >= (a < 0 ? -a : a)) {
      compensation += (sum - t) + a;
    } else {
      compensation += (a - t) + sum;
    }
    sum = t;
  }
  double value() const { return sum + compensation; }
};

/// Observes one trial: validates `config`, then either records the trial as failed (a NaN or ±Inf
/// in the spectrum, a negative singular value, a moment that overflows double) without touching
/// `into`, or adds its values to `into` and returns its row. Throws InputError if the spectrum is
/// empty or `into` does not match the bins.
TrialRecord observe_spectrum(std::uint64_t trial, std::span<const double> spectrum,
                          const ObserveConfig& config, Histogram& into);

/// The row of a trial that produced no spectrum (a solver failure reported by the caller).
/// Throws InputError if `reason` is empty.
TrialRecord failed_trial(std::uint64_t trial, std::string reason);

/// All observations of one configuration (one matrix size): the histogram and one row per trial,
/// rows sorted by trial index with no index twice. Build it with start_observations and change it
/// only through record_trial, record_failure and merge_into, which keep those rules.
struct Observations {
  ObserveConfig config;
  Histogram histogram;
  std::vector<TrialRecord> trials;
};

/// Empty observations for `config` (validates it).
Observations start_observations(ObserveConfig config);

/// Observes a trial into `obs` (see observe_spectrum). Throws InputError, changing nothing, if the
/// trial is already recorded.
void record_trial(Observations& obs, std::uint64_t trial, std::span<const double> spectrum);
/// Records a failed trial (see failed_trial). Throws InputError, changing nothing, if the trial is
/// already recorded.
void record_failure(Observations& obs, std::uint64_t trial, std::string reason);

/// Merges `from` into `into`: counts add, rows interleave in trial order. Throws InputError,
/// changing nothing, if the configurations differ or a trial is recorded in both.
void merge_into(Observations& into, const Observations& from);

/// Mean and standard error of one quantity over the non-failed trials.
struct MeanWithError {
  double mean = 0.0;
  /// s/√n with the sample standard deviation s (divisor n − 1); NaN when n < 2.
  double standard_error = 0.0;
};

/// Statistics derived from Observations when read; a pure function of the rows.
struct Summary {
  std::int64_t trials = 0;  ///< rows, failed or not
  std::int64_t failed = 0;
  /// Each distinct failure reason with how many trials failed with it, sorted by reason.
  std::vector<std::pair<std::string, std::int64_t>> failure_reasons;
  std::vector<MeanWithError> moments;  ///< indexed by k = 0..K; NaN means when no trial succeeded
  MeanWithError min, max, norm;        ///< of the per-trial extremes and norm
  double smallest = 0.0;          ///< min over trials of the smallest value (NaN if none)
  double largest = 0.0;           ///< max over trials of the largest value (NaN if none)
};

/// Sums run in trial order with compensated summation and deviations are taken from the mean
/// (two passes), so the result depends only on the rows, never on how they were merged.
Summary summarize(const Observations& obs);

}  // namespace freegap::observe
