// The MPI runner (see include/freegap/run.hpp for the design).
#include "freegap/run.hpp"

#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <csignal>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <deque>
#include <filesystem>
#include <fstream>
#include <memory>
#include <optional>
#include <iostream>
#include <sstream>
#include <thread>
#include <tuple>

#include "freegap/errors.hpp"
#include "freegap/estimate.hpp"
#include "freegap/plan.hpp"
#include "freegap/stop.hpp"
#include "freegap/store.hpp"
#include "freegap/study.hpp"

extern "C" void openblas_set_num_threads(int);

namespace freegap::run {

namespace {

// ---- signals ---------------------------------------------------------------------------------

extern "C" void on_stop_signal(int sig) { g_stop_signal = sig; }

}  // namespace

void install_signal_handlers() {
  struct sigaction sa {};
  sa.sa_handler = on_stop_signal;
  sigemptyset(&sa.sa_mask);
  sa.sa_flags = SA_RESTART;
  sigaction(SIGUSR1, &sa, nullptr);
  sigaction(SIGTERM, &sa, nullptr);
  sigaction(SIGINT, &sa, nullptr);
}

namespace {

bool stop_requested() { return g_stop_signal != 0; }

// ---- MPI helpers -----------------------------------------------------------------------------

constexpr int kTagRequest = 1;  // worker → 0: int32 0 = give me work
constexpr int kTagAssign = 2;   // 0 → worker: int64[2] {size index, unit} or {-1, -1} = no more
constexpr int kTagResult = 3;   // worker → 0: serialised unit result
constexpr int kTagStopped = 4;  // worker → 0: int32: stopped by a signal, unit dropped; done

int comm_rank(MPI_Comm comm) {
  int r = 0;
  MPI_Comm_rank(comm, &r);
  return r;
}
int comm_size(MPI_Comm comm) {
  int s = 1;
  MPI_Comm_size(comm, &s);
  return s;
}

void broadcast_string(std::string& s, MPI_Comm comm) {
  long long n = static_cast<long long>(s.size());
  MPI_Bcast(&n, 1, MPI_LONG_LONG, 0, comm);
  s.resize(static_cast<std::size_t>(n));
  if (n > 0) MPI_Bcast(s.data(), static_cast<int>(n), MPI_CHAR, 0, comm);
}

/// Every rank reports (code, message); all learn the worst code and the message of the lowest
/// rank with that code, so they exit together with one message.
std::pair<int, std::string> agree(int code, const std::string& message, MPI_Comm comm) {
  int worst = 0;
  MPI_Allreduce(&code, &worst, 1, MPI_INT, MPI_MAX, comm);
  if (worst == 0) return {0, {}};
  const int me = comm_rank(comm);
  int candidate = code == worst ? me : comm_size(comm);
  int first = 0;
  MPI_Allreduce(&candidate, &first, 1, MPI_INT, MPI_MIN, comm);
  std::string msg = message;
  long long n = static_cast<long long>(msg.size());
  MPI_Bcast(&n, 1, MPI_LONG_LONG, first, comm);
  msg.resize(static_cast<std::size_t>(n));
  if (n > 0) MPI_Bcast(msg.data(), static_cast<int>(n), MPI_CHAR, first, comm);
  return {worst, msg};
}

std::string host_name() {
  char name[MPI_MAX_PROCESSOR_NAME] = {};
  int len = 0;
  MPI_Get_processor_name(name, &len);
  return std::string(name, static_cast<std::size_t>(len));
}

// ---- serialisation of a unit's observations ----------------------------------------------------

struct Writer {
  std::vector<char> bytes;
  template <class T>
  void put(const T& v) {
    const char* p = reinterpret_cast<const char*>(&v);
    bytes.insert(bytes.end(), p, p + sizeof(T));
  }
  void put_doubles(const std::vector<double>& v) {
    put<std::uint64_t>(v.size());
    const char* p = reinterpret_cast<const char*>(v.data());
    bytes.insert(bytes.end(), p, p + v.size() * sizeof(double));
  }
  void put_string(const std::string& s) {
    put<std::uint64_t>(s.size());
    bytes.insert(bytes.end(), s.begin(), s.end());
  }
};

struct Reader {
  const std::vector<char>& bytes;
  std::size_t at = 0;
  template <class T>
  T get() {
    if (at + sizeof(T) > bytes.size()) throw Error("corrupt unit message between ranks");
    T v;
    std::memcpy(&v, bytes.data() + at, sizeof(T));
    at += sizeof(T);
    return v;
  }
  std::vector<double> get_doubles() {
    const auto n = get<std::uint64_t>();
    if (at + n * sizeof(double) > bytes.size()) throw Error("corrupt unit message between ranks");
    std::vector<double> v(n);
    // An empty vector's data() may be null, and memcpy from or to null is undefined even for 0.
    if (n > 0) std::memcpy(v.data(), bytes.data() + at, n * sizeof(double));
    at += n * sizeof(double);
    return v;
  }
  std::string get_string() {
    const auto n = get<std::uint64_t>();
    if (at + n > bytes.size()) throw Error("corrupt unit message between ranks");
    std::string s(bytes.data() + at, n);
    at += n;
    return s;
  }
};

struct UnitDone {
  std::size_t size_index = 0;
  std::int64_t unit = 0;
  int rank = 0;
  double seconds = 0.0;
  observe::Observations obs;
  std::vector<double> estimates;            // trials × E (with estimators only)
  std::vector<std::string> estimate_failures;  // trials × P
};

std::vector<char> pack(const UnitDone& u) {
  Writer w;
  w.put<std::uint64_t>(u.size_index);
  w.put<std::int64_t>(u.unit);
  w.put<std::int32_t>(u.rank);
  w.put<double>(u.seconds);
  const auto& h = u.obs.histogram;
  w.put<std::uint64_t>(h.counts.size());
  for (auto c : h.counts) w.put<std::int64_t>(c);
  w.put<std::int64_t>(h.below);
  w.put<std::int64_t>(h.above);
  w.put<std::uint64_t>(u.obs.trials.size());
  for (const auto& t : u.obs.trials) {
    w.put<std::uint64_t>(t.trial);
    w.put<std::uint8_t>(t.failed ? 1 : 0);
    w.put_string(t.reason);
    w.put_doubles(t.moments);
    w.put<double>(t.min);
    w.put<double>(t.max);
    w.put<double>(t.norm);
    w.put_doubles(t.spectrum);
    for (const double v : t.certificate.row()) w.put<double>(v);
  }
  w.put_doubles(u.estimates);
  w.put<std::uint64_t>(u.estimate_failures.size());
  for (const auto& reason : u.estimate_failures) w.put_string(reason);
  return std::move(w.bytes);
}

UnitDone unpack(const std::vector<char>& bytes, const observe::ObserveConfig& config) {
  Reader r{bytes};
  UnitDone u;
  u.size_index = r.get<std::uint64_t>();
  u.unit = r.get<std::int64_t>();
  u.rank = r.get<std::int32_t>();
  u.seconds = r.get<double>();
  u.obs = observe::start_observations(config);
  const auto bins = r.get<std::uint64_t>();
  if (bins != u.obs.histogram.counts.size()) throw Error("unit message has the wrong bin count");
  for (auto& c : u.obs.histogram.counts) c = r.get<std::int64_t>();
  u.obs.histogram.below = r.get<std::int64_t>();
  u.obs.histogram.above = r.get<std::int64_t>();
  const auto rows = r.get<std::uint64_t>();
  u.obs.trials.resize(rows);
  for (auto& t : u.obs.trials) {
    t.trial = r.get<std::uint64_t>();
    t.failed = r.get<std::uint8_t>() != 0;
    t.reason = r.get_string();
    t.moments = r.get_doubles();
    t.min = r.get<double>();
    t.max = r.get<double>();
    t.norm = r.get<double>();
    t.spectrum = r.get_doubles();
    std::array<double, observe::Certificate::kColumns> certificate{};
    for (double& v : certificate) v = r.get<double>();
    t.certificate = observe::Certificate::from_row(certificate.data());
  }
  u.estimates = r.get_doubles();
  const auto reasons = r.get<std::uint64_t>();
  if (reasons > bytes.size()) throw Error("corrupt unit message between ranks");
  u.estimate_failures.resize(reasons);
  for (auto& reason : u.estimate_failures) reason = r.get_string();
  return u;
}

// ---- work units ----------------------------------------------------------------------------

struct Unit {
  std::size_t size_index = 0;
  std::int64_t unit = 0;
  std::int64_t first_trial = 0, end_trial = 0;
  double cost = 0.0;
};

using plan::human_bytes;

std::string human_seconds(double s) {
  char buf[32];
  if (s < 60) {
    std::snprintf(buf, sizeof buf, "%.0fs", s);
  } else if (s < 3600) {
    std::snprintf(buf, sizeof buf, "%dm%02ds", static_cast<int>(s) / 60, static_cast<int>(s) % 60);
  } else {
    std::snprintf(buf, sizeof buf, "%dh%02dm", static_cast<int>(s) / 3600,
                  (static_cast<int>(s) % 3600) / 60);
  }
  return buf;
}

using plan::available_memory_bytes;

// How many ranks share this node (for the default per-rank memory budget).
int ranks_on_this_node(MPI_Comm comm) {
  MPI_Comm node;
  MPI_Comm_split_type(comm, MPI_COMM_TYPE_SHARED, 0, MPI_INFO_NULL, &node);
  const int n = comm_size(node);
  MPI_Comm_free(&node);
  return n;
}

// ---- the run file's size against the free space ---------------------------------------------

/// The run file's predicted size when complete (the planner's estimate) beside the free space of
/// its file system. A file already at the path counts as free: a resumed run grows it, --fresh
/// deletes it (and a refused --fresh deletes nothing).
struct Space {
  std::size_t need = 0;
  std::int64_t free = -1;   // -1: unknown (then nothing is refused)
  std::uintmax_t held = 0;  // bytes of an existing file at the path

