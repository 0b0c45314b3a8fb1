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

#include <Eigen/Core>
#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

namespace freegap::ensembles {

using Index = Eigen::Index;

enum class Kind {
  gue,
  goe,
  wigner_rademacher,
  wishart_complex,
  wishart_real,
  ginibre_complex,
  ginibre_real,
  haar_unitary,
  haar_orthogonal,
  diagonal,
  beta_hermite,   ///< β-Hermite eigenvalue law (any β > 0); tridiagonal model only
  beta_laguerre,  ///< β-Laguerre eigenvalue law (any β > 0, ratio c); tridiagonal model only
};

/// How Haar matrices are sampled. Both are exactly Haar; QR is 4–5× cheaper
/// (docs/performance.md §3), so it is the default.
enum class HaarMethod {
  qr,     ///< Mezzadri (2007): QR of a Ginibre matrix with the phase (sign) correction
  polar,  ///< polar factor Z (Z^*Z)^(-1/2) of a Ginibre matrix, through the SVD
};

/// A point mass `value` carrying probability `weight`.
struct Atom {
  double value = 0.0;
  double weight = 0.0;
};

enum class DiagonalLawKind {
  atoms,                       ///< finitely many atoms with weights
  uniform,                     ///< uniform on [low, high]
  semicircle_quantiles,        ///< semicircle of the given variance
  marchenko_pastur_quantiles,  ///< Marchenko–Pastur of the given ratio c (atom at 0 when c > 1)
  file,                        ///< the empirical law of the numbers in a text file
};

/// The law of a deterministic diagonal matrix. Its N diagonal entries are
///  - atoms: atom i repeated n_i times, in the order given, with n_i = N·w_i rounded by the
///    largest-remainder rule: floor(N·w_i) each, then one more to the atoms with the largest
///    fractional parts (ties to the earlier atom) until the counts sum to N;
///  - every other law: its quantiles F^(-1)((k + 1/2)/N), k = 0..N−1 (midpoint rule), ascending.
///    For `file`, F is the empirical CDF of the K numbers in the file (equal weights, left-
///    continuous inverse), so a file with exactly N numbers gives those numbers, sorted.
struct DiagonalLaw {
  DiagonalLawKind kind = DiagonalLawKind::atoms;
  std::vector<Atom> atoms;
  double low = 0.0, high = 1.0;  ///< uniform
  double variance = 1.0;         ///< semicircle
  double ratio = 1.0;            ///< Marchenko–Pastur c
  std::string path;              ///< file: whitespace-separated numbers, '#' starts a comment
};

/// One declared matrix.
struct MatrixSpec {
  std::string name;
  Kind kind = Kind::gue;
  double ratio = 1.0;  ///< c = N/M for wishart_*, ginibre_* (ginibre: 1 = square), beta_laguerre
  double beta = 2.0;   ///< β for beta_hermite and beta_laguerre
  HaarMethod haar = HaarMethod::qr;
  DiagonalLaw diagonal;
};

struct Shape {
  Index rows = 0;
  Index cols = 0;
};

/// Parse an ensemble name as written in job files ("gue", "haar_unitary", ...).
Kind parse_kind(std::string_view text);
std::string_view kind_name(Kind kind);
/// Every ensemble name, in declaration order (for messages and help).
std::string known_kinds();

bool is_self_adjoint(Kind kind);  ///< gue, goe, wigner, wishart, diagonal
bool is_unitary(Kind kind);       ///< haar_unitary, haar_orthogonal
bool is_real(Kind kind);          ///< real entries
bool is_random(Kind kind);        ///< draws random numbers (everything but diagonal)

/// The second dimension M = round(N/c) used by Wishart and rectangular Ginibre matrices.
Index companion_size(Index n, double ratio);
/// The shape of the matrix at size N (N×N except rectangular Ginibre: N×M).
Shape shape(const MatrixSpec& spec, Index n);

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

/// The empirical law of a `file` diagonal's numbers as atoms: each distinct number once, in
/// ascending order, with weight (its count)/K for the K numbers in the file. Reads the file;
/// throws InputError as the Sampler does when it cannot. `counts`, when given, receives each
/// number's count (the weights are counts[i]/K exactly).
std::vector<Atom> file_law_atoms(const MatrixSpec& spec,
                                 std::vector<std::size_t>* counts = nullptr);

/// Counts n_i for atoms at size N by the largest-remainder rule (see DiagonalLaw).
std::vector<Index> atom_counts(const std::vector<Atom>& atoms, Index n);

/// Draws one declared matrix. Construction validates the spec (throws InputError naming the
/// matrix, the parameter and the fix) and reads an eigenvalue file once.
class Sampler {
 public:
  explicit Sampler(MatrixSpec spec);

  const MatrixSpec& spec() const { return spec_; }
  /// The matrix at size n for (seed, trial). Deterministic in (seed, name, n, trial).
  Sample draw(Index n, std::uint64_t seed, std::uint64_t trial) const;
  /// The diagonal entries of a `diagonal` matrix at size n (no randomness).
  Eigen::VectorXd diagonal_values(Index n) const;

 private:
  MatrixSpec spec_;
  std::vector<double> file_values_;  ///< sorted numbers of a `file` law
};

}  // namespace freegap::ensembles
