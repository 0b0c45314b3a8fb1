// Exact limit moments of polynomials in free variables (see moments.hpp for the method).
#include "freegap/analysis/limits/moments.hpp"
#include "freegap/analysis/limits/limit.hpp"

#include <algorithm>
#include <cstdio>
#include <cctype>
#include <climits>
#include <functional>
#include <map>
#include <stdexcept>
#include <string>
#include <utility>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/stop.hpp"

namespace freegap::analysis {

// ---------------------------------------------------------------------------------------------
// Free variables

struct FreeVariable::Tables {
  bool given_moments = true;               ///< the generator gives moments (else cumulants)
  std::function<Rational(int)> generator;  ///< n ≥ 1
  int known_limit = INT_MAX;               ///< largest order the generator knows
  std::vector<Rational> moments{Rational(1)};
  std::vector<Rational> cumulants{Rational(0)};  ///< κ_0 is a placeholder

  /// powers[s][j] = [z^j] M(z)^s for s ≥ 1 and j < moments.size(); powers[0] is unused. Kept
  /// between calls so that order n costs O(n²) products instead of O(n³): each new moment m_k
  /// adds one coefficient to every row, and a new row s is built once.
  std::vector<std::vector<Rational>> powers{{}};

  /// Appends [z^k] M^s to every row s ≥ 1 after m_k has been appended (k = moments.size() − 1).
  void append_coefficient() {
    const std::size_t k = moments.size() - 1;
    for (std::size_t s = 1; s < powers.size(); ++s) {
      if (s == 1) {
        powers[1].push_back(moments[k]);
        continue;
      }
      Rational c(0);
      for (std::size_t a = 0; a <= k; ++a) {
        if (powers[s - 1][a].is_zero() || moments[k - a].is_zero()) continue;
        c += powers[s - 1][a] * moments[k - a];
      }
      powers[s].push_back(std::move(c));
    }
  }

  /// Adds row s = powers.size() with coefficients j = 0 … moments.size() − 1.
  void add_row() {
    const std::size_t s = powers.size();
    std::vector<Rational> row;
    row.reserve(moments.size());
    for (std::size_t j = 0; j < moments.size(); ++j) {
      if (s == 1) {
        row.push_back(moments[j]);
        continue;
      }
      Rational c(0);
      for (std::size_t a = 0; a <= j; ++a) {
        if (powers[s - 1][a].is_zero() || moments[j - a].is_zero()) continue;
        c += powers[s - 1][a] * moments[j - a];
      }
      row.push_back(std::move(c));
    }
    powers.push_back(std::move(row));
  }

