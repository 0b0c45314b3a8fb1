// The matrices a job declares: their kinds, parameters and diagonal laws, and what follows from a
// declaration alone (shape, validity, an eigenvalue file's numbers). Knows no sampler: the job
// parser, the study and the analysis read declarations through this header; the samplers
// (ensembles.hpp) draw them. The normalisations are listed in ensembles.hpp.
#pragma once

#include <Eigen/Core>
#include <cstdint>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

#include "freegap/matrix_file.hpp"

namespace freegap::declarations {

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
  toeplitz,       ///< deterministic real symmetric Toeplitz or circulant matrix of a symbol
  file_matrix,    ///< deterministic self-adjoint matrix read from a file (MatrixSpec::file)
  jacobi,         ///< deterministic real symmetric tridiagonal matrix with periodic coefficients
};

/// How Haar matrices are sampled. Both are exactly Haar; QR is 4–5× cheaper
/// (docs/performance.md §3), so it is the default.
enum class HaarMethod {
  qr,     ///< Mezzadri (2007): QR of a Ginibre matrix with the phase (sign) correction
  polar,  ///< polar factor Z (Z^*Z)^(-1/2) of a Ginibre matrix (linalg::polar_factor)
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
  spiked,                      ///< finitely many given values, every other entry one base value
};

/// The law of a deterministic diagonal matrix. Its N diagonal entries are
///  - atoms: atom i repeated n_i times, in the order given, with n_i = N·w_i rounded by the
///    largest-remainder rule: floor(N·w_i) each, then one more to the atoms with the largest
///    fractional parts (ties to the earlier atom) until the counts sum to N;
///  - every other law: its quantiles F^(-1)((k + 1/2)/N), k = 0..N−1 (midpoint rule), ascending.
///    For `file`, F is the empirical CDF of the K numbers in the file (equal weights, left-
///    continuous inverse), so a file with exactly N numbers gives those numbers, sorted;
///  - spiked: the r values of `spikes` in the order given, then N − r entries equal to `base`. The
///    count r does not grow with N (a finite-rank perturbation), so the limit law is the point
///    mass at `base`, and the spikes show as outliers (analysis/limits/outliers.hpp).
struct DiagonalLaw {
  DiagonalLawKind kind = DiagonalLawKind::atoms;
  std::vector<Atom> atoms;
  double low = 0.0, high = 1.0;  ///< uniform
  double variance = 1.0;         ///< semicircle
  double ratio = 1.0;            ///< Marchenko–Pastur c
  std::string path;              ///< file: whitespace-separated numbers, '#' starts a comment
  std::vector<double> spikes;    ///< spiked: the r values, r ≤ kMostSpikes
  double base = 0.0;             ///< spiked: the value of the other N − r entries
};

/// The largest rank of a spiked diagonal: a finite-rank perturbation, not a law.
inline constexpr std::size_t kMostSpikes = 64;

/// Where a `file_matrix` comes from (job key ensemble = "file"): one file for every size, or one
/// per size. The matrix must be square and self-adjoint: real symmetric or complex Hermitian, up
/// to 1e-12 of its largest entry; the sample is (A + A^*)/2, which is A bit for bit when A is
/// exactly self-adjoint.
///  - `path` without "{N}": one n × n matrix; at size N = k·n the sample is k copies of it on the
///    block diagonal, whose eigenvalue law is that of A at every size (a size that is not a
///    multiple of n is refused).
///  - `path` with "{N}": the file for size N is the path with {N} replaced by N, and holds N × N.
struct FileMatrix {
  std::string path;     ///< resolved against the job file's directory
  std::string dataset;  ///< the HDF5 dataset ("" = the file's only one); other formats: ""
  bool complex = false;      ///< complex Hermitian entries (set from the file when the job is read)
  Index reference_size = 0;  ///< the size whose matrix stands for the limit law (the largest)
  Index file_size = 0;       ///< the order n of the reference size's matrix (set with `complex`)
};

