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

}  // namespace freegap
