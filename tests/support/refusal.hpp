// What a test expects a refusal to say: the message of the InputError a call throws.
#pragma once

#include <gtest/gtest.h>

#include <string>

#include "freegap/errors.hpp"

namespace freegap::testing {

/// The message of the InputError `f` throws; "" and a test failure when it throws none.
template <class F>
std::string refusal(F f) {
  try {
    f();
  } catch (const InputError& e) {
    return e.what();
  }
  ADD_FAILURE() << "no InputError was thrown";
  return "";
}

}  // namespace freegap::testing
