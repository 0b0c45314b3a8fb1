// Planning a job before it runs: per size the seconds per trial, core-hours, peak memory per rank
// and output size; a warning for a size that cannot fit; a rank count and wall time for a
// deadline. Also the duration syntax of `freegap plan --deadline` and `freegap run --stop-before`.
//
// The cost model is measured, not assumed: a few trials of the job's own model (same matrices,
// expression and observations) are timed at small sizes on this machine, and
//   t(N) = a·N³ + b·N² + c   (dense path: tridiagonalisation, products and QR are N³, sampling
//                             and observing N²), or
//   t(N) = a·N + c           (tridiagonal, two_projection: O(N) per bin edge, extreme and moment)
// is fitted with non-negative coefficients by least squares on relative errors, then used at the
// job's sizes. The fit is stored in a calibration file and reused until the machine changes (CPU
// model, core count, BLAS build, freegap version); the BLAS thread count is part of each entry.
// Memory is the runner's own estimate (run::peak_bytes), the one it refuses jobs by.
//
// Everything here is an estimate from a short measurement on one machine: other nodes, other
// loads and the site's scheduling policies decide the real costs.
#pragma once

#include <cstddef>
#include <cstdint>
#include <iosfwd>
#include <string>
#include <string_view>
#include <vector>

#include "freegap/job.hpp"

namespace freegap::plan {

/// Parses a duration: a number of seconds ("90", "1.5"), or numbers with units d, h, m, s in
/// that order ("90s", "10m", "1h30m", "2d", "1h30m15s", "1.5h"). Returns seconds (> 0). Throws
/// InputError("<text>: <rule>; write e.g. 90s, 10m or 1h30m"); callers put the option in front.
double parse_duration(std::string_view text);
/// "45s", "10m00s", "1h30m", "2d03h": the form the planner prints.
std::string format_duration(double seconds);
/// Slurm's --time form, rounded up to whole minutes: "MM:00", "HH:MM:00" or "D-HH:MM:00".
std::string slurm_time(double seconds);

/// One part of a trial's cost, measured and fitted on its own: on the dense path "sample"
/// (drawing the matrices: a Haar sample's QR or polar factor is N³), "form" (evaluating the
/// expression), "spectrum" (eigenvalues or singular values) and "observe" (histogram, moments,
/// extremes); on the tridiagonal path one part, "trial".
struct CostTerm {
  std::string name;
  std::vector<int> powers;
  std::vector<double> coefficients;
  std::vector<double> seconds;  ///< fastest seconds of this part per trial at CostFit::sizes
};

/// Seconds per trial as Σ coefficient_k · N^power_k (the sum of its terms' fits), with the
/// measurements it was fitted to and how well it predicts them.
struct CostFit {
  std::vector<int> powers;
  std::vector<double> coefficients;
  std::vector<std::int64_t> sizes;  ///< where it was measured
  std::vector<double> seconds;      ///< fastest seconds per trial there (an unshared core)
  std::vector<CostTerm> terms;      ///< the parts, each fitted separately (empty: one fit)
  /// Largest |predicted − measured| / measured over the calibrated sizes.
  double fit_error = 0.0;
  /// The largest calibrated size predicted from the smaller ones alone: |relative error| of that
  /// one-step extrapolation; −1 when there were too few sizes to tell.
  double step_error = -1.0;
  /// Bytes one trial adds to a process at each calibrated size (peak resident memory of a trial
  /// in a fresh child process, above what it started with); empty when not measured.
  std::vector<double> trial_bytes;
  /// trial_bytes fitted as a·N² + c (an N × N matrix and its companions); 0 when not measured.
  double predict_bytes(std::int64_t n) const;
  double predict(std::int64_t n) const;
  /// "3.1e-10·N³ + 2e-08·N² + 0.00012 s"
  std::string formula() const;
  std::int64_t largest_calibrated() const { return sizes.empty() ? 0 : sizes.back(); }
};

/// Fits every term separately (fit_cost with that term's powers) and sums them into one CostFit,
/// with its fit_error and step_error.
CostFit fit_terms(const std::vector<CostTerm>& measured, const std::vector<std::int64_t>& sizes);

/// Least squares on relative errors, Σ ((t(N_i) − s_i)/s_i)², over coefficients ≥ 0 (the best of
/// every subset of the powers whose unconstrained fit is non-negative). Throws InputError when
/// sizes and seconds differ in length or are empty.
CostFit fit_cost(const std::vector<int>& powers, const std::vector<std::int64_t>& sizes,
                 const std::vector<double>& seconds);

/// Seconds `plan` may spend measuring a model's cost when the calibration file lacks it.
inline constexpr double kCalibrationBudget = 60.0;
/// Beyond this factor over the largest calibrated size, `plan` warns that it extrapolates.
inline constexpr double kExtrapolationWarning = 2.0;
/// The margin on the planned peak memory per rank in the Slurm request (--mem-per-cpu).
inline constexpr double kMemoryMargin = 1.25;
/// Resident memory of a rank before its first trial: the executable, Open MPI, HDF5 and the run
/// file's buffers. Measured 23–42 MB peak for the ranks of small jobs (Open MPI 4.1.4, HDF5
/// 1.10.8, Debian 12, 2 ranks and 1); 40 MiB covers them.
inline constexpr double kRankBaseBytes = 40.0 * 1024 * 1024;

/// What makes costs comparable between runs: CPU model, core count, BLAS build, freegap build.
struct Machine {
  std::string cpu;
  int cores = 0;
  std::string blas;
  std::string freegap;
  /// One line naming all four; the calibration file is valid while it matches.
  std::string key() const;
};
Machine this_machine();

/// $FREEGAP_CALIBRATION if set, else $XDG_CACHE_HOME/freegap/calibration.toml, else
/// $HOME/.cache/freegap/calibration.toml.
std::string default_calibration_path();

/// A calibration file: measured cost fits of models on one machine. A file written on another
/// machine (or an unreadable one) is treated as empty and replaced on save.
class Calibration {
 public:
  /// Reads `path` if it exists. `stale` tells whether it existed but was for another machine.
  static Calibration load(const std::string& path, const Machine& machine);