  explicit Space(const job::Job& job)
      : need(plan::run_file_bytes(job)), free(plan::free_bytes_for(job.output)) {
    std::error_code ec;
    if (std::filesystem::is_regular_file(job.output, ec)) {
      const auto size = std::filesystem::file_size(job.output, ec);
      if (!ec) held = size;
    }
  }
  bool fits() const {
    return free < 0 ||
           static_cast<double>(need) <= static_cast<double>(free) + static_cast<double>(held);
  }
  std::string free_text() const {
    return plan::human_bytes(static_cast<double>(free)) + " free on its file system" +
           (held > 0 ? " (plus the " + plan::human_bytes(static_cast<double>(held)) +
                           " the existing file takes)"
                     : std::string());
  }
};

// For --explain: "run file: PATH: about X when complete (estimate); Y free on its file system".
std::string space_line(const job::Job& job) {
  const Space s(job);
  std::string line = "run file: " + job.output + ": about " +
                     plan::human_bytes(static_cast<double>(s.need)) + " when complete (estimate); ";
  if (s.free < 0) return line + "free space on its file system unknown";
  line += s.free_text();
  if (!s.fits()) line += "; more than is free: freegap run will refuse it";
  return line;
}

// Refuses to start a run whose file would not fit, before anything is written.
void check_free_space(const job::Job& job) {
  const Space s(job);
  if (s.fits()) return;
  throw InputError("run file '" + job.output + "' needs about " +
                   plan::human_bytes(static_cast<double>(s.need)) +
                   " when complete (estimate), more than the " + s.free_text() +
                   "; free space there, write the run file elsewhere with -o, or pass "
                   "--ignore-free-space to run anyway");
}

/// The per-size pieces every rank needs: the trial runner and the observation settings.
struct Prepared {
  job::Job job;
  std::optional<study::Study> study;  // the job compiled: its runners, units and peak bytes
  std::vector<observe::ObserveConfig> configs;  // filled after the bin edges are known
  /// The job's estimators, opened in this rank (empty set without any). Shared so that the
  /// const Prepared handed around can still call them (a plug-in's helper process has state).
  std::shared_ptr<estimate::EstimatorSet> estimators = std::make_shared<estimate::EstimatorSet>();
};

std::string prefix(const job::Job& job, const std::string& key) {
  const int line = job.line_of(key);
  return job.path + ":" + (line > 0 ? std::to_string(line) + ":" : std::string()) + " " + key +
         ": ";
}

/// The deterministic pilot trial that fixes an automatic histogram range: trial index
/// 4294967295 (never a real trial) at the smallest size; its [min, max] widened by margin × width.
constexpr std::uint64_t kPilotTrial = 4294967295ULL;

std::vector<double> pilot_edges(const job::Job& job, const model::SizeRunner& smallest) {
  double lo = 0.0, hi = 0.0;
  try {
    std::tie(lo, hi) = smallest.pilot_range(job.seed, kPilotTrial);
  } catch (const NumericalError& e) {
    throw InputError(prefix(job, "observe.range") + "the pilot trial failed (" + e.what() +
                     "); give range = [low, high]");
  }
  double width = hi - lo;
  if (!(width > 0)) width = std::max(1.0, std::abs(hi));
  return observe::uniform_edges(lo - job.observe.margin * width, hi + job.observe.margin * width,
                                job.observe.bins);
}

observe::ObserveConfig config_for(const job::Job& job, std::size_t size_index,
                                  const std::vector<double>& edges,
                                  const model::SizeRunner& runner) {
  observe::ObserveConfig c;
  c.kind = runner.spectrum_kind();
  if (job.observe.extremes_only) {
    c.extremes_only = true;
    c.max_moment = 0;
    return c;
  }
  c.bin_edges = edges;
  c.max_moment = job.observe.max_moment;
  const std::int64_t keep = std::min(job.observe.keep_spectra, job.trials[size_index]);
  for (std::int64_t t = 0; t < keep; ++t) c.keep_spectrum_trials.push_back(static_cast<std::uint64_t>(t));
  return c;
}

store::RunHeader make_header(const Prepared& p, int threads) {
  store::RunHeader h;
  h.job_text = p.job.text;
  h.job_canonical = p.job.canonical();
  h.job_hash = p.job.hash();
  h.expression = p.job.expression;
  {
    std::error_code ec;
    const auto dir = std::filesystem::absolute(std::filesystem::path(p.job.path).parent_path(), ec);
    if (!ec) h.job_directory = dir.lexically_normal().string();
  }
  const auto& e = p.study->runners().front().expression();
  h.self_adjoint = e.self_adjoint();
  h.spectrum = p.study->runners().front().spectrum_kind();
  h.metadata["job_name"] = p.job.name.empty() ? std::string("(unnamed)") : p.job.name;
  h.metadata["seed"] = std::to_string(p.job.seed);
  // Which path computed the numbers (they differ between paths, so this is not provenance).
  h.metadata["path"] = p.study->path_names();
  h.metadata["path_choice"] = p.study->runners().front().path_choice();
  // Which samplers draw differently from format 1.3's (compared on resume like the path).
  std::string changes;
  for (const auto& r : p.study->runners()) {
    const std::string c = r.sampler_changes();
    if (c.empty() || changes.find(c) != std::string::npos) continue;
    changes += (changes.empty() ? "" : "; ") + c;
  }
  h.metadata["sampler_changes"] = changes;
  // LAPACK's blocked factorisations give different last bits with different BLAS thread counts
  // (measured: Haar QR at N = 400), so the count is part of what defines the numbers.
  h.metadata["blas_threads"] = std::to_string(threads);
  for (std::size_t i = 0; i < p.study->runners().size(); ++i) {
    store::SizeLayout s;
    s.n = p.job.sizes[i];
    s.trials = p.job.trials[i];
    s.trials_per_unit = p.job.trials_per_unit;
    s.observe = p.configs[i];
    h.sizes.push_back(std::move(s));
  }
  for (const auto& e : p.job.estimators) {
    for (std::size_t k = 0; k < e.estimates.size(); ++k) {
      h.estimates.push_back({e.name, e.estimates[k], e.truths[k]});
    }
  }
  return h;
}

std::vector<Unit> all_units(const job::Job& job) {
  std::vector<Unit> units;
  for (std::size_t i = 0; i < job.sizes.size(); ++i) {
    const std::int64_t t = job.trials[i], b = job.trials_per_unit;
    const double n = static_cast<double>(job.sizes[i]);
    for (std::int64_t u = 0; u * b < t; ++u) {
      Unit unit{i, u, u * b, std::min(t, (u + 1) * b), 0.0};
      // Dense work grows as N³ per trial (tridiagonal reduction, products, QR).
      unit.cost = n * n * n * static_cast<double>(unit.end_trial - unit.first_trial);
      units.push_back(unit);
    }
  }
  // Biggest first (longest-processing-time order); ties in a fixed order.
  std::stable_sort(units.begin(), units.end(), [](const Unit& a, const Unit& b) {
    if (a.cost != b.cost) return a.cost > b.cost;
    if (a.size_index != b.size_index) return a.size_index > b.size_index;
    return a.unit < b.unit;
  });
  return units;
}

/// Runs one unit's trials; returns false (dropping the unit) if a stop was requested before it
/// finished. `between_trials` lets rank 0 coordinate after every trial.
template <class Between>
bool compute_unit(const Prepared& p, const Unit& unit, int rank, UnitDone& done,
                  Between&& between_trials) {
  const auto start = std::chrono::steady_clock::now();
  std::chrono::steady_clock::duration coordinating{};
  done.size_index = unit.size_index;
  done.unit = unit.unit;
  done.rank = rank;
  done.obs = observe::start_observations(p.configs[unit.size_index]);
  const auto& runner = p.study->runners()[unit.size_index];
  auto& estimators = *p.estimators;
  std::vector<double> values;
  std::vector<std::string> reasons;
  // Estimators that read the matrix find it in the memory their plug-in helpers share.
  model::MatrixBuffer keep_matrix;
  if (estimators.wants_matrix()) {
    keep_matrix = [&estimators](std::size_t doubles) { return estimators.matrix_buffer(doubles); };
  }
  for (std::int64_t t = unit.first_trial; t < unit.end_trial; ++t) {
    if (stop_requested()) return false;
    const auto trial = static_cast<std::uint64_t>(t);
    if (estimators.empty()) {
      runner.observe_trial(done.obs, p.job.seed, trial);
    } else {
      // The same trial as SizeRunner::observe_trial's dense path, then every estimator on its spectrum.
      const model::TrialOutcome outcome = runner.run(p.job.seed, trial, keep_matrix);
      model::record(done.obs, outcome);
      if (outcome.failed) {
        estimators.fail_all("the trial failed: " + outcome.reason, values, reasons);
      } else {
        estimate::TrialInput input;
        input.n = runner.size();
        input.trial = trial;
        input.seed = p.job.seed;
        input.kind = runner.spectrum_kind();
        input.spectrum = {outcome.spectrum.data(), static_cast<std::size_t>(outcome.spectrum.size())};
        input.matrix = outcome.matrix;
        estimators.run(input, values, reasons);
        // A stop request cuts a waiting plug-in short and fails its estimate: the unit must
        // not be committed with that failure (a resume computes it again, bit for bit).
        if (stop_requested()) return false;
      }
      done.estimates.insert(done.estimates.end(), values.begin(), values.end());
      done.estimate_failures.insert(done.estimate_failures.end(), reasons.begin(), reasons.end());
    }
    const auto paused = std::chrono::steady_clock::now();
    between_trials();
    coordinating += std::chrono::steady_clock::now() - paused;
  }
  // The unit's own work: rank 0's coordination between its trials (writing other ranks' units)
  // is not what the unit costs, and counted in it made every prediction of the deadline logic as
  // slow as rank 0's busiest unit.
  done.seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - start - coordinating)
          .count();
  return true;
}

// ---- progress ----------------------------------------------------------------------------------

class Progress {
 public:
  Progress(std::ostream& err, std::size_t total_units, std::int64_t total_trials,
           std::size_t already_units, std::int64_t already_trials, double interval, bool quiet)
      : err_(err), total_units_(total_units), total_trials_(total_trials),
        done_units_(already_units), done_trials_(already_trials), start_trials_(already_trials),
        interval_(interval), quiet_(quiet), tty_(isatty(STDERR_FILENO) != 0),
        start_(std::chrono::steady_clock::now()), last_(start_) {}

