// Pieces shared by the tridiagonal sources (not part of the public interface).
#pragma once

#include <charconv>
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "freegap/tridiagonal.hpp"

// GCC/Clang function multiversioning on x86-64: an AVX2 clone and a baseline clone, chosen at
// load time. Elsewhere the plain function is compiled.
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__)
#define FREEGAP_SIMD_CLONES __attribute__((target_clones("avx2", "default")))
#else
#define FREEGAP_SIMD_CLONES
#endif

namespace freegap::tridiagonal::detail {

/// x in the shortest form that reads back to the same double (for messages).
inline std::string number(double x) {
  char buffer[64];
  const auto result = std::to_chars(buffer, buffer + sizeof buffer, x);
  return std::string(buffer, result.ptr);
}

/// negatives[j] = number of negative LDLᵀ pivots of T − x_j I (as a double), j < m; q is scratch.
void sturm_sweep(const double* d, const double* e2, Index n, const double* x, double* q,
                 double* negatives, std::size_t m);

/// A matrix ready for Sturm counts: off² (the only way the off-diagonal enters), and, when the
/// entries are so large or small that off² would overflow or underflow, T scaled by an exact power
/// of two 2^-exponent (the points are scaled the same way, so the counts are unchanged).
struct Prepared {
  const double* diag = nullptr;  ///< t.diag, or diag_store when scaled
  Index n = 0;
  std::vector<double> diag_store;
  std::vector<double> e2;
  int exponent = 0;
};
Prepared prepare(const Tridiagonal& t);
/// Throws InputError unless diag.size() ≥ 1 and off.size() == diag.size() − 1.
void check_shape(const Tridiagonal& t);
/// out[j] = #{λ < x_j}, j < m.
void counts_with(const Prepared& p, const double* x, std::size_t m, std::int64_t* out);

/// An eigenvalue bracket [lo, hi); converged when hi − lo ≤ tolerance.
struct Bracket {
  double lo = 0.0;
  double hi = 0.0;
};

inline constexpr const char* kGershgorinOverflow =
    "tridiagonal: the Gershgorin bound overflows double (entries too large); rescale the "
    "expression";

/// Gershgorin brackets for both extremes, widened by a few ulps, and the tolerance raised to
/// 4 ulps of the spectral bound. Throws InputError for tolerance ≤ 0 or NaN, or an infinite bound.
struct GershgorinStart {
  Bracket lower, upper;
  double tolerance = 0.0;
};
GershgorinStart start_brackets(const Tridiagonal& t, double tolerance);

/// Multisection for λ_min in `lower` and λ_max in `upper` (a bracket with lo == hi is skipped).
Extremes multisect(const Prepared& p, Bracket lower, Bracket upper, double tolerance);

}  // namespace freegap::tridiagonal::detail
