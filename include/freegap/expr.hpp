// Polynomial expressions in declared matrices: parse, check (shapes, self-adjointness), plan,
// evaluate.
//
// Syntax (our own, as written on paper), by example:
//
//   B + U B U^*          X1 X2 + X2 X1         1/2 (X1 X2 + X2 X1)       X1 - 0.25 X2^3
//   G G^*                (A B)^* (A B)         U1 + U1^* + U2 + U2^*      X1/2 + 3*X2 - 1
//
//  - names: a letter, then letters, digits or '_' (X1, B, U_2); every name must be declared;
//  - sums and differences with '+' and '-'; a leading '-' (or '+') is allowed at the start of the
//    expression and right after '('; "A + -B" is refused (write "A - B" or "A + (-B)");
//  - products by juxtaposition or '*';
//  - real numbers: 2, 0.5, 1e-3; a fraction is a product with a division, so "1/2 (A B)" is
//    (1/2)·(A B). Division is by numbers only ("X1/2" is X1·½; "A/B" is refused). A number may
//    start a product but not follow a factor without '*' ("2 A" and "A*2" are fine, "A 2" is not);
//  - a number on its own in a sum is that multiple of the identity: "A^2 - 1" is A² − I;
//  - the imaginary unit i is a number like 2: "i (U - U^*)", "2i X", "X i", "(1 + 2 i) A B";
//    no matrix may be called i (Expression refuses the declaration), and division is by real
//    numbers only ("X/i" is refused: write "-i X"). Powers of i are exact (i² = −1 bit for bit).
//    Coefficients are then complex through the expansion (Monomial::coefficient), the
//    self-adjointness check (the adjoint conjugates them) and the plan (sums with complex
//    coefficients, complex arithmetic even for real factors; a complex factor folds only into a
//    complex sum, never into a real BLAS alpha);
//  - postfix '^k' (k a non-negative integer, at most 1000) and '^*' (adjoint) apply to the name,
//    number or parenthesised group just before them and chain left to right: "U^2^*" is (U²)^*,
//    "U^*^2" is (U^*)²; '^' binds tighter than products and unary minus ("-X^2" is −(X²));
//  - bounds (below, kMaxNesting …): parentheses nest at most 100 deep, at most 16 '^' in a row,
//    and the degree (factors in a word once multiplied out) is at most 1000.
//
// Checks: every name is declared; shapes agree symbolically (N for square matrices, one symbol M,
// M2, ... per distinct ratio c of rectangular Ginibre matrices, so "G G" with G N×M is refused even
// when M happens to equal N); the whole expression is square. Self-adjointness is decided
// symbolically: the expression is expanded into a sum of words in the letters and their adjoints
// (self-adjoint letters are their own adjoints, adjacent U U^* of a Haar unitary cancel, adjacent
// diagonal letters commute), and compared with its formal adjoint. The expansion stops at a cap
// (100 000 monomials by default); the expression is then "not proven self-adjoint" and gets
// singular values, with a note saying so.
//
// Evaluation: the expression becomes a graph in which identical subexpressions — including one
// and its adjoint, e.g. X1 X2 and X2 X1 = (X1 X2)^* for self-adjoint X1, X2 — are one node, so
// each is computed once. Products go to zgemm/dgemm; Y Y^* and Y^* Y go to zherk/dsyrk; diagonal
// factors scale rows or columns in O(N²); Y D Y^* with D real diagonal is formed by rank-k updates
// (below); powers use repeated squaring, a self-adjoint X² being X X^* (herk). Scalars fold into
// BLAS alpha where the product is used once. Arithmetic is real when every factor is real.
//
// Y D Y^* with D diagonal: write D − d_r I = D₊ − D₋ (positive and negative parts), where d_r is
// the most frequent value of D when Y is unitary (then Y d_r I Y^* = d_r I) and 0 otherwise. Then
// Y D Y^* = d_r I + W₊W₊^* − W₋W₋^*, W± = Y restricted to the columns where D ≠ d_r, scaled by
// √|d − d_r|: at most two herks over the columns where D ≠ d_r. For B = ±1 and Haar U this is one
// herk on N/2 columns, 4 times cheaper than a general product
// (docs/performance.md §4: 0.33 s against 1.57 s at N = 2000).
//
// Haar columns: a Haar U used only in conjugations U D U^* (or only U^* D U) of diagonals with an
// atoms law is read only at the columns S where some D differs from its most frequent value. The
// plan then asks for U as an N×|S| Haar isometry (Evaluation::haar_columns; the sampler
// orthonormalises an N×|S| Ginibre block, Mezzadri 2007), whose columns stand for S in increasing
// order: Haar columns are exchangeable, so this is the law of U's columns at S. For B = ±1 the
// sample is N×N/2 and the herk reads it in place (the weight into alpha).
//
// Flop conventions (Evaluation::flops, explain): complex gemm 8mnk, real 2mnk; zherk 4n²k, dsyrk n²k;
// scaling a complex entry by a real number 2, a real entry 1; adding a scaled term to a complex
// matrix 4 per entry, to a real one 2; operations on diagonals N per operation; copies, mirroring
// a triangle, transposing and promoting real to complex 0.
//
// Memory: a plan holds its inputs (the caller's samples, not copied) plus temporaries. For
// B + U B U^* it holds the result (one N×N complex temporary, 16 N² bytes) and reads U's N/2
// sampled columns in place (with EvaluationOptions::full_haar, U is an N×N input and the herk
// copies its N/2 scaled columns: 1.5 N×N temporaries). Evaluation::peak_temporary_bytes gives
// the exact peak of any plan; temporaries are freed after their last use and sums accumulate in
// place into a temporary that is not needed afterwards.
#pragma once

