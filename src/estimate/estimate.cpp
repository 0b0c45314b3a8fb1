// Estimators that ride along with a run (include/freegap/estimate.hpp): plug-in libraries in a
// helper program (src/estimate/host/), external commands, and the set that runs them on a trial.
#include "freegap/estimate.hpp"
#include "freegap/text.hpp"

#include <dlfcn.h>
#include <fcntl.h>
#include <poll.h>
#include <signal.h>
#include <spawn.h>
#include <sys/mman.h>
#include <sys/socket.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <charconv>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <functional>
#include <limits>
#include <set>

#include "freegap/errors.hpp"
#include "freegap/estimator_abi.h"
#include "plugin_host_protocol.hpp"

extern char** environ;

namespace freegap::estimate {

// A memfd: the rank maps it read-write and writes each trial's matrix into it; plug-in helpers,
// sent a read-only descriptor of it, map it read-only. It only grows, so a helper's older, smaller
// mapping stays valid and it remaps when a request needs more.
class SharedMatrixMemory {
 public:
  SharedMatrixMemory() : fd_(::memfd_create("freegap-trial-matrix", MFD_CLOEXEC)) {
    if (fd_ < 0) {
      throw Error(std::string("cannot create the memory shared with plug-in helpers ") +
                  "(memfd_create: " + std::strerror(errno) + ")");
    }
  }
  ~SharedMatrixMemory() {
    if (data_ != nullptr) ::munmap(data_, bytes_);
    ::close(fd_);
  }
  SharedMatrixMemory(const SharedMatrixMemory&) = delete;
  SharedMatrixMemory& operator=(const SharedMatrixMemory&) = delete;

  int fd() const { return fd_; }
  const double* data() const { return data_; }

  // A new read-only descriptor of the memory for a plug-in host (a new open of it, so not even
  // mprotect can make a mapping of it writable), or a copy of the rank's descriptor where /proc
  // is not there to reopen it. The host never has a writable mapping: the plug-in cannot change
  // the matrix another estimator of the rank reads next.
  int read_only_descriptor() const {
    char path[64];
    std::snprintf(path, sizeof path, "/proc/self/fd/%d", fd_);
    const int fd = ::open(path, O_RDONLY | O_CLOEXEC);
    return fd >= 0 ? fd : ::fcntl(fd_, F_DUPFD_CLOEXEC, 0);
  }

  double* reserve(std::size_t doubles) {
    const std::size_t bytes = std::max<std::size_t>(doubles, 1) * sizeof(double);
    if (bytes > bytes_) {
      if (::ftruncate(fd_, static_cast<off_t>(bytes)) != 0) {
        throw Error("cannot grow the memory shared with plug-in helpers to " +
                    std::to_string(bytes) + " bytes: " + std::strerror(errno));
      }
      void* p = ::mmap(nullptr, bytes, PROT_READ | PROT_WRITE, MAP_SHARED, fd_, 0);
      if (p == MAP_FAILED) {
        throw Error("cannot map the memory shared with plug-in helpers: " +
                    std::string(std::strerror(errno)));
      }
      if (data_ != nullptr) ::munmap(data_, bytes_);
      data_ = static_cast<double*>(p);
      bytes_ = bytes;
    }
    return data_;
  }

 private:
  int fd_ = -1;
  double* data_ = nullptr;
  std::size_t bytes_ = 0;
};

namespace {

using host::Request;
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
using Clock = std::chrono::steady_clock;


std::string join_names(const std::vector<std::string>& names) {
  std::string out;
  for (const auto& n : names) out += (out.empty() ? "" : ", ") + n;
  return out.empty() ? "(none)" : out;
}

// A reason fit for a one-line record: control characters become spaces, at most 200 bytes.
std::string clean(std::string text) {
  for (auto& c : text) {
    if (static_cast<unsigned char>(c) < 0x20) c = ' ';
  }
  while (!text.empty() && text.back() == ' ') text.pop_back();
  if (text.size() > 200) text = text.substr(0, 197) + "...";
  return text;
}

std::string signal_text(int sig) {
  const char* abbrev = sigabbrev_np(sig);
  return "signal " + std::to_string(sig) + (abbrev ? std::string(" (SIG") + abbrev + ")" : "");
}

// What a waitpid status says about how a process ended.
std::string exit_text(int status) {
  if (WIFSIGNALED(status)) return "was killed by " + signal_text(WTERMSIG(status));
  if (WIFEXITED(status)) return "exited with status " + std::to_string(WEXITSTATUS(status));
  return "ended abnormally";
}

Outcome failed(const std::string& reason, std::size_t count) {
  Outcome o;
  o.failed = true;
  o.reason = clean(reason);
  o.values.assign(count, kNaN);
  return o;
}

// Checks every value is finite; returns the failure otherwise.
Outcome checked(std::vector<double> values, const std::vector<std::string>& names,
                const std::string& who) {
  for (std::size_t i = 0; i < values.size(); ++i) {
    if (!std::isfinite(values[i])) {
      return failed(who + " returned " + (std::isnan(values[i]) ? "NaN" : "an infinite value") +
                        " for '" + names[i] + "'",
                    names.size());
    }
  }
  Outcome o;
  o.values = std::move(values);
  return o;
}

// The job's "file:line: estimator.NAME.key: " prefix.
std::string where(const job::Job& job, const job::EstimatorSpec& spec, const std::string& key) {
  return job.where("estimator." + spec.name + (key.empty() ? "" : "." + key));
}

// Refuses unless `declared` (in any order) is exactly the job's truth keys.
void check_names(const job::Job& job, const job::EstimatorSpec& spec,
                 std::vector<std::string> declared, const std::string& who) {
  std::sort(declared.begin(), declared.end());
  if (declared != spec.estimates) {
    throw InputError(where(job, spec, "truth") + "names " + join_names(spec.estimates) + ", but " +
                     who + " returns " + join_names(declared) +
                     "; name the truth of each estimate it returns, and no other");
  }
}

// ---- file descriptors --------------------------------------------------------------------------

class Fd {
 public:
  Fd() = default;
  explicit Fd(int fd) : fd_(fd) {}
  Fd(Fd&& o) noexcept : fd_(o.release()) {}
  Fd& operator=(Fd&& o) noexcept {
    if (this != &o) {
      reset();
      fd_ = o.release();
    }
    return *this;
  }
  Fd(const Fd&) = delete;
  Fd& operator=(const Fd&) = delete;
  ~Fd() { reset(); }
  int get() const { return fd_; }
  int release() {
    const int f = fd_;
    fd_ = -1;
    return f;
  }
  void reset() {
    if (fd_ >= 0) ::close(fd_);
    fd_ = -1;
  }

