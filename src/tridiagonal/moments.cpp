// Moments (1/N) Tr T^k of a symmetric tridiagonal matrix from its entries, without eigenvalues.
//
// T^j has bandwidth j. Keep its upper half-band U_j(i, s) = (T^j)_{i,i+s}, s = 0..j, and step
//   (T^{j+1})_{i,i+s} = (T^j)_{i,i+s−1}·e_{i+s−1} + (T^j)_{i,i+s}·d_{i+s} +
//   (T^j)_{i,i+s+1}·e_{i+s},
// where for s = 0 the first term is (T^j)_{i,i−1} = U_j(i−1, 1) by symmetry. Then, since T is
// symmetric, Tr T^{2j} = ‖T^j‖_F² and Tr T^{2j+1} = ⟨T^j, T^{j+1}⟩_F, and each Frobenius product
// is a sum over rows i of U(i,0)·U'(i,0) + 2·Σ_{s≥1} U(i,s)·U'(i,s) (each off-diagonal pair once,
// credited to its upper row). For moments up to K this needs j ≤ ⌈K/2⌉: about
// 5·N·Σ_{j ≤ K/2} (j + 1) ≈ 0.6·N·K² flops (common practice: powers of a banded matrix; the
// trace identities are elementary).
//
// Row i of U_j depends only on rows i−j..i of earlier powers and on T's entries at i−j..i+j+1, so
// rows are processed in blocks with a margin of ⌈K/2⌉ + 2 on each side: a block's rows are then
// exact, and memory is O(N) for T plus O(K·block) scratch, whatever N is.
#include <algorithm>
#include <cmath>
#include <string>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/observe.hpp"
#include "freegap/tridiagonal.hpp"
#include "internal.hpp"

