// `freegap plan JOB.toml`: estimated time, core-hours, memory and output per size before a run.
#include "freegap/plan.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <iostream>
#include <map>
#include <sstream>
#include <variant>

#include "commands.hpp"
#include "freegap/analysis/reporting/console.hpp"
#include "freegap/analysis/reporting/report.hpp"
#include "freegap/errors.hpp"
#include "freegap/job.hpp"

namespace freegap::cli {

namespace {

struct PlanArgs {
  std::string job;
  std::string deadline;
  plan::Options options;
  bool confine = false;
  double rate_halfwidth = 0.0;
  std::string pilot;
  std::string rate_quantity = "kolmogorov";
};

// More trials per size than any plan should recommend (and far below where a count overflows).
constexpr double kMostRecommendedTrials = 1e12;

const analysis::Table& table_named(const analysis::Report& r, const std::string& name) {
  for (const auto& t : r.tables) {
    if (t.name == name) return t;
  }
  throw Error("the report has no table '" + name + "'");
}

double cell_number(const analysis::Table& t, const std::vector<analysis::Table::Cell>& row,
                   const std::string& column) {
  const auto it = std::find(t.columns.begin(), t.columns.end(), column);
  if (it == t.columns.end()) throw Error("table '" + t.name + "' has no column '" + column + "'");
  const auto& c = row[static_cast<std::size_t>(it - t.columns.begin())];
  return std::holds_alternative<double>(c) ? std::get<double>(c) : std::nan("");
}

std::string cell_text(const analysis::Table& t, const std::vector<analysis::Table::Cell>& row,
                      const std::string& column) {
  const auto it = std::find(t.columns.begin(), t.columns.end(), column);
  if (it == t.columns.end()) return "";
  const auto& c = row[static_cast<std::size_t>(it - t.columns.begin())];
  return std::holds_alternative<std::string>(c) ? std::get<std::string>(c) : "";
}

// --rate-halfwidth: the factor by which the pilot's trials must grow for the quantity's exponent
// to have a 95% interval of ± the target. Every interval of the fit is noise-limited, so its
// width falls like 1/√R (docs/check-values.md §4i): factor = (half-width now / target)². A
// quantity the pilot could not fit (sizes unresolved) gets the factor that lifts its weakest size
// to 1.5 × its noise floor, which also falls like 1/√R: factor = max_j (1.5·floor_j/value_j)².
// Writes what it found to `out`; returns the factor (NaN when the pilot says nothing usable).
double rate_factor(const std::string& pilot, const std::string& key, double target,
                   std::map<std::int64_t, std::int64_t>& pilot_trials, std::ostream& out) {
  analysis::ReportOptions ro;
  ro.figures = false;
  const analysis::Report rep = analysis::build_report({pilot}, ro);
  const auto& sizes = table_named(rep, "sizes");
  const auto& fits = table_named(rep, "fits");
  for (const auto& row : sizes.rows) {
    pilot_trials[static_cast<std::int64_t>(cell_number(sizes, row, "n"))] =
        static_cast<std::int64_t>(cell_number(sizes, row, "trials_used"));
  }
  char line[512];
  for (const auto& row : fits.rows) {
    if (cell_text(fits, row, "key") != key) continue;
    const std::string quantity = cell_text(fits, row, "quantity");
    if (cell_number(fits, row, "ok") == 1.0) {
      const double lo = cell_number(fits, row, "ci_low"), hi = cell_number(fits, row, "ci_high");
      const double half = 0.5 * (hi - lo), factor = (half / target) * (half / target);
      std::snprintf(line, sizeof line,
                    "pilot:        %s: α = %.3f, 95%% interval ± %.3g with the pilot's trials; "
                    "± %.3g needs about %.3g × the trials at every size\n",
                    quantity.c_str(), cell_number(fits, row, "alpha"), half, target, factor);
      out << line;
      return factor;
    }
    // Not fitted: what it takes to resolve every size (only distances carry a noise floor).
    double factor = 0.0;
    bool known = true;
    const bool has_floor = std::find(sizes.columns.begin(), sizes.columns.end(),
                                     key + "_noise_floor") != sizes.columns.end();
    for (const auto& srow : sizes.rows) {
      if (!has_floor) {
        known = false;
        break;
      }
      const double value = cell_number(sizes, srow, key), floor = cell_number(sizes, srow, key + "_noise_floor");
      if (!std::isfinite(value) || !std::isfinite(floor)) {
        known = false;
        break;
      }
      if (value <= 0.0) {
        known = false;
        break;
      }
      factor = std::max(factor, std::pow(1.5 * floor / value, 2.0));
    }
    if (known && factor > 0.0) {
      std::snprintf(line, sizeof line,
                    "pilot:        %s: not fitted (sizes unresolved); about %.3g × the trials lift "
                    "every size to 1.5 × its noise floor; plan again from that run for the "
                    "interval\n",
                    quantity.c_str(), factor);
      out << line;
      return std::max(factor, 1.0);
    }
    out << "pilot:        " << quantity << ": not fitted, and the pilot tells nothing of the trials "
        << "it would need (no resolved value at some size)\n";
    return std::nan("");
  }
  throw InputError("--rate-quantity " + key + ": the pilot '" + pilot +
                   "' has no such fitted quantity (see the key column of its report's fits.csv)");
}

}  // namespace

Subcommand add_plan_command(CLI::App& app) {
  auto args = std::make_shared<PlanArgs>();
  auto* cmd = app.add_subcommand(
      "plan", "Forecast a job's time per trial, core-hours, memory per rank and output size");
  cmd->add_option("job", args->job, "Job file (TOML)")->required();
  cmd->add_option("--ranks", args->options.ranks, "MPI ranks the job would run on (default 1)")
      ->check(CLI::Range(1, 1 << 24));
  cmd->add_option("--threads", args->options.threads, "BLAS threads per rank (default 1)")
      ->check(CLI::Range(1, 1024));
  cmd->add_option(
      "--deadline", args->deadline,
      "Wall time available, e.g. 2h or 1d12h: suggests a rank count and a time request");
  cmd->add_option("--calibration", args->options.calibration_path,
                  "Calibration file (default $XDG_CACHE_HOME/freegap/calibration.toml)");
  cmd->add_flag("--remeasure", args->options.remeasure,
                "Measure the cost again even if the calibration file has this model");
  cmd->add_option("--calibration-budget", args->options.calibration_budget,
                  "Seconds a new measurement of the cost may take (default 60): larger sizes "
                  "are timed while they fit")
      ->check(CLI::Range(0.1, 86400.0));
  auto* halfwidth =
      cmd->add_option("--rate-halfwidth", args->rate_halfwidth,
                      "Target half-width of a fitted exponent's 95% interval (e.g. 0.05): with "
                      "--pilot, the trials per size it needs, and their cost")
          ->check(CLI::Range(1e-6, 100.0));
  auto* pilot = cmd->add_option("--pilot", args->pilot,
                                "A run file of this model (finished or not) whose fit "
                                "--rate-halfwidth scales");
  halfwidth->needs(pilot);
  pilot->needs(halfwidth);
  cmd->add_option("--rate-quantity", args->rate_quantity,
                  "Which fitted quantity --rate-halfwidth is about (a key of the report's "
                  "fits.csv; default kolmogorov, the mean spectrum's Kolmogorov distance)");
  cmd->add_flag("--confine", args->confine,
                "Refuse a job file that names any path outside its own directory (as freegap run "
                "--confine)");
  return {cmd, [args] {
            if (!args->deadline.empty()) {
              try {
                args->options.deadline_seconds = plan::parse_duration(args->deadline);
              } catch (const InputError& e) {
                throw InputError(std::string("--deadline ") + e.what());
              }
            }
            auto job = job::load_job(
                args->job, args->confine ? job::Paths::confined : job::Paths::anywhere);
            std::ostringstream pilot_text;
            if (args->rate_halfwidth > 0.0) {
              std::map<std::int64_t, std::int64_t> pilot_trials;
              const double factor = rate_factor(args->pilot, args->rate_quantity,
                                                args->rate_halfwidth, pilot_trials, pilot_text);
              if (std::isfinite(factor)) {
                std::string changed;
                for (std::size_t i = 0; i < job.sizes.size(); ++i) {
                  const auto it = pilot_trials.find(job.sizes[i]);
                  const double base = static_cast<double>(it != pilot_trials.end() && it->second > 0
                                                              ? it->second
                                                              : job.trials[i]);
                  const double want = std::ceil(base * factor);
                  if (!(want <= kMostRecommendedTrials)) {
                    throw InputError("--rate-halfwidth " + std::to_string(args->rate_halfwidth) +
                                     ": the pilot's numbers ask for more than 10^12 trials at N = " +
                                     std::to_string(job.sizes[i]) +
                                     "; ask for a wider interval, or run a larger pilot first");
                  }
                  job.trials[i] = std::max<std::int64_t>(2, static_cast<std::int64_t>(want));
                  changed += (changed.empty() ? "" : ", ") + std::to_string(job.trials[i]);
                  if (it == pilot_trials.end()) changed += " (N = " + std::to_string(job.sizes[i]) + " not in the pilot: the job's own trials scaled)";
                }
                job::resolve_keep_spectra(job);
                pilot_text << "recommended:  trials per size " << changed
                           << " (the estimate below is for these)\n";
              }
            }
            const auto e = plan::forecast(job, args->options, std::cerr);
            std::cout << pilot_text.str() << analysis::forecast_text(e);
            return 0;
          }};
}

}  // namespace freegap::cli
