// Estimators that ride along with a run: built-in ones, plug-in shared libraries (the C ABI of
// include/freegap/estimator_abi.h) and external commands, each called on every trial's spectrum
// (plug-ins that ask for it: and its matrix) and returning named scalar estimates. A failure of
// one estimator on one trial — a crash, a hang past its timeout, a NaN, a wrong count, malformed
// output — is that trial's recorded failure, never the run's (docs/plugins.md).
//
// Containment: a plug-in library is loaded, described and run only in a helper process, the
// program freegap-plugin-host that the rank starts per library estimator (again after a
// failure), fed trials through a socket pair (and, for a plug-in that reads the matrix, shared
// memory it maps read-only), so a segfault, a hang or an exit ends the helper, not the rank, and
// what the plug-in prints goes to a log beside the run file; a command is a new process per
// trial. Built-ins are freegap's own code and run in the rank.
#pragma once

#include <cstdint>
#include <functional>
#include <memory>
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "freegap/expr.hpp"
#include "freegap/job.hpp"
#include "freegap/observe.hpp"

namespace freegap::estimate {

/// A trial's evaluated matrix as plug-ins see it.
using MatrixView = expr::MatrixView;

/// What every estimator sees of one trial.
struct TrialInput {
  std::int64_t n = 0;
  std::uint64_t trial = 0;
  std::uint64_t seed = 0;
  observe::SpectrumKind kind = observe::SpectrumKind::eigenvalues;
  std::span<const double> spectrum;
  /// The evaluated matrix, given when some estimator wants it (EstimatorSet::wants_matrix);
  /// best kept in EstimatorSet::matrix_buffer, which plug-in helpers read without a copy.
  MatrixView matrix;
};

/// One estimator's answer for one trial: one value per estimate of its spec (in the spec's
/// order, i.e. sorted by estimate name), or failed with a short reason and every value NaN.
struct Outcome {
  bool failed = false;
  std::string reason;
  std::vector<double> values;
};

/// Memory shared with plug-in helper processes (a memfd they map read-only): where the runner
/// keeps each trial's matrix for the estimators that read it, so that it reaches them without
/// being copied again or sent through a socket. Defined in estimate.cpp.
class SharedMatrixMemory;

/// Where plug-ins' standard output and error go: a log beside the run file. Defined in
/// estimate.cpp.
class PluginLog;

/// The log of a run file's plug-in output: `<run file>.estimators.log`.
std::string plugin_log_path(const std::string& run_file);
/// The log grows to at most this many bytes (then a note says the rest is dropped).
constexpr std::size_t kPluginLogLimit = std::size_t{16} << 20;

class Estimator {
 public:
  virtual ~Estimator() = default;
  /// Never throws for anything the estimator does; a failure is an Outcome.
  virtual Outcome estimate(const TrialInput& input) = 0;
  /// Whether it reads the trial's matrix besides the spectrum (a plug-in that asked for it).
  virtual bool wants_matrix() const { return false; }
  /// Hands over the memory the set keeps trials' matrices in (for estimators that want them).
  virtual void share_matrix_memory(std::shared_ptr<SharedMatrixMemory> memory) { (void)memory; }
  /// A wait for a plug-in or command ends (the trial failed, "stopped: ...") soon after
  /// `requested` turns true, instead of at the estimator's timeout.
  virtual void set_stop_check(std::function<bool()> requested) { (void)requested; }
};

/// Opens one estimator of `job`: finds the built-in, or starts the library's helper process,
/// which loads it and describes it (this process never loads a plug-in), and checks its ABI
/// version, entry points and declared names against the job's truth table — a library whose
/// loading or describe crashes, hangs past the estimator's timeout or exits is refused too — or
/// checks the command's program can be found. Throws InputError "file:line: estimator.NAME...:
/// rule and fix" (docs/design.md rule 6: before the run starts, nothing written), or Error if the
/// helper program cannot be started. A library estimator opened alone discards its plug-in's
/// output.
std::unique_ptr<Estimator> open_estimator(const job::Job& job, std::size_t index);
/// The same, with the plug-in's output going to `log`.
std::unique_ptr<Estimator> open_estimator(const job::Job& job, std::size_t index,
                                          std::shared_ptr<PluginLog> log);

/// Every estimator of a job, in job order, and the flat layout of their results: estimate
/// columns are the estimators' estimates in order (estimator 0's, then 1's, ...).
class EstimatorSet {
 public:
  EstimatorSet() = default;
  /// Opens every estimator (throws InputError like open_estimator).
  explicit EstimatorSet(const job::Job& job);
  ~EstimatorSet();
  EstimatorSet(EstimatorSet&&) = default;
  EstimatorSet& operator=(EstimatorSet&&) = default;