  // Extends both tables to order n with the first-block recursion
  //   m_i = Σ_{s=1}^{i} κ_s [z^{i−s}] M(z)^s,   M(z) = Σ_{k≥0} m_k z^k
  // (Nica & Speicher 2006, from memory; docs/check-values.md §4e), solved for whichever is unknown.
  void extend(int n) {
    if (n > known_limit) {
      throw InputError("the law is known only up to order " + std::to_string(known_limit) +
                       "; order " + std::to_string(n) + " is needed");
    }
    for (int i = static_cast<int>(moments.size()); i <= n; ++i) {
      // Rows s = 1 … i−1 with coefficients j ≤ i−1 (they need m_0 … m_{i−1} only).
      while (static_cast<int>(powers.size()) < i) add_row();
      Rational rest(0);
      for (int s = 1; s < i; ++s) {
        if (!cumulants[s].is_zero()) rest += cumulants[s] * powers[s][i - s];
      }
      const Rational given = generator(i);
      if (given_moments) {
        moments.push_back(given);
        cumulants.push_back(given - rest);
      } else {
        cumulants.push_back(given);
        moments.push_back(given + rest);
      }
      append_coefficient();
    }
  }
};

FreeVariable FreeVariable::make(bool given_moments, std::function<Rational(int)> generator,
                                int known_limit) {
  FreeVariable v;
  v.kind_ = VariableKind::self_adjoint;
  v.tables_ = std::make_shared<Tables>();
  v.tables_->given_moments = given_moments;
  v.tables_->generator = std::move(generator);
  v.tables_->known_limit = known_limit;
  return v;
}

FreeVariable FreeVariable::from_cumulants(std::function<Rational(int)> cumulant) {
  return make(false, std::move(cumulant), INT_MAX);
}

FreeVariable FreeVariable::from_moment_function(std::function<Rational(int)> moment) {
  return make(true, std::move(moment), INT_MAX);
}

FreeVariable FreeVariable::from_moments(std::vector<Rational> moments) {
  const int limit = static_cast<int>(moments.size());
  return make(
      true, [m = std::move(moments)](int n) { return m[static_cast<std::size_t>(n - 1)]; }, limit);
}

FreeVariable FreeVariable::semicircular(Rational variance) {
  return from_cumulants([variance](int n) { return n == 2 ? variance : Rational(0); });
}

FreeVariable FreeVariable::marchenko_pastur(Rational ratio) {
  if (!(Rational(0) < ratio)) throw InputError("Marchenko–Pastur ratio c must be positive");
  return from_cumulants([ratio](int n) { return ratio.pow(n - 1); });
}

FreeVariable FreeVariable::atoms(std::vector<std::pair<Rational, Rational>> value_weight) {
  Rational total(0);
  for (const auto& [value, weight] : value_weight) {
    if (weight < Rational(0)) throw InputError("atom weights must be non-negative");
    total += weight;
  }
  if (!(total == Rational(1))) {
    throw InputError("atom weights must sum to 1 (got " + total.to_string() + ")");
  }
  return from_moment_function([atoms = std::move(value_weight)](int n) {
    Rational m(0);
    for (const auto& [value, weight] : atoms) m += weight * value.pow(n);
    return m;
  });
}

FreeVariable FreeVariable::bernoulli() {
  return atoms({{Rational(-1), Rational(1, 2)}, {Rational(1), Rational(1, 2)}});
}

FreeVariable FreeVariable::uniform(Rational low, Rational high) {
  if (!(low < high)) throw InputError("uniform law needs low < high");
  return from_moment_function([low, high](int n) {
    return (high.pow(n + 1) - low.pow(n + 1)) / (Rational(n + 1) * (high - low));
  });
}

FreeVariable FreeVariable::haar_unitary() {
  FreeVariable v;
  v.kind_ = VariableKind::haar_unitary;
  return v;
}

FreeVariable FreeVariable::circular() {
  FreeVariable v;
  v.kind_ = VariableKind::circular;
  return v;
}

Rational FreeVariable::moment(int n) const {
  if (!tables_ || n < 0) throw InputError("moments are defined for self-adjoint laws, n ≥ 0");
  tables_->extend(n);
  return tables_->moments[static_cast<std::size_t>(n)];
}

Rational FreeVariable::cumulant(int n) const {
  if (!tables_ || n < 1)
    throw InputError("free cumulants are defined for self-adjoint laws, n ≥ 1");
  tables_->extend(n);
  return tables_->cumulants[static_cast<std::size_t>(n)];
}

Rational FreeVariable::block_cumulant(const std::vector<bool>& adjoint) const {
  const std::size_t n = adjoint.size();
  switch (kind_) {
    case VariableKind::self_adjoint:
      return cumulant(static_cast<int>(n));
    case VariableKind::haar_unitary: {
      // κ_{2k}(u, u^*, ..., u, u^*) = κ_{2k}(u^*, u, ...) = (−1)^{k−1} Cat(k−1); every other
      // *-cumulant vanishes (Nica & Speicher 2006, Prop. 15.1, from memory).
      if (n == 0 || n % 2 != 0) return Rational(0);
      for (std::size_t i = 0; i + 1 < n; ++i) {
        if (adjoint[i] == adjoint[i + 1]) return Rational(0);
      }
      const int k = static_cast<int>(n / 2);
      const Rational c(catalan(k - 1));
      return k % 2 == 1 ? c : -c;
    }
    case VariableKind::circular:
      return (n == 2 && adjoint[0] != adjoint[1]) ? Rational(1) : Rational(0);
  }
  return Rational(0);
}

// The Szegő limit of a Toeplitz symbol f(θ) = c_0 + Σ_{j≥1} c_j (e^{ijθ} + e^{−ijθ}): m_n is
// (1/2π)∫ f(θ)ⁿ dθ, the constant term of the Laurent polynomial fⁿ, exactly.
static FreeVariable toeplitz_variable(const std::vector<double>& coefficients) {
  const auto k = static_cast<std::ptrdiff_t>(coefficients.size()) - 1;
  std::vector<Rational> symbol(static_cast<std::size_t>(2 * k + 1));  // exponents −k … k
  for (std::ptrdiff_t j = -k; j <= k; ++j) {
    symbol[static_cast<std::size_t>(j + k)] =
        Rational::from_double(coefficients[static_cast<std::size_t>(j < 0 ? -j : j)]);
  }
  return FreeVariable::from_moment_function([symbol, k](int n) {
    std::vector<Rational> power = {Rational(1)};  // exponents −(current degree) … +(degree)
    for (int p = 0; p < n; ++p) {
      std::vector<Rational> next(power.size() + static_cast<std::size_t>(2 * k));
      for (std::size_t a = 0; a < power.size(); ++a) {
        if (power[a].is_zero()) continue;
        for (std::size_t b = 0; b < symbol.size(); ++b) next[a + b] += power[a] * symbol[b];
      }
      power = std::move(next);
    }
    return power[power.size() / 2];
  });
}

// Atoms with weights count_i / Σ counts as exact rationals.
static std::vector<std::pair<Rational, Rational>> rational_atoms(
    const std::vector<declarations::Atom>& read, const std::vector<std::size_t>& counts) {
  std::size_t k = 0;
  for (const std::size_t c : counts) k += c;
  std::vector<std::pair<Rational, Rational>> atoms;
  for (std::size_t i = 0; i < read.size(); ++i) {
    atoms.emplace_back(Rational::from_double(read[i].value),
                       Rational(static_cast<std::int64_t>(counts[i])) /
                           Rational(static_cast<std::int64_t>(k)));
  }
  return atoms;
}

// The limit moments of a periodic Jacobi matrix: m_n = (1/p) Σ_i (Jⁿ)_ii for the infinite
// periodic matrix, the weighted closed walks of length n from each site of the period, exactly.
static FreeVariable jacobi_variable(const declarations::MatrixSpec& spec) {
  std::vector<Rational> a, b;
  for (const double v : spec.jacobi_diagonal) a.push_back(Rational::from_double(v));
  for (const double v : spec.jacobi_off_diagonal) b.push_back(Rational::from_double(v));
  return FreeVariable::from_moment_function([a, b](int n) {
    const auto p = static_cast<std::ptrdiff_t>(a.size());
    const auto at = [p](std::ptrdiff_t s) { return static_cast<std::size_t>(((s % p) + p) % p); };
    Rational total(0);
    for (std::ptrdiff_t i = 0; i < p; ++i) {
      std::vector<Rational> v(static_cast<std::size_t>(2 * n + 1));  // sites i − n … i + n
      v[static_cast<std::size_t>(n)] = Rational(1);
      for (int step = 0; step < n; ++step) {
        std::vector<Rational> w(v.size());
        for (std::size_t j = 0; j < v.size(); ++j) {
          const std::ptrdiff_t site = i + static_cast<std::ptrdiff_t>(j) - n;
          w[j] += a[at(site)] * v[j];
          if (j > 0) w[j] += b[at(site - 1)] * v[j - 1];
          if (j + 1 < v.size()) w[j] += b[at(site)] * v[j + 1];
        }
        v = std::move(w);
      }
      total += v[static_cast<std::size_t>(n)];
    }
    return total / Rational(static_cast<std::int64_t>(p));
  });
}

FreeVariable free_variable_for(const declarations::MatrixSpec& spec) {
  using declarations::DiagonalLawKind;
  using declarations::Kind;
  switch (spec.kind) {
    case Kind::gue:
    case Kind::goe:
    case Kind::wigner_rademacher:
    case Kind::beta_hermite:  // normalised to the semicircle on [−2, 2] for every β
      return FreeVariable::semicircular();
    case Kind::wishart_complex:
    case Kind::wishart_real:
    case Kind::beta_laguerre:  // normalised to Marchenko–Pastur(c) for every β
      return FreeVariable::marchenko_pastur(Rational::from_double(spec.ratio));
    case Kind::toeplitz:
      return toeplitz_variable(spec.coefficients);
    case Kind::jacobi:
      return jacobi_variable(spec);
    case Kind::file_matrix: {
      // The eigenvalue law of the matrix (limit.hpp); its weights count/n are exact rationals.
      std::vector<std::size_t> counts;
      const auto law = file_matrix_eigenvalue_law(spec, &counts);
      return FreeVariable::atoms(rational_atoms(law, counts));
    }
    case Kind::ginibre_complex:
    case Kind::ginibre_real:
      if (spec.ratio != 1.0) {
        throw InputError("matrix '" + spec.name +
                         "': exact limit moments need a square Ginibre matrix (ratio 1)");
      }
      return FreeVariable::circular();
    case Kind::haar_unitary:
    case Kind::haar_orthogonal:
      return FreeVariable::haar_unitary();
    case Kind::diagonal:
      switch (spec.diagonal.kind) {
        case DiagonalLawKind::atoms: {
          std::vector<std::pair<Rational, Rational>> atoms;
          for (const auto& a : spec.diagonal.atoms) {
            atoms.emplace_back(Rational::from_double(a.value), Rational::from_double(a.weight));
          }
          return FreeVariable::atoms(std::move(atoms));
        }
        case DiagonalLawKind::uniform:
          return FreeVariable::uniform(Rational::from_double(spec.diagonal.low),
                                       Rational::from_double(spec.diagonal.high));
        case DiagonalLawKind::semicircle_quantiles:
          return FreeVariable::semicircular(Rational::from_double(spec.diagonal.variance));
        case DiagonalLawKind::marchenko_pastur_quantiles:
          return FreeVariable::marchenko_pastur(Rational::from_double(spec.diagonal.ratio));
        case DiagonalLawKind::spiked: {  // finite rank: the point mass at the base in the limit
          std::vector<std::pair<Rational, Rational>> atoms;
          atoms.emplace_back(Rational::from_double(spec.diagonal.base), Rational(1));
          return FreeVariable::atoms(std::move(atoms));
        }
        case DiagonalLawKind::file: {
          // The empirical law of the file's numbers; its weights count/K are exact rationals.
          std::vector<std::size_t> counts;
          const auto read = declarations::file_law_atoms(spec, &counts);
          return FreeVariable::atoms(rational_atoms(read, counts));
        }
      }
  }
  throw InputError("matrix '" + spec.name + "': no free limit variable for this kind");
}

// ---------------------------------------------------------------------------------------------
// The engine

namespace {

void append_key(std::string& key, const Letter& l) {
  const auto code = static_cast<std::uint32_t>(l.variable) * 2u + (l.adjoint ? 1u : 0u);
  key.push_back(static_cast<char>(code & 0xff));
  key.push_back(static_cast<char>((code >> 8) & 0xff));
  key.push_back(static_cast<char>((code >> 16) & 0xff));
}

std::string word_key(const Word& w, std::size_t begin, std::size_t end) {
  std::string key;
  key.reserve(3 * (end - begin));
  for (std::size_t i = begin; i < end; ++i) append_key(key, w[i]);
  return key;
}

}  // namespace

FreeMomentEngine::FreeMomentEngine(std::vector<FreeVariable> variables, EngineOptions options)
    : variables_(std::move(variables)), options_(options) {}

Word FreeMomentEngine::normalise(const Word& word) const {
  Word out;
  out.reserve(word.size());
  for (Letter l : word) {
    if (l.variable < 0 || static_cast<std::size_t>(l.variable) >= variables_.size()) {
      throw InputError("word uses variable " + std::to_string(l.variable) + " but only " +
                       std::to_string(variables_.size()) + " are declared");
    }
    const FreeVariable& v = variables_[static_cast<std::size_t>(l.variable)];
    if (v.self_adjoint()) l.adjoint = false;
    // u u^* = u^* u = 1 for a unitary: cancel as a free-group reduction (stack).
    if (v.kind() == VariableKind::haar_unitary && !out.empty() &&
        out.back().variable == l.variable && out.back().adjoint != l.adjoint) {
      out.pop_back();
      continue;
    }
    out.push_back(l);
  }
  return out;
}

Rational FreeMomentEngine::trace(const Word& word) { return trace_normalised(normalise(word)); }

Rational FreeMomentEngine::trace(const Polynomial& polynomial) {
  ComplexRational total(0);
  for (const Term& t : polynomial) {
    if (t.coefficient.is_zero()) continue;
    total += t.coefficient * ComplexRational(trace(t.word));
  }
  if (!total.im.is_zero()) {
    throw InputError("the trace of the polynomial is not real (imaginary part " +
                     total.im.to_string() + "): its moments need a self-adjoint polynomial");
  }
  return total.re;
}

// τ(w) by the first-block decomposition of the moment–cumulant formula (header comment): with
// p_0 = 0 < p_1 < ... the positions of the first letter's variable,
//   R_1(i) = τ(w after p_i),   R_s(i) = Σ_{j>i} τ(w strictly between p_i and p_j) · R_{s−1}(j),
// and τ(w) = Σ_s κ_s R_s(0). For Haar unitaries and circular elements the chain must alternate
// between the letter and its adjoint (their *-cumulants vanish otherwise), which the sum over j
// enforces; the block cumulant then depends only on s.
Rational FreeMomentEngine::trace_normalised(const Word& w) {
  if (w.empty()) return Rational(1);
  const std::string key = word_key(w, 0, w.size());
  if (auto it = memo_.find(key); it != memo_.end()) return it->second;
  check_stop();  // every new word's trace passes here: exact moments can take seconds

  const std::size_t n = w.size();
  const int var = w[0].variable;
  const FreeVariable& v = variables_[static_cast<std::size_t>(var)];
  const bool alternating = v.kind() != VariableKind::self_adjoint;

  std::vector<std::size_t> p;
  for (std::size_t i = 0; i < n; ++i) {
    if (w[i].variable == var) p.push_back(i);
  }
  const std::size_t m = p.size();
  std::size_t max_block = m;
  if (v.kind() == VariableKind::circular) max_block = std::min<std::size_t>(m, 2);

  // The nonzero block cumulants, by size.
  std::vector<Rational> kappa(max_block + 1, Rational(0));
  bool any = false;
  for (std::size_t s = 1; s <= max_block; ++s) {
    if (alternating) {
      std::vector<bool> flags(s);
      for (std::size_t i = 0; i < s; ++i) flags[i] = (i % 2 == 1) != w[0].adjoint;
      kappa[s] = v.block_cumulant(flags);
    } else {
      kappa[s] = v.cumulant(static_cast<int>(s));
    }
    any = any || !kappa[s].is_zero();
  }
  // Blocks longer than the last nonzero cumulant never contribute.
  while (max_block > 0 && kappa[max_block].is_zero()) --max_block;

  Rational result(0);
  if (any) {
    // gap(i, j) = τ of the letters strictly between p_i and p_j (j = m means the end).
    auto gap = [&](std::size_t i, std::size_t j) {
      const std::size_t begin = p[i] + 1, end = j < m ? p[j] : n;
      if (begin >= end) return Rational(1);
      return trace_normalised(Word(w.begin() + static_cast<std::ptrdiff_t>(begin),
                                   w.begin() + static_cast<std::ptrdiff_t>(end)));
    };
    std::vector<Rational> current(m), next(m);
    for (std::size_t i = 0; i < m; ++i) current[i] = gap(i, m);  // R_1
    if (!kappa[1].is_zero()) result += kappa[1] * current[0];
    for (std::size_t s = 2; s <= max_block; ++s) {
      for (std::size_t i = 0; i < m; ++i) {
        Rational sum(0);
        for (std::size_t j = i + 1; j < m; ++j) {
          if (current[j].is_zero()) continue;
          if (alternating && w[p[j]].adjoint == w[p[i]].adjoint) continue;
          const Rational g = gap(i, j);
          if (!g.is_zero()) sum += g * current[j];
        }
        next[i] = std::move(sum);
      }
      std::swap(current, next);
      if (!kappa[s].is_zero()) result += kappa[s] * current[0];
    }
  }
  memo_.emplace(key, result);
  return result;
}

Polynomial FreeMomentEngine::multiply(const Polynomial& p, const Polynomial& q) const {
  std::map<std::string, Term> merged;
  for (const Term& a : p) {
    if (a.coefficient.is_zero()) continue;
    for (const Term& b : q) {
      if (b.coefficient.is_zero()) continue;
      Word w = a.word;
      w.insert(w.end(), b.word.begin(), b.word.end());
      w = normalise(w);
      const std::string key = word_key(w, 0, w.size());
      auto it = merged.find(key);
      if (it == merged.end()) {
        if (merged.size() >= options_.max_words) {
          throw InputError("expanding the polynomial needs more than " +
                           std::to_string(options_.max_words) + " words; lower the moment order");
        }
        merged.emplace(key, Term{a.coefficient * b.coefficient, std::move(w)});
      } else {
        it->second.coefficient += a.coefficient * b.coefficient;
      }
    }
  }
  Polynomial out;
  out.reserve(merged.size());
  for (auto& [key, term] : merged) {
    if (!term.coefficient.is_zero()) out.push_back(std::move(term));
  }
  return out;
}

Polynomial FreeMomentEngine::adjoint(const Polynomial& p) const {
  Polynomial out;
  for (const Term& t : p) {
    Word w(t.word.rbegin(), t.word.rend());
    for (Letter& l : w) l.adjoint = !l.adjoint;
    out.push_back({t.coefficient.conj(), normalise(w)});
  }
  return out;
}

std::vector<ExactValue> FreeMomentEngine::moments(const Polynomial& polynomial, int max_order) {
  if (max_order < 0) throw InputError("moment order must be non-negative");
  std::vector<ExactValue> out;
  Polynomial power{Term{Rational(1), Word{}}};
  for (int k = 0; k <= max_order; ++k) {
    if (k > 0) power = multiply(power, polynomial);
    const Rational value = trace(power);
    // An exact rational is shown as such while it stays readable (inputs that are small
    // rationals); one grown from decimal inputs (√3 written as 1.7320508…) has hundreds of digits
    // and is shown as a decimal of 15 significant digits instead.
    std::string text = value.to_string();
    if (text.size() > 24) {
      char buffer[40];
      std::snprintf(buffer, sizeof buffer, "%.15g", value.to_double());
      text = buffer;
    }
    out.push_back({value, value.to_double(), text});
  }
  return out;
}

// ---------------------------------------------------------------------------------------------
// Small helpers

Polynomial parse_polynomial(std::string_view text, const std::vector<std::string>& names) {
  Polynomial out;
  std::size_t pos = 0;
  auto skip_space = [&] {
    while (pos < text.size() && (text[pos] == ' ' || text[pos] == '\t')) ++pos;
  };
  skip_space();
  bool negative = false;
  if (pos < text.size() && (text[pos] == '+' || text[pos] == '-')) {
    negative = text[pos] == '-';
    ++pos;
  }
  while (true) {
    // One term: tokens up to the next '+' or '-' that is not part of a number exponent.
    std::size_t end = pos;
    while (end < text.size() && text[end] != '+' && text[end] != '-') ++end;
    const std::string_view term_text = text.substr(pos, end - pos);
    Term term{Rational(negative ? -1 : 1), {}};
    std::size_t t = 0;
    bool first = true;
    while (t < term_text.size()) {
      while (t < term_text.size() && (term_text[t] == ' ' || term_text[t] == '\t')) ++t;
      if (t >= term_text.size()) break;
      std::size_t u = t;
      while (u < term_text.size() && term_text[u] != ' ' && term_text[u] != '\t') ++u;
      std::string token(term_text.substr(t, u - t));
      t = u;
      if (first && (std::isdigit(static_cast<unsigned char>(token[0])) != 0)) {
        term.coefficient *= Rational::parse(token);
        first = false;
        continue;
      }
      first = false;
      bool adjoint = false;
      if (token.size() > 2 && token.ends_with("^*")) {
        adjoint = true;
        token.resize(token.size() - 2);
      }
      const auto it = std::find(names.begin(), names.end(), token);
      if (it == names.end()) throw InputError("unknown letter '" + token + "' in polynomial");
      term.word.push_back({static_cast<int>(it - names.begin()), adjoint});
    }
    if (first) throw InputError("empty term in polynomial '" + std::string(text) + "'");
    out.push_back(std::move(term));
    if (end >= text.size()) break;
    negative = text[end] == '-';
    pos = end + 1;
  }
  return out;
}

std::vector<std::vector<int>> noncrossing_partitions(int n) {
  if (n < 0 || n > 16) throw InputError("noncrossing_partitions: n must be 0..16");
  std::vector<std::vector<int>> out;
  std::vector<int> assign(static_cast<std::size_t>(n), -1);
  // Element j may join block b only if no other block has an element after last(b) and before j
  // together with one before last(b) (the crossing a < b < c < d, a, c ∈ X, b, d ∈ Y).
  std::function<void(int, int)> place = [&](int j, int blocks) {
    if (j == n) {
      out.push_back(assign);
      return;
    }
    for (int b = 0; b <= blocks; ++b) {
      bool ok = true;
      if (b < blocks) {
        int last = -1;
        for (int i = 0; i < j; ++i) {
          if (assign[static_cast<std::size_t>(i)] == b) last = i;
        }
        for (int i = last + 1; i < j && ok; ++i) {
          const int other = assign[static_cast<std::size_t>(i)];
          for (int k = 0; k < last; ++k) {
            if (assign[static_cast<std::size_t>(k)] == other) {
              ok = false;
              break;
            }
          }
        }
      }
      if (!ok) continue;
      assign[static_cast<std::size_t>(j)] = b;
      place(j + 1, b == blocks ? blocks + 1 : blocks);
    }
    assign[static_cast<std::size_t>(j)] = -1;
  };
  place(0, 0);
  return out;
}

Polynomial polynomial_of(const expr::Expression& expression) {
  Polynomial p;
  for (const auto& m : expression.expansion()) {
    Term t;
    t.coefficient = ComplexRational(Rational::from_double(m.coefficient.real()),
                                    Rational::from_double(m.coefficient.imag()));
    for (const auto& [index, adjoint] : m.letters) t.word.push_back(Letter{index, adjoint});
    p.push_back(std::move(t));
  }
  return p;
}

std::vector<ExactValue> limit_moments(const expr::Expression& expression, int max_order,
                                      EngineOptions options) {
  std::vector<FreeVariable> variables;
  for (const auto& spec : expression.declared()) variables.push_back(free_variable_for(spec));
  FreeMomentEngine engine(std::move(variables), options);
  return engine.moments(polynomial_of(expression), max_order);
}

}  // namespace freegap::analysis