 private:
  int fd_ = -1;
};

// Writes everything; false if the peer is gone (no SIGPIPE: MSG_NOSIGNAL).
bool send_all(int fd, const void* data, std::size_t size) {
  const char* p = static_cast<const char*>(data);
  while (size > 0) {
    const ssize_t k = ::send(fd, p, size, MSG_NOSIGNAL);
    if (k < 0 && errno == EINTR) continue;
    if (k <= 0) return false;
    p += k;
    size -= static_cast<std::size_t>(k);
  }
  return true;
}

// ---- plug-in libraries -------------------------------------------------------------------------

// Where the plug-in host program is: FREEGAP_PLUGIN_HOST if set, else beside the running
// executable (freegap and freegap-plugin-host are built and installed side by side), else where
// this build put it (test programs run from other directories).
std::string plugin_host_path() {
  if (const char* env = std::getenv("FREEGAP_PLUGIN_HOST"); env != nullptr && *env != '\0') {
    return env;
  }
  std::error_code ec;
  const auto self = std::filesystem::read_symlink("/proc/self/exe", ec);
  if (!ec) {
    const auto beside = (self.parent_path() / host::kHostProgram).string();
    if (::access(beside.c_str(), X_OK) == 0) return beside;
  }
#ifdef FREEGAP_PLUGIN_HOST_BUILT
  if (::access(FREEGAP_PLUGIN_HOST_BUILT, X_OK) == 0) return FREEGAP_PLUGIN_HOST_BUILT;
#endif
  throw Error(std::string("cannot find the program ") + host::kHostProgram +
              ", which runs plug-in estimators (looked beside the running program" +
              (ec ? "" : " in " + self.parent_path().string()) +
              "); build it with freegap, or set FREEGAP_PLUGIN_HOST to its path");
}

std::string read_text(std::string_view payload, std::size_t& at, std::size_t length) {
  if (at + length > payload.size()) return {};
  std::string s(payload.substr(at, length));
  at += length;
  return s;
}

std::uint32_t read_u32(std::string_view payload, std::size_t& at) {
  std::uint32_t x = 0;
  if (at + 4 <= payload.size()) std::memcpy(&x, payload.data() + at, 4);
  at += 4;
  return x;
}

// A running plug-in host: its process, the socket to it and the read ends of the pipes its
// standard output and error go to. Ends the process when destroyed.
struct HostProcess {
  pid_t pid = -1;
  Fd sock;
  Fd output[2];  // standard output, standard error
  bool matrix_sent = false;

  HostProcess() = default;
  HostProcess(const HostProcess&) = delete;
  HostProcess& operator=(const HostProcess&) = delete;
  ~HostProcess() { end(true); }

  bool running() const { return pid > 0; }

  // Ends the process: closes the socket (an idle host exits at once), waits up to a second
  // unless `kill_now`, then SIGKILL. Returns its wait status (0 if none was running).
  int end(bool kill_now) {
    if (pid <= 0) return 0;
    sock.reset();
    int status = 0;
    if (!kill_now) {
      for (int i = 0; i < 200; ++i) {
        if (::waitpid(pid, &status, WNOHANG) == pid) {
          pid = -1;
          return status;
        }
        ::usleep(5000);
      }
    }
    ::kill(pid, SIGKILL);
    while (::waitpid(pid, &status, 0) < 0 && errno == EINTR) {
    }
    pid = -1;
    return status;
  }
};

}  // namespace

// The log beside the run file that plug-ins' standard output and error go to
// (docs/plugins.md): appended by every rank, created at the first line, bounded.
class PluginLog {
 public:
  // Output before the log has a place (the plug-ins' loading and describe, before the run file
  // is accepted) is held, up to the limit, and written when it gets one; never, for freegap plan
  // and run --explain.
  void open(const std::string& path, std::size_t limit) {
    path_ = path;
    limit_ = limit;
    std::string held = std::move(held_);
    held_.clear();
    if (!held.empty()) write(held);
    if (held_dropped_) note();
  }

  void write(std::string_view text) {
    if (full_ || text.empty()) return;
    if (path_.empty()) {
      if (held_.size() + text.size() > limit_) {
        held_dropped_ = true;
      } else {
        held_.append(text);
      }
      return;
    }
    if (!ensure_open()) return;
    struct stat st {};
    if (::fstat(fd_.get(), &st) != 0) return;
    if (static_cast<std::size_t>(st.st_size) + text.size() > limit_) {
      note();
      return;
    }
    append(text);
  }

 private:
  bool ensure_open() {
    if (fd_.get() < 0 && !failed_) {
      fd_ = Fd(::open(path_.c_str(), O_WRONLY | O_CREAT | O_APPEND | O_CLOEXEC, 0644));
      failed_ = fd_.get() < 0;  // nowhere to put it: plug-in output is dropped, never shown
    }
    return fd_.get() >= 0;
  }
  void append(std::string_view text) {
    while (!text.empty()) {
      const ssize_t k = ::write(fd_.get(), text.data(), text.size());
      if (k < 0 && errno == EINTR) continue;
      if (k <= 0) return;
      text.remove_prefix(static_cast<std::size_t>(k));
    }
  }
  // Said once per process: this process writes no more plug-in output to the log.
  void note() {
    if (full_ || !ensure_open()) return;
    full_ = true;
    append("freegap: this log reached its limit of " + std::to_string(limit_) +
           " bytes; further plug-in output of process " + std::to_string(::getpid()) +
           " is dropped\n");
  }

