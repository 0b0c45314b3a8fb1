// Typed errors, short stable messages; main maps them to exit codes (docs/building.md habit 10).
#pragma once

#include <stdexcept>
#include <string>

namespace freegap {

/// Base of every error freegap throws on purpose.
class Error : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

/// Bad input from the user: a parameter, a file, a key. The message names the place and the fix.
class InputError : public Error {
 public:
  using Error::Error;
};

/// A numerical routine (LAPACK, an iteration) failed on data that was otherwise valid.
class NumericalError : public Error {
 public:
  using Error::Error;
};

/// Exit statuses of every freegap command, defined here once (the README lists them): main
/// returns them, and `run` hands its status back to main through run_job.
inline constexpr int kExitFinished = 0;
inline constexpr int kExitFailure = 1;    ///< an unexpected error (I/O, MPI)
inline constexpr int kExitBadInput = 2;   ///< job file, command line, expression or run file refused
inline constexpr int kExitResumable = 3;  ///< stopped by a signal or a deadline; run again to resume
inline constexpr int kExitDamaged = 4;    ///< `inspect --verify` found damaged units (the rest is usable)

}  // namespace freegap
