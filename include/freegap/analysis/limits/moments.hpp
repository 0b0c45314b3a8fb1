// Exact limit moments of polynomials in free variables, as exact rationals.
//
// What it computes: for a polynomial P = Σ c_j w_j in free variables x_1, ..., x_r (each word w_j a
// sequence of letters x_i or x_i^*), the limit moments τ(P^k) of the free product of the
// variables' laws — the N → ∞ values of (1/N) E Tr P(X_1, ..., X_r)^k for asymptotically free
// matrices X_i (Voiculescu 1991).
//
// How: the moment–cumulant formula with mixed cumulants vanishing (Nica & Speicher 2006, from
// memory; docs/check-values.md §4e):
//     τ(a_1 ⋯ a_n) = Σ_{π ∈ NC(n), π ≤ ker(variable)} Π_{V ∈ π} κ_V,
// organised by the block V that contains the first letter: the gaps between consecutive elements
// of V are intervals that are partitioned independently, so
//     τ(w) = Σ_{V ∋ 1} κ(V) Π_{gaps g} τ(w_g),
// and the sum over V is a dynamic programme over chains 1 = i_1 < ... < i_s (O(n³) per word),
// with τ of subwords memoised by content. No NC(n) enumeration is needed, so words of a few dozen
// letters are cheap; the number of words of P^k (up to terms^k) is the practical limit, capped by
// EngineOptions::max_words.
//
// Cumulants of a block:
//  - self-adjoint variable: κ_|V|, from its moments by m_n = Σ_{s=1}^n κ_s [z^{n−s}] M(z)^s (first-
//    block decomposition, Nica & Speicher 2006, from memory; docs/check-values.md §4e);
//  - Haar unitary u (*-free, τ(u^k) = δ_{k0}): κ(u^{ε_1}, ..., u^{ε_n}) is (−1)^{k−1} Cat(k−1) when
//    n = 2k and the ε alternate (u, u^*, u, ... or u^*, u, ...), 0 otherwise — u is R-diagonal
//    (Nica & Speicher 2006, Prop. 15.1, from memory; checked by the Kesten–McKay moments 4, 28, 232
//    of docs/check-values.md §1.4 and by τ(u u^* u u^*) = 1);
//  - circular c (limit of a square Ginibre matrix / √N): κ_2(c, c^*) = κ_2(c^*, c) = 1, all others
//  0
//    (Nica & Speicher 2006, from memory).
//
// Exact arithmetic: Rational over BigInt, an arbitrary-precision integer in base 2^32 (schoolbook
// multiplication, Knuth's (1997) Algorithm D for division, Euclid's gcd); every Rational is kept in
// lowest terms with a positive denominator, so there is no overflow to detect — only time and
// memory grow. Doubles are derived at the end (correctly scaled, not through int64).
//
// Not thread-safe: a FreeMomentEngine memoises; use one per thread.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <memory>
#include <string>
#include <string_view>
#include <unordered_map>
#include <vector>

#include "freegap/declarations.hpp"
#include "freegap/expr.hpp"

namespace freegap::analysis {

/// Arbitrary-precision signed integer (sign and magnitude, base 2^32 limbs, little-endian).
class BigInt {
 public:
  BigInt() = default;
  BigInt(std::int64_t value);  // NOLINT(google-explicit-constructor): integers convert freely
  /// Parses an optional sign and decimal digits. Throws InputError on anything else.
  static BigInt parse(std::string_view text);

  bool is_zero() const { return limbs_.empty(); }
  bool is_negative() const { return negative_; }
  int sign() const { return is_zero() ? 0 : (negative_ ? -1 : 1); }
  /// Number of significant bits of |value| (0 for zero).
  std::size_t bit_length() const;
  std::string to_string() const;
  /// Nearest double (±Inf beyond the double range).
  double to_double() const;
  /// |value|.
  BigInt abs() const;
  /// value · 2^bits and trunc(value / 2^bits) (sign kept, magnitude shifted).
  BigInt operator<<(std::size_t bits) const;
  BigInt operator>>(std::size_t bits) const;

