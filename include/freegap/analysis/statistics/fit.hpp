// Convergence-rate fits: error ≈ C·N^(−α), with confidence intervals and the published exponents.
//
// Method (docs/check-values.md §4h):
//  - weighted least squares of log e_j = log C − α log N_j, weights w_j = e_j²/s_j² (delta method:
//    sd(log e) ≈ s/e). The errors are known, so the CI is normal, α̂ ± z_{(1+level)/2}·se(α̂), with
//    se inflated by the Birge ratio √(χ²/(m−2)) when the residual χ² exceeds m − 2 (the scatter is
//    larger than the stated errors; Birge 1932, as the Particle Data Group's scale factor, from
//    memory). Without standard errors (s_j ≤ 0 or NaN anywhere) the fit is unweighted, se comes
//    from the residuals and the CI uses Student's t_{m−2}.
//  - bootstrap over trials or units: resample within each N, recompute each e_j, refit, and take
//    the percentile interval of α (Efron & Tibshirani 1993, from memory); fixed seed through
//    rng::Stream, so the interval is reproducible.
//  - local slopes −log(e_{j+1}/e_j)/log(N_{j+1}/N_j) show pre-asymptotic curvature; the top-window
//    fit uses only the largest sizes.
// Warnings (never silent): fewer than 3 usable sizes ("no fit" for ≤ 2), sizes spanning less than
// a factor 4, smallest N below 50, points dropped because e ≤ 0 or unresolved.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <optional>
#include <span>
#include <string>
#include <string_view>
#include <vector>

namespace freegap::analysis {

/// One size's error with its Monte Carlo standard error.
struct ErrorPoint {
  double n = 0.0;
  double error = 0.0;           ///< fitted in absolute value; must be non-zero to be used
  double standard_error = 0.0;  ///< ≤ 0 or NaN: unknown
  bool resolved = true;         ///< unresolved points are left out (with a warning)
};

struct PowerLawFit {
  bool ok = false;     ///< a fit with ≥ 3 sizes was made
  int points = 0;      ///< sizes used
  double alpha = 0.0;  ///< fitted exponent (also the two-point slope when ok is false, if any)
  double alpha_standard_error = 0.0;
  double ci_low = 0.0, ci_high = 0.0;  ///< normal (weighted) or t (unweighted) interval at `level`
  double level = 0.95;
  double constant = 0.0;  ///< C
  double chi2 = 0.0;      ///< Σ w r² (weighted) or Σ r² (unweighted)
  int dof = 0;            ///< points − 2
  bool weighted = false;
  bool inflated = false;  ///< se inflated by √(χ²/dof)
  std::vector<std::string> warnings;
};

struct FitOptions {
  double level = 0.95;
  /// Minimum N below which pre-asymptotic curvature is warned about.
  double small_n = 50.0;
  /// Sizes should span at least this factor.
  double min_span = 4.0;
};

/// Weighted least-squares fit of |e| ≈ C·N^(−α) over all usable points.
PowerLawFit fit_power_law(std::span<const ErrorPoint> points, const FitOptions& options = {});

/// The same fit over the `window` largest sizes only (points are sorted by N first).
PowerLawFit fit_top_window(std::span<const ErrorPoint> points, std::size_t window = 3,
                           const FitOptions& options = {});

struct LocalSlope {
  double n_low = 0.0, n_high = 0.0;
  double alpha = 0.0;  ///< −log(|e_high|/|e_low|)/log(n_high/n_low)
};
/// Slopes between consecutive sizes (sorted by N); pairs with a zero error are skipped.
std::vector<LocalSlope> local_slopes(std::span<const ErrorPoint> points);

/// Student t quantile t_{ν, p} for ν ≥ 1 and p ∈ (0, 1), by bisection on the CDF, which is
/// computed from the density by composite Simpson quadrature (accurate to ~1e−10).
double student_t_quantile(double dof, double p);
/// Standard normal quantile Φ^{−1}(p), 0 < p < 1, by bisection on std::erfc (to ~1e−15).
double normal_quantile(double p);

/// A bootstrap interval for α.
struct BootstrapInterval {
  double alpha = 0.0;  ///< the fit on the original data (same as fit_power_law)
  double low = 0.0, high = 0.0;
  double level = 0.95;
  int replicates = 0;  ///< replicates that gave a fit
  int failed = 0;      ///< replicates without a usable fit (e.g. an error of 0)
};

struct BootstrapOptions {
  int replicates = 1000;
  double level = 0.95;
  std::uint64_t seed = 12345;
  /// Fit only the `window` largest sizes (0: all).
  std::size_t window = 0;
  FitOptions fit;
};

/// Recomputes one size's error point from a resample: `draw` holds indices into that size's
/// replicates (trials or units), drawn with replacement.
using ResampledPoint =
    std::function<ErrorPoint(std::size_t size_index, std::span<const std::size_t> draw)>;

/// Percentile bootstrap of α: `replicates_per_size[j]` is the number of independent replicates
/// (trials or units) of size j; each bootstrap replicate draws that many indices with replacement
/// for every size, asks `point` for the errors, and refits.
BootstrapInterval bootstrap_alpha(std::span<const std::size_t> replicates_per_size,
                                  const ResampledPoint& point,
                                  const BootstrapOptions& options = {});

/// Percentile interval of α from given replicates of each size's error: replicate b of every
/// size makes one bootstrap data set (the sizes are independent, so pairing by index is a joint
/// draw). Each data set keeps the points' n, standard errors and resolved flags, so it is fitted
/// on the same sizes as the data. Used with spectra_distances' bias-corrected replicates.
BootstrapInterval bootstrap_alpha_from_replicates(std::span<const ErrorPoint> points,
                                                  std::span<const std::vector<double>> replicates,
                                                  const BootstrapOptions& options = {});

/// Convenience for the common case: per-trial values x_{j,r} of a quantity whose limit is
/// `target`; e_j = mean_r x_{j,r} − target, s_j = sd/√R.
BootstrapInterval bootstrap_alpha_of_means(std::span<const double> sizes,
                                           const std::vector<std::vector<double>>& values,
                                           double target, const BootstrapOptions& options = {});
/// The error point of per-trial values (mean − target, SE, resolved at 2 SE).
ErrorPoint mean_error_point(double n, std::span<const double> values, double target);

/// A published convergence exponent, for printing beside a fit (docs/check-values.md §3.3).
struct PublishedRate {
  std::string_view key;          ///< e.g. "moments/gue"
  std::string_view description;  ///< what converges
  double alpha = 0.0;
  std::string_view source;  ///< author, year (and "from memory" where docs/check-values.md says so)
};

/// The table of known exponents.
std::span<const PublishedRate> published_rates();
/// The entry for `key`, if known.
std::optional<PublishedRate> find_published_rate(std::string_view key);

/// One line for a report: "α = 1.998 ± 0.004 (95% CI 1.990–2.006, 5 sizes); published 2
/// (Harer & Zagier 1986, from memory)" followed by warnings.
std::string describe_fit(const PowerLawFit& fit, const std::optional<PublishedRate>& published);

}  // namespace freegap::analysis
