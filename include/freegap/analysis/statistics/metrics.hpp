// Finite-N errors against the limit, each with its Monte Carlo standard error and a flag saying
// whether it is resolved above its own noise (docs/design.md rule 4).
//
// Metrics for one size N:
//  - Kolmogorov and Wasserstein-1 distance of the mean spectral distribution (pooled histogram of
//    all trials) to the limit, with a bootstrap over work units for the standard error;
//  - the same distances per trial from kept full spectra (mean and spread over trials);
//  - moment errors: mean of tr P^k over trials minus the exact limit moment m_k;
//  - deviations of the mean largest/smallest value and mean operator norm from the limit's edges
//    and norm.
//
// Binned distances (from histograms) — resolution limited by the bins:
//  - the empirical CDF F_n is known only at the bin edges e_i, so the Kolmogorov distance is
//    max_i |F_n(e_i) − F(e_i)|, a lower bound of the true sup (the true sup can exceed it by at
//    most the largest single-bin mass of F_n or F, reported as `resolution`);
//  - W1 = ∫|F_n − F| dx with F_n linear inside each bin (mass spread uniformly in the bin); mass
//    below the first or above the last edge is placed on that edge. Relative to the exact W1 of
//    the pooled spectrum the error is at most the bin width (each eigenvalue moves by less than
//    one bin).
// Per-trial distances from kept spectra are exact (docs/check-values.md §4h): Kolmogorov from the
// order statistics; W1 = Σ_i ∫_{λ_(i)}^{λ_(i+1)} |i/n − F| dx, each piece split at F^{−1}(i/n) and
// integrated exactly with the antiderivative Φ of F when given, else by 8-point Gauss–Legendre on
// each monotone piece.
//
// Noise and resolution:
//  - pooled distances: standard error = standard deviation of the distance over B bootstrap
//    resamples of the work units (Efron & Tibshirani 1993, from memory); noise floor = the
//    distance that the Monte Carlo noise alone would produce, estimated from the bootstrap
//    spread of F_n at each edge: sup_i sd(F_n(e_i)) for Kolmogorov, Σ_i sd(F_n(e_i))·Δe_i for W1.
//    A pooled distance is unresolved when value < kDistanceResolutionFactor (= 3) × noise floor
//    (3 because a supremum over many correlated edges of noise of size σ typically reaches 2–3σ);
//  - signed errors (moments, edges, norm) and per-trial distance means: standard error s/√R;
//    unresolved when |value| < kSignedResolutionFactor (= 2) × standard error, i.e. not distinct
//    from zero at about the 95% level.
#pragma once

#include <cstdint>
#include <functional>
#include <span>
#include <string>
#include <vector>

#include "freegap/observe.hpp"