  friend BigInt operator+(const BigInt& a, const BigInt& b);
  friend BigInt operator-(const BigInt& a, const BigInt& b);
  friend BigInt operator*(const BigInt& a, const BigInt& b);
  /// Truncating division (quotient rounds toward zero, as for built-in integers). Throws
  /// std::domain_error on division by zero.
  friend BigInt operator/(const BigInt& a, const BigInt& b);
  friend BigInt operator%(const BigInt& a, const BigInt& b);
  BigInt operator-() const;
  BigInt& operator+=(const BigInt& b) { return *this = *this + b; }
  BigInt& operator-=(const BigInt& b) { return *this = *this - b; }
  BigInt& operator*=(const BigInt& b) { return *this = *this * b; }

  friend bool operator==(const BigInt& a, const BigInt& b) = default;
  friend int compare(const BigInt& a, const BigInt& b);
  friend bool operator<(const BigInt& a, const BigInt& b) { return compare(a, b) < 0; }
  friend bool operator>(const BigInt& a, const BigInt& b) { return compare(a, b) > 0; }
  friend bool operator<=(const BigInt& a, const BigInt& b) { return compare(a, b) <= 0; }
  friend bool operator>=(const BigInt& a, const BigInt& b) { return compare(a, b) >= 0; }

  /// Greatest common divisor, ≥ 0 (gcd(0, 0) = 0).
  friend BigInt gcd(BigInt a, BigInt b);
  /// Quotient and remainder of |a| by |b| (both non-negative). Throws std::domain_error if b = 0.
  friend void divide_magnitudes(const BigInt& a, const BigInt& b, BigInt& quotient,
                                BigInt& remainder);

 private:
  void trim();
  std::vector<std::uint32_t> limbs_;  ///< magnitude; empty for zero; no leading zero limbs
  bool negative_ = false;             ///< never true for zero
};

/// Exact rational p/q in lowest terms, q > 0.
class Rational {
 public:
  Rational() = default;
  Rational(std::int64_t value);  // NOLINT(google-explicit-constructor)
  Rational(BigInt numerator);    // NOLINT(google-explicit-constructor)
  /// p/q reduced; throws std::domain_error if q = 0.
  Rational(BigInt numerator, BigInt denominator);
  /// Parses "p", "p/q" or a decimal "1.25", "-0.5", "2e-3" exactly. Throws InputError.
  static Rational parse(std::string_view text);
  /// The simplest rational within 1e-12 relative of `value` with denominator ≤ 10^6 (so 0.5 → 1/2
  /// and 0.1 → 1/10); otherwise the exact binary value of the double. Throws InputError if not
  /// finite.
  static Rational from_double(double value);

  const BigInt& numerator() const { return numerator_; }
  const BigInt& denominator() const { return denominator_; }
  bool is_zero() const { return numerator_.is_zero(); }
  bool is_integer() const { return denominator_ == BigInt(1); }
  /// "p" for integers, "p/q" otherwise.
  std::string to_string() const;
  /// Correctly scaled double (numerator and denominator may both exceed the double range).
  double to_double() const;
  /// this^k for k ≥ 0 (0^0 = 1); negative k inverts (throws std::domain_error for 0).
  Rational pow(int k) const;

  friend Rational operator+(const Rational& a, const Rational& b);
  friend Rational operator-(const Rational& a, const Rational& b);
  friend Rational operator*(const Rational& a, const Rational& b);
  friend Rational operator/(const Rational& a, const Rational& b);
  Rational operator-() const;
  Rational& operator+=(const Rational& b) { return *this = *this + b; }
  Rational& operator-=(const Rational& b) { return *this = *this - b; }
  Rational& operator*=(const Rational& b) { return *this = *this * b; }
  friend bool operator==(const Rational& a, const Rational& b) = default;
  friend bool operator<(const Rational& a, const Rational& b);

