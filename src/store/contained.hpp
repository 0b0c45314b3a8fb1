// Internal to store: runs a piece of reading in a forked child process, so that a file whose
// bytes make the HDF5 library crash or loop costs a refusal, never the caller's process.
#pragma once

#include <functional>
#include <string>
#include <vector>

namespace freegap::store::contained {

/// How the child ended.
struct Outcome {
  enum class Kind {
    finished,   ///< the body returned; `lines` is everything it emitted
    signalled,  ///< the child died by signal `signal` (a crash inside a library)
    stalled,    ///< the child emitted nothing for the stall limit and was killed
    lost,       ///< the child exited without finishing (it cannot be told why)
  };
  Kind kind = Kind::lost;
  int signal = 0;
  double stall_seconds = 0.0;
  std::vector<std::string> lines;
};

/// Emits one line (no newline inside) to the parent; also proves the child is making progress.
using Emit = std::function<void(const std::string&)>;

/// Forks; the child runs `body(emit)` and ends with _exit, the parent collects the emitted
/// lines. The child is killed when it emits nothing for `stall_seconds`.
Outcome run(const std::function<void(const Emit&)>& body, double stall_seconds);

/// The stall limit: FREEGAP_CHECK_STALL_SECONDS if set to a positive number, else 60 s.
double stall_limit();

/// "signal 11 (SIGSEGV)".
std::string signal_text(int signal);

}  // namespace freegap::store::contained