namespace freegap::analysis {

inline constexpr double kDistanceResolutionFactor = 3.0;
inline constexpr double kSignedResolutionFactor = 2.0;
/// A moment error no larger than this times max|x|^k is at the level of floating-point rounding
/// (the moments are accurate to a few ulps relative to (1/N) Σ |x|^k, observe.hpp) and is never
/// resolved, whatever its standard error.
inline constexpr double kRoundingResolution = 1e-12;

/// What the metrics need of a limit law. Only `cdf` and the support are required.
struct LimitDistribution {
  std::function<double(double)> cdf;  ///< F, non-decreasing, 0 below the support, 1 above
  /// Optional Φ(x) = ∫_{support_low}^x F(t) dt (exact W1 pieces); empty: Gauss–Legendre.
  std::function<double(double)> cdf_integral;
  /// Optional F^{−1}(u) for u ∈ (0, 1); empty: bisection on F.
  std::function<double(double)> quantile;
  double support_low = 0.0;
  double support_high = 0.0;
};

/// A value with its Monte Carlo standard error and the resolution verdict.
struct MetricValue {
  double value = 0.0;
  double standard_error = 0.0;  ///< NaN when it cannot be estimated (fewer than 2 replicates)
  double noise_floor = 0.0;     ///< what noise alone would give (distances); = standard_error else
  bool resolved = false;        ///< value stands above k × noise floor (see header)
};

/// Distances from a histogram on fixed edges (no uncertainty).
struct BinnedDistances {
  double kolmogorov = 0.0;    ///< max over edges of |F_n(e) − F(e)|
  double wasserstein1 = 0.0;  ///< ∫|F_n − F|, F_n linear within bins
  double resolution = 0.0;    ///< max single-bin mass of F_n or F: bound on the KS underestimate
};

/// Distances of the histogram (counts summed over trials) to the limit.
/// Throws InputError if the counts do not match the edges or the histogram is empty.
BinnedDistances binned_distances(std::span<const double> edges, const observe::Histogram& histogram,
                                 const LimitDistribution& limit);

/// Exact distances of one sample (a spectrum, or spectra pooled) to the limit (§4h formulas).
struct SampleDistances {
  double kolmogorov = 0.0;
  double wasserstein1 = 0.0;
};
SampleDistances sample_distances(std::vector<double> sample, const LimitDistribution& limit);

/// Per-trial distances summarised over trials.
struct PerTrialDistances {
  std::int64_t trials = 0;  ///< trials with a kept spectrum
  MetricValue kolmogorov;   ///< mean over trials, SE = sd/√R
  MetricValue wasserstein1;
  double kolmogorov_sd = 0.0;  ///< spread over trials
  double wasserstein1_sd = 0.0;
  std::vector<double> kolmogorov_values, wasserstein1_values;  ///< one per trial (for the fits)
};

/// An error of a signed quantity (mean over trials minus its limit).
struct SignedError {
  double limit = 0.0;  ///< the limit value it is compared with
  double mean = 0.0;   ///< mean over trials
  MetricValue error;   ///< mean − limit, SE over trials
};

/// Everything the limit offers for comparison. NaN (or empty) means "not known".
struct LimitReference {
  LimitDistribution distribution;  ///< cdf may be empty: no distances then
  std::vector<double> moments;     ///< m_0..m_K of the limit (empty: no moment errors)
  double edge_low = 0.0;           ///< inf of the support (NaN: unknown)
  double edge_high = 0.0;          ///< sup of the support
  double norm = 0.0;               ///< limit operator norm
};

/// Inputs for one size, as a run file gives them.
struct SizeData {
  std::int64_t n = 0;
  std::vector<double> edges;                        ///< bin edges
  std::vector<observe::Histogram> unit_histograms;  ///< one per work unit (bootstrap over units)
  std::vector<observe::TrialRecord> trials;         ///< per-trial rows (failed ones are skipped)
};

struct MetricsOptions {
  int bootstrap_replicates = 200;
  std::uint64_t seed = 20240611;  ///< bootstrap stream seed (fixed: reports are reproducible)
};

/// Distances of the mean spectral distribution computed from the kept spectra of every trial —
/// no bins (docs/check-values.md §4i):
///  - Kolmogorov: exact, the supremum of |F̄_n − F| over every jump of the pooled empirical CDF
///    F̄_n = (1/R) Σ_t F_{n,t} (each trial weighs 1/R, each of its values 1/(R·n_t));
///  - Wasserstein-1: ∫|F̄_n − F_L| with F_L the piecewise-linear interpolant of F on a grid made of
///    every pooled value, the support's ends and equal subdivisions between them (at least
///    kSpectraGridCells cells). Its distance to the true W1 is at most
///    Σ_cells h·(F(b) − F(a)) (F and F_L are monotone between F(a) and F(b) in each cell), which
///    is computed and returned as `wasserstein1_grid_bound`;
///  - uncertainty: B bootstrap resamples of the trials (Efron & Tibshirani 1993 ch. 6 and 10,
///    from memory), each a reweighting of the same pooled values (no F calls per replicate).
///    standard error = sd of the replicates; bias = mean(D*) − D̂ (a distance measured on a noisy
///    estimate of F̄ is biased upward); the reported value is D̂ − bias.
///  - resolved: a test of "the true distance is 0". Then D̂ is a distance of noise alone, of mean
///    μ0, and a replicate adds an independent noise of the same size, so E D* ≈ √2·μ0 (exact for
///    W1 with Gaussian noise, close for the supremum) and the corrected value 2D̂ − mean(D*) sits
///    near (2 − √2)·μ0 — not at 0: for W1, an integral of |noise| over the whole support, that
///    level is many standard errors. μ0 is estimated by the mean over the replicates of the
///    distance between the resampled and the data's own F̄_n. Noise floor = (2 − √2)·μ0 +
///    kSignedResolutionFactor × standard error; resolved when the corrected value exceeds it.
///    (Measured on samples drawn from the limit itself, see the unit test's comment.)
///  - per trial: the same distances of each trial's own spectral distribution, on the same grid.
inline constexpr std::size_t kSpectraGridCells = std::size_t{1} << 19;
/// The bootstrap replicates run on at most this many threads (and at most the hardware's); the
/// numbers do not depend on how many.
inline constexpr std::size_t kSpectraThreads = 4;

struct SpectraDistances {
  std::int64_t trials = 0;   ///< trials pooled
  std::int64_t values = 0;   ///< eigenvalues pooled
  MetricValue kolmogorov;    ///< bias-corrected value, bootstrap SE, noise floor (see above)
  MetricValue wasserstein1;
  double kolmogorov_plugin = 0.0, wasserstein1_plugin = 0.0;  ///< D̂ before the correction
  double kolmogorov_bias = 0.0, wasserstein1_bias = 0.0;      ///< mean(D*) − D̂
  /// (2 − √2)·μ0: where the corrected value of a zero distance lies.
  double kolmogorov_zero_level = 0.0, wasserstein1_zero_level = 0.0;
  /// A bound on the bias the correction leaves, min(zero level, √2·|bias|); rate fits add it to
  /// the standard error in quadrature. Why √2: if the expected distance grows with the noise's
  /// scale s as D + c·s^p, the data's noise is s = 1 and a replicate's s = √2, the correction
  /// removes c(2^{p/2} − 1) and leaves c(2 − 2^{p/2}), at most √2 × what it removed for
  /// 1 ≤ p ≤ 2 (p = 1: a zero distance, where the bound is the zero level; p = 2: a smooth
  /// functional, where nothing is left; a peak of |F̄ − F| under Brownian-like noise gives
  /// p = 4/3, the cube-root scaling of Chernoff 1964, from memory, leaving 0.70 × the bias).
  /// Measured (semicircle samples moved by a shift or a scale, 100 trials × 50 values, 60
  /// seeds at each of 9 distances from 0 to 14 μ0; docs/check-values.md §4i): the Kolmogorov
  /// residual was 0.5–1.4 × the bias removed, the W1 residual within 2 standard errors of 0
  /// once resolved.
  double kolmogorov_residual_bound = 0.0, wasserstein1_residual_bound = 0.0;
  double wasserstein1_grid_bound = 0.0;  ///< bound on |computed − exact| W1 (see above)
  /// Bias-corrected bootstrap replicates D*_b − bias (replicate b of every size can be paired
  /// for a bootstrap of a rate's exponent).
  std::vector<double> kolmogorov_replicates, wasserstein1_replicates;
  /// Per-trial distances (trial order), on the same grid.
  std::vector<double> per_trial_kolmogorov, per_trial_wasserstein1;
};

/// Throws InputError when there are no spectra, one is empty, or the limit has no CDF.
/// `stream_size` keys the bootstrap stream (the N of the size).
SpectraDistances spectra_distances(std::span<const std::vector<double>> spectra,
                                   const LimitDistribution& limit, std::uint64_t stream_size,
                                   const MetricsOptions& options = {});

/// All metrics of one size.
struct SizeMetrics {
  std::int64_t n = 0;
  std::int64_t trials_used = 0;  ///< non-failed trials
  bool has_pooled = false;
  /// The pooled distances come from every trial's kept spectrum (spectra_distances, no bins);
  /// false: from the histograms (binned, bootstrap over units).
  bool pooled_from_spectra = false;
  SpectraDistances spectra;  ///< when pooled_from_spectra
  MetricValue pooled_kolmogorov;
  MetricValue pooled_wasserstein1;
  double pooled_resolution = 0.0;  ///< bin-limited KS resolution (see BinnedDistances)
  bool has_per_trial = false;
  PerTrialDistances per_trial;
  std::vector<SignedError> moment_errors;  ///< indexed by k = 0..K (k = 0 is trivially 0)
  SignedError max_edge, min_edge, norm;    ///< NaN limit when unknown
  std::vector<std::string> notes;          ///< why something is missing
};

/// Mean pooled distances with bootstrap SE over units: resamples `units` with replacement
/// `options.bootstrap_replicates` times (rng::Stream keyed by options.seed), sums, recomputes.
/// With fewer than 2 units the SE and noise floor are NaN and the value is unresolved.
struct PooledDistances {
  MetricValue kolmogorov, wasserstein1;
  double resolution = 0.0;
};
PooledDistances pooled_distances(std::span<const double> edges,
                                 std::span<const observe::Histogram> units,
                                 const LimitDistribution& limit,
                                 const MetricsOptions& options = {});

/// Mean − limit with SE s/√R and the resolution verdict; NaN limit gives NaN error.
SignedError signed_error(std::span<const double> values, double limit);

SizeMetrics compute_size_metrics(const SizeData& data, const LimitReference& limit,
                                 const MetricsOptions& options = {});

}  // namespace freegap::analysis