 private:
  BigInt numerator_{0};
  BigInt denominator_{1};
};

/// An exact complex rational re + im·i (the Gaussian rationals ℚ(i)): the coefficients of
/// polynomials written with the imaginary unit. Real numbers convert implicitly.
struct ComplexRational {
  Rational re;
  Rational im;
  ComplexRational() = default;
  ComplexRational(Rational real) : re(std::move(real)) {}  // NOLINT(google-explicit-constructor)
  ComplexRational(std::int64_t real) : re(real) {}         // NOLINT(google-explicit-constructor)
  ComplexRational(Rational real, Rational imaginary)
      : re(std::move(real)), im(std::move(imaginary)) {}
  bool is_zero() const { return re.is_zero() && im.is_zero(); }
  ComplexRational conj() const { return {re, -im}; }
  friend ComplexRational operator+(const ComplexRational& a, const ComplexRational& b) {
    return {a.re + b.re, a.im + b.im};
  }
  friend ComplexRational operator*(const ComplexRational& a, const ComplexRational& b) {
    if (a.im.is_zero() && b.im.is_zero()) return {a.re * b.re};  // the common real case
    return {a.re * b.re - a.im * b.im, a.re * b.im + a.im * b.re};
  }
  ComplexRational& operator+=(const ComplexRational& b) { return *this = *this + b; }
  ComplexRational& operator*=(const ComplexRational& b) { return *this = *this * b; }
  friend bool operator==(const ComplexRational& a, const ComplexRational& b) = default;
};

/// Catalan number Cat(n) = C(2n, n)/(n + 1), exact.
BigInt catalan(int n);
/// Binomial coefficient C(n, k), exact (0 outside 0 ≤ k ≤ n).
BigInt binomial(int n, int k);

/// How a free variable enters the cumulant formula.
enum class VariableKind {
  self_adjoint,  ///< a law on ℝ, given by moments or free cumulants
  haar_unitary,  ///< Haar unitary: R-diagonal, τ(u^k) = δ_{k0}
  circular,      ///< circular element (square Ginibre / √N)
};

/// One free variable: its kind and, for self-adjoint ones, its moments and free cumulants (exact,
/// extended on demand and cached; copies share the cache).
class FreeVariable {
 public:
  /// Semicircular of variance σ² (limit of GUE, GOE, Wigner): κ_2 = σ², others 0.
  static FreeVariable semicircular(Rational variance = Rational(1));
  /// Marchenko–Pastur MP(c) of W = X X^*/M, c = N/M: κ_n = c^{n−1} (docs/check-values.md §1.2).
  static FreeVariable marchenko_pastur(Rational ratio);
  /// A finitely supported law Σ w_i δ_{a_i} (deterministic diagonal; weights must sum to 1).
  static FreeVariable atoms(std::vector<std::pair<Rational, Rational>> value_weight);
  /// The symmetric Bernoulli law (δ_{−1} + δ_{+1})/2.
  static FreeVariable bernoulli();
  /// The uniform law on [low, high]: m_n = (high^{n+1} − low^{n+1}) / ((n + 1)(high − low)).
  static FreeVariable uniform(Rational low, Rational high);
  /// A self-adjoint law given by its moments m_1..m_K (m_0 = 1 implied). Orders above K are
  /// unknown: asking for them throws InputError.
  static FreeVariable from_moments(std::vector<Rational> moments);
  /// A self-adjoint law given by all its free cumulants κ_n = cumulant(n), n ≥ 1.
  static FreeVariable from_cumulants(std::function<Rational(int)> cumulant);
  /// A self-adjoint law given by all its moments m_n = moment(n), n ≥ 1.
  static FreeVariable from_moment_function(std::function<Rational(int)> moment);
  static FreeVariable haar_unitary();
  static FreeVariable circular();

  VariableKind kind() const { return kind_; }
  bool self_adjoint() const { return kind_ == VariableKind::self_adjoint; }
  /// m_n (self-adjoint only; n ≥ 0). Throws InputError beyond the known orders.
  Rational moment(int n) const;
  /// κ_n (self-adjoint only; n ≥ 1). Throws InputError beyond the known orders.
  Rational cumulant(int n) const;
  /// The cumulant of a block whose letters carry the adjoint flags `adjoint` in cyclic order.
  Rational block_cumulant(const std::vector<bool>& adjoint) const;

