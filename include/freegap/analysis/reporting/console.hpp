// Console text: what freegap's commands print on standard output — `inspect` (and `inspect
// --verify`), `limit` (with the table of its limit.csv), `sample` and `plan` — composed here, in
// the reporting room, and returned as strings. The commands compute (read the run file, solve
// the limit, sample, forecast) and write the strings; nothing here prints or writes a file.
#pragma once

#include <cstdint>
#include <filesystem>
#include <string>
#include <vector>

#include "freegap/analysis/limits/limit.hpp"
#include "freegap/analysis/limits/polynomial_limit.hpp"
#include "freegap/expr.hpp"
#include "freegap/observe.hpp"
#include "freegap/plan.hpp"
#include "freegap/store.hpp"
#include "freegap/study.hpp"

namespace freegap::analysis {

// --- inspect ---

/// `inspect`: the run file's header, its size table, status and failures, the estimates'
/// failures, its sessions, and (when asked) each size's moments and the stored job file.
std::string inspect_text(const store::RunFile& file, const std::string& path, bool show_job,
                         bool show_moments);

/// `inspect --verify`: what checking every committed unit against its checksums found.
std::string verify_text(const store::Integrity& integrity, const std::string& path);

// --- limit ---

/// The density of a limit on its grid, as `limit` computed it: a value per point (NaN where the
/// point failed), which points converged, and the polynomial solver's iterations (all points
/// together, and the most at one point).
struct LimitDensities {
  std::vector<double> density;
  std::vector<bool> ok;
  long long steps = 0, worst = 0;
};

/// The law found: the expression, its spectrum, the rule and the law (a polynomial's free
/// variables and pencil, when `polynomial` is set), the support and its bands, and the
/// operator-norm limit `norm`.
std::string limit_law_text(const expr::Expression& expression, const DerivedLimit& derived,
                           const Law& law, const PolynomialLaw* polynomial,
                           const Support& support, bool singular, double norm);

/// The predicted outliers of a spiked diagonal, one line per spike, and the limits of the
/// extremes they give (empty without a spiked diagonal).
std::string outliers_text(const OutlierPrediction& prediction);

/// The moments m_1..m_max_moment found (`computed`, by the solver when `solver`, else by the
/// law) beside the exact ones where they are known.
std::string limit_moments_text(const std::vector<double>& computed, bool solver,
                               const DerivedLimit& derived, int max_moment);

/// How many grid points `xs` converged (with the solver's iterations when `solver`), each point
/// that did not, the point masses and the law's note.
std::string limit_density_text(const LimitDensities& densities, const std::vector<double>& xs,
                               bool solver, const Support& support, const DerivedLimit& derived);

/// limit.csv: the header x,density,cdf and a row per grid point (%.12g each).
std::string limit_csv(const std::vector<double>& xs, const std::vector<double>& density,
                      const std::vector<double>& cdf);

/// The files `limit -o` wrote into `dir`: the CSV, and the figures when the plot script
/// succeeded (`figures`), else why there are none (`script`: the script that failed).
std::string limit_files_text(const std::filesystem::path& dir, bool figures,
                             const std::string& script);

// --- sample ---

/// `sample --explain`: what each size of the study computes, its path and why.
std::string sample_explain_text(const study::Study& study);

/// `sample`: the expression, the seed and trials, and the table's column heads up to m_max_moment.
std::string sample_table_header(const expr::Expression& expression, std::uint64_t seed,
                                long long trials, int max_moment);

/// `sample`: the table's row of size n: failures, moments, largest value and norm with their
/// standard errors, and the seconds per trial.
std::string sample_row(long long n, const observe::Summary& summary, int max_moment,
                       double seconds_per_trial);

// --- plan ---

/// The forecast `freegap plan` prints: the cost model, a row per size, totals, the run file,
/// the wall time, the deadline's suggestion, the Slurm request and the warnings.
std::string forecast_text(const plan::Forecast& e);

}  // namespace freegap::analysis