  void unit_done(std::int64_t trials) {
    ++done_units_;
    done_trials_ += trials;
    maybe_print(false);
  }
  void tick() { maybe_print(false); }
  void finish() {
    maybe_print(true);
    if (tty_ && !quiet_) err_ << "\n";
  }

 private:
  void maybe_print(bool force) {
    if (quiet_) return;
    const auto now = std::chrono::steady_clock::now();
    const double since = std::chrono::duration<double>(now - last_).count();
    if (!force && since < (tty_ ? 0.5 : interval_)) return;
    last_ = now;
    const double elapsed = std::chrono::duration<double>(now - start_).count();
    const double rate = elapsed > 0 ? static_cast<double>(done_trials_ - start_trials_) / elapsed : 0;
    const double eta = rate > 0 ? static_cast<double>(total_trials_ - done_trials_) / rate : 0;
    char line[200];
    std::snprintf(line, sizeof line, "units %zu/%zu (%.0f%%), %.2f trials/s, ETA %s",
                  done_units_, total_units_,
                  total_units_ ? 100.0 * static_cast<double>(done_units_) / static_cast<double>(total_units_) : 100.0,
                  rate, rate > 0 ? human_seconds(eta).c_str() : "unknown");
    if (tty_) {
      err_ << "\r" << line << "   " << std::flush;
    } else {
      err_ << "freegap: " << line << "\n" << std::flush;
    }
  }