 private:
  struct Tables;
  static FreeVariable make(bool given_moments, std::function<Rational(int)> generator,
                           int known_limit);
  VariableKind kind_ = VariableKind::self_adjoint;
  std::shared_ptr<Tables> tables_;
};

/// The free variable that is the N → ∞ limit of a declared matrix (free from the others):
/// GUE, GOE, Wigner → semicircular(1); Wishart ratio c → MP(c); square Ginibre → circular;
/// Haar unitary or orthogonal → Haar unitary (both are asymptotically *-free Haar unitaries,
/// Collins & Śniady 2006, from memory); diagonal → its law (atoms, uniform, semicircle, MP).
/// Ratios and atoms are read with Rational::from_double. Throws InputError for rectangular
/// Ginibre and for diagonal laws read from a file (no exact moments).
FreeVariable free_variable_for(const declarations::MatrixSpec& spec);

/// One letter of a word: variable index and whether it is the adjoint.
struct Letter {
  int variable = 0;
  bool adjoint = false;
  friend bool operator==(const Letter&, const Letter&) = default;
};
using Word = std::vector<Letter>;

/// c · w.
struct Term {
  ComplexRational coefficient;  ///< real unless the expression has the imaginary unit
  Word word;
};
/// Σ c_j w_j; the empty word is the identity.
using Polynomial = std::vector<Term>;

struct EngineOptions {
  /// Refuse to expand P^k into more distinct words than this (InputError).
  std::size_t max_words = 2'000'000;
};

/// An exact moment with its double value.
struct ExactValue {
  Rational exact;
  double value = 0.0;
  std::string text;  ///< exact.to_string(), or a 15-digit decimal when that is over 24 characters
};

/// τ of words and polynomials in free variables (see the header comment for the method).
class FreeMomentEngine {
 public:
  explicit FreeMomentEngine(std::vector<FreeVariable> variables, EngineOptions options = {});

  /// τ(w). Letters of self-adjoint variables ignore their adjoint flag. Throws InputError for a
  /// variable index out of range.
  Rational trace(const Word& word);
  /// τ(P) = Σ c_j τ(w_j), which must be real (as for a self-adjoint P); throws InputError when
  /// its imaginary part is not zero.
  Rational trace(const Polynomial& polynomial);
  /// τ(P^k) for k = 0..max_order (P^k expanded word by word, equal words merged, U U^* of a Haar
  /// unitary cancelled).
  std::vector<ExactValue> moments(const Polynomial& polynomial, int max_order);
  /// P·Q expanded, equal words merged, zero coefficients dropped, U U^* cancelled.
  Polynomial multiply(const Polynomial& p, const Polynomial& q) const;
  /// The formal adjoint P^* (reversed words, flipped flags, coefficients conjugated).
  Polynomial adjoint(const Polynomial& p) const;
  /// Number of memoised subwords (for tests of the memo and diagnostics).
  std::size_t memo_size() const { return memo_.size(); }

 private:
  Word normalise(const Word& word) const;
  Rational trace_normalised(const Word& word);
  std::vector<FreeVariable> variables_;
  EngineOptions options_;
  std::unordered_map<std::string, Rational> memo_;
};

/// Parses a polynomial written as a sum of terms "c w" over named letters, for tests and small
/// tools: terms separated by '+' or '-', each an optional rational coefficient ("2", "1/2") then
/// letters separated by spaces, a trailing "^*" marking an adjoint: "s1 s2 + s2 s1",
/// "u1 + u1^* + u2 + u2^*", "1/2 a b - 3". Names map to variable indices through `names`.
/// Throws InputError naming the unknown word. (Not the job-file expression syntax: that is
/// freegap::expr's; limit_moments below takes an expr::Expression.)
Polynomial parse_polynomial(std::string_view text, const std::vector<std::string>& names);

/// The polynomial of an expression: its expansion (expr::Expression::expansion) with each declared
/// matrix as variable of the same index and coefficients read with Rational::from_double.
Polynomial polynomial_of(const expr::Expression& expression);

/// Exact limit moments τ(P^k), k = 0..max_order, of an expression in declared matrices, each
/// matrix replaced by its free limit variable (free_variable_for). Throws InputError for a matrix
/// without exact limit moments (rectangular Ginibre, a diagonal read from a file) or a too-large
/// expansion.
std::vector<ExactValue> limit_moments(const expr::Expression& expression, int max_order,
                                      EngineOptions options = {});

/// Every non-crossing partition of {0..n−1}, each as a block index per element (blocks numbered in
/// order of first element). Brute-force reference for tests; n ≤ 16.
std::vector<std::vector<int>> noncrossing_partitions(int n);

}  // namespace freegap::analysis