  std::string path_;
  std::size_t limit_ = kPluginLogLimit;
  Fd fd_;
  bool failed_ = false;
  bool full_ = false;
  std::string held_;
  bool held_dropped_ = false;
};

namespace {

class LibraryEstimator final : public Estimator {
 public:
  LibraryEstimator(const job::Job& job, const job::EstimatorSpec& spec,
                   std::shared_ptr<PluginLog> log)
      : spec_(spec), log_(std::move(log)) {
    const std::string at = where(job, spec, "library");
    // The job names a file (beside the job file when relative); dlopen would look a bare file
    // name up on the system's library path instead.
    file_ = spec.library.find('/') == std::string::npos ? "./" + spec.library : spec.library;
    host_path_ = plugin_host_path();
    // The library is loaded and described in a host process, never in this one: a library
    // whose loading or describe crashes, hangs or exits is refused here, before the run.
    std::string why;
    if (!start_host(why)) throw Error("cannot start the plug-in's host process (" + why + ")");
    const std::string lib = "'" + spec.library + "'";
    std::string payload;
    switch (await_description(payload, why)) {
      case Described::ok:
        break;
      case Described::cannot_load:
        throw InputError(at + "cannot load " + lib + " (" + why +
                         "); give the path of a shared library built against "
                         "include/freegap/estimator_abi.h");
      case Described::refused:
        throw InputError(at + lib + why);
      case Described::failed:
      case Described::stopped:  // not before set_stop_check
        throw InputError(at + lib + ": " + why +
                         "; fix the plug-in: loading it and " FREEGAP_ESTIMATOR_DESCRIBE_SYMBOL
                         " must only return static data");
    }
    description_ = payload;
    std::size_t pos = 0;
    const std::uint32_t version = read_u32(payload, pos);
    const auto count = static_cast<std::int32_t>(read_u32(payload, pos));
    const std::uint32_t wants = read_u32(payload, pos);
    const std::uint32_t flags = read_u32(payload, pos);
    const std::uint32_t sent = read_u32(payload, pos);
    if (version < FREEGAP_ESTIMATOR_ABI_OLDEST || version > FREEGAP_ESTIMATOR_ABI_VERSION) {
      throw InputError(at + lib + " was built for plug-in ABI version " + std::to_string(version) +
                       ", this freegap loads versions " +
                       std::to_string(FREEGAP_ESTIMATOR_ABI_OLDEST) + " to " +
                       std::to_string(FREEGAP_ESTIMATOR_ABI_VERSION) +
                       "; rebuild it against this freegap's include/freegap/estimator_abi.h");
    }
    // The host reads `wants` only from version 2 on (version 1's info ends before it).
    if ((wants & ~FREEGAP_WANTS_MATRIX) != 0) {
      throw InputError(at + lib + " asks for input this freegap does not know " +
                       "(wants = " + std::to_string(wants) + "; known: FREEGAP_WANTS_MATRIX = " +
                       std::to_string(FREEGAP_WANTS_MATRIX) + "); clear the unknown bits");
    }
    wants_matrix_ = (wants & FREEGAP_WANTS_MATRIX) != 0;
    if (count < 1 || count > FREEGAP_ESTIMATOR_MAX_ESTIMATES || (flags & host::kNamesNull) != 0) {
      throw InputError(at + lib + " declares " + std::to_string(count) +
                       " estimates; declare 1 to " +
                       std::to_string(FREEGAP_ESTIMATOR_MAX_ESTIMATES) + " names");
    }
    if ((flags & host::kNameNull) != 0) {
      throw InputError(at + lib + " declares a NULL estimate name");
    }
    std::vector<std::string> names;
    for (std::uint32_t i = 0; i < sent; ++i) {
      const std::uint32_t length = read_u32(payload, pos);
      names.push_back(read_text(payload, pos, length));
    }
    std::set<std::string> distinct(names.begin(), names.end());
    if (distinct.size() != names.size()) {
      throw InputError(at + lib + " declares an estimate name twice (" + join_names(names) + ")");
    }
    check_names(job, spec, names, "the plug-in");
    // Declared order → the spec's sorted order.
    for (const auto& name : names) {
      order_.push_back(static_cast<std::size_t>(
          std::lower_bound(spec.estimates.begin(), spec.estimates.end(), name) -
          spec.estimates.begin()));
    }
  }

  ~LibraryEstimator() override {
    host_.end(false);
    take_output(true);
  }

  bool wants_matrix() const override { return wants_matrix_; }
  void share_matrix_memory(std::shared_ptr<SharedMatrixMemory> memory) override {
    if (!wants_matrix_ || memory == matrix_memory_) return;
    matrix_memory_ = std::move(memory);
    host_.matrix_sent = false;
  }
  void set_stop_check(std::function<bool()> requested) override { stop_ = std::move(requested); }

  Outcome estimate(const TrialInput& input) override {
    const std::size_t count = spec_.estimates.size();
    if (wants_matrix_) {
      if (input.matrix.data == nullptr) {
        return failed("the plug-in asks for the matrix, and this trial has none to give", count);
      }
      if (!matrix_memory_) share_matrix_memory(std::make_shared<SharedMatrixMemory>());
      // The runner writes it there already (EstimatorSet::matrix_buffer); anyone else's is copied.
      if (input.matrix.data != matrix_memory_->data()) {
        std::memcpy(matrix_memory_->reserve(input.matrix.doubles()), input.matrix.data,
                    input.matrix.doubles() * sizeof(double));
      }
    }
    if (!host_.running()) {
      // A new host after a failure: it loads the library again and must describe it as before.
      std::string why, payload;
      if (!start_host(why)) {
        return failed("could not start the plug-in's host process (" + why + ")", count);
      }
      const Described d = await_description(payload, why);
      if (d == Described::stopped) return stopped(count);
      if (d != Described::ok) {
        return failed("plug-in could not be loaded again after a failure: " + why, count);
      }
      if (payload != description_) {
        host_.end(true);
        return failed(
            "plug-in described itself differently when loaded again; describe must "
            "return the same static data every time",
            count);
      }
    }
    const Request req = request_for(input);
    if (!send_request(req) || !send_all(host_.sock.get(), input.spectrum.data(),
                                        input.spectrum.size() * sizeof(double))) {
      return failed("plug-in " + ended(), count);
    }
    return await_answer(count);
  }

 private:
  enum class Described { ok, cannot_load, refused, failed, stopped };

