// Planning a job before it runs (see include/freegap/plan.hpp).
#include "freegap/plan.hpp"
#include "freegap/text.hpp"

#include <toml++/toml.h>
#include <malloc.h>
#include <sys/wait.h>
#include <unistd.h>

#include <Eigen/Dense>
#include <algorithm>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <ctime>
#include <filesystem>
#include <fstream>
#include <functional>
#include <iostream>
#include <limits>
#include <numeric>
#include <queue>
#include <sstream>
#include <thread>

#include "freegap/declarations.hpp"
#include "freegap/errors.hpp"
#include "freegap/estimate.hpp"
#include "freegap/linalg.hpp"
#include "freegap/model.hpp"
#include "freegap/study.hpp"
#include "freegap/version.hpp"

extern "C" void openblas_set_num_threads(int);
extern "C" int openblas_get_num_threads(void);

namespace freegap::plan {

namespace {

double seconds_since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

[[noreturn]] void bad_duration(std::string_view text, const std::string& rule) {
  throw InputError(std::string(text) + ": " + rule + "; write e.g. 90s, 10m or 1h30m");
}

std::string number(double v, const char* fmt = "%.3g") {
  char buf[64];
  std::snprintf(buf, sizeof buf, fmt, v);
  return buf;
}

using text::utc_now;

int online_cores() {
  const long n = sysconf(_SC_NPROCESSORS_ONLN);
  return n > 0 ? static_cast<int>(n) : 1;
}

/// Trial indices the planner times: far from any real trial and from the runner's pilot trial
/// (4294967295); the numbers are thrown away.
constexpr std::uint64_t kTimingTrialBase = 4000000000ULL;

// The first line of every calibration file: what proves the file may be read and replaced.
constexpr const char* kCalibrationHeader = "# freegap plan:";

}  // namespace

// MemAvailable from /proc/meminfo (Linux), 0 if unknown.
std::size_t available_memory_bytes() {
  std::ifstream in("/proc/meminfo");
  std::string key, unit;
  std::size_t value = 0;
  while (in >> key >> value >> unit) {
    if (key == "MemAvailable:") return value * 1024;
  }
  return 0;
}

std::string human_bytes(double b) {
  const char* units[] = {"B", "KiB", "MiB", "GiB", "TiB", "PiB"};
  int i = 0;
  while (b >= 1024.0 && i < 5) {
    b /= 1024.0;
    ++i;
  }
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.1f %s", b, units[i]);
  return buf;
}

// ---- durations --------------------------------------------------------------------------------

double parse_duration(std::string_view text) {
  if (text.empty()) bad_duration(text, "no duration given");
  double total = 0.0;
  std::size_t i = 0;
  const std::string units = "dhms";
  std::size_t last_unit = std::string::npos;  // index into units of the previous unit
  bool any = false;
  while (i < text.size()) {
    std::size_t j = i;
    while (j < text.size() && (std::isdigit(static_cast<unsigned char>(text[j])) || text[j] == '.'))
      ++j;
    if (j == i) bad_duration(text, "expected a number at character " + std::to_string(i + 1));
    const std::string digits(text.substr(i, j - i));
    double v = 0.0;
    try {
      std::size_t used = 0;
      v = std::stod(digits, &used);
      if (used != digits.size()) throw std::invalid_argument(digits);
    } catch (const std::exception&) {
      bad_duration(text, "'" + digits + "' is not a number");
    }
    if (j == text.size()) {
      if (any) bad_duration(text, "the last number has no unit");
      total = v;  // plain seconds
      any = true;
      break;
    }
    const auto u = units.find(static_cast<char>(std::tolower(static_cast<unsigned char>(text[j]))));
    if (u == std::string::npos) {
      bad_duration(text, "unknown unit '" + std::string(1, text[j]) + "' (use d, h, m, s)");
    }
    if (last_unit != std::string::npos && u <= last_unit) {
      bad_duration(text, "units must come in the order d, h, m, s, each at most once");
    }
    last_unit = u;
    static const double scale[] = {86400.0, 3600.0, 60.0, 1.0};
    total += v * scale[u];
    any = true;
    i = j + 1;
  }
  if (!(total > 0) || !std::isfinite(total)) bad_duration(text, "must be positive");
  return total;
}

std::string format_duration(double seconds) {
  char buf[48];
  const auto s = static_cast<long long>(std::ceil(std::max(0.0, seconds)));
  if (seconds < 60) {
    std::snprintf(buf, sizeof buf, "%.3gs", std::max(0.0, seconds));
  } else if (s < 3600) {
    std::snprintf(buf, sizeof buf, "%lldm%02llds", s / 60, s % 60);
  } else if (s < 86400) {
    const long long minutes = (s + 59) / 60;
    std::snprintf(buf, sizeof buf, "%lldh%02lldm", minutes / 60, minutes % 60);
  } else {
    std::snprintf(buf, sizeof buf, "%lldd%02lldh", s / 86400, (s % 86400) / 3600);
  }
  return buf;
}

std::string slurm_time(double seconds) {
  const auto minutes = static_cast<long long>(std::max(1.0, std::ceil(seconds / 60.0)));
  char buf[48];
  if (minutes < 60) {
    std::snprintf(buf, sizeof buf, "%lld:00", minutes);
  } else if (minutes < 1440) {
    std::snprintf(buf, sizeof buf, "%lld:%02lld:00", minutes / 60, minutes % 60);
  } else {
    std::snprintf(buf, sizeof buf, "%lld-%02lld:%02lld:00", minutes / 1440, (minutes % 1440) / 60,
                  minutes % 60);
  }
  return buf;
}

// ---- the cost fit -------------------------------------------------------------------------------

double CostFit::predict_bytes(std::int64_t n) const {
  if (trial_bytes.size() != sizes.size() || trial_bytes.empty()) return 0.0;
  // Relative least squares wants positive data: a trial that allocated nothing counts as 1 byte.
  std::vector<double> bytes;
  for (double b : trial_bytes) bytes.push_back(std::max(b, 1.0));
  return fit_cost({2, 0}, sizes, bytes).predict(n);
}

double CostFit::predict(std::int64_t n) const {
  double t = 0.0;
  for (std::size_t k = 0; k < powers.size(); ++k) {
    t += coefficients[k] * std::pow(static_cast<double>(n), powers[k]);
  }
  return t;
}

std::string CostFit::formula() const {
  std::string out;
  for (std::size_t k = 0; k < powers.size(); ++k) {
    if (coefficients[k] == 0.0) continue;
    if (!out.empty()) out += " + ";
    out += number(coefficients[k], "%.3g");
    if (powers[k] == 1) out += "·N";
    if (powers[k] > 1) out += "·N^" + std::to_string(powers[k]);
  }
  return (out.empty() ? std::string("0") : out) + " s";
}

CostFit fit_cost(const std::vector<int>& powers, const std::vector<std::int64_t>& sizes,
                 const std::vector<double>& seconds) {
  if (sizes.empty() || sizes.size() != seconds.size() || powers.empty()) {
    throw InputError("cost fit: needs as many timings as sizes, at least one");
  }
  const std::size_t m = sizes.size(), p = powers.size();
  CostFit best;
  best.powers = powers;
  best.coefficients.assign(p, 0.0);
  best.sizes = sizes;
  best.seconds = seconds;
  double best_residual = INFINITY;
  // Every non-empty subset of the basis (at most 2^3 here): the unconstrained weighted fit on the
  // subset, kept if all its coefficients are ≥ 0; the smallest residual wins. With so few columns
  // this is exactly non-negative least squares.
  for (unsigned mask = 1; mask < (1u << p); ++mask) {
    std::vector<std::size_t> cols;
    for (std::size_t k = 0; k < p; ++k) {
      if (mask & (1u << k)) cols.push_back(k);
    }
    if (cols.size() > m) continue;
    Eigen::MatrixXd a(static_cast<Eigen::Index>(m), static_cast<Eigen::Index>(cols.size()));
    Eigen::VectorXd b(static_cast<Eigen::Index>(m));
    for (std::size_t i = 0; i < m; ++i) {
      const double w = 1.0 / seconds[i];
      for (std::size_t c = 0; c < cols.size(); ++c) {
        a(static_cast<Eigen::Index>(i), static_cast<Eigen::Index>(c)) =
            w * std::pow(static_cast<double>(sizes[i]), powers[cols[c]]);
      }
      b(static_cast<Eigen::Index>(i)) = 1.0;
    }
    const Eigen::VectorXd x = a.colPivHouseholderQr().solve(b);
    if ((x.array() < 0).any() || !x.allFinite()) continue;
    const double r = (a * x - b).squaredNorm();
    if (r < best_residual) {
      best_residual = r;
      best.coefficients.assign(p, 0.0);
      for (std::size_t c = 0; c < cols.size(); ++c)
        best.coefficients[cols[c]] = x(static_cast<Eigen::Index>(c));
    }
  }
  return best;
}

namespace {

// The terms fitted on the first `count` sizes only, summed into one polynomial.
CostFit combine_terms(const std::vector<CostTerm>& measured, const std::vector<std::int64_t>& sizes,
                      std::size_t count) {
  CostFit out;
  out.sizes.assign(sizes.begin(), sizes.begin() + static_cast<std::ptrdiff_t>(count));
  out.seconds.assign(count, 0.0);
  for (const CostTerm& term : measured) {
    const std::vector<double> seconds(term.seconds.begin(),
                                      term.seconds.begin() + static_cast<std::ptrdiff_t>(count));
    const CostFit f = fit_cost(term.powers, out.sizes, seconds);
    out.terms.push_back({term.name, f.powers, f.coefficients, seconds});
    for (std::size_t i = 0; i < count; ++i) out.seconds[i] += seconds[i];
    for (std::size_t k = 0; k < f.powers.size(); ++k) {
      const auto at = std::find(out.powers.begin(), out.powers.end(), f.powers[k]);
      if (at == out.powers.end()) {
        out.powers.push_back(f.powers[k]);
        out.coefficients.push_back(f.coefficients[k]);
      } else {
        out.coefficients[static_cast<std::size_t>(at - out.powers.begin())] += f.coefficients[k];
      }
    }
  }
  // Highest power first, as formula() prints it.
  std::vector<std::size_t> order(out.powers.size());
  for (std::size_t k = 0; k < order.size(); ++k) order[k] = k;
  std::sort(order.begin(), order.end(),
            [&](std::size_t a, std::size_t b) { return out.powers[a] > out.powers[b]; });
  std::vector<int> powers;
  std::vector<double> coefficients;
  for (const auto k : order) {
    powers.push_back(out.powers[k]);
    coefficients.push_back(out.coefficients[k]);
  }
  out.powers = powers;
  out.coefficients = coefficients;
  return out;
}

}  // namespace

CostFit fit_terms(const std::vector<CostTerm>& measured, const std::vector<std::int64_t>& sizes) {
  if (measured.empty()) throw InputError("cost fit: no terms");
  CostFit out = combine_terms(measured, sizes, sizes.size());
  for (std::size_t i = 0; i < sizes.size(); ++i) {
    out.fit_error =
        std::max(out.fit_error, std::abs(out.predict(sizes[i]) - out.seconds[i]) / out.seconds[i]);
  }
  // How far one step of extrapolation goes wrong: the largest size predicted from the others,
  // once there are more of them than the widest term has coefficients.
  std::size_t widest = 0;
  for (const auto& t : measured) widest = std::max(widest, t.powers.size());
  if (sizes.size() >= widest + 2) {
    const CostFit smaller = combine_terms(measured, sizes, sizes.size() - 1);
    out.step_error =
        std::abs(smaller.predict(sizes.back()) - out.seconds.back()) / out.seconds.back();
  }
  return out;
}

// ---- the machine and the calibration file ------------------------------------------------------

std::string Machine::key() const {
  return "cpu=" + cpu + "; cores=" + std::to_string(cores) + "; blas=" + blas +
         "; freegap=" + freegap;
}

Machine this_machine() {
  Machine m;
  std::ifstream in("/proc/cpuinfo");
  std::string line;
  while (std::getline(in, line)) {
    if (line.rfind("model name", 0) == 0) {
      const auto colon = line.find(':');
      if (colon != std::string::npos) m.cpu = line.substr(line.find_first_not_of(" \t", colon + 1));
      break;
    }
  }
  if (m.cpu.empty()) m.cpu = "unknown";
  m.cores = online_cores();
  m.blas = linalg::blas_description();
  // OpenBLAS picks its kernel by CPU unless told (OPENBLAS_CORETYPE; docs/building.md pitfall 4).
  if (const char* core = std::getenv("OPENBLAS_CORETYPE"))
    m.blas += " OPENBLAS_CORETYPE=" + std::string(core);
  m.freegap = std::string(tool_version) + " (" + git_revision + ")";
  return m;
}

std::string default_calibration_path() {
  if (const char* p = std::getenv("FREEGAP_CALIBRATION"); p && *p) return p;
  if (const char* x = std::getenv("XDG_CACHE_HOME"); x && *x) {
    return std::string(x) + "/freegap/calibration.toml";
  }
  if (const char* h = std::getenv("HOME"); h && *h)
    return std::string(h) + "/.cache/freegap/calibration.toml";
  return ".freegap-calibration.toml";
}

Calibration Calibration::load(const std::string& path, const Machine& machine) {
  Calibration c;
  c.path_ = path;
  c.machine_ = machine;
  if (!std::filesystem::exists(path)) return c;
  {
    // Only a file that starts as save() writes it is ours to read and replace.
    std::ifstream in(path);
    std::string first;
    if (!std::getline(in, first) || first.rfind(kCalibrationHeader, 0) != 0) {
      c.foreign_ = true;
      return c;
    }
  }
  toml::table t;
  try {
    t = toml::parse_file(path);
  } catch (const toml::parse_error&) {
    c.stale_ = true;  // unreadable: measure again and replace it
    return c;
  }
  if (t["machine"].value_or(std::string()) != machine.key()) {
    c.stale_ = true;
    return c;
  }
  if (const auto* costs = t["cost"].as_array()) {
    for (const auto& node : *costs) {
      const auto* e = node.as_table();
      if (!e) continue;
      Entry entry;
      entry.key = (*e)["key"].value_or(std::string());
      entry.description = (*e)["description"].value_or(std::string());
      auto ints = [&](const char* k, auto& out) {
        if (const auto* a = (*e)[k].as_array()) {
          for (const auto& v : *a)
            out.push_back(static_cast<std::decay_t<decltype(out[0])>>(v.value_or(0.0)));
        }
      };
      ints("powers", entry.fit.powers);
      ints("coefficients", entry.fit.coefficients);
      ints("sizes", entry.fit.sizes);
      ints("seconds", entry.fit.seconds);
      ints("trial_bytes", entry.fit.trial_bytes);
      entry.fit.fit_error = (*e)["fit_error"].value_or(0.0);
      entry.fit.step_error = (*e)["step_error"].value_or(-1.0);
      if (const auto* terms = (*e)["terms"].as_array()) {
        for (const auto& tn : *terms) {
          const auto* tt = tn.as_table();
          if (!tt) continue;
          CostTerm term;
          term.name = (*tt)["name"].value_or(std::string());
          const auto numbers = [&](const char* k, auto& out) {
            if (const auto* a = (*tt)[k].as_array()) {
              for (const auto& v : *a)
                out.push_back(static_cast<std::decay_t<decltype(out[0])>>(v.value_or(0.0)));
            }
          };
          numbers("powers", term.powers);
          numbers("coefficients", term.coefficients);
          numbers("seconds", term.seconds);
          entry.fit.terms.push_back(std::move(term));
        }
      }
      if (entry.key.empty() || entry.fit.powers.empty() ||
          entry.fit.powers.size() != entry.fit.coefficients.size()) {
        continue;
      }
      c.entries_.push_back(std::move(entry));
    }
  }
  return c;
}

const CostFit* Calibration::find(const std::string& key) const {
  for (const auto& e : entries_) {
    if (e.key == key) return &e.fit;
  }
  return nullptr;
}

void Calibration::put(const std::string& key, const std::string& description, const CostFit& fit) {
  for (auto& e : entries_) {
    if (e.key == key) {
      e.description = description;
      e.fit = fit;
      return;
    }
  }
  entries_.push_back({key, description, fit});
}

void Calibration::save() const {
  namespace fs = std::filesystem;
  const fs::path p(path_);
  if (foreign_) {
    throw Error("'" + path_ + "' is not a calibration file of freegap plan, so it is not "
                "replaced; name another with --calibration or FREEGAP_CALIBRATION");
  }
  std::error_code ec;
  if (p.has_parent_path()) fs::create_directories(p.parent_path(), ec);
  toml::table t;
  t.insert("machine", machine_.key());
  t.insert("written", utc_now());
  toml::array costs;
  for (const auto& e : entries_) {
    toml::table row;
    row.insert("key", e.key);
    row.insert("description", e.description);
    toml::array powers, coefficients, sizes, seconds;
    for (auto v : e.fit.powers) powers.push_back(static_cast<std::int64_t>(v));
    for (auto v : e.fit.coefficients) coefficients.push_back(v);
    for (auto v : e.fit.sizes) sizes.push_back(static_cast<std::int64_t>(v));
    for (auto v : e.fit.seconds) seconds.push_back(v);
    row.insert("powers", powers);
    row.insert("coefficients", coefficients);
    row.insert("sizes", sizes);
    row.insert("seconds", seconds);
    toml::array bytes;
    for (auto v : e.fit.trial_bytes) bytes.push_back(v);
    row.insert("trial_bytes", bytes);
    row.insert("fit_error", e.fit.fit_error);
    row.insert("step_error", e.fit.step_error);
    toml::array terms;
    for (const auto& term : e.fit.terms) {
      toml::table tt;
      toml::array tp, tc, ts;
      for (auto v : term.powers) tp.push_back(static_cast<std::int64_t>(v));
      for (auto v : term.coefficients) tc.push_back(v);
      for (auto v : term.seconds) ts.push_back(v);
      tt.insert("name", term.name);
      tt.insert("powers", tp);
      tt.insert("coefficients", tc);
      tt.insert("seconds", ts);
      terms.push_back(std::move(tt));
    }
    row.insert("terms", std::move(terms));
    costs.push_back(std::move(row));
  }
  t.insert("cost", std::move(costs));
  const std::string tmp = path_ + ".tmp." + std::to_string(getpid());
  {
    std::ofstream out(tmp);
    if (!out) throw Error("cannot write the calibration file '" + tmp + "'");
    out << kCalibrationHeader << " seconds per trial measured on this machine, one entry per model and\n"
           "# BLAS thread count. Replaced when the machine changes; delete it to measure again.\n";
    out << t << "\n";
    if (!out) throw Error("cannot write the calibration file '" + tmp + "'");
  }
  fs::rename(tmp, p, ec);
  if (ec) {
    fs::remove(tmp);
    throw Error("cannot write the calibration file '" + path_ + "': " + ec.message());
  }
}

std::string cost_key(const job::Job& job, int threads) {
  // The canonical job with the seed, sizes and trials neutralised: what is left defines the work
  // of one trial (matrices, expression, observations, force_dense).
  job::Job j = job;
  j.seed = 0;
  j.sizes = {1};
  j.trials = {1};
  j.trials_per_unit = 1;
  // Whether spectra are kept changes a trial's work (tridiagonal path); how many does not.
  j.observe.keep_spectra = job.observe.keep_spectra > 0 ? 1 : 0;
  return job::sha256_hex(j.canonical() + "\nblas_threads=" + std::to_string(threads));
}

// ---- measuring ---------------------------------------------------------------------------------

namespace {

// A /proc/self/status field in bytes (VmRSS, VmHWM); -1 when it cannot be read.
double status_bytes(const char* field) {
  std::ifstream in("/proc/self/status");
  std::string line;
  const std::string key = std::string(field) + ":";
  while (std::getline(in, line)) {
    if (line.rfind(key, 0) == 0) return 1024.0 * std::atof(line.c_str() + key.size());
  }
  return -1.0;
}

// Peak resident bytes one trial adds, measured in a forked child so that neither the parent's
// heap nor its free lists hide it: the child makes every large allocation a fresh mapping,
// resets its peak (/proc/self/clear_refs, "5"), runs the trial and reports VmHWM − VmRSS. −1 when
// the kernel does not allow it.
double trial_peak_bytes(const model::SizeRunner& runner, const observe::ObserveConfig& config,
                        std::uint64_t seed, std::uint64_t trial) {
  int fds[2];
  if (::pipe(fds) != 0) return -1.0;
  const pid_t pid = ::fork();
  if (pid < 0) {
    ::close(fds[0]);
    ::close(fds[1]);
    return -1.0;
  }
  if (pid == 0) {
    ::close(fds[0]);
    double extra = -1.0;
    mallopt(M_MMAP_THRESHOLD, 64 * 1024);
    mallopt(M_TRIM_THRESHOLD, 64 * 1024);
    std::ofstream reset("/proc/self/clear_refs");
    reset << "5";
    reset.close();
    const double before = status_bytes("VmRSS");
    if (reset && before > 0) {
      try {
        auto obs = observe::start_observations(config);
        runner.observe_trial(obs, seed, trial);
        extra = std::max(0.0, status_bytes("VmHWM") - before);
      } catch (...) {
      }
    }
    const ssize_t w = ::write(fds[1], &extra, sizeof extra);
    ::_exit(w == static_cast<ssize_t>(sizeof extra) ? 0 : 1);
  }
  ::close(fds[1]);
  double extra = -1.0;
  if (::read(fds[0], &extra, sizeof extra) != static_cast<ssize_t>(sizeof extra)) extra = -1.0;
  ::close(fds[0]);
  int status = 0;
  while (::waitpid(pid, &status, 0) < 0 && errno == EINTR) {
  }
  return extra;
}

// The parts of a trial and the powers of N each may grow with (dense: a Haar sample, a product
// and the eigenvalues are N³, Gaussian entries N², observing the spectrum N).
std::vector<CostTerm> trial_parts(bool tri, bool tri_spectra) {
  if (tri) {
    return {{"trial", tri_spectra ? std::vector<int>{2, 1, 0} : std::vector<int>{1, 0}, {}, {}}};
  }
  return {{"sample", {3, 2, 0}, {}, {}},
          {"form", {3, 2, 0}, {}, {}},
          {"spectrum", {3, 2, 0}, {}, {}},
          {"observe", {1, 0}, {}, {}}};
}

// Ladder of sizes: geometric up to the largest size of the job, which is timed itself if the
// budget allows.
std::vector<std::int64_t> size_ladder(bool tri, std::int64_t largest) {
  std::vector<std::int64_t> ladder;
  // Not powers of two: a leading dimension of 2^k slows BLAS down by cache-set conflicts
  // (N = 256 measured 2× slower per N³ than 240 and 360 here), which real sizes rarely share.
  const std::int64_t first = tri ? 1000 : 40;
  const std::int64_t factor = tri ? 4 : 2;
  for (std::int64_t n = std::min(first, std::max<std::int64_t>(1, largest / 8)); n < largest;
       n *= factor) {
    ladder.push_back(n);
  }
  ladder.push_back(largest);
  while (ladder.size() < 4 && ladder.front() > 4) {
    ladder.insert(ladder.begin(), std::max<std::int64_t>(2, ladder.front() / 2));
  }
  return ladder;
}

// The observation settings a size is timed with.
observe::ObserveConfig timing_config(const job::Job& job, const model::SizeRunner& runner) {
  observe::ObserveConfig config;
  config.kind = runner.spectrum_kind();
  if (job.observe.extremes_only) {
    config.extremes_only = true;
    config.max_moment = 0;
    return config;
  }
  config.bin_edges = observe::uniform_edges(-10.0, 10.0, job.observe.bins);
  config.max_moment = job.observe.max_moment;
  // Timed as they will run: a kept spectrum changes the tridiagonal path's work (every
  // eigenvalue instead of counts per bin).
  if (job.observe.keep_spectra > 0) {
    for (std::uint64_t i = 0; i < 64; ++i) {
      config.keep_spectrum_trials.push_back(kTimingTrialBase + i);
    }
  }
  return config;
}

constexpr int kTimed = 3;  // timed trials at least, after one untimed

// The seconds of each part (one list per part, one entry per timed trial) of a size's trials,
// numbered from `trial` on (which is advanced past them).
std::vector<std::vector<double>> time_trials(const model::SizeRunner& runner,
                                             const observe::ObserveConfig& config,
                                             std::uint64_t seed, bool tri, std::size_t parts,
                                             std::uint64_t& trial) {
  std::vector<std::vector<double>> times(parts);
  // One untimed trial first (first-touch page faults, lazy library set-up), then at least
  // kTimed timed ones and up to 0.15 s of them.
  {
    auto obs = observe::start_observations(config);
    runner.observe_trial(obs, seed, trial++);
  }
  double here = 0.0;
  while (static_cast<int>(times[0].size()) < kTimed || (here < 0.15 && times[0].size() < 25)) {
    auto obs = observe::start_observations(config);
    const auto t0 = std::chrono::steady_clock::now();
    if (tri) {
      runner.observe_trial(obs, seed, trial++);
      times[0].push_back(seconds_since(t0));
    } else {
      const auto outcome = runner.run(seed, trial++);
      const auto t1 = std::chrono::steady_clock::now();
      model::record(obs, outcome);
      times[0].push_back(outcome.seconds.sample);
      times[1].push_back(outcome.seconds.evaluate);
      times[2].push_back(outcome.seconds.spectrum);
      times[3].push_back(seconds_since(t1));
    }
    here += seconds_since(t0);
  }
  return times;
}

// The index of the fastest timed trial (the least sum of its parts).
std::size_t fastest_trial(const std::vector<std::vector<double>>& times) {
  std::size_t fastest = 0;
  double best = INFINITY;
  for (std::size_t j = 0; j < times[0].size(); ++j) {
    double total = 0.0;
    for (const auto& part : times) total += part[j];
    if (total < best) {
      best = total;
      fastest = j;
    }
  }
  return fastest;
}

// The sizes a model with matrices read from files can be sampled at: with a file per size only
// the job's own sizes have files; with one file of order n only multiples of n (each timed size
// rounded to the nearest, the least common multiple for several such files).
std::vector<std::int64_t> sampleable_ladder(const job::Job& job, std::vector<std::int64_t> ladder) {
  std::int64_t step = 1;
  for (const auto& m : job.matrices) {
    if (m.kind != declarations::Kind::file_matrix) continue;
    if (declarations::file_matrix_per_size(m)) return job.sizes;
    step = std::lcm(step, std::max<std::int64_t>(1, m.file.file_size));
  }
  for (auto& n : ladder) n = std::max(step, (n + step / 2) / step * step);
  std::sort(ladder.begin(), ladder.end());
  ladder.erase(std::unique(ladder.begin(), ladder.end()), ladder.end());
  return ladder;
}

}  // namespace

CostFit measure_cost(const job::Job& job, int threads, double budget_seconds) {
  if (job.sizes.empty()) throw InputError(job.where("sizes") + "the job has no sizes");
  const int saved_threads = openblas_get_num_threads();
  openblas_set_num_threads(std::max(1, threads));
  const std::int64_t largest = job.sizes.back();
  // Both O(N) paths (tridiagonal, two_projection) observe a tridiagonal matrix: one a·N + c.
  // The Krylov path is timed whole too (smaller sizes of the ladder may run dense): a·N³ + b·N²
  // + c, its N² products times the slowly growing number of steps landing on the N² term.
  const model::Path path = study::runner_at(job, largest).path();
  const bool krylov = path == model::Path::krylov;
  const bool tri = path != model::Path::dense && !krylov;
  // A kept spectrum makes a tridiagonal trial compute every eigenvalue (O(N²)).
  const bool tri_spectra = tri && job.observe.keep_spectra > 0;
  std::vector<CostTerm> terms =
      krylov ? std::vector<CostTerm>{{"trial", {3, 2, 0}, {}, {}}} : trial_parts(tri, tri_spectra);
  const double growth = tri ? (tri_spectra ? 2.0 : 1.0) : 3.0;
  const std::vector<std::int64_t> ladder = sampleable_ladder(job, size_ladder(tri, largest));

  std::vector<std::int64_t> sizes;
  std::vector<double> trial_bytes;
  const auto start = std::chrono::steady_clock::now();
  auto spent = [&] {
    return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  };
  for (const auto n : ladder) {
    if (!sizes.empty()) {
      // Climb only while this size's measurement (one untimed and kTimed timed trials, scaled
      // from the last size by the fastest growth) is predicted to fit in what is left.
      double last = 0.0;
      for (const auto& t : terms) last += t.seconds.back();
      const double predicted =
          last * std::pow(static_cast<double>(n) / static_cast<double>(sizes.back()), growth);
      if (spent() + (kTimed + 1) * predicted > budget_seconds) break;
    }
    const auto runner = study::runner_at(job, n);
    const observe::ObserveConfig config = timing_config(job, runner);
    std::uint64_t trial = kTimingTrialBase;
    const auto times = time_trials(runner, config, job.seed, tri || krylov, terms.size(), trial);
    sizes.push_back(n);
    trial_bytes.push_back(trial_peak_bytes(runner, config, job.seed, trial++));
    // The parts of the fastest timed trial: its time on an unshared core. Other processes on the
    // machine only ever add to a trial's time, so the minimum is the measurement they disturb
    // least; the parts of one trial (not each part's own minimum) add up to that trial.
    const std::size_t fastest = fastest_trial(times);
    for (std::size_t k = 0; k < terms.size(); ++k) {
      terms[k].seconds.push_back(std::max(times[k][fastest], 1e-9));
    }
    if (spent() > budget_seconds) break;
  }
  openblas_set_num_threads(std::max(1, saved_threads));
  CostFit fit = fit_terms(terms, sizes);
  if (std::none_of(trial_bytes.begin(), trial_bytes.end(), [](double b) { return b < 0; })) {
    fit.trial_bytes = trial_bytes;
  }
  return fit;
}

// ---- the estimate ------------------------------------------------------------------------------

double simulate_wall(std::vector<double> unit_seconds, int ranks) {
  std::sort(unit_seconds.begin(), unit_seconds.end(), std::greater<>());
  std::priority_queue<double, std::vector<double>, std::greater<>> free_at;
  for (int r = 0; r < std::max(1, ranks); ++r) free_at.push(0.0);
  double wall = 0.0;
  for (const double s : unit_seconds) {
    const double t = free_at.top() + s;
    free_at.pop();
    free_at.push(t);
    wall = std::max(wall, t);
  }
  // MPI start-up, the pilot trial and the file's creation: about 1 s (docs/cluster-notes.md §1.4).
  return wall + 1.0;
}

std::size_t output_bytes(const job::Job& job, std::size_t i) {
  // docs/run-file.md: per trial a row of K+1 moments, min, max, norm (float64), failed (int8) and a
  // variable-length failure reason (a 16-byte heap reference); per unit a histogram row of b
  // counts, below, above, the commit marker and a provenance record (~120 bytes with its
  // strings); per kept spectrum N float64 and its length. Every chunk costs HDF5 an index entry
  // (about 100 bytes measured with chunked datasets of this shape) — 10 chunks per unit and one
  // per kept spectrum.
  const double t = static_cast<double>(job.trials[i]);
  const double b = static_cast<double>(job.trials_per_unit);
  const double units = std::ceil(t / b);
  const double k = job.observe.max_moment + 1;
  // extremes_only: no histogram, and a certificate row of 5 doubles per trial (format 1.5).
  const bool extremes = job.observe.extremes_only;
  const double bins = extremes ? 0.0 : static_cast<double>(job.observe.bins);
  const double kept = static_cast<double>(std::min(job.observe.keep_spectra, job.trials[i]));
  const double n = static_cast<double>(job.sizes[i]);
  const double bytes = t * (8.0 * k + 3 * 8.0 + 1.0 + 16.0 + (extremes ? 40.0 : 0.0)) +
                       units * (8.0 * bins + 8.0 * 2 + 1.0 + 120.0) + kept * (8.0 * n + 8.0) +
                       8.0 * (bins + 1) + (10.0 * units + kept) * 100.0 +
                       4096.0;  // the size's group, attributes and bin edges
  return static_cast<std::size_t>(bytes);
}

std::size_t run_file_bytes(const job::Job& job) {
  std::size_t bytes = 64 * 1024;  // root attributes, job text, provenance sessions
  for (std::size_t i = 0; i < job.sizes.size(); ++i) bytes += output_bytes(job, i);
  return bytes;
}

std::int64_t free_bytes_for(const std::string& path) {
  namespace fs = std::filesystem;
  std::error_code ec;
  fs::path dir = fs::absolute(fs::path(path), ec).parent_path();
  if (ec) return -1;
  // The run file's directory may not exist yet (it is refused later): its nearest ancestor is on
  // the file system it would be made on.
  while (!dir.empty() && !fs::is_directory(dir, ec)) {
    if (dir == dir.parent_path()) return -1;
    dir = dir.parent_path();
  }
  const fs::space_info info = fs::space(dir, ec);
  if (ec || info.available == static_cast<std::uintmax_t>(-1)) return -1;
  return static_cast<std::int64_t>(
      std::min<std::uintmax_t>(info.available, std::numeric_limits<std::int64_t>::max()));
}

namespace {

// What to ask a Slurm scheduler for (Forecast::slurm_command): the time from the predicted wall
// time with the estimate's 25 % margin plus the checkpoint margin jobs/slurm/run.sbatch keeps
// before the limit (5 % of it, at least 60 s); the memory per task from the largest planned peak
// per rank with kMemoryMargin, in whole MiB.
void slurm_request(Forecast& e, const job::Job& job) {
  double peak = 0.0;
  for (const auto& s : e.sizes) {
    // The measured trial memory, but never less than the evaluation's own temporaries, which
    // every trial holds (a fit from small sizes only may undershoot a large one).
    const double trial = std::max(e.cost.predict_bytes(s.n), static_cast<double>(s.working_bytes));
    peak = std::max(peak, e.cost.trial_bytes.empty() ? static_cast<double>(s.peak_bytes)
                                                      : kRankBaseBytes + trial);
  }
  e.request_bytes_per_task = static_cast<std::size_t>(std::ceil(peak * kMemoryMargin));
  const int ranks = e.suggested_ranks > 0 ? e.suggested_ranks : e.options.ranks;
  double seconds = e.suggested_wall_seconds;
  if (e.suggested_ranks == 0) {
    const double planned = e.wall_seconds * 1.25;
    seconds = std::max(planned + 60.0, planned / 0.95);
  }
  const int threads = std::max(1, e.options.threads);
  const double mib = std::ceil(static_cast<double>(e.request_bytes_per_task) / threads / (1024.0 * 1024.0));
  std::string command = "sbatch --ntasks=" + std::to_string(ranks);
  if (threads > 1) command += " --cpus-per-task=" + std::to_string(threads);
  command += " --time=" + slurm_time(seconds) + " --mem-per-cpu=" + number(mib, "%.0f") + "M";
  command += " run.sbatch " + job.path;
  e.slurm_command = command;
}

// The cost of a trial: from the calibration file, or measured now and stored there.
void find_cost(Forecast& e, const job::Job& job, const Options& options, std::ostream& log) {
  const std::string cal_path =
      options.calibration_path.empty() ? default_calibration_path() : options.calibration_path;
  auto cal = Calibration::load(cal_path, this_machine());
  const std::string key = cost_key(job, options.threads);
  const CostFit* known = options.remeasure ? nullptr : cal.find(key);
  if (known) {
    e.cost = *known;
    e.cost_source = "from " + cal_path;
  } else {
    log << "freegap plan: measuring trials of this model on this machine"
        << (cal.stale() ? " (the calibration file was for another machine)" : "") << "...\n"
        << std::flush;
    const auto t0 = std::chrono::steady_clock::now();
    e.cost = measure_cost(job, options.threads, options.calibration_budget);
    const double took =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    std::string at;
    for (auto n : e.cost.sizes) at += (at.empty() ? "" : ", ") + std::to_string(n);
    e.cost_source = "measured now at N = " + at + " in " + format_duration(took);
    cal.put(key,
            job.expression + " (" + e.path + ", " + std::to_string(options.threads) +
                " BLAS thread(s))",
            e.cost);
    try {
      cal.save();
      e.cost_source += "; stored in " + cal_path;
    } catch (const Error& err) {
      e.warnings.push_back(std::string(err.what()) + "; the measurement is not kept");
    }
  }
}

// Memory per rank: the job's memory_per_rank, else this node's available memory shared by the
// ranks that would run on it (at most one per core).
void find_memory_limit(Forecast& e, const job::Job& job, const Options& options) {
  if (job.memory_per_rank_bytes > 0) {
    e.memory_limit = static_cast<std::size_t>(job.memory_per_rank_bytes);
    e.memory_source = "memory_per_rank in the job";
  } else {
    const int local = std::min(options.ranks, online_cores());
    e.memory_limit = available_memory_bytes() / static_cast<std::size_t>(local);
    e.memory_source =
        "this node's available memory shared by " + std::to_string(local) + " rank(s)";
  }
}

// Every size's estimate (appended to e.sizes, its core-hours added to e.core_hours); returns the
// predicted seconds of every unit of the job.
std::vector<double> forecast_sizes(Forecast& e, const study::Study& st, const Options& options,
                                   bool keeps_matrix) {
  const job::Job& job = st.job();
  const std::vector<model::SizeRunner>& runners = st.runners();
  std::vector<double> unit_seconds;
  for (std::size_t i = 0; i < job.sizes.size(); ++i) {
    SizeForecast s;
    s.n = job.sizes[i];
    s.trials = job.trials[i];
    s.seconds_per_trial = e.cost.predict(s.n);
    s.core_hours = static_cast<double>(s.trials) * s.seconds_per_trial * options.threads / 3600.0;
    s.peak_bytes = st.peak_bytes(i, keeps_matrix);
    s.working_bytes = runners[i].evaluation().input_bytes() +
                      runners[i].evaluation().peak_temporary_bytes();
    s.output_bytes = output_bytes(job, i);
    s.fits = e.memory_limit == 0 || s.peak_bytes <= e.memory_limit;
    if (!s.fits) {
      e.warnings.push_back(
          "N = " + std::to_string(s.n) + " needs about " +
          human_bytes(static_cast<double>(s.peak_bytes)) + " per rank (estimate), more than the " +
          human_bytes(static_cast<double>(e.memory_limit)) + " from " + e.memory_source +
          "; freegap run will refuse it: remove the size, run fewer ranks per node, or "
          "raise memory_per_rank where the node has the memory");
    }
    e.core_hours += s.core_hours;
    for (std::int64_t u = 0; u < st.unit_count(i); ++u) {
      unit_seconds.push_back(static_cast<double>(st.trials_in_unit(i, u)) * s.seconds_per_trial +
                             0.002);  // + commit
    }
    e.sizes.push_back(s);
  }
  return unit_seconds;
}

// Which spectra the run file keeps, their size, and what they are used for (e.kept_spectra).
void describe_kept_spectra(Forecast& e, const job::Job& job) {
  if (job.observe.extremes_only) {
    e.kept_spectra = "none (observe.extremes_only: only the extremes and the norm are observed, so "
                     "the report gives no distances of the spectrum)";
    return;
  }
  double spectra = 0.0, largest = 0.0;
  bool every = true;
  for (std::size_t i = 0; i < job.sizes.size(); ++i) {
    const std::int64_t kept = std::min(job.observe.keep_spectra, job.trials[i]);
    every = every && kept == job.trials[i];
    spectra += 8.0 * static_cast<double>(kept) * static_cast<double>(job.sizes[i]);
    largest = std::max(largest, static_cast<double>(kept) * static_cast<double>(job.sizes[i]));
  }
  const auto& o = job.observe;
  e.kept_spectra =
      (every ? std::string("every trial")
             : o.keep_spectra == 0 ? std::string("none")
                                   : "the first " + std::to_string(o.keep_spectra) + " trial(s) of each size") +
      " (keep_spectra = " + (o.keep_spectra_rule == "first k" ? std::to_string(o.keep_spectra) : "\"" + o.keep_spectra_rule + "\"") +
      "; about " + human_bytes(spectra) + " of the run file" +
      (o.keep_spectra_rule == "auto" ? ", within the " + human_bytes(job::kKeptSpectraBudget) + " the default allows" : std::string()) +
      ")" + (every ? "; distances of the mean spectrum are computed from them, without bins"
                   : "; distances of the mean spectrum come from the histograms (bin-limited)");
  if (every && largest > 0) {
    // analysis::spectra_distances holds about 100 bytes per eigenvalue of the size it analyses.
    e.kept_spectra += "; freegap report will need about " + human_bytes(100.0 * largest) +
                      " of memory for the largest size's";
  }
  if (spectra > 0 && e.path != "dense") {
    e.kept_spectra += "; on the " + e.path + " path a kept spectrum costs every eigenvalue (O(N²)) "
                      "instead of counts per bin (O(N·bins)); the timing above includes it";
  }
}

// A warning when the largest size lies far beyond the sizes whose trials were timed.
void warn_if_extrapolated(Forecast& e, const job::Job& job) {
  const std::int64_t calibrated = e.cost.largest_calibrated();
  if (calibrated > 0 && static_cast<double>(job.sizes.back()) >
                            kExtrapolationWarning * static_cast<double>(calibrated)) {
    e.warnings.push_back(
        "the cost of N = " + std::to_string(job.sizes.back()) + " is extrapolated from trials " +
        "timed at N ≤ " + std::to_string(calibrated) + " (" +
        number(static_cast<double>(job.sizes.back()) / static_cast<double>(calibrated), "%.3g") +
        "× beyond): the times may be off by more than the stated error; measure larger sizes "
        "with --remeasure --calibration-budget SECONDS, or time a short run of the largest size");
  }
}

// The fewest ranks whose wall time with a 25 % margin fits the deadline. Beyond one rank per
// unit nothing gets faster.
void suggest_ranks(Forecast& e, const std::vector<double>& unit_seconds, const Options& options) {
  constexpr double kMargin = 1.25;
  const int most = static_cast<int>(std::max<std::size_t>(1, unit_seconds.size()));
  int lo = 1, hi = most;
  if (simulate_wall(unit_seconds, hi) * kMargin <= options.deadline_seconds) {
    while (lo < hi) {  // wall time does not increase with ranks (largest-first list scheduling)
      const int mid = lo + (hi - lo) / 2;
      if (simulate_wall(unit_seconds, mid) * kMargin <= options.deadline_seconds)
        hi = mid;
      else
        lo = mid + 1;
    }
    e.suggested_ranks = lo;
    e.suggested_run_seconds = simulate_wall(unit_seconds, lo);
    e.suggested_wall_seconds =
        std::min(options.deadline_seconds, e.suggested_run_seconds * kMargin + 60.0);
  } else {
    const double longest = *std::max_element(unit_seconds.begin(), unit_seconds.end());
    e.warnings.push_back("the job cannot finish within " +
                         format_duration(options.deadline_seconds) +
                         " on any number of ranks: its longest unit alone takes about " +
                         format_duration(longest) +
                         "; run it in several jobs that resume (freegap run --stop-before, "
                         "jobs/slurm/long-run.sbatch) or "
                         "lower trials_per_unit");
  }
}

}  // namespace

Forecast forecast(const job::Job& job, const Options& options, std::ostream& log) {
  if (options.ranks < 1)
    throw InputError("--ranks must be at least 1 (got " + std::to_string(options.ranks) + ")");
  if (options.threads < 1)
    throw InputError("--threads must be at least 1 (got " + std::to_string(options.threads) + ")");
  Forecast e;
  e.job_path = job.path;
  e.expression = job.expression;
  e.options = options;
  // Compile the study first (every size's runner): a bad model fails before any measurement.
  const study::Study st(job);
  // The estimators are checked as freegap run checks them (a bad plug-in is refused here too),
  // and one that reads the matrix adds the copy kept for it to the memory estimate.
  const bool keeps_matrix = estimate::EstimatorSet(job).wants_matrix();
  e.path = st.path_names();
  e.path_reason = st.path_reason(0);
  // Measuring would crash where freegap run refuses to run (threaded complex SVDs in Debian
  // 12's OpenBLAS 0.3.21): the same refusal, from the study.
  st.check_threads(options.threads);

  find_cost(e, job, options, log);
  find_memory_limit(e, job, options);
  const std::vector<double> unit_seconds = forecast_sizes(e, st, options, keeps_matrix);
  e.output_bytes = run_file_bytes(job);
  describe_kept_spectra(e, job);
  e.output_path = job.output;
  e.output_free = free_bytes_for(job.output);
  if (e.output_free >= 0 && e.output_bytes > static_cast<std::size_t>(e.output_free)) {
    e.warnings.push_back(
        "the run file needs about " + human_bytes(static_cast<double>(e.output_bytes)) +
        " (estimate), more than the " + human_bytes(static_cast<double>(e.output_free)) +
        " free on the file system of '" + e.output_path +
        "'; freegap run will refuse it: free space there, write the run file "
        "elsewhere (run.output, or freegap run -o), or run fewer trials");
  }
  e.units = unit_seconds.size();
  e.wall_seconds = simulate_wall(unit_seconds, options.ranks);
  warn_if_extrapolated(e, job);
  if (options.deadline_seconds > 0) suggest_ranks(e, unit_seconds, options);
  slurm_request(e, job);
  return e;
}

}  // namespace freegap::plan