  std::ostream& err_;
  std::size_t total_units_;
  std::int64_t total_trials_;
  std::size_t done_units_;
  std::int64_t done_trials_, start_trials_;
  double interval_;
  bool quiet_, tty_;
  std::chrono::steady_clock::time_point start_, last_;
};

// ---- rank 0: coordinate, compute, write --------------------------------------------------------

/// Up to this many ranks rank 0 also computes. Beyond it, one rank's share of the work is at most
/// 1/17 ≈ 6%, while a rank-0 trial of the largest size delays every answer by up to one trial.
constexpr int kRankZeroComputesUpTo = 16;

struct WorkerState {
  bool finished = false;       // will send nothing more
  bool told_to_stop = false;   // has been answered "no more work"
  int outstanding = 0;         // units assigned and not returned
};

/// --stop-before and the scheduler's end time: rank 0 starts a unit only if, by the measured
/// durations, it would finish before the deadline. A unit's duration is predicted from the
/// measured seconds per cost (N³ × trials, the runner's cost model) of finished units of the
/// same size — this session's or, on resume, the earlier sessions' in /provenance — or else of
/// the nearest size with a measurement. Before any unit has been measured nothing can be
/// predicted and units are started. A rank's next unit starts when its current one ends.
///
/// The prediction is deliberately pessimistic (the slowest unit so far per cost), so a rank's
/// predicted end must be re-anchored to the real clock whenever one of its units arrives:
/// chaining predictions alone (a worker holds one unit ahead) added the over-estimate of every
/// unit to the next, and with many tiny units a run stopped at a fifth of its budget.
class Deadline {
 public:
  Deadline(const RunOptions& options, const job::Job& job, const store::RunFile& file, int ranks,
           std::chrono::steady_clock::time_point run_start)
      : sizes_(job.sizes),
        per_cost_(job.sizes.size(), 0.0),
        busy_until_(static_cast<std::size_t>(ranks), std::chrono::steady_clock::now()),
        queued_(static_cast<std::size_t>(ranks)) {
    const auto now = std::chrono::steady_clock::now();
    std::optional<double> left;
    if (options.stop_before_seconds > 0) {
      // Counted from the start of the run, so the set-up (pilot trial, file) counts too.
      left = options.stop_before_seconds - std::chrono::duration<double>(now - run_start).count();
    }
    if (options.scheduler_end_time > 0) {
      const double unix_now =
          std::chrono::duration<double>(std::chrono::system_clock::now().time_since_epoch()).count();
      const double to_end =
          static_cast<double>(options.scheduler_end_time) - unix_now - kSchedulerEndMarginSeconds;
      left = left ? std::min(*left, to_end) : to_end;
    }
    if (left) {
      deadline_ = now + std::chrono::duration_cast<std::chrono::steady_clock::duration>(
                            std::chrono::duration<double>(std::max(0.0, *left)));
    }
    if (!deadline_) return;
    for (const auto& u : file.read_provenance().units) {
      if (u.size_index >= sizes_.size() || !(u.seconds > 0)) continue;
      const std::int64_t b = job.trials_per_unit;
      const auto trials = std::min<std::int64_t>(b, job.trials[u.size_index] - u.unit * b);
      if (trials > 0) measured(u.size_index, trials, u.seconds);
    }
  }

  /// Records a finished unit's wall time.
  void measured(std::size_t size_index, std::int64_t trials, double seconds) {
    const double cost = cost_of(size_index, trials);
    if (cost > 0) per_cost_[size_index] = std::max(per_cost_[size_index], seconds / cost);
  }

  /// A unit of `rank` has arrived: the rank's next unit (if it holds one) started just now, so
  /// its predicted end is counted from now, not from the predicted end of the finished one.
  void finished(int rank) {
    if (!deadline_) return;
    auto& queue = queued_[static_cast<std::size_t>(rank)];
    if (!queue.empty()) queue.pop_front();
    double ahead = 0.0;
    for (const double s : queue) ahead += s;
    busy_until_[static_cast<std::size_t>(rank)] = std::chrono::steady_clock::now() + seconds(ahead);
  }