  // The request for one trial, without the spectrum that follows it.
  Request request_for(const TrialInput& input) const {
    Request req{};
    req.trial = input.trial;
    req.seed = input.seed;
    req.n = input.n;
    req.length = static_cast<std::int64_t>(input.spectrum.size());
    req.kind = input.kind == observe::SpectrumKind::eigenvalues ? FREEGAP_SPECTRUM_EIGENVALUES
                                                                : FREEGAP_SPECTRUM_SINGULAR_VALUES;
    if (wants_matrix_) {
      req.matrix_rows = input.matrix.rows;
      req.matrix_cols = input.matrix.cols;
      req.matrix_is_complex = input.matrix.is_complex ? 1 : 0;
    }
    return req;
  }

  // Waits for the host's answer to the request just sent and checks its `count` values.
  Outcome await_answer(std::size_t count) {
    const auto deadline = Clock::now() + std::chrono::duration_cast<Clock::duration>(
                                             std::chrono::duration<double>(spec_.timeout));
    host::Message m{};
    std::string payload;
    const ReadStatus st = receive(m, payload, deadline);
    if (st == ReadStatus::stopped) return stopped(count);
    if (st == ReadStatus::timeout) {
      host_.end(true);
      take_output(true);
      return failed("plug-in did not answer within the timeout of " + text::compact(spec_.timeout) +
                        " s; its helper process was stopped",
                    count);
    }
    if (st == ReadStatus::closed) return failed("plug-in " + ended(), count);
    if (m.kind == host::kExited) {
      host_.end(false);
      take_output(true);
      return failed("plug-in called exit(" + std::to_string(m.status) + ")", count);
    }
    if (m.kind != host::kAnswer) {
      host_.end(true);
      take_output(true);
      return failed("plug-in's helper sent something other than an answer", count);
    }
    // What the plug-in printed for this trial was flushed before its answer, so the wait for
    // the answer has already moved it to the log.
    const std::size_t k =
        m.status > 0 ? static_cast<std::size_t>(std::min<int>(m.status, static_cast<int>(count)))
                     : 0;
    if (payload.size() < k * sizeof(double)) {
      host_.end(true);
      return failed("plug-in's helper sent a short answer", count);
    }
    std::vector<double> got(k);
    if (k > 0) std::memcpy(got.data(), payload.data(), k * sizeof(double));  // no null pointer
    const std::string message = payload.substr(k * sizeof(double));
    if (m.status < 0) {
      return failed("plug-in reported failure" + (message.empty() ? "" : ": " + message), count);
    }
    if (static_cast<std::size_t>(m.status) != count) {
      return failed("plug-in returned " + std::to_string(m.status) + " value(s), declared " +
                        std::to_string(count),
                    count);
    }
    std::vector<double> values(count, kNaN);
    for (std::size_t i = 0; i < count; ++i) values[order_[i]] = got[i];
    return checked(std::move(values), spec_.estimates, "plug-in");
  }

  // Starts a host for this library: a fresh program (posix_spawn, which neither copies the
  // rank's memory nor runs anything of the rank in the child), so nothing of an MPI rank — its
  // threads, locks, exit handlers, open files — is in the process the plug-in runs in.
  bool start_host(std::string& why) {
    int pair[2];
    if (::socketpair(AF_UNIX, SOCK_STREAM | SOCK_CLOEXEC, 0, pair) != 0) {
      why = std::string("socketpair: ") + std::strerror(errno);
      return false;
    }
    Fd mine(pair[0]), theirs(pair[1]);
    int pipe_fds[2];
    if (::pipe2(pipe_fds, O_CLOEXEC) != 0) {
      why = std::string("pipe: ") + std::strerror(errno);
      return false;
    }
    Fd out_read(pipe_fds[0]), out_write(pipe_fds[1]);
    // Standard error apart from standard output: a line of either is never split by the other
    // (standard output is buffered in the plug-in, standard error is not).
    if (::pipe2(pipe_fds, O_CLOEXEC) != 0) {
      why = std::string("pipe: ") + std::strerror(errno);
      return false;
    }
    Fd err_read(pipe_fds[0]), err_write(pipe_fds[1]);
    // Above the descriptors about to be set, so no dup2 clobbers another's source.
    Fd sock_high(::fcntl(theirs.get(), F_DUPFD_CLOEXEC, 10));
    Fd out_high(::fcntl(out_write.get(), F_DUPFD_CLOEXEC, 10));
    Fd err_high(::fcntl(err_write.get(), F_DUPFD_CLOEXEC, 10));
    if (sock_high.get() < 0 || out_high.get() < 0 || err_high.get() < 0) {
      why = std::string("fcntl: ") + std::strerror(errno);
      return false;
    }
    posix_spawn_file_actions_t actions;
    posix_spawn_file_actions_init(&actions);
    posix_spawn_file_actions_addopen(&actions, 0, "/dev/null", O_RDONLY, 0);
    posix_spawn_file_actions_adddup2(&actions, out_high.get(), 1);
    posix_spawn_file_actions_adddup2(&actions, err_high.get(), 2);
    posix_spawn_file_actions_adddup2(&actions, sock_high.get(), 3);
    // Nothing else of the rank's: not the run file, its lock, MPI's sockets or shared memory.
    posix_spawn_file_actions_addclosefrom_np(&actions, 4);
    posix_spawnattr_t attr;
    posix_spawnattr_init(&attr);
    sigset_t none, defaults;
    sigemptyset(&none);
    sigfillset(&defaults);
    posix_spawnattr_setsigmask(&attr, &none);
    posix_spawnattr_setsigdefault(&attr, &defaults);
    posix_spawnattr_setflags(&attr, POSIX_SPAWN_SETSIGMASK | POSIX_SPAWN_SETSIGDEF);
    const std::string parent = std::to_string(::getpid());
    std::vector<char*> argv = {const_cast<char*>(host_path_.c_str()),
                               const_cast<char*>(file_.c_str()), const_cast<char*>(parent.c_str())};
    for (const auto& [key, value] : spec_.parameters) {
      argv.push_back(const_cast<char*>(key.c_str()));
      argv.push_back(const_cast<char*>(value.c_str()));
    }
    argv.push_back(nullptr);
    pid_t pid = -1;
    const int rc = ::posix_spawn(&pid, host_path_.c_str(), &actions, &attr, argv.data(), environ);
    posix_spawn_file_actions_destroy(&actions);
    posix_spawnattr_destroy(&attr);
    if (rc != 0) {
      why = host_path_ + ": " + std::strerror(rc);
      return false;
    }
    ::fcntl(out_read.get(), F_SETFL, O_NONBLOCK);
    ::fcntl(err_read.get(), F_SETFL, O_NONBLOCK);
    // The last host's unfinished lines, under its own process id.
    for (int stream = 0; stream < 2; ++stream) flush_lines(stream, true);
    output_pid_ = pid;
    host_.pid = pid;
    host_.sock = std::move(mine);
    host_.output[0] = std::move(out_read);
    host_.output[1] = std::move(err_read);
    host_.matrix_sent = false;
    return true;
  }

