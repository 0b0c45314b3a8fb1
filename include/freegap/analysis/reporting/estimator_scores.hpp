// Scoring of the estimators that rode along with a run: per estimate and per N, bias, standard
// deviation and RMSE against the estimate's truth, with bootstrap intervals, and the fitted rate
// of |bias| and RMSE against N; rendered as a Markdown section and a CSV file (the figure is
// analysis/plot_estimators.py, drawn from that CSV).
//
// Statistics per size, over the T trials where neither the trial nor the estimator failed, with
// values x_t and truth θ:
//   mean x̄ = (1/T) Σ x_t, bias b = x̄ − θ, SE(b) = s/√T,
//   s = sample standard deviation (divisor T − 1), RMSE r = √((1/T) Σ (x_t − θ)²),
//   SE(r) ≈ sd_t((x_t − θ)²)/(2 r √T) (delta method, common practice);
// intervals: percentile bootstrap over trials within the size (Efron & Tibshirani 1993, from
// memory), reproducible from a fixed seed through rng::Stream. Rates: fit_power_law
// (include/freegap/analysis/statistics/fit.hpp) of |b| (a point is unresolved when |b| < 2·SE(b)) and of r.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "freegap/analysis/statistics/fit.hpp"
#include "freegap/store.hpp"

namespace freegap::analysis {

/// A truth resolved to a number, or why it cannot be.
struct TruthValue {
  bool known = false;
  double value = 0.0;
  std::string text;  ///< the truth as written in the job ("limit_norm", "2.5", ...)
  std::string note;  ///< how it was computed, or why it is unknown
};

/// Per-size statistics of one estimate.
struct EstimateSizeScore {
  std::int64_t n = 0;
  std::int64_t trials = 0;  ///< trials with a value
  std::int64_t failed = 0;  ///< trials where the trial or the estimator failed
  double mean = 0.0;
  double bias = 0.0, bias_se = 0.0, bias_low = 0.0, bias_high = 0.0;
  double sd = 0.0, sd_low = 0.0, sd_high = 0.0;
  double rmse = 0.0, rmse_se = 0.0, rmse_low = 0.0, rmse_high = 0.0;
};

/// One estimate of one estimator, over every size of the run.
struct EstimateScore {
  std::string estimator;
  std::string estimate;
  TruthValue truth;
  std::vector<EstimateSizeScore> sizes;  ///< in the run's size order
  PowerLawFit bias_rate;                 ///< |bias| ≈ C·N^(−α)
  PowerLawFit rmse_rate;                 ///< RMSE ≈ C·N^(−α)
  /// Distinct failure reasons of this estimate's estimator with their counts, most frequent
  /// first (at most 5).
  std::vector<std::pair<std::string, std::int64_t>> failure_reasons;
};

struct ScoreOptions {
  int bootstrap_replicates = 400;
  double level = 0.95;
  std::uint64_t seed = 20261202;  ///< bootstrap stream seed (fixed: reports are reproducible)
  /// Support edges [lower, upper] of the expression's limit law, when the caller knows them (the
  /// report computes limit laws); otherwise they are derived here (limit.hpp: closed-form rules,
  /// else the polynomial solver), and "limit_edge"/"limit_norm" truths are unknown, with the
  /// reason, for a model neither covers.
  std::optional<std::pair<double, double>> limit_edges;
  /// The run file's path: a file the job names by a relative path (an eigenvalue file) is looked
  /// for beside it, then in the current directory (analysis::run_expression). score_estimators
  /// sets it from the file it reads.
  std::string run_file;
};

/// Resolves a truth text against the job stored in a run file (see include/freegap/job.hpp for
/// the forms). Never throws for an unknown quantity: `known` is false and `note` says why.
TruthValue resolve_truth(const std::string& truth, const store::RunHeader& header,
                         const ScoreOptions& options = {});

/// Scores every estimate column of a run file (its committed units). Empty without estimators.
std::vector<EstimateScore> score_estimators(const store::RunFile& file,
                                            const ScoreOptions& options = {});
/// Opens `path` read-only and scores it.
std::vector<EstimateScore> score_estimators(const std::string& path,
                                            const ScoreOptions& options = {});

/// A Markdown section ("## Estimators"): one table per truth, the estimators of that truth side
/// by side for each N, then the fitted rates and the failure reasons.
std::string estimator_scores_markdown(const std::vector<EstimateScore>& scores);
/// CSV, one row per estimate and size, header line first (columns in SCHEMA-like order:
/// estimator, estimate, truth, truth_value, n, trials, failed, mean, bias, bias_se, bias_low,
/// bias_high, sd, sd_low, sd_high, rmse, rmse_se, rmse_low, rmse_high, bias_alpha,
/// bias_alpha_se, rmse_alpha, rmse_alpha_se). Numbers %.17g; unknown values empty.
std::string estimator_scores_csv(const std::vector<EstimateScore>& scores);
/// Writes estimator_scores_csv to `path` (throws Error if it cannot).
void write_estimator_scores_csv(const std::string& path, const std::vector<EstimateScore>& scores);

}  // namespace freegap::analysis