  /// Whether `unit` may go to `rank` now; if so, books the rank until its predicted end.
  /// `extra_seconds`: what the rank spends besides the unit's own work (rank 0's coordination).
  bool take(int rank, const Unit& unit, bool rank_busy, double extra_seconds = 0.0) {
    if (!deadline_) return true;
    const auto now = std::chrono::steady_clock::now();
    auto& busy = busy_until_[static_cast<std::size_t>(rank)];
    auto& queue = queued_[static_cast<std::size_t>(rank)];
    if (!rank_busy) queue.clear();  // nothing outstanding: the unit starts now
    const auto start = rank_busy ? std::max(now, busy) : now;
    const double rate = rate_for(unit.size_index);
    const double predicted = rate * unit.cost + (rate > 0 ? extra_seconds : 0.0);
    const auto end = start + seconds(predicted);
    if (rate > 0 && end > *deadline_) {
      reached_ = true;
      return false;
    }
    if (start >= *deadline_) {  // nothing measured yet, but the deadline has passed
      reached_ = true;
      return false;
    }
    busy = end;
    queue.push_back(predicted);
    return true;
  }

  bool reached() const { return reached_; }

 private:
  static std::chrono::steady_clock::duration seconds(double s) {
    return std::chrono::duration_cast<std::chrono::steady_clock::duration>(
        std::chrono::duration<double>(s));
  }
  double cost_of(std::size_t size_index, std::int64_t trials) const {
    const double n = static_cast<double>(sizes_[size_index]);
    return n * n * n * static_cast<double>(trials);
  }
  double rate_for(std::size_t size_index) const {
    if (per_cost_[size_index] > 0) return per_cost_[size_index];
    double best = 0.0;
    std::int64_t best_gap = 0;
    for (std::size_t j = 0; j < sizes_.size(); ++j) {
      if (!(per_cost_[j] > 0)) continue;
      const std::int64_t gap = std::abs(sizes_[j] - sizes_[size_index]);
      if (best == 0.0 || gap < best_gap) {
        best = per_cost_[j];
        best_gap = gap;
      }
    }
    return best;
  }

  std::vector<std::int64_t> sizes_;
  std::vector<double> per_cost_;  // seconds per unit of cost, the largest measured per size
  std::vector<std::chrono::steady_clock::time_point> busy_until_;
  std::vector<std::deque<double>> queued_;  // per rank: predicted seconds of its units in hand
  std::optional<std::chrono::steady_clock::time_point> deadline_;
  bool reached_ = false;
};

/// How many units and trials the job has in all, and how many of them are already committed.
struct Totals {
  std::size_t units = 0, done_units = 0;
  std::int64_t trials = 0, done_trials = 0;
};

Totals count_totals(const Prepared& p, const store::RunFile& file) {
  Totals t;
  for (std::size_t i = 0; i < p.job.sizes.size(); ++i) {
    const auto committed = file.committed(i);
    t.units += committed.size();
    t.trials += p.job.trials[i];
    for (std::size_t u = 0; u < committed.size(); ++u) {
      if (committed[u]) {
        ++t.done_units;
        t.done_trials += p.study->trials_in_unit(i, static_cast<std::int64_t>(u));
      }
    }
  }
  return t;
}

// The progress report of a run, starting from the units the run file already holds.
Progress progress_for(const Prepared& p, const store::RunFile& file, const RunOptions& options,
                      std::ostream& err) {
  const Totals t = count_totals(p, file);
  return Progress(err, t.units, t.trials, t.done_units, t.done_trials, options.progress_seconds,
                  options.quiet);
}

/// Rank 0's side of a run: hands the pending units out to the ranks that ask, services their
/// messages, writes every finished unit to the run file, and computes units itself if it may.
class Coordinator {
 public:
  Coordinator(Prepared& p, store::RunFile& file, std::vector<Unit> pending, MPI_Comm comm,
              const RunOptions& options, std::ostream& err, const std::vector<std::string>& hosts,
              std::chrono::steady_clock::time_point run_start)
      : p_(p),
        file_(file),
        pending_(std::move(pending)),
        comm_(comm),
        hosts_(hosts),
        ranks_(comm_size(comm)),
        workers_(static_cast<std::size_t>(ranks_)),
        deadline_(options, p.job, file, ranks_, run_start),
        progress_(progress_for(p, file, options, err)) {
    workers_[0].finished = true;  // rank 0 itself
  }

  int ranks() const { return ranks_; }

  /// Rank 0 computes units from the same queue, servicing the other ranks between its trials,
  /// until the queue is empty or the run stops.
  void compute_on_rank_zero() {
    // What rank 0 spends besides its units' own work (coordinating between its trials, writing),
    // the most of any of its units so far: its next unit takes that long on top of the prediction.
    double rank0_extra = 0.0;
    for (;;) {
      service(false);
      if (stopping_ || next_ >= pending_.size()) break;
      if (!deadline_.take(0, pending_[next_], false, rank0_extra)) {
        stopping_ = true;  // the next unit would not finish before the deadline
        break;
      }
      const Unit unit = pending_[next_++];
      UnitDone d;
      const auto began = std::chrono::steady_clock::now();
      if (!compute_unit(p_, unit, 0, d, [&] { service(false); })) {
        stopping_ = true;
        break;
      }
      write(d);
      const double wall =
          std::chrono::duration<double>(std::chrono::steady_clock::now() - began).count();
      rank0_extra = std::max(rank0_extra, wall - d.seconds);
    }
  }

  /// Services messages until every other rank will send nothing more.
  void wait_for_workers() {
    while (!std::all_of(workers_.begin(), workers_.end(),
                        [](const WorkerState& w) { return w.finished; })) {
      service(true);
    }
  }

  /// Ends the progress report; the run's exit status.
  int finish(bool& stopped_for_deadline) {
    progress_.finish();
    stopped_for_deadline = deadline_.reached();
    return (stopping_ && !file_.complete()) ? kExitResumable : kExitFinished;
  }

 private:
  // Writes a finished unit to the run file and counts it for the deadline and the progress.
  void write(const UnitDone& d) {
    store::UnitResult r;
    r.size_index = d.size_index;
    r.unit = d.unit;
    r.obs = d.obs;
    r.estimates = d.estimates;
    r.estimate_failures = d.estimate_failures;
    store::UnitProvenance where;
    where.rank = d.rank;
    where.host = hosts_[static_cast<std::size_t>(d.rank)];
    where.seconds = d.seconds;
    file_.write_unit(r, where);
    deadline_.measured(d.size_index, static_cast<std::int64_t>(d.obs.trials.size()), d.seconds);
    deadline_.finished(d.rank);
    progress_.unit_done(static_cast<std::int64_t>(d.obs.trials.size()));
  }