  // Waits for the new host to load the library and describe it. On failure `why` says what
  // happened, for the job's refusal or the trial's record.
  Described await_description(std::string& payload, std::string& why) {
    const auto deadline = Clock::now() + std::chrono::duration_cast<Clock::duration>(
                                             std::chrono::duration<double>(spec_.timeout));
    bool loaded = false;
    for (;;) {
      host::Message m{};
      const ReadStatus st = receive(m, payload, deadline);
      const char* doing = loaded ? FREEGAP_ESTIMATOR_DESCRIBE_SYMBOL : "loading it";
      if (st == ReadStatus::stopped) {
        host_.end(true);
        why = "the run was asked to stop";
        return Described::stopped;
      }
      if (st == ReadStatus::timeout) {
        host_.end(true);
        take_output(true);
        why = std::string(doing) + " did not finish within the estimator's timeout of " +
              text::compact(spec_.timeout) + " s";
        return Described::failed;
      }
      if (st == ReadStatus::closed) {
        const int status = host_.end(false);
        take_output(true);
        if (!protocol_error_.empty()) {
          why = protocol_error_;
        } else if (WIFSIGNALED(status)) {
          why = std::string(doing) + " crashed: " + signal_text(WTERMSIG(status));
        } else {
          why = std::string(doing) + " ended its process (" + exit_text(status) + ")";
        }
        return Described::failed;
      }
      switch (m.kind) {
        case host::kLoaded:
          loaded = true;
          continue;
        case host::kDescribed:
          take_output(false);
          return Described::ok;
        case host::kExited:
          host_.end(false);
          take_output(true);
          why = std::string(doing) + " called exit(" + std::to_string(m.status) + ")";
          return Described::failed;
        case host::kLoadFailed:
          host_.end(false);
          take_output(true);
          if (m.status == host::kCannotLoad) {
            why = payload.empty() ? "unknown" : payload;
            return Described::cannot_load;
          }
          if (m.status == host::kDescribeNull) {
            why = ": " FREEGAP_ESTIMATOR_DESCRIBE_SYMBOL
                  " returned NULL; return a pointer to static freegap_estimator_info";
          } else {
            why = std::string(" does not export ") +
                  (m.status == host::kNoDescribe ? FREEGAP_ESTIMATOR_DESCRIBE_SYMBOL
                                                 : FREEGAP_ESTIMATOR_ESTIMATE_SYMBOL) +
                  "; define it with C linkage as declared in include/freegap/estimator_abi.h";
          }
          return Described::refused;
        default:
          host_.end(true);
          why = "its host sent an unexpected message";
          return Described::failed;
      }
    }
  }

  // The request header, with the read-only descriptor of the matrix memory the first time the
  // host needs it.
  bool send_request(const Request& req) {
    if (!wants_matrix_ || host_.matrix_sent) return send_all(host_.sock.get(), &req, sizeof req);
    Fd readonly(matrix_memory_->read_only_descriptor());
    if (readonly.get() < 0) return false;
    iovec iov{const_cast<Request*>(&req), sizeof req};
    alignas(cmsghdr) char control[CMSG_SPACE(sizeof(int))] = {};
    msghdr msg{};
    msg.msg_iov = &iov;
    msg.msg_iovlen = 1;
    msg.msg_control = control;
    msg.msg_controllen = sizeof control;
    cmsghdr* c = CMSG_FIRSTHDR(&msg);
    c->cmsg_level = SOL_SOCKET;
    c->cmsg_type = SCM_RIGHTS;
    c->cmsg_len = CMSG_LEN(sizeof(int));
    const int fd = readonly.get();
    std::memcpy(CMSG_DATA(c), &fd, sizeof fd);
    ssize_t k = -1;
    do {
      k = ::sendmsg(host_.sock.get(), &msg, MSG_NOSIGNAL);
    } while (k < 0 && errno == EINTR);
    if (k <= 0) return false;
    host_.matrix_sent = true;
    // The descriptor went with the first byte; the rest of the header follows plainly.
    return send_all(host_.sock.get(), reinterpret_cast<const char*>(&req) + k,
                    sizeof req - static_cast<std::size_t>(k));
  }

  enum class ReadStatus { ok, closed, timeout, stopped };

  // Waits until the socket has something to read, moving the host's output to the log
  // meanwhile; a stop request ends the wait within kStopLatency.
  ReadStatus wait_readable(Clock::time_point deadline) {
    constexpr long long kStopLatency = 100;  // ms
    for (;;) {
      if (stop_ && stop_()) return ReadStatus::stopped;
      const auto left =
          std::chrono::duration_cast<std::chrono::milliseconds>(deadline - Clock::now()).count();
      if (left <= 0) return ReadStatus::timeout;
      // A closed pipe's descriptor is -1, which poll skips.
      pollfd fds[3] = {{host_.sock.get(), POLLIN, 0},
                       {host_.output[0].get(), POLLIN, 0},
                       {host_.output[1].get(), POLLIN, 0}};
      const int ready = ::poll(fds, 3, static_cast<int>(std::min<long long>(left, kStopLatency)));
      if (ready < 0 && errno != EINTR) return ReadStatus::ok;  // recv reports the error
      if (ready <= 0) continue;
      if (fds[1].revents != 0 || fds[2].revents != 0) take_output(false);
      if (fds[0].revents != 0) return ReadStatus::ok;
    }
  }

  ReadStatus recv_all(void* data, std::size_t size, Clock::time_point deadline) {
    char* p = static_cast<char*>(data);
    while (size > 0) {
      const ReadStatus w = wait_readable(deadline);
      if (w != ReadStatus::ok) return w;
      const ssize_t k = ::recv(host_.sock.get(), p, size, MSG_DONTWAIT);
      if (k < 0 && (errno == EINTR || errno == EAGAIN)) continue;
      if (k <= 0) return ReadStatus::closed;
      p += k;
      size -= static_cast<std::size_t>(k);
    }
    return ReadStatus::ok;
  }