#include <Eigen/Core>
#include <complex>
#include <cstddef>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/errors.hpp"

namespace freegap::expr {

using Index = Eigen::Index;

/// A malformed or ill-shaped expression. The message ends with "at column k" (1-based) where a
/// place can be named.
class ExprError : public InputError {
 public:
  ExprError(const std::string& message, int column);
  /// 1-based column of the offending token, or 0 when the error concerns the whole expression.
  int column() const { return column_; }

 private:
  int column_;
};

/// Which spectrum the expression gets.
enum class Spectrum {
  eigenvalues,      ///< real eigenvalues of a self-adjoint result (lower triangle read)
  singular_values,  ///< singular values (operator norm = the largest)
};

/// Bounds on an expression, checked while parsing and right after it, before any expansion,
/// planning or evaluation, so that no text can make freegap recurse without bound, run for hours
/// or exhaust memory before saying no. Each refusal names the bound, the column and what to do.
///
/// Parentheses nested deeper than this are refused. Written studies nest a few levels; 100 keeps
/// every recursive walk of the syntax tree a few thousand frames deep at most, far inside the
/// 8 MiB default stack (and the smaller stacks of threads that validate jobs).
inline constexpr int kMaxNesting = 100;
/// '^' operators in a row on one factor ("U^2^*" is two). More than a handful is never needed
/// ("X^2^3" is X^6, "X^*^*" is X); the bound keeps the tree shallow like kMaxNesting.
inline constexpr int kMaxPowerChain = 16;
/// Degree: the most matrix factors in one word of the expanded expression (powers multiplied
/// out, e.g. "(A B)^3 C" has degree 7). Sampling costs one product per factor at most, and the
/// symbolic checks copy words of this length, so the bound caps both. 1000 matches the largest
/// single power ("U^1000": high powers of Haar unitaries are studied as such) and is far above
/// the degrees of polynomial models (rarely past 10); "B^1000^1000" (degree 10^6) is refused.
inline constexpr long long kMaxDegree = 1000;
/// Letters held by all the words of one symbolic expansion at once (with max_monomials words);
/// 10^7 letters are 40 MB of word storage, the expansion's memory bound. Past it the expansion
/// stops as at the monomial cap.
inline constexpr std::size_t kMaxExpansionLetters = 10000000;
/// Word products formed in one symbolic expansion (merged words included): 2·10^7 take a few
/// seconds at most; past them the expansion stops as at the monomial cap. Expansions that merge
/// heavily ((U + U^*)^k with U unitary) stay far below this.
inline constexpr std::size_t kMaxExpansionProducts = 20000000;

struct CheckOptions {
  /// Singular values even when the expression is self-adjoint.
  bool force_singular_values = false;
  /// Cap on the monomials of the symbolic expansion used to decide self-adjointness.
  std::size_t max_monomials = 100000;
  /// Budgets of every symbolic expansion of the expression (this check and expansion()): letters
  /// stored and word products formed. Lower only to keep instrumented builds (fuzzing) fast.
  std::size_t max_expansion_letters = kMaxExpansionLetters;
  std::size_t max_expansion_products = kMaxExpansionProducts;
};

/// One term c·w of an expression expanded as a noncommutative polynomial in the declared
/// matrices: `letters` holds (index into declared(), adjointed) pairs in product order; an empty
/// word is the identity. A self-adjoint matrix's letter is never marked adjointed.
struct Monomial {
  std::complex<double> coefficient = 0.0;  ///< real unless the text has the imaginary unit i
  std::vector<std::pair<int, bool>> letters;
};

namespace detail {
struct ExpressionData;
struct EvaluationData;
}  // namespace detail

/// A parsed and checked expression over declared matrices.
class Expression {
 public:
  /// Parses `text` over the matrices `declared` and checks it. Throws ExprError.
  Expression(std::string_view text, std::vector<ensembles::MatrixSpec> declared,
             const CheckOptions& options = {});