  // Answers a rank's request for work: its next unit, or {-1, -1} for "no more".
  void answer(int worker) {
    std::int64_t msg[2] = {-1, -1};
    auto& w = workers_[static_cast<std::size_t>(worker)];
    if (!stopping_ && next_ < pending_.size() &&
        !deadline_.take(worker, pending_[next_], w.outstanding > 0)) {
      stopping_ = true;  // the next unit would not finish before the deadline
    }
    if (!stopping_ && next_ < pending_.size()) {
      msg[0] = static_cast<std::int64_t>(pending_[next_].size_index);
      msg[1] = pending_[next_].unit;
      ++next_;
      ++w.outstanding;
    } else {
      w.told_to_stop = true;
    }
    MPI_Send(msg, 2, MPI_INT64_T, worker, kTagAssign, comm_);
    if (w.told_to_stop && w.outstanding == 0) w.finished = true;
  }

  // Handles every message that has arrived; with `block`, waits (polling) for at least one.
  void service(bool block) {
    for (;;) {
      if (stop_requested()) stopping_ = true;
      int flag = 0;
      MPI_Status st;
      MPI_Iprobe(MPI_ANY_SOURCE, MPI_ANY_TAG, comm_, &flag, &st);
      if (!flag) {
        if (!block) return;
        progress_.tick();
        std::this_thread::sleep_for(std::chrono::milliseconds(2));
        continue;
      }
      block = false;
      const int src = st.MPI_SOURCE;
      auto& w = workers_[static_cast<std::size_t>(src)];
      if (st.MPI_TAG == kTagRequest) {
        std::int32_t dummy = 0;
        MPI_Recv(&dummy, 1, MPI_INT32_T, src, kTagRequest, comm_, MPI_STATUS_IGNORE);
        answer(src);
      } else if (st.MPI_TAG == kTagResult) {
        int count = 0;
        MPI_Get_count(&st, MPI_CHAR, &count);
        std::vector<char> bytes(static_cast<std::size_t>(count));
        MPI_Recv(bytes.data(), count, MPI_CHAR, src, kTagResult, comm_, MPI_STATUS_IGNORE);
        const UnitDone d = unpack(bytes, p_.configs.at(
            static_cast<std::size_t>(*reinterpret_cast<const std::uint64_t*>(bytes.data()))));
        write(d);
        --w.outstanding;
        if (w.told_to_stop && w.outstanding == 0) w.finished = true;
      } else if (st.MPI_TAG == kTagStopped) {
        std::int32_t dummy = 0;
        MPI_Recv(&dummy, 1, MPI_INT32_T, src, kTagStopped, comm_, MPI_STATUS_IGNORE);
        stopping_ = true;
        w.finished = true;
      } else {
        throw Error("unexpected message tag " + std::to_string(st.MPI_TAG) + " from rank " +
                    std::to_string(src));
      }
    }
  }