  // One message from the host. A message that is not one (the plug-in wrote to descriptor 3)
  // ends the host: it is reported as closed, with protocol_error_ saying why.
  ReadStatus receive(host::Message& m, std::string& payload, Clock::time_point deadline) {
    protocol_error_.clear();
    ReadStatus st = recv_all(&m, sizeof m, deadline);
    if (st != ReadStatus::ok) return st;
    constexpr std::uint32_t kMost = 1u << 20;  // far above any message the host sends
    if (m.magic != host::kHostMagic || m.length > kMost) {
      protocol_error_ =
          "its host sent something else than freegap's plug-in protocol (did the "
          "plug-in write to descriptor 3, or is " +
          host_path_ + " from another build?)";
      host_.end(true);
      return ReadStatus::closed;
    }
    payload.assign(m.length, '\0');
    return recv_all(payload.data(), payload.size(), deadline);
  }

  Outcome stopped(std::size_t count) {
    host_.end(true);
    take_output(true);
    return failed("stopped: the run was asked to stop", count);
  }

  // How the host ended (it closed the socket): waits for it.
  std::string ended() {
    const int status = host_.end(false);
    take_output(true);
    if (!protocol_error_.empty()) return "failed: " + protocol_error_;
    if (WIFSIGNALED(status)) return "crashed: " + signal_text(WTERMSIG(status));
    return "helper " + exit_text(status);
  }

  // Moves what the host wrote to its standard output and error into the log, a line at a time,
  // each line prefixed with the estimator's name, the host's process id and the stream. At
  // `last` (the host is gone) a line without its end is written too.
  void take_output(bool last) {
    for (int stream = 0; stream < 2; ++stream) {
      Fd& fd = host_.output[stream];
      if (fd.get() >= 0) {
        char buf[65536];
        for (;;) {
          const ssize_t k = ::read(fd.get(), buf, sizeof buf);
          if (k > 0) {
            partial_[stream].append(buf, static_cast<std::size_t>(k));
            if (partial_[stream].size() > sizeof buf) flush_lines(stream, true);
            continue;
          }
          if (k < 0 && errno == EINTR) continue;
          // End of file, or nothing more now. A gone host's pipe may still be held open by a
          // process the plug-in started: stop reading it rather than wait.
          if (k == 0 || last || errno != EAGAIN) fd.reset();
          break;
        }
      }
      flush_lines(stream, last);
    }
  }

  void flush_lines(int stream, bool whole) {
    std::string& partial = partial_[stream];
    if (partial.empty()) return;
    const std::string prefix =
        spec_.name + "[" + std::to_string(output_pid_) + "]" + (stream == 0 ? " out: " : " err: ");
    std::string text;
    std::size_t start = 0;
    for (std::size_t nl; (nl = partial.find('\n', start)) != std::string::npos; start = nl + 1) {
      text += prefix;
      text.append(partial, start, nl + 1 - start);
    }
    partial.erase(0, start);
    if (whole && !partial.empty()) {
      text += prefix + partial + "\n";
      partial.clear();
    }
    log_->write(text);
  }