  const std::string& text() const;
  const std::vector<ensembles::MatrixSpec>& declared() const;
  /// Self-adjoint, proven symbolically.
  bool self_adjoint() const;
  /// The spectrum that will be computed.
  Spectrum spectrum() const;
  /// Every factor is real and no number is complex (real arithmetic throughout).
  bool is_real() const;
  /// Why self-adjointness could not be decided (expansion cap), or empty.
  const std::string& note() const;
  /// The symbolic shape, e.g. "N×N".
  std::string shape() const;
  /// The expression expanded into monomials (normal form of the self-adjointness check: U U^*
  /// of a unitary cancels, adjacent diagonal letters are sorted), terms with zero coefficient
  /// dropped. Throws ExprError if the expansion has more than `max_monomials` terms.
  std::vector<Monomial> expansion(std::size_t max_monomials = 100000) const;

 private:
  friend class Evaluation;
  friend class VectorProduct;
  std::shared_ptr<const detail::ExpressionData> data_;
};

struct EvaluationOptions {
  /// Form the full matrix even when the lower triangle would do (eigenvalues of a self-adjoint
  /// result read only the lower triangle).
  bool full_result = false;
  /// Plan every Haar matrix as a whole N×N sample, even one whose conjugations use only some of
  /// its columns (for comparisons; see Evaluation::haar_columns).
  bool full_haar = false;
};

/// The evaluated expression: real or complex dense, square.
struct Evaluated {
  bool is_complex = false;
  Eigen::MatrixXd real;
  Eigen::MatrixXcd complex;
  /// Only the lower triangle (with the diagonal) is valid; the upper one is unspecified.
  bool lower_only = false;
};

/// A whole evaluated matrix as estimators read it (include/freegap/estimator_abi.h): column-major
/// rows × cols, complex entries as interleaved (real, imaginary) pairs.
struct MatrixView {
  const double* data = nullptr;
  Index rows = 0;
  Index cols = 0;
  bool is_complex = false;
  /// Doubles in `data`: rows · cols, twice that for a complex matrix.
  std::size_t doubles() const {
    return static_cast<std::size_t>(rows * cols) * (is_complex ? 2u : 1u);
  }
};

/// What one step of a plan does.
enum class StepKind {
  gemm,           ///< general product (zgemm / dgemm)
  herk,           ///< Y Y^* or Y^* Y (zherk / dsyrk)
  conjugate,      ///< Y D Y^* with D diagonal, by rank-k updates (zherk / dsyrk)
  scale_rows,     ///< diag(d)·A
  scale_columns,  ///< A·diag(d)
  sum,            ///< linear combination, with multiples of the identity and diagonals
  diagonal,       ///< arithmetic on diagonals (vectors)
  to_dense,       ///< a diagonal result written as a dense matrix
  copy,           ///< the result is an input matrix, copied (the spectrum routine overwrites it)
  adjoint,        ///< the result is the adjoint of a computed matrix
};

struct StepInfo {
  StepKind kind;
  std::string output;       ///< "t3"
  std::string description;  ///< "X1·X2", "herk(t1)", ...
  std::string routine;      ///< "zgemm", "zherk", "column scaling", ...
  double flops = 0.0;
};

/// Whether every coefficient of an expansion is real (no imaginary unit left after expanding).
bool real_coefficients(const std::vector<Monomial>& terms);

/// An evaluation plan for one size N.
class Evaluation {
 public:
  Evaluation(const Expression& expression, Index n, const EvaluationOptions& options = {});