  Prepared& p_;
  store::RunFile& file_;
  const std::vector<Unit> pending_;
  MPI_Comm comm_;
  const std::vector<std::string>& hosts_;
  const int ranks_;
  std::vector<WorkerState> workers_;
  std::size_t next_ = 0;
  bool stopping_ = false;
  Deadline deadline_;
  Progress progress_;
};

int coordinate(Prepared& p, store::RunFile& file, std::vector<Unit> pending, MPI_Comm comm,
               const RunOptions& options, std::ostream& err, const std::vector<std::string>& hosts,
               std::chrono::steady_clock::time_point run_start, bool& stopped_for_deadline) {
  Coordinator coordinator(p, file, std::move(pending), comm, options, err, hosts, run_start);
  // Rank 0 computes too — taking units from the same queue and coordinating between its trials —
  // as long as there are few ranks; with many, answering promptly matters more than its share of
  // the work (docs/scaling.md).
  const bool rank0_computes = coordinator.ranks() <= kRankZeroComputesUpTo;
  if (rank0_computes) coordinator.compute_on_rank_zero();
  coordinator.wait_for_workers();
  return coordinator.finish(stopped_for_deadline);
}

// ---- other ranks: compute ------------------------------------------------------------------------

void work(const Prepared& p, MPI_Comm comm) {
  const int me = comm_rank(comm);
  std::int64_t assign[2];
  MPI_Request req;
  auto ask = [&] {
    MPI_Irecv(assign, 2, MPI_INT64_T, 0, kTagAssign, comm, &req);
    std::int32_t zero = 0;
    MPI_Send(&zero, 1, MPI_INT32_T, 0, kTagRequest, comm);
  };
  auto wait_answer = [&] {
    int done = 0;
    while (!done) {
      MPI_Test(&req, &done, MPI_STATUS_IGNORE);
      if (!done) std::this_thread::sleep_for(std::chrono::milliseconds(2));
    }
  };
  ask();
  for (;;) {
    wait_answer();
    if (assign[0] < 0) return;  // no more work, or stopping
    Unit unit;
    unit.size_index = static_cast<std::size_t>(assign[0]);
    unit.unit = assign[1];
    const std::int64_t b = p.job.trials_per_unit;
    unit.first_trial = unit.unit * b;
    unit.end_trial = std::min(p.job.trials[unit.size_index], (unit.unit + 1) * b);
    ask();  // ask for the next unit now, so the answer waits for us
    UnitDone d;
    if (!compute_unit(p, unit, me, d, [] {})) {
      std::int32_t sig = g_stop_signal;
      MPI_Send(&sig, 1, MPI_INT32_T, 0, kTagStopped, comm);
      wait_answer();  // every request gets exactly one answer; take it and leave
      return;
    }
    const auto bytes = pack(d);
    MPI_Send(bytes.data(), static_cast<int>(bytes.size()), MPI_CHAR, 0, kTagResult, comm);
  }
}

// ---- run_job's steps ---------------------------------------------------------------------------

/// The code every rank agrees on (agree()), its message printed once by rank 0; 0 if none failed.
int agreed_failure(int code, const std::string& message, int me, MPI_Comm comm,
                   std::ostream& err) {
  auto [c, m] = agree(code, message, comm);
  if (c != 0 && me == 0) err << "freegap: " << m << "\n";
  return c;
}

/// Rank 0 reads the job file's text; a failure sets `code` and `message` for agree().
void read_job_text(const std::string& job_path, std::string& text, int& code,
                   std::string& message) {
  std::ifstream in(job_path);
  if (!in) {
    code = kExitBadInput;
    message = "cannot read job file '" + job_path + "': " + std::strerror(errno);
  } else {
    std::ostringstream ss;
    ss << in.rdbuf();
    text = ss.str();
  }
}


/// Parses the job text and builds its runners and estimators in this rank.
void prepare_job(Prepared& p, const std::string& text, const std::string& job_path,
                 const RunOptions& options) {
  p.job = job::parse_job(text, job_path, true,
                         options.confine ? job::Paths::confined : job::Paths::anywhere);
  if (!options.output.empty()) p.job.output = options.output;
  p.study.emplace(p.job);
  // Opens and checks every estimator (a library is loaded and described by its helper
  // process, never here: entry points, ABI version, declared names; commands on PATH) on
  // every rank, before anything is written.
  p.estimators = std::make_shared<estimate::EstimatorSet>(p.job);
  p.estimators->set_stop_check([] { return stop_requested(); });
  p.study->check_threads(options.threads);
}

/// prepare_job, its failure as a code and message for agree() ({0, ""} if it succeeds).
std::pair<int, std::string> prepare_job_or_fail(Prepared& p, const std::string& text,
                                                const std::string& job_path,
                                                const RunOptions& options) {
  try {
    prepare_job(p, text, job_path, options);
  } catch (const InputError& e) {
    return {kExitBadInput, e.what()};
  } catch (const Stopped& e) {
    // A signal during validation (freegap/stop.hpp): nothing is written yet, so running the
    // same command again starts the run.
    return {kExitResumable, e.what()};
  } catch (const Error& e) {
    // Not the input's fault (e.g. the plug-in helper program cannot be started): every rank
    // stops the same way, before anything is written.
    return {kExitFailure, e.what()};
  }
  return {0, {}};
}

/// The refusal of the first size whose estimated peak memory does not fit a rank, as a code and
/// message for agree() ({0, ""} if every size fits).
std::pair<int, std::string> check_memory(const Prepared& p, MPI_Comm comm) {
  std::size_t limit = static_cast<std::size_t>(p.job.memory_per_rank_bytes);
  std::string source = "memory_per_rank in the job";
  if (limit == 0) {
    const int local = ranks_on_this_node(comm);
    limit = available_memory_bytes() / static_cast<std::size_t>(std::max(1, local));
    source = "this node's available memory shared by " + std::to_string(local) + " rank(s)";
  }
  std::string msg;
  int c = 0;
  for (const auto& r : p.study->runners()) {
    const auto need = study::peak_bytes(r, p.estimators->wants_matrix());
    if (limit > 0 && need > limit) {
      c = kExitBadInput;
      msg = prefix(p.job, "sizes") + "N = " + std::to_string(r.size()) + " needs about " +
            human_bytes(static_cast<double>(need)) + " per rank (estimate), more than the " +
            human_bytes(static_cast<double>(limit)) + " from " + source +
            "; remove the size, run fewer ranks per node, or raise memory_per_rank";
      break;
    }
  }
  return {c, msg};
}

/// --explain: each size's evaluation plan, trials and peak memory, then the run file's size.
void print_explanation(const Prepared& p, std::ostream& out) {
  for (std::size_t i = 0; i < p.study->runners().size(); ++i) {
    out << p.study->runners()[i].explain();
    out << "why the path: " << p.study->path_reason(i) << "\n";
    out << "trials: " << p.job.trials[i] << " in units of " << p.job.trials_per_unit
        << "; estimated peak per rank: "
        << human_bytes(static_cast<double>(
               p.study->peak_bytes(i, p.estimators->wants_matrix())))
        << "\n\n";
  }
  out << space_line(p.job) << "\n";
}

/// Rank 0: the bin edges of the run file at `path` that this run resumes, once the BLAS thread
/// count it was written with is checked against this run's.
std::vector<double> resumed_edges(const Prepared& p, const std::string& path,
                                  const std::string& threads) {
  // Read-only first: the bin edges of a resumed run are the file's (an automatic range was
  // fixed by the first session's pilot trial), and the BLAS thread count must match before
  // the file is opened for writing.
  const store::RunHeader found = store::read_header_for_resume(path);
  const auto it = found.metadata.find("blas_threads");
  if (found.job_hash == p.job.hash() && it != found.metadata.end() &&
      it->second != threads) {
    throw InputError("run file '" + path + "' was written with " + it->second +
                     " BLAS thread(s) per rank and this run asks for " + threads +
                     "; the last bits of the results depend on it, so resume with --threads " +
                     it->second + " or start over with --fresh");
  }
  return found.sizes.empty() ? std::vector<double>{} : found.sizes.front().observe.bin_edges;
}

/// Rank 0: opens the run file to resume it or creates it (--fresh deletes it first), fixing the
/// bin edges.
void open_run_file(Prepared& p, const RunOptions& options, std::vector<double>& edges,
                   std::optional<store::RunFile>& file) {
  namespace fs = std::filesystem;
  const std::string& path = p.job.output;
  if (!options.ignore_free_space) check_free_space(p.job);
  if (options.fresh) {
    store::check_replaceable(path);  // never delete anything but a run file
    fs::remove(path);
  }
  const bool resume = fs::exists(path) || fs::is_symlink(path);
  const std::string threads = std::to_string(options.threads);
  if (resume) {
    edges = resumed_edges(p, path, threads);
  } else if (p.job.observe.extremes_only) {
    edges.clear();  // no histogram, so no pilot trial
  } else {
    edges = p.job.observe.auto_range
                ? pilot_edges(p.job, p.study->runners().front())
                : observe::uniform_edges(p.job.observe.low, p.job.observe.high, p.job.observe.bins);
  }
  if (edges.size() < 2 && !p.job.observe.extremes_only) {
    edges = observe::uniform_edges(0.0, 1.0, 1);  // refused below anyway
  }
  for (std::size_t i = 0; i < p.study->runners().size(); ++i) {
    p.configs.push_back(config_for(p.job, i, edges, p.study->runners()[i]));
  }
  file.emplace(resume ? store::RunFile::open_for_resume(path, make_header(p, options.threads))
                      : store::RunFile::create(path, make_header(p, options.threads)));
}

/// Every rank learns rank 0's bin edges and builds its observation settings from them.
void share_edges(Prepared& p, std::vector<double>& edges, MPI_Comm comm) {
  long long ne = static_cast<long long>(edges.size());
  MPI_Bcast(&ne, 1, MPI_LONG_LONG, 0, comm);
  edges.resize(static_cast<std::size_t>(ne));
  MPI_Bcast(edges.data(), static_cast<int>(ne), MPI_DOUBLE, 0, comm);
  p.configs.clear();
  for (std::size_t i = 0; i < p.study->runners().size(); ++i) {
    p.configs.push_back(config_for(p.job, i, edges, p.study->runners()[i]));
  }
}

/// Every rank's host name, known to every rank (each rank broadcasts its own in turn).
std::vector<std::string> share_host_names(int ranks, MPI_Comm comm) {
  std::vector<std::string> hosts(static_cast<std::size_t>(ranks));
  std::string mine = host_name();
  for (int r = 0; r < ranks; ++r) {
    std::string h = mine;
    long long n = static_cast<long long>(h.size());
    MPI_Bcast(&n, 1, MPI_LONG_LONG, r, comm);
    h.resize(static_cast<std::size_t>(n));
    MPI_Bcast(h.data(), static_cast<int>(n), MPI_CHAR, r, comm);
    hosts[static_cast<std::size_t>(r)] = h;
  }
  return hosts;
}

/// Rank 0: runs this session over the units not yet committed and says how it ended; the run's
/// exit status. A failure here aborts every rank.
int run_session(Prepared& p, store::RunFile& file, const RunOptions& options, MPI_Comm comm,
                int ranks, const std::vector<std::string>& hosts,
                std::chrono::steady_clock::time_point run_start, std::ostream& out,
                std::ostream& err) {
  int status = kExitFinished;
  try {
    std::vector<Unit> pending;
    std::vector<std::vector<bool>> committed;
    for (std::size_t i = 0; i < p.study->runners().size(); ++i) {
      committed.push_back(file.committed(i));
    }
    for (const auto& u : all_units(p.job)) {
      if (!committed[u.size_index][static_cast<std::size_t>(u.unit)]) pending.push_back(u);
    }
    file.begin_session(ranks, hosts);
    bool stopped_for_deadline = false;
    status = coordinate(p, file, pending, comm, options, err, hosts, run_start,
                        stopped_for_deadline);
    file.end_session(status == kExitFinished ? "finished" : "interrupted");
    if (status == kExitResumable && stopped_for_deadline && g_stop_signal == 0) {
      err << "freegap: stopped before the deadline: the next unit would not finish in time; "
             "committed units are in '"
          << p.job.output << "'; run the same command again to resume\n";
    } else if (status == kExitResumable) {
      err << "freegap: stopped by signal " << static_cast<int>(g_stop_signal)
          << "; committed units are in '" << p.job.output
          << "'; run the same command again to resume\n";
    } else if (!options.quiet) {
      out << "freegap: run complete: " << p.job.output << "\n";
    }
  } catch (const std::exception& e) {
    err << "freegap: " << e.what() << "\n";
    MPI_Abort(comm, kExitFailure);
  }
  return status;
}

}  // namespace

