// A forked child for reading that may crash (see contained.hpp).
#include "contained.hpp"

#include <fcntl.h>
#include <poll.h>
#include <signal.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cerrno>
#include <chrono>
#include <cstdlib>
#include <cstring>
#include <initializer_list>

#include "freegap/errors.hpp"

namespace freegap::store::contained {
namespace {

void write_all(int fd, const std::string& text) {
  std::size_t done = 0;
  while (done < text.size()) {
    const ssize_t n = ::write(fd, text.data() + done, text.size() - done);
    if (n < 0 && errno == EINTR) continue;
    if (n <= 0) ::_exit(3);  // the parent is gone: nobody needs the rest
    done += static_cast<std::size_t>(n);
  }
}

// The last line of a child whose body returned: anything else means it did not finish.
constexpr const char* kDone =
    "\x04"
    "done";

}  // namespace

double stall_limit() {
  if (const char* text = std::getenv("FREEGAP_CHECK_STALL_SECONDS"); text && *text) {
    char* rest = nullptr;
    const double v = std::strtod(text, &rest);
    if (rest && *rest == '\0' && v > 0) return v;
  }
  // Generous: a large file on a slow shared file system, or a loaded node, must not be taken for
  // a damaged one (5 s was seen to refuse good files under load and under the sanitizers).
  return 60.0;
}

std::string signal_text(int signal) {
  const char* abbrev = sigabbrev_np(signal);
  return "signal " + std::to_string(signal) +
         (abbrev != nullptr ? std::string(" (SIG") + abbrev + ")" : std::string());
}

Outcome run(const std::function<void(const Emit&)>& body, double stall_seconds) {
  int fds[2];
  if (::pipe2(fds, O_CLOEXEC) != 0) {
    throw Error(std::string("cannot start the process that checks a run file (pipe: ") +
                std::strerror(errno) + ")");
  }
  const pid_t pid = ::fork();
  if (pid < 0) {
    const int error = errno;
    ::close(fds[0]);
    ::close(fds[1]);
    throw Error(std::string("cannot start the process that checks a run file (fork: ") +
                std::strerror(error) + ")");
  }
  if (pid == 0) {
    ::close(fds[0]);
    // A crash here must end only this process, by its signal, so that the parent can name it:
    // handlers another library installed (a sanitizer's, which would print and exit instead)
    // are put back to the default.
    ::signal(SIGPIPE, SIG_DFL);
    for (const int s : {SIGSEGV, SIGBUS, SIGFPE, SIGILL, SIGABRT}) ::signal(s, SIG_DFL);
    const Emit emit = [fd = fds[1]](const std::string& line) {
      std::string clean = line;
      for (char& c : clean) {
        if (c == '\n' || c == '\r') c = ' ';
      }
      write_all(fd, clean + "\n");
    };
    try {
      body(emit);
    } catch (...) {
      ::_exit(4);  // the body reports its own errors; this is a bug, seen as "lost"
    }
    write_all(fds[1], std::string(kDone) + "\n");
    ::_exit(0);  // no atexit handlers: they belong to the parent (MPI, HDF5)
  }
  ::close(fds[1]);
  Outcome out;
  out.stall_seconds = stall_seconds;
  std::string pending;
  bool stalled = false;
  const int stall_ms = static_cast<int>(stall_seconds * 1000.0);
  while (true) {
    pollfd p{fds[0], POLLIN, 0};
    const int ready = ::poll(&p, 1, stall_ms);
    if (ready < 0 && errno == EINTR) continue;
    if (ready == 0) {
      stalled = true;
      ::kill(pid, SIGKILL);
      break;
    }
    char buffer[4096];
    const ssize_t n = ::read(fds[0], buffer, sizeof buffer);
    if (n < 0 && errno == EINTR) continue;
    if (n <= 0) break;
    pending.append(buffer, static_cast<std::size_t>(n));
    std::string::size_type end;
    while ((end = pending.find('\n')) != std::string::npos) {
      out.lines.push_back(pending.substr(0, end));
      pending.erase(0, end + 1);
    }
  }
  ::close(fds[0]);
  int status = 0;
  while (::waitpid(pid, &status, 0) < 0 && errno == EINTR) {
  }
  if (stalled) {
    out.kind = Outcome::Kind::stalled;
  } else if (WIFSIGNALED(status)) {
    out.kind = Outcome::Kind::signalled;
    out.signal = WTERMSIG(status);
  } else if (WIFEXITED(status) && WEXITSTATUS(status) == 0 && !out.lines.empty() &&
             out.lines.back() == kDone) {
    out.lines.pop_back();
    out.kind = Outcome::Kind::finished;
  } else {
    out.kind = Outcome::Kind::lost;
  }
  return out;
}

}  // namespace freegap::store::contained
