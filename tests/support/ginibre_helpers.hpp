// Helpers of the linear-algebra tests: Ginibre matrices from a stream, and the two measures of a
// computed factor the tests bound (distance from orthonormal columns, condition number).
#pragma once

#include <cstddef>
#include <type_traits>

#include "freegap/linalg.hpp"
#include "freegap/rng.hpp"

namespace freegap::testing {

/// rows × cols standard Ginibre numbers (complex with E|z|² = 1, or real N(0, 1)) from `stream`,
/// column by column.
template <class M>
M ginibre_from(rng::Stream& stream, linalg::Index rows, linalg::Index cols) {
  M z(rows, cols);
  if constexpr (std::is_same_v<M, linalg::CMatrix>) {
    stream.fill_complex_normal({z.data(), static_cast<std::size_t>(z.size())});
  } else {
    stream.fill_normal({z.data(), static_cast<std::size_t>(z.size())});
  }
  return z;
}

/// ‖Q^*Q − I‖_max: how far Q's columns are from orthonormal.
template <class M>
double orthogonality_error(const M& q) {
  return (q.adjoint() * q - M::Identity(q.cols(), q.cols())).cwiseAbs().maxCoeff();
}

/// κ₂(Z) = σ_max / σ_min from the singular values (zgesdd / dgesdd).
template <class M>
double condition_number(M z) {
  const linalg::Vector s = linalg::singular_values(z);
  return s(0) / s(s.size() - 1);
}

}  // namespace freegap::testing
