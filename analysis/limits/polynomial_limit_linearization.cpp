// From an expression in declared matrices to a self-adjoint polynomial in free variables, and its
// self-adjoint linear pencil (Anderson 2013; Belinschi et al. 2017; docs/check-values.md §4d).
#include <algorithm>
#include <limits>
#include <map>
#include <optional>
#include <string>

#include "freegap/analysis/limits/limit.hpp"
#include "freegap/analysis/limits/polynomial_limit.hpp"
#include "freegap/errors.hpp"

namespace freegap::analysis {

namespace {

using declarations::DiagonalLawKind;
using declarations::Kind;

// The free variable a self-adjoint declared matrix becomes (Voiculescu 1991).
FreeLetter letter_for(const declarations::MatrixSpec& spec, const std::string& name) {
  FreeLetter letter;
  letter.name = name;
  const auto semicircular = [&](double variance) {
    letter.semicircular = true;
    letter.variance = variance;
    letter.law = semicircle(variance);
  };
  switch (spec.kind) {
    case Kind::gue:
    case Kind::goe:
    case Kind::wigner_rademacher:
      semicircular(1.0);
      return letter;
    case Kind::wishart_complex:
    case Kind::wishart_real:
      letter.law = marchenko_pastur(spec.ratio);
      return letter;
    case Kind::toeplitz:
      letter.law = toeplitz_symbol_law(spec.coefficients);
      return letter;
    case Kind::jacobi:
      letter.law = periodic_jacobi_law(spec.jacobi_diagonal, spec.jacobi_off_diagonal);
      return letter;
    case Kind::file_matrix:
      for (const auto& a : file_matrix_eigenvalue_law(spec)) letter.atoms.push_back({a.value, a.weight});
      letter.law = atoms(letter.atoms);
      return letter;
    case Kind::diagonal:
      switch (spec.diagonal.kind) {
        case DiagonalLawKind::atoms: {
          std::vector<Atom> points;
          for (const auto& a : spec.diagonal.atoms) {
            if (a.weight > 0.0) points.push_back({a.value, a.weight});
          }
          std::sort(points.begin(), points.end(),
                    [](const Atom& a, const Atom& b) { return a.value < b.value; });
          letter.atoms = points;
          letter.law = atoms(points);
          return letter;
        }
        case DiagonalLawKind::uniform:
          letter.law = uniform(spec.diagonal.low, spec.diagonal.high);
          return letter;
        case DiagonalLawKind::semicircle_quantiles:
          semicircular(spec.diagonal.variance);
          return letter;
        case DiagonalLawKind::marchenko_pastur_quantiles:
          letter.law = marchenko_pastur(spec.diagonal.ratio);
          return letter;
        case DiagonalLawKind::spiked:  // finite rank: the point mass at the base in the limit
          letter.atoms = {{spec.diagonal.base, 1.0}};
          letter.law = atoms(letter.atoms);
          return letter;
        case DiagonalLawKind::file: {
          // The empirical law of the file's numbers (declarations::file_law_atoms), ascending.
          std::vector<Atom> points;
          for (const auto& a : declarations::file_law_atoms(spec)) points.push_back({a.value, a.weight});
          letter.atoms = points;
          letter.law = atoms(points);
          return letter;
        }
      }
      break;
    case Kind::ginibre_complex:
    case Kind::ginibre_real:
      throw InputError("matrix '" + spec.name +
                       "': Ginibre matrices are not covered by the polynomial limit (it needs "
                       "self-adjoint variables; for G G^* declare a Wishart matrix instead)");
    case Kind::beta_hermite:
    case Kind::beta_laguerre:
      throw InputError("matrix '" + spec.name +
                       "': beta ensembles have only a tridiagonal model and cannot appear in "
                       "a polynomial in several matrices");
    case Kind::haar_unitary:
    case Kind::haar_orthogonal:
      break;
  }
  throw InputError("matrix '" + spec.name + "': not a self-adjoint matrix");
}

std::string word_text(const std::vector<int>& w) {
  std::string s;
  for (int i : w) s += std::to_string(i) + ",";
  return s;
}

// How a Haar unitary appears: U D^k U^* (or U^* D^k U) with one D.
struct Conjugation {
  bool adjoint_first = false;  // U^* D U
  int inner = -1;
};

// The conjugation of each Haar unitary of the monomials (InputError when one is not of that form).
std::map<int, Conjugation> conjugations_of(const expr::Expression& expression,
                                           const std::vector<declarations::MatrixSpec>& declared,
                                           const std::vector<expr::Monomial>& monomials) {
  // Haar unitaries: each must appear only as U D^k U^* (or only as U^* D^k U) with one D.
  std::map<int, Conjugation> conjugations;
  for (const auto& m : monomials) {
    const auto& ls = m.letters;
    for (std::size_t p = 0; p < ls.size(); ++p) {
      const int v = ls[p].first;
      if (!declarations::is_unitary(declared[v].kind)) continue;
      const std::string& uname = declared[v].name;
      const auto refuse = [&](const std::string& why) {
        throw InputError("matrix '" + uname + "' in '" + expression.text() + "': " + why +
                         "; the polynomial limit covers a Haar unitary only in conjugations " +
                         uname + " D " + uname + "^* (powers of one self-adjoint matrix D, the " +
                         "same D everywhere), which give a free copy of D");
      };
      std::size_t q = p + 1;
      while (q < ls.size() && ls[q].first != v) ++q;
      if (q == ls.size() || ls[q].second == ls[p].second) refuse("it appears unpaired");
      if (q == p + 1) refuse("it appears unpaired");
      const int inner = ls[p + 1].first;
      for (std::size_t r = p + 1; r < q; ++r) {
        if (ls[r].first != inner) refuse("it conjugates a product of several matrices");
      }
      if (!declarations::is_self_adjoint(declared[inner].kind)) {
        refuse("it conjugates a matrix that is not self-adjoint");
      }
      Conjugation c{ls[p].second, inner};
      auto [it, fresh] = conjugations.emplace(v, c);
      if (!fresh && (it->second.inner != inner || it->second.adjoint_first != c.adjoint_first)) {
        refuse("it conjugates different matrices (or in both orders)");
      }
      p = q;
    }
  }
  return conjugations;
}

// The free letters handed out so far: declared self-adjoint matrices that appear bare, then one
// per conjugation.
struct LetterIndices {
  std::map<int, int> bare_index;
  std::map<int, int> conjugated_index;  // unitary → letter
  std::optional<int> diagonal_seen;
};

// The word of free letters of one monomial; adds each new letter to result.letters.
std::vector<int> free_word_of(const expr::Monomial& m, const expr::Expression& expression,
                              const std::vector<declarations::MatrixSpec>& declared,
                              const std::map<int, Conjugation>& conjugations,
                              LetterIndices& indices, FreePolynomial& result) {
  std::map<int, int>& bare_index = indices.bare_index;
  std::map<int, int>& conjugated_index = indices.conjugated_index;
  std::optional<int>& diagonal_seen = indices.diagonal_seen;
  const auto& ls = m.letters;
  std::vector<int> word;
  for (std::size_t p = 0; p < ls.size(); ++p) {
    const int v = ls[p].first;
    if (declarations::is_unitary(declared[v].kind)) {
      auto it = conjugated_index.find(v);
      if (it == conjugated_index.end()) {
        const auto& c = conjugations.at(v);
        const std::string& u = declared[v].name;
        const std::string& d = declared[c.inner].name;
        const std::string name =
            c.adjoint_first ? u + "^* " + d + " " + u : u + " " + d + " " + u + "^*";
        result.letters.push_back(letter_for(declared[c.inner], name));
        it = conjugated_index.emplace(v, static_cast<int>(result.letters.size()) - 1).first;
      }
      std::size_t q = p + 1;
      while (ls[q].first != v) ++q;
      for (std::size_t r = p + 1; r < q; ++r) word.push_back(it->second);
      p = q;
      continue;
    }
    auto it = bare_index.find(v);
    if (it == bare_index.end()) {
      if (!declarations::is_random(declared[v].kind)) {
        if (diagonal_seen && *diagonal_seen != v) {
          throw InputError("matrices '" + declared[*diagonal_seen].name + "' and '" +
                           declared[v].name + "' in '" + expression.text() +
                           "': two deterministic matrices are not free of each other (diagonals "
                           "commute), so the polynomial limit does not cover them together "
                           "(conjugate one by a Haar unitary, U D U^*, to make it free)");
        }
        diagonal_seen = v;
      }
      result.letters.push_back(letter_for(declared[v], declared[v].name));
      it = bare_index.emplace(v, static_cast<int>(result.letters.size()) - 1).first;
    }
    word.push_back(it->second);
  }
  return word;
}

}  // namespace

FreePolynomial free_polynomial_of(const expr::Expression& expression) {
  if (!expression.self_adjoint()) {
    throw InputError("expression '" + expression.text() +
                     "' is not proven self-adjoint: the polynomial limit needs a self-adjoint "
                     "expression (add its adjoint, e.g. 'A B + B A')");
  }
  const auto& declared = expression.declared();
  const auto monomials = expression.expansion();
  const std::map<int, Conjugation> conjugations =
      conjugations_of(expression, declared, monomials);

  // Letter indices: declared self-adjoint matrices that appear bare, then one per conjugation.
  LetterIndices indices;
  FreePolynomial result;
  result.text = expression.text();
  std::map<std::string, std::complex<double>> merged;  // word key → coefficient
  std::map<std::string, std::vector<int>> words;
  for (const auto& m : monomials) {
    const std::vector<int> word =
        free_word_of(m, expression, declared, conjugations, indices, result);
    const std::string key = word_text(word);
    merged[key] += m.coefficient;
    words[key] = word;
  }
  for (const auto& [key, c] : merged) {
    if (c != 0.0) result.terms.push_back({c, words[key]});
  }
  return result;
}

// ---------------------------------------------------------------------------------------------
// The pencil

namespace {

// Adds value·(letter or constant) at (r, c) of the pencil; letter −1 is the constant part.
struct PencilBuilder {
  explicit PencilBuilder(int letters) : letters_(letters) {}
  struct Entry {
    int r, c, letter;
    std::complex<double> value;
  };
  void add(int r, int c, int letter, std::complex<double> value) {
    entries_.push_back({r, c, letter, value});
  }
  int grow(int rows) {
    const int start = size_;
    size_ += rows;
    return start;
  }
  Pencil finish() const {
    Pencil p;
    p.size = size_;
    p.constant = Eigen::MatrixXcd::Zero(size_, size_);
    p.coefficients.assign(letters_, Eigen::MatrixXcd::Zero(size_, size_));
    for (const auto& e : entries_) {
      Eigen::MatrixXcd& m = e.letter < 0 ? p.constant : p.coefficients[e.letter];
      m(e.r, e.c) += e.value;
    }
    return p;
  }
  int letters_;
  int size_ = 1;
  std::vector<Entry> entries_;
};

// Pencil of x_{i_1}⋯x_{i_k}, k×k (docs/check-values.md §4d): x_{i_{r+1}} at (r, k−1−r), −1 at
// (r, k−r) for r ≥ 1; P = −u Q^{−1} v with u = row 0, v = column 0, Q the rest.
struct MonomialEntry {
  int r, c, letter;  // letter −1: the constant −1
};
std::vector<MonomialEntry> monomial_entries(const std::vector<int>& word) {
  const int k = static_cast<int>(word.size());
  std::vector<MonomialEntry> out;
  for (int r = 0; r < k; ++r) {
    out.push_back({r, k - 1 - r, word[r]});
    if (r >= 1) out.push_back({r, k - r, -1});
  }
  return out;
}

bool palindrome(const std::vector<int>& w) { return std::equal(w.begin(), w.end(), w.rbegin()); }

// The merged coefficient of every word, as linearize reads them.
std::map<std::vector<int>, std::complex<double>> merged_terms(const FreePolynomial& polynomial) {
  std::map<std::vector<int>, std::complex<double>> coefficient;
  for (const auto& t : polynomial.terms) coefficient[t.word] += t.coefficient;
  return coefficient;
}

}  // namespace

long long pencil_size(const FreePolynomial& polynomial) {
  // The rows linearize grows, word by word (same rules, nothing built).
  const long long limit = std::numeric_limits<int>::max();
  long long size = 1;
  const auto coefficient = merged_terms(polynomial);
  for (const auto& [word, c] : coefficient) {
    const long long k = static_cast<long long>(word.size());
    if (c == 0.0 || k < 2) continue;
    if (palindrome(word)) {
      size += k - 1;
    } else if (!(std::vector<int>(word.rbegin(), word.rend()) < word)) {
      size += 2 * (k - 1);
    }
    size = std::min(size, limit);
  }
  return size;
}

Pencil linearize(const FreePolynomial& polynomial) {
  if (const long long n = pencil_size(polynomial); n > kMaxPencilSize) {
    throw InputError("expression '" + polynomial.text + "': its linearization is a " +
                     std::to_string(n) + "×" + std::to_string(n) + " pencil, larger than the " +
                     std::to_string(kMaxPencilSize) +
                     " the limit solver takes (its cost climbs steeply with the size); lower the "
                     "degree or the number of distinct words");
  }
  PencilBuilder b(static_cast<int>(polynomial.letters.size()));
  const auto coefficient = merged_terms(polynomial);
  for (const auto& [word, c] : coefficient) {
    if (c == 0.0) continue;
    const double real = c.real();  // a palindrome's coefficient is real (self-adjointness)
    const int k = static_cast<int>(word.size());
    if (k == 0) {
      b.add(0, 0, -1, c);
      continue;
    }
    if (k == 1) {
      b.add(0, 0, word[0], c);
      continue;
    }
    const auto entries = monomial_entries(word);
    if (palindrome(word)) {
      // Self-adjoint as it stands; the coefficient scales Q by 1/c (−u (Q/c)^{−1} v = c·P).
      const int start = b.grow(k - 1);
      const auto g = [&](int r) { return r == 0 ? 0 : start + r - 1; };
      for (const auto& e : entries) {
        const double scale = (e.r > 0 && e.c > 0) ? 1.0 / real : 1.0;
        b.add(g(e.r), g(e.c), e.letter, e.letter < 0 ? -scale : scale);
      }
      continue;
    }
    const std::vector<int> adjoint(word.rbegin(), word.rend());
    if (adjoint < word) continue;  // the pair is built once, from its smaller word
    const std::complex<double> c_pair =
        0.5 * (c + (coefficient.count(adjoint) ? std::conj(coefficient.at(adjoint)) : c));
    // q + q^* for q = c·w: [[0, c u, v^*], [c̄ u^*, 0, Q^*], [v, Q, 0]] (docs/check-values.md §4d).
    const int a0 = b.grow(k - 1);  // rows of u^*, Q^*
    const int b0 = b.grow(k - 1);  // rows of v, Q
    for (const auto& e : entries) {
      const double value = e.letter < 0 ? -1.0 : 1.0;
      if (e.r == 0) {  // u_j, j = e.c ≥ 1
        b.add(0, a0 + e.c - 1, e.letter, c_pair * value);
        b.add(a0 + e.c - 1, 0, e.letter, std::conj(c_pair) * value);
      } else if (e.c == 0) {  // v_i
        b.add(b0 + e.r - 1, 0, e.letter, value);
        b.add(0, b0 + e.r - 1, e.letter, value);
      } else {  // Q_ij at (B_i, A_j) and Q^*_ji at (A_j, B_i)
        b.add(b0 + e.r - 1, a0 + e.c - 1, e.letter, value);
        b.add(a0 + e.c - 1, b0 + e.r - 1, e.letter, value);
      }
    }
  }
  return b.finish();
}

Eigen::MatrixXcd pencil_matrix(const Pencil& pencil, const std::vector<Eigen::MatrixXcd>& xs) {
  if (xs.size() != pencil.coefficients.size() || xs.empty()) {
    throw InputError("pencil_matrix: one matrix per letter is needed");
  }
  const Eigen::Index N = xs[0].rows();
  const int n = pencil.size;
  Eigen::MatrixXcd out = Eigen::MatrixXcd::Zero(n * N, n * N);
  for (int r = 0; r < n; ++r) {
    for (int c = 0; c < n; ++c) {
      auto block = out.block(r * N, c * N, N, N);
      if (pencil.constant(r, c) != 0.0) {  // b_0(r, c)·I
        block.diagonal().array() += pencil.constant(r, c);
      }
      for (std::size_t i = 0; i < xs.size(); ++i) {
        if (pencil.coefficients[i](r, c) != 0.0) block += pencil.coefficients[i](r, c) * xs[i];
      }
    }
  }
  return out;
}

Eigen::MatrixXcd evaluate_polynomial(const FreePolynomial& polynomial,
                                     const std::vector<Eigen::MatrixXcd>& xs) {
  const Eigen::Index N = xs.at(0).rows();
  Eigen::MatrixXcd sum = Eigen::MatrixXcd::Zero(N, N);
  for (const auto& t : polynomial.terms) {
    Eigen::MatrixXcd w = Eigen::MatrixXcd::Identity(N, N);
    for (int i : t.word) w = w * xs.at(i);
    sum += t.coefficient * w;
  }
  return sum;
}

}  // namespace freegap::analysis