namespace freegap::tridiagonal {
namespace {

// Neumaier (1974) compensated summation, shared with observe (the error no longer grows with N).
using NeumaierSum = observe::CompensatedSum;

constexpr Index kBlock = 2048;

using Diagonals = std::vector<std::vector<double>>;

// The scaled entries of T on the window of rows w0..w1 (zero on the padding), and U_0 = I there
// with every other diagonal of U and V zero.
void load_window(const Tridiagonal& t, int e, Index w0, Index w1, Index pad, Index len,
                 std::vector<double>& d, std::vector<double>& off, Diagonals& U, Diagonals& V) {
  std::fill(d.begin(), d.begin() + len, 0.0);
  std::fill(off.begin(), off.begin() + len, 0.0);
  for (Index i = w0; i < w1; ++i) {
    const auto L = static_cast<std::size_t>(i - w0 + pad);
    d[L] = std::ldexp(t.diag[i], -e);
    if (i + 1 < w1) off[L] = std::ldexp(t.off[i], -e);  // T_{i,i+1}
  }
  // U_0 = I on the window's rows, zero on the padding.
  // Both buffers start at zero: a diagonal above the current power's bandwidth must read 0.
  for (auto& diagonal : U) std::fill(diagonal.begin(), diagonal.begin() + len, 0.0);
  for (auto& diagonal : V) std::fill(diagonal.begin(), diagonal.begin() + len, 0.0);
  for (Index L = pad; L < pad + (w1 - w0); ++L) U[0][static_cast<std::size_t>(L)] = 1.0;
}

// One step of the recurrence at the top of this file, on the local rows lo..hi − 1.
void next_power(const Diagonals& U, Diagonals& V, const std::vector<double>& d,
                const std::vector<double>& off, int j, Index lo, Index hi) {
  // V = U_{j+1} from U = U_j (diagonals 0..j of U are meaningful, j+1 of V).
  for (int s = 0; s <= j + 1; ++s) {
    double* v = V[static_cast<std::size_t>(s)].data();
    const double* us = U[static_cast<std::size_t>(s)].data();      // zero when s > j
    const double* up = U[static_cast<std::size_t>(s + 1)].data();  // zero when s + 1 > j
    const double* dd = d.data() + s;
    const double* ee = off.data() + s;
    if (s == 0) {
      const double* u1 = U[1].data();  // U_j(i−1, 1), zero for j = 0
      for (Index L = lo; L < hi; ++L) {
        v[L] = u1[L - 1] * off[static_cast<std::size_t>(L - 1)] + us[L] * dd[L] + up[L] * ee[L];
      }
    } else {
      const double* um = U[static_cast<std::size_t>(s - 1)].data();
      const double* em = off.data() + (s - 1);
      for (Index L = lo; L < hi; ++L) v[L] = um[L] * em[L] + us[L] * dd[L] + up[L] * ee[L];
    }
  }
}

// Adds the block's rows b0..b1 − 1 of the Frobenius product ⟨A, B⟩ (diagonals 0..top) to `sum`.
void accumulate_rows(const Diagonals& A, const Diagonals& B, int top, Index b0, Index b1,
                     std::vector<double>& row_terms, NeumaierSum& sum) {
  // Row terms Σ_s w_s·A(i,s)·B(i,s), w_0 = 1, w_s = 2; then compensated over the rows.
  double* terms = row_terms.data();
  const double* a0 = A[0].data();
  const double* c0 = B[0].data();
  for (Index L = b0; L < b1; ++L) terms[L - b0] = a0[L] * c0[L];
  for (int s = 1; s <= top; ++s) {
    const double* a = A[static_cast<std::size_t>(s)].data();
    const double* c = B[static_cast<std::size_t>(s)].data();
    for (Index L = b0; L < b1; ++L) terms[L - b0] += 2.0 * a[L] * c[L];
  }
  for (Index L = b0; L < b1; ++L) sum.add(terms[L - b0]);
}

}  // namespace

std::vector<double> moments(const Tridiagonal& t, int max_moment) {
  detail::check_shape(t);
  if (max_moment < 0 || max_moment > observe::kMaxMomentLimit) {
    throw InputError("tridiagonal: max_moment must be in 0.." +
                     std::to_string(observe::kMaxMomentLimit) + " (got " +
                     std::to_string(max_moment) + ")");
  }
  if (!t.diag.allFinite() || !t.off.allFinite()) {
    throw InputError("tridiagonal: cannot take moments of a matrix with a non-finite entry");
  }
  const Index n = t.size();
  const int K = max_moment;
  std::vector<double> result(static_cast<std::size_t>(K) + 1, 0.0);
  result[0] = 1.0;
  if (K == 0) return result;

  // Scale by 2^-e with 2^e above the Gershgorin bound G ≥ ‖T‖₂ (exact: a power of two): every
  // entry of (T/2^e)^j is then at most 1 in magnitude, so nothing overflows before the single
  // final rescaling m_k = 2^(k·e)·(scaled mean), as in observe::spectral_moments.
  const auto [low, high] = gershgorin(t);
  const double bound = std::max(std::fabs(low), std::fabs(high));
  if (bound == 0.0) return result;  // the zero matrix
  int e = 0;
  std::frexp(bound, &e);

  const int h = (K + 1) / 2;  // highest power of T needed
  const Index margin = h + 2;
  const Index pad = h + 2;  // zero padding beyond the window, for indices i + s + 1 ≤ i + h + 1
  std::vector<NeumaierSum> sums(static_cast<std::size_t>(K) + 1);

  // Window storage: local index L = (i − w0) + pad. U[s] and V[s] hold the diagonals of the
  // current and the next power, each as a contiguous array over L, so every loop below runs over
  // rows and vectorises.
  const Index cap = kBlock + 2 * margin + 2 * pad + h + 2;
  std::vector<double> d(static_cast<std::size_t>(cap)), off(static_cast<std::size_t>(cap));
  std::vector<std::vector<double>> U(static_cast<std::size_t>(h) + 2,
                                     std::vector<double>(static_cast<std::size_t>(cap)));
  std::vector<std::vector<double>> V = U;
  std::vector<double> row_terms(static_cast<std::size_t>(kBlock));

  for (Index r0 = 0; r0 < n; r0 += kBlock) {
    const Index r1 = std::min(n, r0 + kBlock);
    const Index w0 = std::max<Index>(0, r0 - margin);
    const Index w1 = std::min(n, r1 + margin);
    const Index len = (w1 - w0) + 2 * pad + h + 2;  // local indices used in this block
    load_window(t, e, w0, w1, pad, len, d, off, U, V);

    const Index b0 = r0 - w0 + pad;  // the block's rows, local
    const Index b1 = r1 - w0 + pad;
    const auto accumulate = [&](int k, const Diagonals& A, const Diagonals& B, int top) {
      accumulate_rows(A, B, top, b0, b1, row_terms, sums[static_cast<std::size_t>(k)]);
    };

    // Rows that can still matter: those of the block and h + 1 before it (a row depends on lower
    // rows only through U(i−1, 1), one row per step; the wrong value at row `lo`, which reads an
    // uncomputed row, climbs one row per step and never reaches b0 = lo + h + 1). Rows after the
    // block never feed the block's rows.
    const Index lo = std::max<Index>(1, b0 - (h + 1));
    const Index hi = b1;
    for (int j = 0; j < h; ++j) {
      next_power(U, V, d, off, j, lo, hi);
      const int k_odd = 2 * j + 1;
      if (k_odd <= K) accumulate(k_odd, U, V, j);
      const int k_even = 2 * j + 2;
      if (k_even <= K) accumulate(k_even, V, V, j + 1);
      std::swap(U, V);
    }
  }

  const auto N = static_cast<double>(n);
  for (int k = 1; k <= K; ++k) {
    result[static_cast<std::size_t>(k)] =
        std::ldexp(sums[static_cast<std::size_t>(k)].value() / N, k * e);
  }
  return result;
}

}  // namespace freegap::tridiagonal
