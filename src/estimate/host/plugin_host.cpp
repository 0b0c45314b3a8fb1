// freegap-plugin-host: the only process that loads a plug-in estimator library. A rank starts one
// per library estimator (posix_spawn, then exec of this small program: a clean process image
// with no MPI, no HDF5, no threads and none of the rank's exit handlers), talks to it over a
// socket pair on descriptor 3 (src/estimate/plugin_host_protocol.hpp), and sends the plug-in's
// standard output and error, descriptors 1 and 2, to the run's log. The host loads the library,
// calls describe and reports what it declares, then calls estimate once per request until the
// rank closes the socket. Whatever the plug-in does — crash, hang, exit — ends this process
// only; the rank sees it and records it. Not a command for people: started by freegap only.
#include <dlfcn.h>
#include <signal.h>
#include <stdlib.h>
#include <sys/mman.h>
#include <sys/prctl.h>
#include <sys/socket.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstdio>
#include <cstring>
#include <initializer_list>
#include <limits>
#include <string>
#include <vector>

#include "../plugin_host_protocol.hpp"
#include "freegap/estimator_abi.h"

namespace {

using namespace freegap::estimate::host;

constexpr int kSocket = 3;
const char* g_phase = "loading";

bool send_all(const void* data, std::size_t size) {
  const char* p = static_cast<const char*>(data);
  while (size > 0) {
    const ssize_t k = ::send(kSocket, p, size, MSG_NOSIGNAL);
    if (k < 0 && errno == EINTR) continue;
    if (k <= 0) return false;
    p += k;
    size -= static_cast<std::size_t>(k);
  }
  return true;
}

bool send_message(Kind kind, std::int32_t status, const std::string& payload) {
  const Message m{kHostMagic, kind, status, static_cast<std::uint32_t>(payload.size())};
  return send_all(&m, sizeof m) && send_all(payload.data(), payload.size());
}

// Reads exactly `size` bytes; a descriptor passed with them (SCM_RIGHTS) lands in *fd_out.
bool read_exact(void* data, std::size_t size, int* fd_out) {
  char* p = static_cast<char*>(data);
  while (size > 0) {
    iovec iov{p, size};
    alignas(cmsghdr) char control[CMSG_SPACE(sizeof(int))];
    msghdr msg{};
    msg.msg_iov = &iov;
    msg.msg_iovlen = 1;
    msg.msg_control = control;
    msg.msg_controllen = sizeof control;
    const ssize_t k = ::recvmsg(kSocket, &msg, MSG_CMSG_CLOEXEC);
    if (k < 0 && errno == EINTR) continue;
    if (k <= 0) return false;
    for (cmsghdr* c = CMSG_FIRSTHDR(&msg); c != nullptr; c = CMSG_NXTHDR(&msg, c)) {
      if (c->cmsg_level == SOL_SOCKET && c->cmsg_type == SCM_RIGHTS) {
        int fd = -1;
        std::memcpy(&fd, CMSG_DATA(c), sizeof fd);
        if (fd_out != nullptr && *fd_out < 0) {
          *fd_out = fd;
        } else {
          ::close(fd);
        }
      }
    }
    p += k;
    size -= static_cast<std::size_t>(k);
  }
  return true;
}

// Registered before the library is loaded, so it runs last of all exit handlers when the
// plug-in calls exit() (its own handlers, registered later, run first): it flushes what the
// plug-in printed, tells the rank, and ends the process with the plug-in's status.
void on_plugin_exit(int status, void*) {
  std::fflush(nullptr);
  send_message(kExited, status, g_phase);
  ::_exit(status);
}

void put_u32(std::string& out, std::uint32_t x) { out.append(reinterpret_cast<char*>(&x), 4); }

// What describe declared, for the rank to check. Fields are read only from the version that has
// them, and the names only when the version and count are ones freegap reads.
std::string description(const freegap_estimator_info* info) {
  std::string out;
  const std::uint32_t version = info->abi_version;
  const bool known =
      version >= FREEGAP_ESTIMATOR_ABI_OLDEST && version <= FREEGAP_ESTIMATOR_ABI_VERSION;
  put_u32(out, version);
  put_u32(out, known ? static_cast<std::uint32_t>(info->estimate_count) : 0u);
  put_u32(out, known && version >= 2 ? info->wants : 0u);
  std::uint32_t flags = 0;
  std::vector<std::string> names;
  if (known && info->estimate_names == nullptr) flags |= kNamesNull;
  if (known && info->estimate_names != nullptr && info->estimate_count >= 1 &&
      info->estimate_count <= FREEGAP_ESTIMATOR_MAX_ESTIMATES) {
    for (int i = 0; i < info->estimate_count; ++i) {
      const char* name = info->estimate_names[i];
      if (name == nullptr) {
        flags |= kNameNull;
        names.clear();
        break;
      }
      names.emplace_back(name, strnlen(name, kMaxNameBytes));
    }
  }
  put_u32(out, flags);
  put_u32(out, static_cast<std::uint32_t>(names.size()));
  for (const auto& n : names) {
    put_u32(out, static_cast<std::uint32_t>(n.size()));
    out += n;
  }
  return out;
}

[[noreturn]] void serve(freegap_estimator_estimate_fn estimate, int capacity,
                        const std::vector<freegap_parameter>& parameters) {
  std::vector<double> spectrum;
  int matrix_fd = -1;
  const void* matrix = nullptr;  // the shared memory, mapped read-only
  std::size_t matrix_bytes = 0;
  std::vector<double> out(static_cast<std::size_t>(capacity));
  constexpr std::int64_t kMost = std::int64_t{1} << 34;  // a sanity bound, not a limit in use
  for (;;) {
    Request req{};
    int received = -1;
    if (!read_exact(&req, sizeof req, &received)) ::_exit(0);
    if (received >= 0) {
      // The rank's matrix memory (or a new one): forget the old mapping and descriptor.
      if (matrix != nullptr) ::munmap(const_cast<void*>(matrix), matrix_bytes);
      if (matrix_fd >= 0) ::close(matrix_fd);
      matrix = nullptr;
      matrix_bytes = 0;
      matrix_fd = received;
    }
    if (req.length < 0 || req.length > kMost || req.matrix_rows < 0 || req.matrix_cols < 0 ||
        req.matrix_rows > kMost ||
        req.matrix_cols > kMost / std::max<std::int64_t>(1, req.matrix_rows)) {
      ::_exit(3);
    }
    spectrum.resize(static_cast<std::size_t>(req.length));
    if (!read_exact(spectrum.data(), spectrum.size() * sizeof(double), nullptr)) ::_exit(0);
    const std::size_t need = static_cast<std::size_t>(req.matrix_rows * req.matrix_cols) *
                             (req.matrix_is_complex ? 2u : 1u) * sizeof(double);
    if (need > matrix_bytes) {
      if (matrix_fd < 0) ::_exit(3);
      // The memory only grows, so a larger mapping replaces a smaller one.
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
    std::fill(out.begin(), out.end(), std::numeric_limits<double>::quiet_NaN());
    const int status = estimate(&trial, out.data(), capacity, message, kMessageSize);
    // What the plug-in printed reaches the log before its answer reaches the rank.
    std::fflush(stdout);
    std::fflush(stderr);
    message[kMessageSize - 1] = '\0';
    const std::size_t count = status > 0 ? static_cast<std::size_t>(std::min(status, capacity)) : 0;
    std::string payload(reinterpret_cast<const char*>(out.data()), count * sizeof(double));
    payload += message;
    if (!send_message(kAnswer, status, payload)) ::_exit(0);
  }
}

}  // namespace

int main(int argc, char** argv) {
  if (argc < kFirstParameterArg || (argc - kFirstParameterArg) % 2 != 0) {
    std::fprintf(stderr, "%s: started by freegap to run a plug-in estimator; not a command\n",
                 argv[0]);
    return 64;
  }
  // Dies with the rank; if the rank is already gone, there is nobody to serve.
  ::prctl(PR_SET_PDEATHSIG, SIGKILL);
  if (std::to_string(::getppid()) != argv[2]) ::_exit(0);
  // The rank decides when to stop (it closes the socket or kills this process): the stop
  // signals meant for it are not the host's. A plug-in writing to a closed pipe gets EPIPE.
  for (int s : {SIGINT, SIGTERM, SIGUSR1, SIGPIPE}) ::signal(s, SIG_IGN);
  // A plug-in's crash ends this process by its own signal, which the rank records by name, even
  // where a sanitizer installed handlers that would print and exit with a status instead.
  for (int s : {SIGSEGV, SIGBUS, SIGFPE, SIGILL, SIGABRT}) ::signal(s, SIG_DFL);
  if (::on_exit(on_plugin_exit, nullptr) != 0) ::_exit(6);

  void* handle = ::dlopen(argv[1], RTLD_NOW | RTLD_LOCAL);
  if (handle == nullptr) {
    const char* why = ::dlerror();
    send_message(kLoadFailed, kCannotLoad, why ? why : "");
    ::_exit(0);
  }
  auto describe = reinterpret_cast<freegap_estimator_describe_fn>(
      ::dlsym(handle, FREEGAP_ESTIMATOR_DESCRIBE_SYMBOL));
  auto estimate = reinterpret_cast<freegap_estimator_estimate_fn>(
      ::dlsym(handle, FREEGAP_ESTIMATOR_ESTIMATE_SYMBOL));
  if (describe == nullptr || estimate == nullptr) {
    send_message(kLoadFailed, describe == nullptr ? kNoDescribe : kNoEstimate, "");
    ::_exit(0);
  }
  if (!send_message(kLoaded, 0, "")) ::_exit(0);
  g_phase = "describe";
  const freegap_estimator_info* info = describe();
  std::fflush(stdout);
  std::fflush(stderr);
  if (info == nullptr) {
    send_message(kLoadFailed, kDescribeNull, "");
    ::_exit(0);
  }
  if (!send_message(kDescribed, 0, description(info))) ::_exit(0);
  g_phase = "estimate";
  const int capacity = std::clamp(info->estimate_count, 1, FREEGAP_ESTIMATOR_MAX_ESTIMATES);
  std::vector<freegap_parameter> parameters;
  for (int i = kFirstParameterArg; i + 1 < argc; i += 2)
    parameters.push_back({argv[i], argv[i + 1]});
  serve(estimate, capacity, parameters);
}