int run_job(const std::string& job_path, const RunOptions& options, MPI_Comm comm,
            std::ostream& out, std::ostream& err) {
  const auto run_start = std::chrono::steady_clock::now();
  const int me = comm_rank(comm);
  const int ranks = comm_size(comm);
  install_signal_handlers();
  openblas_set_num_threads(std::max(1, options.threads));

  // 1. Every rank parses the same job text (rank 0 reads it) and builds the same runners.
  Prepared p;
  std::string text, message;
  int code = 0;
  if (me == 0) read_job_text(job_path, text, code, message);
  if (const int c = agreed_failure(code, message, me, comm, err); c != 0) return c;
  broadcast_string(text, comm);
  std::tie(code, message) = prepare_job_or_fail(p, text, job_path, options);
  if (const int c = agreed_failure(code, message, me, comm, err); c != 0) return c;

  // 2. Memory: refuse a size whose estimated peak does not fit a rank, before any work.
  {
    const auto [c, msg] = check_memory(p, comm);
    if (const int cc = agreed_failure(c, msg, me, comm, err); cc != 0) return cc;
  }

  if (options.explain) {
    if (me == 0) print_explanation(p, out);
    return kExitFinished;
  }

  // 3. Rank 0 opens or creates the run file and fixes the bin edges; everyone learns the edges
  //    and which units are still to do.
  std::optional<store::RunFile> file;
  std::vector<double> edges;
  code = 0;
  message.clear();
  if (me == 0) {
    try {
      open_run_file(p, options, edges, file);
    } catch (const InputError& e) {
      code = kExitBadInput;
      message = e.what();
    } catch (const std::exception& e) {
      code = kExitFailure;
      message = e.what();
    }
  }
  if (const int c = agreed_failure(code, message, me, comm, err); c != 0) return c;
  // The run file is accepted: from now on plug-ins' output goes to the log beside it.
  p.estimators->log_plugin_output_to(estimate::plugin_log_path(p.job.output));
  share_edges(p, edges, comm);
  const std::vector<std::string> hosts = share_host_names(ranks, comm);

  int status = kExitFinished;
  if (me == 0) {
    status = run_session(p, *file, options, comm, ranks, hosts, run_start, out, err);
  } else {
    work(p, comm);
  }
  MPI_Bcast(&status, 1, MPI_INT, 0, comm);
  return status;
}

int run_job_in_world(int& argc, char**& argv, const std::string& job_path,
                     const RunOptions& options, std::ostream& out, std::ostream& err) {
  // A plain process without a launcher is a singleton MPI job of one rank. Open MPI then
  // spends ~0.2 s probing network transports it cannot use; the shared-memory layer is
  // enough for one process (measured: MPI_Init 0.28 s → 0.08 s). Only when no launcher is
  // present, and only if the user has not chosen.
  const bool launched = std::getenv("OMPI_COMM_WORLD_SIZE") || std::getenv("PMIX_RANK") ||
                        std::getenv("PMI_RANK") || std::getenv("SLURM_PROCID");
  if (!launched) setenv("OMPI_MCA_pml", "ob1", 0);
  int provided = 0;
  MPI_Init_thread(&argc, &argv, MPI_THREAD_FUNNELED, &provided);
  int status = kExitFailure;
  try {
    status = run_job(job_path, options, MPI_COMM_WORLD, out, err);
  } catch (const std::exception& e) {
    err << "freegap: " << e.what() << "\n";
    MPI_Abort(MPI_COMM_WORLD, kExitFailure);
  }
  MPI_Finalize();
  return status;
}

}  // namespace freegap::run