  job::EstimatorSpec spec_;
  std::shared_ptr<PluginLog> log_;
  std::string file_;
  std::string host_path_;
  std::string description_;  // as the first host sent it
  std::vector<std::size_t> order_;
  bool wants_matrix_ = false;
  std::shared_ptr<SharedMatrixMemory> matrix_memory_;
  std::function<bool()> stop_;
  std::string protocol_error_;
  std::string partial_[2];  // the host's output and error not yet written to the log
  pid_t output_pid_ = -1;
  HostProcess host_;
};

// ---- external commands -------------------------------------------------------------------------

bool find_program(const std::string& program) {
  if (program.find('/') != std::string::npos) return ::access(program.c_str(), X_OK) == 0;
  const char* path = std::getenv("PATH");
  std::string dirs = path ? path : "/usr/bin:/bin";
  std::size_t start = 0;
  for (;;) {
    const std::size_t colon = dirs.find(':', start);
    std::string dir = dirs.substr(start, colon == std::string::npos ? std::string::npos : colon - start);
    if (dir.empty()) dir = ".";
    if (::access((dir + "/" + program).c_str(), X_OK) == 0) return true;
    if (colon == std::string::npos) return false;
    start = colon + 1;
  }
}

// Starts `command` with its standard input, output and error on the given pipe ends, in a process
// group of its own; posix_spawnp's result, and the child's id in `pid`.
int spawn_command(const std::vector<std::string>& command, const Fd& in_read, const Fd& out_write,
                  const Fd& err_write, pid_t& pid) {
  posix_spawn_file_actions_t actions;
  posix_spawn_file_actions_init(&actions);
  posix_spawn_file_actions_adddup2(&actions, in_read.get(), 0);
  posix_spawn_file_actions_adddup2(&actions, out_write.get(), 1);
  posix_spawn_file_actions_adddup2(&actions, err_write.get(), 2);
  // The command gets none of the rank's other descriptors (the run file, MPI's sockets).
  posix_spawn_file_actions_addclosefrom_np(&actions, 3);
  posix_spawnattr_t attr;
  posix_spawnattr_init(&attr);
  // A process group of its own: a timeout kills the command and anything it started, and a
  // terminal's Ctrl-C (meant for the run, which stops cleanly) does not reach it.
  posix_spawnattr_setpgroup(&attr, 0);
  sigset_t defaults;
  sigemptyset(&defaults);
  for (int s : {SIGINT, SIGTERM, SIGUSR1, SIGPIPE}) sigaddset(&defaults, s);
  posix_spawnattr_setsigdefault(&attr, &defaults);
  posix_spawnattr_setflags(&attr, POSIX_SPAWN_SETPGROUP | POSIX_SPAWN_SETSIGDEF);
  std::vector<char*> argv;
  for (const auto& word : command) argv.push_back(const_cast<char*>(word.c_str()));
  argv.push_back(nullptr);
  const int rc = ::posix_spawnp(&pid, argv[0], &actions, &attr, argv.data(), environ);
  posix_spawn_file_actions_destroy(&actions);
  posix_spawnattr_destroy(&attr);
  return rc;
}

// What a command wrote, and whether the exchange with it ended on the timeout or a stop request.
struct CommandOutput {
  std::string out, err;
  bool timed_out = false, stop = false;
};

// Feeds `text` to a command's input while draining its output and error, until both close, the
// timeout passes or `stop` asks to stop.
CommandOutput exchange(const std::string& text, double timeout, const std::function<bool()>& stop,
                       Fd& in_write, Fd& out_read, Fd& err_read) {
  // Feed stdin while draining stdout and stderr (a command may answer before reading all).
  ::fcntl(in_write.get(), F_SETFL, O_NONBLOCK);
  CommandOutput got;
  std::size_t sent = 0;
  const auto deadline = Clock::now() + std::chrono::duration_cast<Clock::duration>(
                                           std::chrono::duration<double>(timeout));
  while (out_read.get() >= 0 || err_read.get() >= 0) {
    const auto left =
        std::chrono::duration_cast<std::chrono::milliseconds>(deadline - Clock::now()).count();
    if (left <= 0) {
      got.timed_out = true;
      break;
    }
    if (stop && stop()) {
      got.stop = true;
      break;
    }
    pollfd fds[3];
    int nfds = 0;
    int in_slot = -1, out_slot = -1, err_slot = -1;
    if (in_write.get() >= 0) {
      in_slot = nfds;
      fds[nfds++] = {in_write.get(), POLLOUT, 0};
    }
    if (out_read.get() >= 0) {
      out_slot = nfds;
      fds[nfds++] = {out_read.get(), POLLIN, 0};
    }
    if (err_read.get() >= 0) {
      err_slot = nfds;
      fds[nfds++] = {err_read.get(), POLLIN, 0};
    }
    // In slices, so that a stop request ends the wait soon.
    const int ready =
        ::poll(fds, static_cast<nfds_t>(nfds), static_cast<int>(std::min<long long>(left, 100)));
    if (ready < 0 && errno == EINTR) continue;
    if (ready <= 0) continue;
    if (in_slot >= 0 && fds[in_slot].revents != 0) {
      if (fds[in_slot].revents & (POLLERR | POLLHUP)) {
        in_write.reset();  // the command closed its input: it read what it wanted
      } else {
        const ssize_t k = ::write(in_write.get(), text.data() + sent, text.size() - sent);
        if (k > 0) sent += static_cast<std::size_t>(k);
        if ((k < 0 && errno != EAGAIN && errno != EINTR) || sent == text.size()) in_write.reset();
      }
    }
    char buf[65536];
    for (auto [slot, fd, sink] : {std::tuple<int, Fd*, std::string*>{out_slot, &out_read, &got.out},
                                  {err_slot, &err_read, &got.err}}) {
      if (slot < 0 || fds[slot].revents == 0) continue;
      const ssize_t k = ::read(fd->get(), buf, sizeof buf);
      if (k > 0) {
        if (sink->size() < (std::size_t{1} << 26)) sink->append(buf, static_cast<std::size_t>(k));
      } else if (k == 0 || (errno != EINTR && errno != EAGAIN)) {
        fd->reset();
      }
    }
  }
  return got;
}

// The last line of a command's error output that is not blank ("" if there is none).
std::string last_line(const std::string& err) {
  std::string last;
  std::size_t end = err.find_last_not_of(" \n\r\t");
  if (end != std::string::npos) {
    const std::size_t begin = err.rfind('\n', end);
    last = err.substr(begin == std::string::npos ? 0 : begin + 1,
                      end + 1 - (begin == std::string::npos ? 0 : begin + 1));
  }
  return last;
}

class CommandEstimator final : public Estimator {
 public:
  CommandEstimator(const job::Job& job, const job::EstimatorSpec& spec) : spec_(spec) {
    if (!find_program(spec.command[0])) {
      throw InputError(where(job, spec, "command") + "cannot find the program '" +
                       spec.command[0] +
                       "' (or it is not executable); give its path, or a program on PATH");
    }
  }

  void set_stop_check(std::function<bool()> requested) override { stop_ = std::move(requested); }

  Outcome estimate(const TrialInput& input) override {
    const std::size_t count = spec_.estimates.size();
    const std::string text = command_input(input, spec_.parameters);

    int in_pipe[2], out_pipe[2], err_pipe[2];
    if (::pipe2(in_pipe, O_CLOEXEC) != 0) return failed(std::string("pipe: ") + std::strerror(errno), count);
    Fd in_read(in_pipe[0]), in_write(in_pipe[1]);
    if (::pipe2(out_pipe, O_CLOEXEC) != 0) return failed(std::string("pipe: ") + std::strerror(errno), count);
    Fd out_read(out_pipe[0]), out_write(out_pipe[1]);
    if (::pipe2(err_pipe, O_CLOEXEC) != 0) return failed(std::string("pipe: ") + std::strerror(errno), count);
    Fd err_read(err_pipe[0]), err_write(err_pipe[1]);

    pid_t pid = -1;
    const int rc = spawn_command(spec_.command, in_read, out_write, err_write, pid);
    in_read.reset();
    out_write.reset();
    err_write.reset();
    if (rc != 0) {
      return failed("cannot start '" + spec_.command[0] + "': " + std::strerror(rc), count);
    }

    const CommandOutput got = exchange(text, spec_.timeout, stop_, in_write, out_read, err_read);
    int status = 0;
    if (got.timed_out || got.stop) {
      ::kill(-pid, SIGKILL);
      ::kill(pid, SIGKILL);
    }
    while (::waitpid(pid, &status, 0) < 0 && errno == EINTR) {
    }
    if (got.stop) return failed("stopped: the run was asked to stop", count);
    if (got.timed_out) {
      return failed("command did not finish within the timeout of " + text::compact(spec_.timeout) +
                        " s; it was killed",
                    count);
    }
    if (!(WIFEXITED(status) && WEXITSTATUS(status) == 0)) {
      const std::string last = last_line(got.err);
      return failed("command " + exit_text(status) + (last.empty() ? "" : ": " + last), count);
    }
    return parse_command_output(got.out, spec_.estimates);
  }