/// One declared matrix.
struct MatrixSpec {
  std::string name;
  Kind kind = Kind::gue;
  double ratio = 1.0;  ///< c = N/M for wishart_*, ginibre_* (ginibre: 1 = square), beta_laguerre
  double beta = 2.0;   ///< β for beta_hermite and beta_laguerre
  HaarMethod haar = HaarMethod::qr;
  DiagonalLaw diagonal;
  /// toeplitz: c_0 … c_k, the entries T_ij = c_|i−j| (zero past k), the symbol
  /// f(θ) = c_0 + 2 Σ_{j≥1} c_j cos(jθ); `circulant` wraps the band around (T_ij = Σ c_|m| over
  /// m ≡ i − j mod N, |m| ≤ k), whose eigenvalues are f(2πj/N) exactly.
  std::vector<double> coefficients;
  bool circulant = false;
  FileMatrix file;  ///< file_matrix
  /// jacobi: J_ii = a_{i mod p}, J_{i,i+1} = J_{i+1,i} = b_{i mod p} (p = the lists' length,
  /// every b_k ≠ 0): a periodic Jacobi matrix; p = 1 is the Toeplitz matrix of a + 2b cos θ.
  std::vector<double> jacobi_diagonal, jacobi_off_diagonal;
};

/// The longest period of a Jacobi matrix's coefficients.
inline constexpr std::size_t kMostJacobiPeriod = 16;

/// The most coefficients of a Toeplitz symbol (band half-width 16): the limit law is the image of
/// the arcsine law under a polynomial of that degree.
inline constexpr std::size_t kMostToeplitzCoefficients = 17;

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
bool is_real(Kind kind);          ///< real entries (file_matrix: see the spec's overload)
bool is_real(const MatrixSpec& spec);  ///< real entries; a file_matrix by its file
bool is_random(Kind kind);        ///< draws random numbers (everything but diagonal, toeplitz)
bool uses_ratio(Kind kind);       ///< wishart_*, ginibre_*, beta_laguerre: a ratio c = N/M

/// The second dimension M = round(N/c) used by Wishart and rectangular Ginibre matrices.
Index companion_size(Index n, double ratio);
/// The shape of the matrix at size N (N×N except rectangular Ginibre: N×M).
Shape shape(const MatrixSpec& spec, Index n);

/// Throws InputError "matrix 'NAME': what": the form of every message about one declaration.
[[noreturn]] void refuse(const MatrixSpec& spec, const std::string& what);

/// Checks a declaration as the samplers need it (name, ratio, β, the diagonal law's parameters);
/// throws InputError "matrix 'NAME': what, and the fix". Does not read an eigenvalue file: that is
/// file_values().
void validate(const MatrixSpec& spec);

/// The numbers of a `file` diagonal's eigenvalue file, ascending (InputError naming the file,
/// the line and the word when it cannot be read or holds something else than finite numbers).
std::vector<double> file_values(const MatrixSpec& spec);

/// The empirical law of a `file` diagonal's numbers as atoms: each distinct number once, in
/// ascending order, with weight (its count)/K for the K numbers in the file. Reads the file;
/// throws InputError as the Sampler does when it cannot. `counts`, when given, receives each
/// number's count (the weights are counts[i]/K exactly).
std::vector<Atom> file_law_atoms(const MatrixSpec& spec,
                                 std::vector<std::size_t>* counts = nullptr);

/// The path of a file_matrix's file at size N ({N} replaced by N).
std::string file_matrix_path(const MatrixSpec& spec, Index n);
/// Whether a file_matrix has one file per size ({N} in its path).
bool file_matrix_per_size(const MatrixSpec& spec);
/// A file_matrix's matrix at size N, read (shared: matrix_file::read_shared) and checked: square,
/// N × N (one file per size) or a divisor of N (one file), self-adjoint to 1e-12 of its largest
/// entry, real or complex as the spec says. InputError "matrix 'NAME': …" naming the file.
/// The k-fold block repetition is the sampler's; this is the file's matrix, not yet symmetrised.
std::shared_ptr<const matrix_file::Matrix> file_matrix_at(const MatrixSpec& spec, Index n);

/// The diagonal entries at size N when they are fixed by the declaration alone (atoms and spiked
/// laws, in the sampler's order); empty for any other law.
std::vector<double> planned_entries(const MatrixSpec& spec, Index n);

/// The declaration as its N → ∞ limit sees it: a spiked diagonal becomes the point mass at its
/// base (law atoms [[base, 1]]); every other declaration is returned unchanged.
MatrixSpec limit_spec(const MatrixSpec& spec);

/// Counts n_i for atoms at size N by the largest-remainder rule (see DiagonalLaw).
std::vector<Index> atom_counts(const std::vector<Atom>& atoms, Index n);

}  // namespace freegap::declarations
