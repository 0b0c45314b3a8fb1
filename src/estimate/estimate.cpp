// Estimators that ride along with a run (include/freegap/estimate.hpp): plug-in libraries in a
// forked helper process, external commands, and the set that runs them on a trial.
#include "freegap/estimate.hpp"

#include <dlfcn.h>
#include <fcntl.h>
#include <poll.h>
#include <signal.h>
#include <spawn.h>
#include <sys/mman.h>
#include <sys/prctl.h>
#include <sys/socket.h>
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
#include <limits>
#include <set>

#include "freegap/errors.hpp"
#include "freegap/estimator_abi.h"

extern char** environ;

namespace freegap::estimate {

// A memfd: the rank maps it read-write and writes each trial's matrix into it; plug-in helpers,
// forked with the descriptor, map it read-only. It only grows, so a helper's older, smaller
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

  // In a freshly forked helper: drops the rank's writable mapping and returns a read-only
  // descriptor of the memory (a new open of it, so not even mprotect can make a mapping of it
  // writable), or a copy of the rank's descriptor where /proc is not there to reopen it. Either
  // way the plug-in cannot change the matrix another estimator of the rank reads next.
  int read_only_in_child() const {
    if (data_ != nullptr) ::munmap(data_, bytes_);
    char path[64];
    std::snprintf(path, sizeof path, "/proc/self/fd/%d", fd_);
    const int fd = ::open(path, O_RDONLY);
    if (fd < 0) return ::fcntl(fd_, F_DUPFD, 10);
    const int high = ::fcntl(fd, F_DUPFD, 10);  // above the descriptors about to be set
    ::close(fd);
    return high;
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

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
using Clock = std::chrono::steady_clock;

std::string number_text(double x) {
  char buf[40];
  const auto r = std::to_chars(buf, buf + sizeof buf, x, std::chars_format::general, 17);
  return std::string(buf, r.ptr);
}

std::string seconds_text(double s) {
  char buf[40];
  std::snprintf(buf, sizeof buf, "%g", s);
  return buf;
}

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

enum class ReadStatus { ok, closed, timeout };

// Reads exactly `size` bytes before `deadline`.
ReadStatus recv_all(int fd, void* data, std::size_t size, Clock::time_point deadline) {
  char* p = static_cast<char*>(data);
  while (size > 0) {
    const auto left =
        std::chrono::duration_cast<std::chrono::milliseconds>(deadline - Clock::now()).count();
    if (left <= 0) return ReadStatus::timeout;
    pollfd pfd{fd, POLLIN, 0};
    const int ready = ::poll(&pfd, 1, static_cast<int>(std::min<long long>(left, 1 << 30)));
    if (ready < 0 && errno == EINTR) continue;
    if (ready < 0) return ReadStatus::closed;
    if (ready == 0) continue;  // the deadline check above ends the loop
    const ssize_t k = ::recv(fd, p, size, 0);
    if (k < 0 && errno == EINTR) continue;
    if (k <= 0) return ReadStatus::closed;
    p += k;
    size -= static_cast<std::size_t>(k);
  }
  return ReadStatus::ok;
}

// Blocking read for the helper side; false on end of file.
bool read_exact(int fd, void* data, std::size_t size) {
  char* p = static_cast<char*>(data);
  while (size > 0) {
    const ssize_t k = ::read(fd, p, size);
    if (k < 0 && errno == EINTR) continue;
    if (k <= 0) return false;
    p += k;
    size -= static_cast<std::size_t>(k);
  }
  return true;
}

// ---- plug-in libraries -------------------------------------------------------------------------

// One trial for the helper: this header, then `length` spectrum values. The matrix, when the
// plug-in asked for it, is at the start of the shared memory (rows · cols doubles, twice that
// for a complex one), which the helper has mapped as descriptor 4.
struct Request {
  std::uint64_t trial;
  std::uint64_t seed;
  std::int64_t n;
  std::int64_t length;
  std::int32_t kind;
  std::int32_t matrix_is_complex;
  std::int64_t matrix_rows;  // 0 without a matrix
  std::int64_t matrix_cols;
};

struct Response {
  std::int32_t status;  // values written, or < 0: the plug-in reported failure
  std::uint32_t message_length;
};

constexpr int kMessageSize = 512;

// The helper process: answers requests until the rank closes its end of the socket. Never
// returns; never calls MPI or anything that flushes the rank's stdio buffers.
[[noreturn]] void serve(int fd, int matrix_fd, freegap_estimator_estimate_fn estimate,
                        int capacity, const std::vector<freegap_parameter>& parameters) {
  std::vector<double> spectrum;
  const void* matrix = nullptr;  // the shared memory, mapped read-only
  std::size_t matrix_bytes = 0;
  std::vector<double> out(static_cast<std::size_t>(capacity));
  constexpr std::int64_t kMost = std::int64_t{1} << 34;  // a sanity bound, not a limit in use
  for (;;) {
    Request req{};
    if (!read_exact(fd, &req, sizeof req)) ::_exit(0);
    if (req.length < 0 || req.length > kMost || req.matrix_rows < 0 || req.matrix_cols < 0 ||
        req.matrix_rows > kMost ||
        req.matrix_cols > kMost / std::max<std::int64_t>(1, req.matrix_rows)) {
      ::_exit(3);
    }
    spectrum.resize(static_cast<std::size_t>(req.length));
    if (!read_exact(fd, spectrum.data(), spectrum.size() * sizeof(double))) ::_exit(0);
    const std::size_t need = static_cast<std::size_t>(req.matrix_rows * req.matrix_cols) *
                             (req.matrix_is_complex ? 2u : 1u) * sizeof(double);
    if (need > matrix_bytes) {
      if (matrix_fd < 0) ::_exit(3);
      void* p = ::mmap(nullptr, need, PROT_READ, MAP_SHARED, matrix_fd, 0);
      if (p == MAP_FAILED) ::_exit(5);
      if (matrix != nullptr) ::munmap(const_cast<void*>(matrix), matrix_bytes);
      matrix = p;
      matrix_bytes = need;
    }
    freegap_trial trial{};
    trial.abi_version = FREEGAP_ESTIMATOR_ABI_VERSION;
    trial.spectrum_kind = req.kind;
    trial.n = req.n;
    trial.trial = req.trial;
    trial.seed = req.seed;
    trial.spectrum = spectrum.data();
    trial.spectrum_length = req.length;
    trial.parameters = parameters.data();
    trial.parameter_count = static_cast<std::int64_t>(parameters.size());
    if (req.matrix_rows > 0) {
      trial.matrix = static_cast<const double*>(matrix);
      trial.matrix_rows = req.matrix_rows;
      trial.matrix_cols = req.matrix_cols;
      trial.matrix_is_complex = req.matrix_is_complex != 0 ? 1 : 0;
    }
    char message[kMessageSize] = {};
    std::fill(out.begin(), out.end(), kNaN);
    const int status = estimate(&trial, out.data(), capacity, message, kMessageSize);
    message[kMessageSize - 1] = '\0';
    Response resp{status, static_cast<std::uint32_t>(std::strlen(message))};
    const std::size_t count =
        status > 0 ? static_cast<std::size_t>(std::min(status, capacity)) : 0;
    if (!send_all(fd, &resp, sizeof resp) || !send_all(fd, out.data(), count * sizeof(double)) ||
        !send_all(fd, message, resp.message_length)) {
      ::_exit(0);
    }
  }
}

class LibraryEstimator final : public Estimator {
 public:
  LibraryEstimator(const job::Job& job, const job::EstimatorSpec& spec) : spec_(spec) {
    const std::string at = where(job, spec, "library");
    // The job names a file (beside the job file when relative); dlopen would look a bare file
    // name up on the system's library path instead.
    const std::string file =
        spec.library.find('/') == std::string::npos ? "./" + spec.library : spec.library;
    handle_ = ::dlopen(file.c_str(), RTLD_NOW | RTLD_LOCAL);
    if (handle_ == nullptr) {
      const char* why = ::dlerror();
      throw InputError(at + "cannot load '" + spec.library + "' (" + (why ? why : "unknown") +
                       "); give the path of a shared library built against "
                       "include/freegap/estimator_abi.h");
    }
    auto describe = reinterpret_cast<freegap_estimator_describe_fn>(
        ::dlsym(handle_, FREEGAP_ESTIMATOR_DESCRIBE_SYMBOL));
    estimate_ = reinterpret_cast<freegap_estimator_estimate_fn>(
        ::dlsym(handle_, FREEGAP_ESTIMATOR_ESTIMATE_SYMBOL));
    for (const auto& [fn, symbol] :
         {std::pair<const void*, const char*>{reinterpret_cast<const void*>(describe),
                                              FREEGAP_ESTIMATOR_DESCRIBE_SYMBOL},
          {reinterpret_cast<const void*>(estimate_), FREEGAP_ESTIMATOR_ESTIMATE_SYMBOL}}) {
      if (fn == nullptr) {
        throw InputError(at + "'" + spec.library + "' does not export " + symbol +
                         "; define it with C linkage as declared in "
                         "include/freegap/estimator_abi.h");
      }
    }
    const freegap_estimator_info* info = describe();
    if (info == nullptr) {
      throw InputError(at + "'" + spec.library + "': " FREEGAP_ESTIMATOR_DESCRIBE_SYMBOL
                            " returned NULL; return a pointer to static freegap_estimator_info");
    }
    if (info->abi_version < FREEGAP_ESTIMATOR_ABI_OLDEST ||
        info->abi_version > FREEGAP_ESTIMATOR_ABI_VERSION) {
      throw InputError(at + "'" + spec.library + "' was built for plug-in ABI version " +
                       std::to_string(info->abi_version) + ", this freegap loads versions " +
                       std::to_string(FREEGAP_ESTIMATOR_ABI_OLDEST) + " to " +
                       std::to_string(FREEGAP_ESTIMATOR_ABI_VERSION) +
                       "; rebuild it against this freegap's include/freegap/estimator_abi.h");
    }
    // Version 1's info ends before `wants`: read it only from version 2 on.
    const std::uint32_t wants = info->abi_version >= 2 ? info->wants : 0u;
    if ((wants & ~FREEGAP_WANTS_MATRIX) != 0) {
      throw InputError(at + "'" + spec.library + "' asks for input this freegap does not know " +
                       "(wants = " + std::to_string(wants) + "; known: FREEGAP_WANTS_MATRIX = " +
                       std::to_string(FREEGAP_WANTS_MATRIX) + "); clear the unknown bits");
    }
    wants_matrix_ = (wants & FREEGAP_WANTS_MATRIX) != 0;
    if (info->estimate_count < 1 || info->estimate_count > FREEGAP_ESTIMATOR_MAX_ESTIMATES ||
        info->estimate_names == nullptr) {
      throw InputError(at + "'" + spec.library + "' declares " +
                       std::to_string(info->estimate_count) + " estimates; declare 1 to " +
                       std::to_string(FREEGAP_ESTIMATOR_MAX_ESTIMATES) + " names");
    }
    std::vector<std::string> names;
    for (int i = 0; i < info->estimate_count; ++i) {
      const char* name = info->estimate_names[i];
      if (name == nullptr) {
        throw InputError(at + "'" + spec.library + "' declares a NULL estimate name");
      }
      names.emplace_back(name);
    }
    std::set<std::string> distinct(names.begin(), names.end());
    if (distinct.size() != names.size()) {
      throw InputError(at + "'" + spec.library + "' declares an estimate name twice (" +
                       join_names(names) + ")");
    }
    check_names(job, spec, names, "the plug-in");
    // Declared order → the spec's sorted order.
    for (const auto& name : names) {
      order_.push_back(static_cast<std::size_t>(
          std::lower_bound(spec.estimates.begin(), spec.estimates.end(), name) -
          spec.estimates.begin()));
    }
    for (const auto& [key, value] : spec_.parameters) {
      parameters_.push_back({key.c_str(), value.c_str()});
    }
  }

  ~LibraryEstimator() override {
    stop_helper(false);
    // The library stays loaded: a plug-in's static destructors may run at exit, not here.
  }

  bool wants_matrix() const override { return wants_matrix_; }
  void share_matrix_memory(std::shared_ptr<SharedMatrixMemory> memory) override {
    if (wants_matrix_ && pid_ <= 0) matrix_memory_ = std::move(memory);
  }

  Outcome estimate(const TrialInput& input) override {
    const std::size_t count = spec_.estimates.size();
    if (wants_matrix_) {
      if (input.matrix.data == nullptr) {
        return failed("the plug-in asks for the matrix, and this trial has none to give", count);
      }
      // Created before the helper is forked, which inherits it (throws Error: a failed trial).
      if (!matrix_memory_) matrix_memory_ = std::make_shared<SharedMatrixMemory>();
      // The runner writes it there already (EstimatorSet::matrix_buffer); anyone else's is copied.
      if (input.matrix.data != matrix_memory_->data()) {
        std::memcpy(matrix_memory_->reserve(input.matrix.doubles()), input.matrix.data,
                    input.matrix.doubles() * sizeof(double));
      }
    }
    if (pid_ <= 0 && !start_helper()) {
      return failed("could not start the plug-in's helper process (" + start_error_ + ")", count);
    }
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
    const auto deadline =
        Clock::now() + std::chrono::duration_cast<Clock::duration>(
                           std::chrono::duration<double>(spec_.timeout));
    if (!send_all(sock_.get(), &req, sizeof req) ||
        !send_all(sock_.get(), input.spectrum.data(), input.spectrum.size() * sizeof(double))) {
      return failed("plug-in " + ended(), count);
    }
    Response resp{};
    ReadStatus st = recv_all(sock_.get(), &resp, sizeof resp, deadline);
    std::vector<double> got;
    std::string message;
    if (st == ReadStatus::ok) {
      const std::size_t k = resp.status > 0 ? static_cast<std::size_t>(
                                                  std::min<int>(resp.status, static_cast<int>(count)))
                                            : 0;
      got.resize(k);
      st = recv_all(sock_.get(), got.data(), k * sizeof(double), deadline);
      if (st == ReadStatus::ok && resp.message_length > 0) {
        message.resize(std::min<std::uint32_t>(resp.message_length, kMessageSize));
        st = recv_all(sock_.get(), message.data(), message.size(), deadline);
      }
    }
    if (st == ReadStatus::timeout) {
      stop_helper(true);
      return failed("plug-in did not answer within the timeout of " + seconds_text(spec_.timeout) +
                        " s; its helper process was stopped",
                    count);
    }
    if (st == ReadStatus::closed) return failed("plug-in " + ended(), count);
    if (resp.status < 0) {
      return failed("plug-in reported failure" + (message.empty() ? "" : ": " + message), count);
    }
    if (static_cast<std::size_t>(resp.status) != count) {
      return failed("plug-in returned " + std::to_string(resp.status) + " value(s), declared " +
                        std::to_string(count),
                    count);
    }
    std::vector<double> values(count, kNaN);
    for (std::size_t i = 0; i < count; ++i) values[order_[i]] = got[i];
    return checked(std::move(values), spec_.estimates, "plug-in");
  }

 private:
  bool start_helper() {
    int pair[2];
    if (::socketpair(AF_UNIX, SOCK_STREAM | SOCK_CLOEXEC, 0, pair) != 0) {
      start_error_ = std::strerror(errno);
      return false;
    }
    Fd mine(pair[0]), theirs(pair[1]);
    const pid_t parent = ::getpid();
    const pid_t pid = ::fork();
    if (pid < 0) {
      start_error_ = std::strerror(errno);
      return false;
    }
    if (pid == 0) {
      // The helper: dies with the rank, ignores the stop signals meant for the rank (the rank
      // decides when to stop and closes the socket), and serves until end of file.
      ::prctl(PR_SET_PDEATHSIG, SIGKILL);
      if (::getppid() != parent) ::_exit(0);
      ::signal(SIGINT, SIG_IGN);
      ::signal(SIGTERM, SIG_IGN);
      ::signal(SIGUSR1, SIG_IGN);
      ::signal(SIGPIPE, SIG_IGN);
      // The rank's crash handlers (MPI libraries print a backtrace) are not the helper's: a
      // crashing plug-in dies quietly and the rank records the signal.
      for (int s : {SIGSEGV, SIGBUS, SIGFPE, SIGILL, SIGABRT}) ::signal(s, SIG_DFL);
      mine.reset();
      // Hold none of the rank's descriptors (the run file and its lock, MPI's sockets): only
      // standard input, output, error, the socket (moved to descriptor 3) and the shared matrix
      // memory, read-only (descriptor 4). Both are first moved above 4 so neither dup2 clobbers
      // the other.
      const int sock = ::fcntl(theirs.get(), F_DUPFD, 10);
      const int shared = matrix_memory_ ? matrix_memory_->read_only_in_child() : -1;
      if (sock < 0 || (matrix_memory_ && shared < 0) || ::dup2(sock, 3) < 0 ||
          (shared >= 0 && ::dup2(shared, 4) < 0)) {
        ::_exit(4);
      }
      ::close_range(shared >= 0 ? 5 : 4, ~0U, 0);
      serve(3, shared >= 0 ? 4 : -1, estimate_, static_cast<int>(spec_.estimates.size()),
            parameters_);
    }
    pid_ = pid;
    sock_ = std::move(mine);
    return true;
  }

  // How the helper ended (it closed the socket): waits for it and forgets it.
  std::string ended() {
    sock_.reset();
    int status = 0;
    pid_t got = -1;
    do {
      got = ::waitpid(pid_, &status, 0);
    } while (got < 0 && errno == EINTR);
    pid_ = -1;
    if (got < 0) return "helper process vanished";
    if (WIFSIGNALED(status)) return "crashed: " + signal_text(WTERMSIG(status));
    return "helper " + exit_text(status);
  }

  void stop_helper(bool kill_now) {
    if (pid_ <= 0) return;
    sock_.reset();  // end of file: an idle helper exits at once
    int status = 0;
    if (!kill_now) {
      for (int i = 0; i < 200; ++i) {
        if (::waitpid(pid_, &status, WNOHANG) == pid_) {
          pid_ = -1;
          return;
        }
        ::usleep(5000);
      }
    }
    ::kill(pid_, SIGKILL);
    while (::waitpid(pid_, &status, 0) < 0 && errno == EINTR) {
    }
    pid_ = -1;
  }

  job::EstimatorSpec spec_;
  void* handle_ = nullptr;
  freegap_estimator_estimate_fn estimate_ = nullptr;
  std::vector<std::size_t> order_;
  std::vector<freegap_parameter> parameters_;
  pid_t pid_ = -1;
  Fd sock_;
  std::string start_error_;
  bool wants_matrix_ = false;
  std::shared_ptr<SharedMatrixMemory> matrix_memory_;
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

class CommandEstimator final : public Estimator {
 public:
  CommandEstimator(const job::Job& job, const job::EstimatorSpec& spec) : spec_(spec) {
    if (!find_program(spec.command[0])) {
      throw InputError(where(job, spec, "command") + "cannot find the program '" +
                       spec.command[0] +
                       "' (or it is not executable); give its path, or a program on PATH");
    }
  }

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
    for (const auto& word : spec_.command) argv.push_back(const_cast<char*>(word.c_str()));
    argv.push_back(nullptr);
    pid_t pid = -1;
    const int rc = ::posix_spawnp(&pid, argv[0], &actions, &attr, argv.data(), environ);
    posix_spawn_file_actions_destroy(&actions);
    posix_spawnattr_destroy(&attr);
    in_read.reset();
    out_write.reset();
    err_write.reset();
    if (rc != 0) {
      return failed("cannot start '" + spec_.command[0] + "': " + std::strerror(rc), count);
    }

    // Feed stdin while draining stdout and stderr (a command may answer before reading all).
    ::fcntl(in_write.get(), F_SETFL, O_NONBLOCK);
    std::string out, err;
    std::size_t sent = 0;
    bool timed_out = false;
    const auto deadline =
        Clock::now() + std::chrono::duration_cast<Clock::duration>(
                           std::chrono::duration<double>(spec_.timeout));
    while (out_read.get() >= 0 || err_read.get() >= 0) {
      const auto left =
          std::chrono::duration_cast<std::chrono::milliseconds>(deadline - Clock::now()).count();
      if (left <= 0) {
        timed_out = true;
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
      const int ready = ::poll(fds, static_cast<nfds_t>(nfds), static_cast<int>(std::min<long long>(left, 1 << 30)));
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
      for (auto [slot, fd, sink] : {std::tuple<int, Fd*, std::string*>{out_slot, &out_read, &out},
                                    {err_slot, &err_read, &err}}) {
        if (slot < 0 || fds[slot].revents == 0) continue;
        const ssize_t k = ::read(fd->get(), buf, sizeof buf);
        if (k > 0) {
          if (sink->size() < (std::size_t{1} << 26)) sink->append(buf, static_cast<std::size_t>(k));
        } else if (k == 0 || (errno != EINTR && errno != EAGAIN)) {
          fd->reset();
        }
      }
    }
    int status = 0;
    if (timed_out) {
      ::kill(-pid, SIGKILL);
      ::kill(pid, SIGKILL);
    }
    while (::waitpid(pid, &status, 0) < 0 && errno == EINTR) {
    }
    if (timed_out) {
      return failed("command did not finish within the timeout of " + seconds_text(spec_.timeout) +
                        " s; it was killed",
                    count);
    }
    if (!(WIFEXITED(status) && WEXITSTATUS(status) == 0)) {
      std::string last;
      std::size_t end = err.find_last_not_of(" \n\r\t");
      if (end != std::string::npos) {
        const std::size_t begin = err.rfind('\n', end);
        last = err.substr(begin == std::string::npos ? 0 : begin + 1, end + 1 - (begin == std::string::npos ? 0 : begin + 1));
      }
      return failed("command " + exit_text(status) + (last.empty() ? "" : ": " + last), count);
    }
    return parse_command_output(out, spec_.estimates);
  }

 private:
  job::EstimatorSpec spec_;
};

}  // namespace

// Defined in builtin.cpp.
std::unique_ptr<Estimator> make_builtin(const job::Job& job, const job::EstimatorSpec& spec);

std::unique_ptr<Estimator> open_estimator(const job::Job& job, std::size_t index) {
  const auto& spec = job.estimators.at(index);
  switch (spec.source) {
    case job::EstimatorSpec::Source::builtin:
      return make_builtin(job, spec);
    case job::EstimatorSpec::Source::library:
      return std::make_unique<LibraryEstimator>(job, spec);
    case job::EstimatorSpec::Source::command:
      return std::make_unique<CommandEstimator>(job, spec);
  }
  throw InputError("unknown estimator source");
}

EstimatorSet::EstimatorSet(const job::Job& job) {
  for (std::size_t i = 0; i < job.estimators.size(); ++i) {
    estimators_.push_back(open_estimator(job, i));
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
    text += number_text(x);
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