  /// A wait for a plug-in or a command ends within 0.1 s of `requested` turning true (a stop
  /// signal): the trial's estimate fails with "stopped: the run was asked to stop", and the
  /// caller drops the unit.
  void set_stop_check(std::function<bool()> requested);
  /// From now on, and for what they printed before (held in memory, up to the limit), the
  /// plug-ins' standard output and error are appended to `path`, created at the first line;
  /// until then nothing is written anywhere. Each line is prefixed "ESTIMATOR[PID] out: " or
  /// "ESTIMATOR[PID] err: " (the helper's process id, the stream).
  void log_plugin_output_to(const std::string& path, std::size_t limit_bytes = kPluginLogLimit);

  bool empty() const { return estimators_.empty(); }
  std::size_t estimator_count() const { return estimators_.size(); }
  std::size_t estimate_count() const { return columns_; }
  /// Whether any estimator reads the trial's matrix: the runner then keeps a copy of it per
  /// trial (run::peak_bytes counts it) and passes it in TrialInput::matrix.
  bool wants_matrix() const { return wants_matrix_; }
  /// Room for a trial's matrix of `doubles` doubles in the memory the plug-in helpers share
  /// (grown as needed; valid until the next call). Only when wants_matrix(); throws Error if the
  /// memory cannot be grown.
  double* matrix_buffer(std::size_t doubles);

  /// Runs every estimator on one trial. `values` gets estimate_count() numbers (NaN for a failed
  /// estimator), `reasons` one string per estimator ("" when it did not fail).
  void run(const TrialInput& input, std::vector<double>& values, std::vector<std::string>& reasons);
  /// The rows of a trial that has no spectrum: every value NaN, every reason `why`.
  void fail_all(const std::string& why, std::vector<double>& values,
                std::vector<std::string>& reasons) const;

 private:
  std::vector<std::unique_ptr<Estimator>> estimators_;
  std::vector<std::size_t> widths_;
  std::size_t columns_ = 0;
  bool wants_matrix_ = false;
  std::shared_ptr<SharedMatrixMemory> matrix_memory_;
  std::shared_ptr<PluginLog> log_;
};

// ---- built-ins ---------------------------------------------------------------------------------

/// A built-in estimator's name, the estimates it returns and a one-line description.
struct BuiltinInfo {
  std::string_view name;
  std::vector<std::string_view> estimates;  ///< sorted
  std::string_view description;
};
/// Every built-in, by name.
std::vector<BuiltinInfo> builtins();

/// Moment estimator of the population spectrum's second moment σ₂ = (1/N) tr Σ² from the
/// eigenvalues λ of a sample covariance S = Σ^{1/2} (X X^*/M) Σ^{1/2} with c = N/M:
/// m_k = (1/N) Σ λ^k, plain σ̂₂ = m₂ − c m₁² (consistent; Bai & Silverstein 2010, ch. 3, from
/// memory), unbiased for Gaussian entries after dividing by 1 − 1/M² (complex) or
/// (M − 1)(M + 2)/M² (real; Srivastava 2005). Returns {plain, unbiased}.
std::pair<double, double> population_second_moment(std::span<const double> eigenvalues,
                                                   std::int64_t m, bool real_entries);

// ---- the command bridge's text format (docs/plugins.md) --------------------------------

/// The text a command reads on standard input for one trial.
std::string command_input(const TrialInput& input,
                          const std::vector<std::pair<std::string, std::string>>& parameters);
/// Parses a command's standard output: one "name value" line per declared estimate (any order,
/// blank lines and lines starting with '#' ignored). Values come back in the order of `names`.
/// A malformed line, an unknown, missing or repeated name, or a non-finite value fails.
Outcome parse_command_output(std::string_view text, const std::vector<std::string>& names);

}  // namespace freegap::estimate