  Index size() const;
  /// Per declared matrix: r ≥ 0 when the plan reads a Haar matrix U only through conjugations
  /// U D U^* (or only U^* D U) of atom-law diagonals, and then only the r columns of U (of U^*)
  /// at the coordinates where a D differs from its most frequent value; its sample must then be
  /// an N×r Haar isometry (ensembles::Sampler::draw_columns), whose columns stand for those
  /// coordinates in increasing order. −1 for a matrix sampled whole (or not used).
  std::vector<Index> haar_columns() const;
  Spectrum spectrum() const;
  const std::vector<StepInfo>& steps() const;
  /// Total floating-point operations (conventions above).
  double flops() const;
  /// Peak bytes of temporaries held at once (inputs not counted, the result counted).
  std::size_t peak_temporary_bytes() const;
  /// Bytes of the inputs (dense N×N complex 16 N², real 8 N², diagonal 8 N).
  std::size_t input_bytes() const;
  /// Text for --explain: each step with its routine and flops, the arithmetic, self-adjointness,
  /// the spectrum, total flops and peak memory.
  std::string explain() const;

  /// Evaluates on samples given in declaration order (one per declared matrix; unused ones may be
  /// empty). Throws InputError when a used sample has the wrong storage or shape.
  Evaluated evaluate(const std::vector<ensembles::Sample>& samples) const;

 private:
  std::shared_ptr<const detail::EvaluationData> data_;
};

/// Products of the expression with vectors, without forming it: for iterative solvers
/// (model::Path::krylov). The syntax tree is applied to the vector from the right, each factor
/// by one BLAS matrix–vector product (zhemv / dsymv for a self-adjoint dense sample, which reads
/// one triangle; zgemv / dgemv otherwise, with the adjoint as BLAS's op), diagonals by scaling,
/// numbers by scaling, sums term by term and powers by repeated products. So P = X1 X2 + X2 X1
/// costs 4 matrix–vector products (4 passes over N×N data) instead of the N³ of forming it.
class VectorProduct {
 public:
  VectorProduct(const Expression& expression, Index n);

  Index size() const { return n_; }
  /// Every factor real: products in real arithmetic (apply on double vectors).
  bool is_real() const { return real_; }
  /// Bytes of sampled matrices read by one product (16 per complex entry, 8 per real one; a
  /// self-adjoint dense factor counts half): the memory traffic the product's time follows.
  double bytes_read() const { return bytes_; }
  /// out = P·in, vectors of length N. Samples as for Evaluation::evaluate, every one whole.
  /// Throws InputError when a used sample has the wrong storage or shape.
  void apply(const std::vector<ensembles::Sample>& samples, const std::complex<double>* in,
             std::complex<double>* out) const;
  /// The same in real arithmetic; only for is_real() expressions.
  void apply(const std::vector<ensembles::Sample>& samples, const double* in, double* out) const;
  /// out = P^*·(P·in): the Gram matrix, whose eigenvalues are the squared singular values of P
  /// (twice the bytes of one product).
  void apply_gram(const std::vector<ensembles::Sample>& samples, const std::complex<double>* in,
                  std::complex<double>* out) const;
  void apply_gram(const std::vector<ensembles::Sample>& samples, const double* in,
                  double* out) const;

 private:
  std::shared_ptr<const detail::ExpressionData> data_;
  Index n_ = 0;
  bool real_ = false;
  double bytes_ = 0.0;
};

/// Peak working memory of evaluating `expression` at size n: inputs plus peak temporaries.
std::size_t peak_working_bytes(const Expression& expression, Index n);

/// The spectrum the plan asks for, computed in place (the matrix is destroyed): eigenvalues
/// ascending, or singular values descending.
Eigen::VectorXd compute_spectrum(Spectrum spectrum, Evaluated& result);

}  // namespace freegap::expr
