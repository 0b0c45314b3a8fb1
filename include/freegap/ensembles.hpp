// Samplers of the random and deterministic matrices a job declares, normalised so that the
// limits are the standard ones (docs/check-values.md §0):
//
//   gue                 X = H/√N, H = (A + A^*)/√2, A_ij = (g + i g')/√2: E|H_ij|^2 = 1, H_ii ~ N(0,1).
//                       Limit: semicircle on [−2, 2].
//   goe                 X = H/√N, H = (A + Aᵀ)/√2, A_ij ~ N(0,1): off-diagonal variance 1,
//                       diagonal variance 2. Limit: semicircle on [−2, 2].
//   wigner_rademacher   X = H/√N, H real symmetric, H_ij = ±1 (i ≠ j) with probability 1/2,
//                       H_ii = 0. Limit: semicircle on [−2, 2] (universality).
//   wishart_complex     W = X X^*/M, X N×M with E|X_ij|^2 = 1, c = N/M. Limit: Marchenko–Pastur(c).
//   wishart_real        W = X Xᵀ/M, X N×M real with E X_ij^2 = 1. Limit: Marchenko–Pastur(c).
//   ginibre_complex     G = Z/√M, Z N×M iid complex normal with E|Z_ij|^2 = 1, M = N/c (c = 1:
//                       square, G/√N as in §0). G G^* is then exactly a complex Wishart matrix.
//                       Limits: circular law (eigenvalues, square), quarter circle (singular values).
//   ginibre_real        the same with real entries, E Z_ij^2 = 1.
//   haar_unitary        U Haar on U(N), by corrected QR (default) or by the polar factor.
//   haar_orthogonal     O Haar on O(N), by corrected QR (default) or by the polar factor.
//   diagonal            deterministic real diagonal matrix with a given law (see DiagonalLaw).
//   beta_hermite        the β-Hermite eigenvalue law, any β > 0 (β = 1, 2: the GOE and GUE laws
//                       above), normalised to the semicircle on [−2, 2]. Only its tridiagonal
//                       model exists (Dumitriu & Edelman 2002; include/freegap/tridiagonal.hpp),
//                       so it may appear only alone or as a·X + b in an expression.
//   beta_laguerre       the β-Laguerre law, any β > 0 and ratio c (β = 1, 2: real and complex
//                       Wishart), normalised to Marchenko–Pastur(c); tridiagonal model only.
//
// The random numbers of matrix `name` in trial t at size N come from the stream
// rng::StreamKey{seed, name, N, t} and from nothing else.
#pragma once

#include "freegap/declarations.hpp"

#include <Eigen/Core>
#include <cstdint>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

namespace freegap::ensembles {

// The declarations, under the names the samplers have always used.
using declarations::Index;
using declarations::Kind;
using declarations::HaarMethod;
using declarations::Atom;
using declarations::DiagonalLawKind;
using declarations::DiagonalLaw;
using declarations::MatrixSpec;
using declarations::Shape;
using declarations::parse_kind;
using declarations::kind_name;
using declarations::known_kinds;
using declarations::is_self_adjoint;
using declarations::is_unitary;
using declarations::is_real;
using declarations::is_random;
using declarations::companion_size;
using declarations::shape;
using declarations::file_law_atoms;
using declarations::atom_counts;
using declarations::planned_entries;

/// A sampled matrix: dense real, dense complex, or a real diagonal kept as a vector.
struct Sample {
  enum class Storage { real_dense, complex_dense, real_diagonal };
  Storage storage = Storage::real_dense;
  Eigen::MatrixXd real;
  Eigen::MatrixXcd complex;
  Eigen::VectorXd diagonal;

  Index rows() const;
  Index cols() const;
};

/// Draws one declared matrix. Construction validates the spec (throws InputError naming the
/// matrix, the parameter and the fix) and reads an eigenvalue file once.
class Sampler {
 public:
  explicit Sampler(MatrixSpec spec);

  const MatrixSpec& spec() const { return spec_; }
  /// The matrix at size n for (seed, trial). Deterministic in (seed, name, n, trial).
  Sample draw(Index n, std::uint64_t seed, std::uint64_t trial) const;
  /// r of the N columns of a haar_unitary or haar_orthogonal matrix (0 ≤ r ≤ n): an N×r
  /// Haar-distributed isometry, from the same stream (seed, name, n, trial) as draw(). With
  /// method qr it equals the first r columns of draw() up to rounding; with method polar it has
  /// their law. Throws InputError for any other kind.
  Sample draw_columns(Index n, Index r, std::uint64_t seed, std::uint64_t trial) const;
  /// The diagonal entries of a `diagonal` matrix at size n (no randomness).
  Eigen::VectorXd diagonal_values(Index n) const;

 private:
  Sample draw_file_matrix(Index n) const;

  MatrixSpec spec_;
  std::vector<double> file_values_;  ///< sorted numbers of a `file` law
  /// file_matrix: the checked matrix of the last size drawn, shared by copies of the sampler
  /// (checked once per size, not once per trial).
  struct FileCache;
  std::shared_ptr<FileCache> file_cache_;
};

}  // namespace freegap::ensembles