 private:
  job::EstimatorSpec spec_;
  std::function<bool()> stop_;
};

}  // namespace

// Defined in builtin.cpp.
std::unique_ptr<Estimator> make_builtin(const job::Job& job, const job::EstimatorSpec& spec);

std::unique_ptr<Estimator> open_estimator(const job::Job& job, std::size_t index) {
  return open_estimator(job, index, std::make_shared<PluginLog>());
}

std::unique_ptr<Estimator> open_estimator(const job::Job& job, std::size_t index,
                                          std::shared_ptr<PluginLog> log) {
  const auto& spec = job.estimators.at(index);
  switch (spec.source) {
    case job::EstimatorSpec::Source::builtin:
      return make_builtin(job, spec);
    case job::EstimatorSpec::Source::library:
      return std::make_unique<LibraryEstimator>(job, spec, log);
    case job::EstimatorSpec::Source::command:
      return std::make_unique<CommandEstimator>(job, spec);
  }
  throw InputError("unknown estimator source");
}

EstimatorSet::EstimatorSet(const job::Job& job) : log_(std::make_shared<PluginLog>()) {
  for (std::size_t i = 0; i < job.estimators.size(); ++i) {
    estimators_.push_back(open_estimator(job, i, log_));
    widths_.push_back(job.estimators[i].estimates.size());
    columns_ += widths_.back();
    wants_matrix_ = wants_matrix_ || estimators_.back()->wants_matrix();
  }
  if (wants_matrix_) {
    // One memory for every plug-in that reads the matrix: the runner's copy is the only one.
    matrix_memory_ = std::make_shared<SharedMatrixMemory>();
    for (auto& e : estimators_) e->share_matrix_memory(matrix_memory_);
  }
}

EstimatorSet::~EstimatorSet() = default;

void EstimatorSet::set_stop_check(std::function<bool()> requested) {
  for (auto& e : estimators_) e->set_stop_check(requested);
}

void EstimatorSet::log_plugin_output_to(const std::string& path, std::size_t limit_bytes) {
  if (log_) log_->open(path, limit_bytes);
}

std::string plugin_log_path(const std::string& run_file) { return run_file + ".estimators.log"; }

double* EstimatorSet::matrix_buffer(std::size_t doubles) {
  if (!matrix_memory_) throw Error("no estimator of this job reads the matrix");
  return matrix_memory_->reserve(doubles);
}

void EstimatorSet::run(const TrialInput& input, std::vector<double>& values,
                       std::vector<std::string>& reasons) {
  values.clear();
  reasons.clear();
  for (std::size_t i = 0; i < estimators_.size(); ++i) {
    Outcome o;
    try {
      o = estimators_[i]->estimate(input);
    } catch (const std::exception& e) {
      o = failed(e.what(), widths_[i]);
    }
    if (o.values.size() != widths_[i]) o = failed("wrong number of values", widths_[i]);
    values.insert(values.end(), o.values.begin(), o.values.end());
    reasons.push_back(o.failed ? (o.reason.empty() ? "failed" : o.reason) : std::string());
  }
}

void EstimatorSet::fail_all(const std::string& why, std::vector<double>& values,
                            std::vector<std::string>& reasons) const {
  values.assign(columns_, kNaN);
  reasons.assign(estimators_.size(), clean(why));
}

// ---- the command bridge's text format ------------------------------------------------------------

std::string command_input(const TrialInput& input,
                          const std::vector<std::pair<std::string, std::string>>& parameters) {
  std::string text = "freegap-estimate 1\n";
  text += "n " + std::to_string(input.n) + "\n";
  text += "trial " + std::to_string(input.trial) + "\n";
  text += "seed " + std::to_string(input.seed) + "\n";
  text += input.kind == observe::SpectrumKind::eigenvalues ? "kind eigenvalues\n"
                                                           : "kind singular_values\n";
  for (const auto& [key, value] : parameters) text += "parameter " + key + " " + value + "\n";
  text += "values " + std::to_string(input.spectrum.size()) + "\n";
  text.reserve(text.size() + 25 * input.spectrum.size() + 8);
  for (const double x : input.spectrum) {
    text += text::exact(x);
    text += '\n';
  }
  text += "end\n";
  return text;
}

Outcome parse_command_output(std::string_view text, const std::vector<std::string>& names) {
  const std::size_t count = names.size();
  std::vector<double> values(count, kNaN);
  std::vector<bool> seen(count, false);
  std::size_t line_no = 0;
  while (!text.empty()) {
    const std::size_t nl = text.find('\n');
    std::string_view line = text.substr(0, nl);
    text = nl == std::string_view::npos ? std::string_view() : text.substr(nl + 1);
    ++line_no;
    while (!line.empty() && (line.back() == '\r' || line.back() == ' ' || line.back() == '\t')) {
      line.remove_suffix(1);
    }
    while (!line.empty() && (line.front() == ' ' || line.front() == '\t')) line.remove_prefix(1);
    if (line.empty() || line.front() == '#') continue;
    const std::size_t space = line.find_first_of(" \t");
    const auto bad = [&](const std::string& why) {
      return failed("malformed output, line " + std::to_string(line_no) + ": " + why +
                        " (expected 'name value')",
                    count);
    };
    if (space == std::string_view::npos) return bad("'" + std::string(line.substr(0, 40)) + "'");
    const std::string name(line.substr(0, space));
    std::string_view rest = line.substr(space);
    while (!rest.empty() && (rest.front() == ' ' || rest.front() == '\t')) rest.remove_prefix(1);
    const auto it = std::find(names.begin(), names.end(), name);
    if (it == names.end()) {
      return failed("output names unknown estimate '" + name.substr(0, 64) + "' (declared: " +
                        join_names(names) + ")",
                    count);
    }
    const auto i = static_cast<std::size_t>(it - names.begin());
    if (seen[i]) return failed("output gives '" + name + "' twice", count);
    seen[i] = true;
    // strtod reads nan/inf too, so a NaN answer is reported as NaN, not as malformed.
    const std::string value(rest);
    char* end = nullptr;
    errno = 0;
    const double x = std::strtod(value.c_str(), &end);
    if (value.empty() || end != value.c_str() + value.size()) {
      return bad("cannot read '" + value.substr(0, 40) + "' as a number");
    }
    values[i] = x;
  }
  for (std::size_t i = 0; i < count; ++i) {
    if (!seen[i]) return failed("output lacks estimate '" + names[i] + "'", count);
  }
  return checked(std::move(values), names, "command");
}

}  // namespace freegap::estimate
