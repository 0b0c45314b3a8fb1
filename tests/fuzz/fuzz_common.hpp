// What both fuzz targets check after an input was refused or accepted: freegap's own promises
// about errors, beyond "no crash" (which the sanitizers and libFuzzer check).
#pragma once

#include <cstdio>
#include <cstdlib>
#include <string>

#include "freegap/expr.hpp"

namespace freegap::fuzz {

/// The expansion's bounds, lowered (the same code paths, reached sooner): under the sanitizers an
/// expansion runs 15-20 times slower, and one that reaches freegap's full bounds takes longer
/// than the fuzz run's 10 s per input ((U + U^*)^1000 forms millions of products of words of up
/// to 1000 letters).
inline constexpr std::size_t kMaxMonomials = 10000;
inline expr::CheckOptions check_options() {
  expr::CheckOptions options;
  options.max_monomials = kMaxMonomials;
  options.max_expansion_letters = expr::kMaxExpansionLetters / 100;
  options.max_expansion_products = expr::kMaxExpansionProducts / 1000;
  return options;
}

/// Stops the run (libFuzzer reports a crash with the input) when a promise is broken.
[[noreturn]] inline void broken(const std::string& what) {
  std::fprintf(stderr, "broken promise: %s\n", what.c_str());
  std::abort();
}

/// An expression error names its column in the message (include/freegap/expr.hpp).
inline void check_expr_error(const expr::ExprError& e) {
  const std::string message = e.what();
  if (message.empty()) broken("an expression error with an empty message");
  if (e.column() > 0 &&
      message.find("at column " + std::to_string(e.column())) == std::string::npos) {
    broken("column " + std::to_string(e.column()) + " missing from: " + message);
  }
}

}  // namespace freegap::fuzz
