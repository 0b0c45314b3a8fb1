// Stop requests: SIGINT and SIGTERM set a flag that every long phase (validation, expansion,
// planning, the limit solver, reports) polls, so a command ends within a fraction of a second of
// the signal, having written nothing half-way. No MPI here: the runner adds SIGUSR1 on top.
#pragma once

#include <csignal>

#include "freegap/errors.hpp"

namespace freegap {

/// The number of the signal that asked for a stop; 0 while none did. Set only by signal handlers.
extern volatile std::sig_atomic_t g_stop_signal;

/// Thrown by a long phase that saw a stop request. Not an InputError: main maps it to the
/// command's "stopped" exit status (kExitResumable for run, stopped_exit_status otherwise).
class Stopped : public Error {
 public:
  explicit Stopped(int signal);
  int signal() const { return signal_; }

 private:
  int signal_;
};

inline bool stop_requested() { return g_stop_signal != 0; }

/// Throws Stopped if a stop was requested. One load of a flag: cheap enough for inner loops.
inline void check_stop() {
  if (g_stop_signal != 0) throw Stopped(g_stop_signal);
}

/// Installs handlers for SIGINT and SIGTERM that set g_stop_signal (commands other than run;
/// run installs its own, which also take SIGUSR1 and set the same flag).
void install_stop_handlers();

/// Exit status of a command that was stopped by `signal` and has nothing to resume: 128 + the
/// signal's number (130 for SIGINT, 143 for SIGTERM), what a shell reports for a process the
/// signal killed, so scripts see the same status whether or not freegap caught it.
inline int stopped_exit_status(int signal) { return 128 + signal; }

}  // namespace freegap