  const CostFit* find(const std::string& key) const;
  void put(const std::string& key, const std::string& description, const CostFit& fit);
  /// Writes the file (through a temporary file and a rename); creates the directory. Throws
  /// Error, writing nothing, when a file at the path is not one freegap plan wrote.
  void save() const;

  const std::string& path() const { return path_; }
  bool stale() const { return stale_; }

 private:
  struct Entry {
    std::string key, description;
    CostFit fit;
  };
  std::string path_;
  Machine machine_;
  std::vector<Entry> entries_;
  bool stale_ = false;
  bool foreign_ = false;  // a file at the path that freegap plan did not write: never replaced
};

/// The key of a job's trial cost: everything that defines the work of one trial (matrices,
/// expression, observation settings, path), not the seed, sizes or trials, plus the BLAS
/// threads.
std::string cost_key(const job::Job& job, int threads);

/// Times trials of the job's own model at a ladder of sizes up to the job's largest (dense:
/// 40, 80, 160, … and the largest size itself; tridiagonal: 1000, 4000, …), each part of a trial
/// (CostTerm) on its own, climbing while the next size's measurement is predicted to fit in what
/// is left of `budget_seconds`, and fits the cost term by term. Uses `threads` BLAS threads.
/// Throws InputError for a job whose model is refused.
CostFit measure_cost(const job::Job& job, int threads, double budget_seconds = kCalibrationBudget);

struct Options {
  int ranks = 1;
  int threads = 1;
  double deadline_seconds = 0.0;  ///< 0: no deadline
  std::string calibration_path;   ///< empty: default_calibration_path()
  bool remeasure = false;         ///< measure even if the calibration file has the model
  double calibration_budget = kCalibrationBudget;  ///< seconds for a new measurement
};

struct SizeForecast {
  std::int64_t n = 0;
  std::int64_t trials = 0;
  double seconds_per_trial = 0.0;
  double core_hours = 0.0;       ///< trials × seconds per trial × threads / 3600
  std::size_t peak_bytes = 0;    ///< run::peak_bytes
  std::size_t working_bytes = 0; ///< the evaluation's own temporaries (expr::peak_working_bytes)
  std::size_t output_bytes = 0;  ///< this size's share of the run file
  bool fits = true;              ///< peak_bytes ≤ the memory per rank (when known)
};

struct Forecast {
  std::string job_path, expression, path;  ///< path: model::path_name
  std::string path_reason;                 ///< why (study::Study::path_reason)
  Options options;
  CostFit cost;
  std::string cost_source;  ///< "measured now (…)" or "from <file>"
  std::vector<SizeForecast> sizes;
  double core_hours = 0.0;
  std::size_t output_bytes = 0;
  std::string output_path;        ///< the job's run file
  std::int64_t output_free = -1;  ///< free bytes on its file system; -1 unknown
  std::string kept_spectra;       ///< which trials keep their spectra, and what that costs
  std::size_t memory_limit = 0;  ///< per rank; 0 unknown
  std::string memory_source;
  double wall_seconds = 0.0;  ///< on options.ranks ranks
  std::size_t units = 0;
  /// With a deadline: the fewest ranks (up to the number of units) whose wall time, with a 25 %
  /// margin, fits; 0 when none does.
  int suggested_ranks = 0;
  double suggested_run_seconds = 0.0;   ///< estimated wall time on suggested_ranks
  double suggested_wall_seconds = 0.0;  ///< wall time to request for suggested_ranks
  /// Memory per task to request from a scheduler: the largest measured peak per rank
  /// (kRankBaseBytes + CostFit::predict_bytes; the runner's estimate where nothing was measured)
  /// × kMemoryMargin.
  std::size_t request_bytes_per_task = 0;
  /// The Slurm submission for options.ranks ranks (or suggested_ranks with a deadline): --ntasks,
  /// --time from the predicted wall time with the checkpoint margin, --mem-per-cpu.
  std::string slurm_command;
  std::vector<std::string> warnings;
};

/// Wall seconds for units of the given durations on `ranks` ranks taking them largest first,
/// each rank the next unit when it is free (the runner's order), plus start-up.
double simulate_wall(std::vector<double> unit_seconds, int ranks);

/// Bytes the run file of `job` takes for size index i (results, kept spectra, commit markers and
/// provenance; HDF5's own overhead approximately).
std::size_t output_bytes(const job::Job& job, std::size_t size_index);
/// Bytes of the whole run file of `job` when complete: every size's share plus the root
/// attributes, job text and provenance sessions. What `plan`, `run --explain` and run's free-space
/// check state.
std::size_t run_file_bytes(const job::Job& job);

/// Free space on the file system that holds (or would hold) the file `path`: bytes an
/// unprivileged writer may still use there (statvfs f_bavail), read at the nearest existing
/// directory of the path. -1 when it cannot be read.
std::int64_t free_bytes_for(const std::string& path);

/// "521.6 GiB": bytes in binary units with one decimal, as plan and run print them.
std::string human_bytes(double bytes);

/// This node's available memory (MemAvailable in /proc/meminfo), 0 when unknown. The planner's
/// and the runner's per-rank budgets both start from it.
std::size_t available_memory_bytes();

/// The whole estimate; measures (and stores) the cost if the calibration file lacks it. Progress
/// notes (e.g. "measuring…") go to `log`.
/// Its text, as `freegap plan` prints it, is analysis::forecast_text
/// (freegap/analysis/reporting/console.hpp).
Forecast forecast(const job::Job& job, const Options& options, std::ostream& log);

}  // namespace freegap::plan
