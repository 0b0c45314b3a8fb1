// Sturm counts #{λ < x} of a symmetric tridiagonal matrix, vectorised across points, and the
// extreme eigenvalues by multisection on them (Barth, Martin & Wilkinson 1967, "Calculation of
// the eigenvalues of a symmetric tridiagonal matrix by the method of bisection", Numer. Math. 9).
#include <algorithm>
#include <charconv>
#include <cmath>
#include <limits>
#include <string>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/tridiagonal.hpp"
#include "internal.hpp"

namespace freegap::tridiagonal {
namespace detail {

// The sweep is compiled for AVX2 and for the baseline and picked at load time (GCC function
// multiversioning), so a default build — which must run on any node of a cluster — still uses
// 4-wide division where the CPU has it. The points are the inner loop so the compiler vectorises
// the recurrence across them: each row costs one vector division per 4 points, and the N rows are
// read once (docs/performance.md §5: ≈ 0.26 ns per (row, point)).
FREEGAP_SIMD_CLONES
void sturm_sweep(const double* d, const double* e2, Index n, const double* x, double* q,
                 double* negatives, std::size_t m) {
  // A zero pivot becomes +pivmin: see counts_below in the header for why this gives #{λ < x}.
  constexpr double pivmin = std::numeric_limits<double>::min();
  const double d0 = d[0];
  for (std::size_t j = 0; j < m; ++j) {
    double v = d0 - x[j];
    v = (v == 0.0) ? pivmin : v;
    q[j] = v;
    negatives[j] = (v < 0.0) ? 1.0 : 0.0;
  }
  for (Index i = 1; i < n; ++i) {
    const double di = d[i];
    const double ei2 = e2[i - 1];
    for (std::size_t j = 0; j < m; ++j) {
      // LDLᵀ pivot of T − xI (the ratio form of the Sturm sequence; its determinants would
      // overflow for N ≳ 300). Counts are kept in double: exact up to 2^53 > any N here, and a
      // double accumulator keeps the loop in one vector type.
      double v = (di - x[j]) - ei2 / q[j];
      v = (v == 0.0) ? pivmin : v;
      q[j] = v;
      negatives[j] += (v < 0.0) ? 1.0 : 0.0;
    }
  }
}

Prepared prepare(const Tridiagonal& t) {
  Prepared p;
  p.n = t.size();
  p.diag = t.diag.data();
  double largest = 0.0;
  for (Index i = 0; i < t.size(); ++i) largest = std::max(largest, std::fabs(t.diag[i]));
  for (Index i = 0; i < t.off.size(); ++i) largest = std::max(largest, std::fabs(t.off[i]));
  int exponent = 0;
  if (std::isfinite(largest) && largest > 0.0) std::frexp(largest, &exponent);
  // Entries of normalised models are O(1) and pass through untouched. Beyond 2^±400 the squares
  // could leave the double range, so scale by 2^-exponent (exact, as LAPACK's dstebz scales its
  // input; the recurrence is homogeneous: counts of T − xI equal those of (T − xI)/2^exponent).
  if (exponent > 400 || exponent < -400) {
    p.exponent = exponent;
    p.diag_store.resize(static_cast<std::size_t>(t.size()));
    for (Index i = 0; i < t.size(); ++i) {
      p.diag_store[static_cast<std::size_t>(i)] = std::ldexp(t.diag[i], -exponent);
    }
    p.diag = p.diag_store.data();
  }
  p.e2.resize(static_cast<std::size_t>(t.off.size()));
  for (Index i = 0; i < t.off.size(); ++i) {
    const double e = std::ldexp(t.off[i], -p.exponent);
    p.e2[static_cast<std::size_t>(i)] = e * e;
  }
  return p;
}

void check_shape(const Tridiagonal& t) {
  if (t.diag.size() < 1) throw InputError("tridiagonal: the matrix is empty");
  if (t.off.size() != t.diag.size() - 1) {
    throw InputError("tridiagonal: off-diagonal has " + std::to_string(t.off.size()) +
                     " entries, expected N - 1 = " + std::to_string(t.diag.size() - 1));
  }
}

// Points are processed in chunks so the per-point state stays in L1 whatever their number.
void counts_with(const Prepared& p, const double* x, std::size_t m, std::int64_t* out) {
  constexpr std::size_t kChunk = 512;
  std::vector<double> q(std::min(m, kChunk)), negatives(std::min(m, kChunk));
  std::vector<double> scaled;
  if (p.exponent != 0) {
    scaled.resize(m);
    for (std::size_t j = 0; j < m; ++j) scaled[j] = std::ldexp(x[j], -p.exponent);
    x = scaled.data();
  }
  for (std::size_t start = 0; start < m; start += kChunk) {
    const std::size_t len = std::min(kChunk, m - start);
    sturm_sweep(p.diag, p.e2.data(), p.n, x + start, q.data(), negatives.data(), len);
    for (std::size_t j = 0; j < len; ++j) {
      out[start + j] = static_cast<std::int64_t>(negatives[j]);
    }
  }
}

}  // namespace detail

std::vector<std::int64_t> counts_below(const Tridiagonal& t, std::span<const double> points) {
  detail::check_shape(t);
  for (const double x : points) {
    if (std::isnan(x)) throw InputError("tridiagonal: cannot count eigenvalues below NaN");
  }
  std::vector<std::int64_t> out(points.size());
  if (points.empty()) return out;
  detail::counts_with(detail::prepare(t), points.data(), points.size(), out.data());
  return out;
}

std::pair<double, double> gershgorin(const Tridiagonal& t) {
  detail::check_shape(t);
  const Index n = t.size();
  double low = std::numeric_limits<double>::infinity();
  double high = -low;
  for (Index i = 0; i < n; ++i) {
    double radius = 0.0;
    if (i > 0) radius += std::fabs(t.off[i - 1]);
    if (i + 1 < n) radius += std::fabs(t.off[i]);
    low = std::min(low, t.diag[i] - radius);
    high = std::max(high, t.diag[i] + radius);
  }
  return {low, high};
}

namespace detail {

// Multisection for the smallest and largest eigenvalue from given brackets. Invariants:
//   min: λ_min ∈ [lo, hi) — count(lo) = 0 is known or lo is a valid lower bound, count(hi) ≥ 1;
//   max: λ_max ∈ [lo, hi) — count(lo) ≤ N − 1, count(hi) = N.
// Each pass evaluates kPoints interior points of every unconverged bracket in one sweep. A sweep
// for one point is latency-bound (each pivot waits for the previous division), so up to about 8
// points (two AVX2 vectors) cost little more than one; 8 points shrink a bracket 9-fold for
// roughly the price of a bisection step, and both brackets (16 points) share a sweep.
Extremes multisect(const Prepared& p, Bracket lower, Bracket upper, double tolerance) {
  constexpr int kPoints = 8;
  const auto n = static_cast<std::int64_t>(p.n);
  std::vector<double> x;
  std::vector<std::int64_t> c;
  const auto converged = [&](const Bracket& b) {
    if (b.hi - b.lo <= tolerance) return true;
    // No double strictly inside: the bracket cannot shrink further.
    const double mid = b.lo + 0.5 * (b.hi - b.lo);
    return !(b.lo < mid && mid < b.hi);
  };
  bool lower_done = converged(lower);
  bool upper_done = converged(upper);
  while (!lower_done || !upper_done) {
    x.clear();
    for (Bracket* b : {&lower, &upper}) {
      if ((b == &lower && lower_done) || (b == &upper && upper_done)) continue;
      for (int k = 1; k <= kPoints; ++k) {
        x.push_back(b->lo + (b->hi - b->lo) * (static_cast<double>(k) / (kPoints + 1)));
      }
    }
    c.assign(x.size(), 0);
    counts_with(p, x.data(), x.size(), c.data());
    std::size_t at = 0;
    if (!lower_done) {
      Bracket next = lower;
      for (int k = 0; k < kPoints; ++k, ++at) {
        if (c[at] == 0) {
          next.lo = std::max(next.lo, x[at]);
        } else {
          next.hi = std::min(next.hi, x[at]);
        }
      }
      // A non-monotone count (not expected: Demmel, Dhillon & Ren 1995) would cross the ends.
      lower_done = !(next.lo < next.hi) || converged(next);
      if (next.lo < next.hi) lower = next;
    }
    if (!upper_done) {
      Bracket next = upper;
      for (int k = 0; k < kPoints; ++k, ++at) {
        if (c[at] < n) {
          next.lo = std::max(next.lo, x[at]);
        } else {
          next.hi = std::min(next.hi, x[at]);
        }
      }
      upper_done = !(next.lo < next.hi) || converged(next);
      if (next.lo < next.hi) upper = next;
    }
  }
  return {lower.lo + 0.5 * (lower.hi - lower.lo), upper.lo + 0.5 * (upper.hi - upper.lo)};
}

// Gershgorin interval widened by a few ulps so that its ends are strict bounds for the computed
// Sturm count too, and the tolerance raised to what the count can resolve.
GershgorinStart start_brackets(const Tridiagonal& t, double tolerance) {
  if (!(tolerance > 0.0)) {
    char text[64];
    const auto end = std::to_chars(text, text + sizeof text, tolerance).ptr;
    throw InputError("tridiagonal: extreme tolerance must be > 0 (got " + std::string(text, end) +
                     ")");
  }
  const auto [low, high] = gershgorin(t);
  if (!std::isfinite(low) || !std::isfinite(high)) {
    throw InputError(kGershgorinOverflow);
  }
  const double bound = std::max(std::fabs(low), std::fabs(high));
  constexpr double u = std::numeric_limits<double>::epsilon();
  const double widen = 16.0 * u * bound + std::numeric_limits<double>::min();
  GershgorinStart s;
  s.lower = {low - widen, high + widen};
  s.upper = {low - widen, high + widen};
  s.tolerance = std::max(tolerance, 4.0 * u * bound);
  return s;
}

}  // namespace detail

Extremes extremes(const Tridiagonal& t, double tolerance) {
  detail::check_shape(t);
  const auto s = detail::start_brackets(t, tolerance);
  return detail::multisect(detail::prepare(t), s.lower, s.upper, s.tolerance);
}

// One extreme only: the other bracket is given empty, so no points are spent on it.
double smallest(const Tridiagonal& t, double tolerance) {
  detail::check_shape(t);
  const auto s = detail::start_brackets(t, tolerance);
  return detail::multisect(detail::prepare(t), s.lower, {0.0, 0.0}, s.tolerance).min;
}

double largest(const Tridiagonal& t, double tolerance) {
  detail::check_shape(t);
  const auto s = detail::start_brackets(t, tolerance);
  return detail::multisect(detail::prepare(t), {0.0, 0.0}, s.upper, s.tolerance).max;
}

double operator_norm(const Tridiagonal& t, double tolerance) {
  const Extremes x = extremes(t, tolerance);
  return std::max(std::fabs(x.min), std::fabs(x.max));
}

}  // namespace freegap::tridiagonal
