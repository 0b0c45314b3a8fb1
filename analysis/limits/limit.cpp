// The limit of a job's model by the rules listed in limit.hpp.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <future>
#include <limits>
#include <map>
#include <mutex>
#include <optional>
#include <set>
#include <sstream>

#include "freegap/analysis/limits/free_convolution.hpp"
#include "freegap/analysis/limits/limit.hpp"
#include "freegap/analysis/limits/moments.hpp"
#include "freegap/analysis/limits/polynomial_limit.hpp"
#include "freegap/ensembles.hpp"
#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/text.hpp"
#include "freegap/stop.hpp"
#include "laws_quadrature.hpp"

namespace freegap::analysis {

std::vector<declarations::Atom> eigenvalue_atoms(const Eigen::VectorXd& values,
                                                 std::vector<std::size_t>* counts) {
  // Eigenvalues closer than LAPACK's backward error (about n·ε·‖A‖; here 8 n ε max|λ|) are one
  // eigenvalue of higher multiplicity (a symmetric ring's pairs come out 1e-15 apart): one atom
  // at their mean (common practice).
  std::vector<declarations::Atom> atoms;
  std::vector<std::size_t> count;
  const auto total = static_cast<double>(values.size());
  const double spread = values.size() == 0 ? 0.0 : values.cwiseAbs().maxCoeff();
  const double tie = 8.0 * total * std::numeric_limits<double>::epsilon() * spread;
  double sum = 0.0;
  for (Eigen::Index i = 0; i < values.size(); ++i) {
    if (!atoms.empty() && values(i) - values(i - 1) <= tie) {
      ++count.back();
      sum += values(i);
      atoms.back().value = sum / static_cast<double>(count.back());
    } else {
      atoms.push_back({values(i), 0.0});
      count.push_back(1);
      sum = values(i);
    }
  }
  for (std::size_t i = 0; i < atoms.size(); ++i) {
    atoms[i].weight = static_cast<double>(count[i]) / total;
  }
  if (counts != nullptr) *counts = std::move(count);
  return atoms;
}

std::vector<declarations::Atom> file_matrix_eigenvalue_law(const declarations::MatrixSpec& spec,
                                                           std::vector<std::size_t>* counts) {
  struct Law {
    std::vector<declarations::Atom> atoms;
    std::vector<std::size_t> counts;
  };
  static std::mutex lock;
  static std::map<std::string, Law> computed;  // by file, dataset and reference size
  const Eigen::Index n = spec.file.reference_size;
  const std::string key = declarations::file_matrix_path(spec, n) + '\n' + spec.file.dataset +
                          '\n' + std::to_string(n);
  const std::lock_guard<std::mutex> hold(lock);
  auto found = computed.find(key);
  if (found == computed.end()) {
    const auto m = declarations::file_matrix_at(spec, n);
    linalg::Vector values;
    if (m->complex) {
      linalg::CMatrix a = 0.5 * (m->values + m->values.adjoint());  // as the sampler does
      values = linalg::eigenvalues(a);
    } else {
      linalg::RMatrix a = 0.5 * (m->real + m->real.transpose());
      values = linalg::eigenvalues(a);
    }
    Law law;
    law.atoms = eigenvalue_atoms(values, &law.counts);
    found = computed.emplace(key, std::move(law)).first;
  }
  if (counts != nullptr) *counts = found->second.counts;
  return found->second.atoms;
}

namespace {

using declarations::Kind;
using declarations::MatrixSpec;
using Letters = std::vector<std::pair<int, bool>>;

bool semicircular(Kind k) {
  return k == Kind::gue || k == Kind::goe || k == Kind::wigner_rademacher || k == Kind::beta_hermite;
}
bool marchenko_pastur_kind(Kind k) {
  return k == Kind::wishart_complex || k == Kind::wishart_real || k == Kind::beta_laguerre;
}
bool ginibre(Kind k) { return k == Kind::ginibre_complex || k == Kind::ginibre_real; }

// The limit law of one self-adjoint matrix, or a reason why there is none.
struct LetterLaw {
  LawPtr law;
  std::string name;  // for the rule text
  std::string reason;
};

LetterLaw law_of(const MatrixSpec& m) {
  using DL = declarations::DiagonalLawKind;
  const std::string who = m.name + " (" + std::string(declarations::kind_name(m.kind)) + ")";
  if (semicircular(m.kind)) return {semicircle(1.0), "semicircle", {}};
  if (marchenko_pastur_kind(m.kind)) {
    return {marchenko_pastur(m.ratio), "Marchenko-Pastur(" + text::readable(m.ratio) + ")", {}};
  }
  if (m.kind == Kind::toeplitz) {
    return {toeplitz_symbol_law(m.coefficients),
            "the law of its symbol f(θ), θ uniform (Szegő 1920; Grenander & Szegő 1958)", {}};
  }
  if (m.kind == Kind::jacobi) {
    return {periodic_jacobi_law(m.jacobi_diagonal, m.jacobi_off_diagonal),
            "the density of states of its periodic Jacobi operator (Toda 1981; Teschl 2000)", {}};
  }
  if (m.kind == Kind::file_matrix) {
    std::vector<declarations::Atom> read;
    try {
      read = file_matrix_eigenvalue_law(m);
    } catch (const InputError& e) {
      return {nullptr, {}, e.what()};
    }
    std::vector<Atom> points;
    for (const auto& a : read) points.push_back({a.value, a.weight});
    const std::string size = std::to_string(m.file.reference_size);
    return {atoms(std::move(points)),
            "the eigenvalue law of its matrix file (" + std::to_string(read.size()) +
                " distinct eigenvalues; " +
                (declarations::file_matrix_per_size(m)
                     ? "the file for N = " + size +
                           ", the largest size, stands for every size: at that N the limit is "
                           "the free deterministic equivalent, Speicher & Vargas 2012"
                     : "one file, repeated on the diagonal, has this law at every size") +
                ")",
            {}};
  }
  if (m.kind != Kind::diagonal) return {nullptr, {}, who + " is not self-adjoint"};
  switch (m.diagonal.kind) {
    case DL::atoms: {
      std::vector<Atom> points;
      for (const auto& a : m.diagonal.atoms) points.push_back({a.value, a.weight});
      return {atoms(std::move(points)), "its atoms", {}};
    }
    case DL::uniform:
      return {uniform(m.diagonal.low, m.diagonal.high), "uniform", {}};
    case DL::semicircle_quantiles:
      return {semicircle(m.diagonal.variance), "semicircle", {}};
    case DL::marchenko_pastur_quantiles:
      return {marchenko_pastur(m.diagonal.ratio), "Marchenko-Pastur", {}};
    case DL::spiked:
      return {atoms({{m.diagonal.base, 1.0}}), "the point mass at its base (its spikes are outliers)",
              {}};
    case DL::file: {
      // The empirical law of the file's K numbers: the law the diagonal's quantiles converge to.
      // When the file holds exactly the N numbers of the sampled size, the limit is the finite-N
      // free deterministic equivalent of the model (Speicher & Vargas 2012), not an N → ∞ law.
      std::vector<declarations::Atom> read;
      try {
        read = declarations::file_law_atoms(m);
      } catch (const InputError& e) {
        return {nullptr, {}, e.what()};
      }
      std::vector<Atom> points;
      for (const auto& a : read) points.push_back({a.value, a.weight});
      return {atoms(std::move(points)),
              "the empirical law of its file '" + m.diagonal.path + "' (" +
                  std::to_string(read.size()) +
                  " distinct values; with exactly N numbers in the file this is the free "
                  "deterministic equivalent at that N, Speicher & Vargas 2012, not an N → ∞ law)",
              {}};
    }
  }
  return {nullptr, {}, who + " has a diagonal law the analysis does not know"};
}

// The variance of X when its law is a centred semicircle, else 0.
double semicircle_variance(const MatrixSpec& m) {
  if (semicircular(m.kind)) return 1.0;
  if (m.kind == Kind::diagonal &&
      m.diagonal.kind == declarations::DiagonalLawKind::semicircle_quantiles) {
    return m.diagonal.variance;
  }
  return 0.0;
}

// The free compound Poisson law is a ⊞ of one free Poisson law per atom, nested ⌈log₂ k⌉ deep;
// past 16 atoms the nesting makes each point cost more than the polynomial solver's.
constexpr std::size_t kMostCompoundPoissonJumps = 16;

// The law of X² for a self-adjoint matrix X with a known law, when it has a closed form here.
LawPtr square_law(const MatrixSpec& m, const LawPtr& law) {
  if (semicircular(m.kind)) return marchenko_pastur(1.0);  // X² of a standard semicircular
  if (m.kind == Kind::diagonal && (m.diagonal.kind == declarations::DiagonalLawKind::atoms ||
                                   m.diagonal.kind == declarations::DiagonalLawKind::file)) {
    std::vector<Atom> squared;
    for (const Atom& a : law->support().atoms) squared.push_back({a.value * a.value, a.weight});
    return atoms(std::move(squared));
  }
  if (m.kind == Kind::diagonal && m.diagonal.kind == declarations::DiagonalLawKind::semicircle_quantiles) {
    return affine(marchenko_pastur(1.0), m.diagonal.variance, 0.0);
  }
  return nullptr;
}

// One free term of a sum: its law, what it uses, and how it reads.
struct FreeTerm {
  LawPtr law;
  std::string text;
  std::set<int> random_letters;         // random matrices and Haar unitaries it uses
  std::set<int> deterministic_letters;  // deterministic matrices it uses unconjugated
  bool unitary_pair = false;            // c·(U + U^*)
  bool haar_orthogonal = false;         // a conjugation or pair by a Haar orthogonal
  bool haar_unitary = false;
  bool polynomial = false;              // p(X) for one matrix X, p of degree ≥ 2
  double coefficient = 1.0;
};

struct Failure {
  std::string reason;
};

std::string word_text(const Letters& letters, const std::vector<MatrixSpec>& declared) {
  std::string s;
  for (const auto& [i, adj] : letters) {
    s += (s.empty() ? "" : " ") + declared[static_cast<std::size_t>(i)].name + (adj ? "^*" : "");
  }
  return s;
}

// A monomial's word with the declared matrices and its text, as the rules of term_of read it.
struct TermWord {
  const Letters& w;
  const std::vector<MatrixSpec>& d;
  std::string text;
  const MatrixSpec& spec(std::size_t k) const { return d[static_cast<std::size_t>(w[k].first)]; }
  // Records that the term uses `letter`, as a random or as a deterministic matrix.
  void use(FreeTerm& t, int letter) const {
    if (declarations::is_random(d[static_cast<std::size_t>(letter)].kind)) {
      t.random_letters.insert(letter);
    } else {
      t.deterministic_letters.insert(letter);
    }
  }
};

// X alone: the law of the self-adjoint matrix X.
std::optional<FreeTerm> single_letter_term(const TermWord& tw, FreeTerm& t, std::string& why) {
  const LetterLaw l = law_of(tw.spec(0));
  if (!l.law) {
    why = l.reason;
    return std::nullopt;
  }
  t.law = l.law;
  t.text = tw.text + " → " + l.name +
           (semicircular(tw.spec(0).kind)           ? " (Wigner 1955)"
            : marchenko_pastur_kind(tw.spec(0).kind) ? " (Marchenko & Pastur 1967)"
                                                    : "");
  tw.use(t, tw.w[0].first);
  return t;
}

// U X U^* or U^* X U: a free copy of X's law.
std::optional<FreeTerm> conjugated_letter_term(const TermWord& tw, FreeTerm& t, std::string& why) {
  const LetterLaw l = law_of(tw.spec(1));
  if (!l.law) {
    why = l.reason;
    return std::nullopt;
  }
  t.law = l.law;
  t.text = tw.text + " → free copy of " + tw.spec(1).name + " (" + l.name + "; Voiculescu 1991)";
  t.random_letters.insert(tw.w[0].first);
  if (declarations::is_random(tw.spec(1).kind)) t.random_letters.insert(tw.w[1].first);
  (tw.spec(0).kind == Kind::haar_orthogonal ? t.haar_orthogonal : t.haar_unitary) = true;
  return t;
}

// The laws of the two letters of a sandwich, or false with `why` set: both deterministic (when
// `y_unrotated`: Y is not conjugated by a Haar unitary) are not free, and each needs a law.
bool free_pair_laws(const std::string& text, const MatrixSpec& x, const MatrixSpec& y,
                    bool y_unrotated, LetterLaw& lx, LetterLaw& ly, std::string& why) {
  if (!declarations::is_random(x.kind) && !declarations::is_random(y.kind) && y_unrotated) {
    why = "'" + text + "': two deterministic matrices are not free of each other";
    return false;
  }
  lx = law_of(x);
  ly = law_of(y);
  if (!lx.law || !ly.law) {
    why = !lx.law ? lx.reason : ly.reason;
    return false;
  }
  return true;
}

// X Y X (`sandwich3`) or X U Y U^* X: law(X²) ⊠ law(Y) when Y ≥ 0.
std::optional<FreeTerm> sandwich_term(const TermWord& tw, bool sandwich3, FreeTerm& t,
                                      std::string& why) {
  const std::string& text = tw.text;
  const MatrixSpec& x = tw.spec(0);
  const MatrixSpec& y = tw.spec(sandwich3 ? 1 : 2);
  LetterLaw lx, ly;
  if (!free_pair_laws(text, x, y, sandwich3, lx, ly, why)) return std::nullopt;
  const LawPtr x2 = square_law(x, lx.law);
  if (!x2) {
    why = "'" + text + "': the law of " + x.name + "² has no closed form here";
    return std::nullopt;
  }
  const Support sy = ly.law->support();
  const double variance = semicircle_variance(x);
  const Support sx2 = x2->support();
  if (sx2.bands.empty() && sx2.atoms.size() == 1) {
    // X² = b²·I (X a point mass b, e.g. a spiked diagonal's limit, or X = ±b): X Y X is similar
    // to b²·Y (X/b is its own inverse), so it has the law of b²·Y.
    const double b2 = sx2.atoms[0].value;
    t.law = b2 == 0.0 ? atoms({{0.0, 1.0}}) : affine(ly.law, b2, 0.0);
    t.text = text + " → " + text::readable(b2) + "·law(" + y.name + ") (" + x.name + "² = " +
             text::readable(b2) + "·I)";
  } else if (sy.lo < 0.0 && variance > 0.0 && sy.bands.empty() &&
      sy.atoms.size() <= kMostCompoundPoissonJumps) {
    // X semicircular of variance v: X Y X has free cumulants κ_n = vⁿ φ(Yⁿ), the free compound
    // Poisson law of rate 1 with jumps v·Y (Nica & Speicher 2006, Prop. 12.18, from memory;
    // tests/limits checks it against the exact moments). Y may take any sign here.
    std::vector<Atom> jumps;
    for (const Atom& a : sy.atoms) jumps.push_back({variance * a.value, a.weight});
    t.law = free_compound_poisson(jumps);
    t.text = text + " → free compound Poisson law with the jumps of " +
             (variance == 1.0 ? "" : text::readable(variance) + "·") + y.name +
             " (Nica & Speicher 2006)";
  } else if (sy.lo < 0.0) {
    why = "'" + text + "': the middle factor " + y.name +
          " takes negative values, and the free multiplicative convolution needs a law on "
          "[0, inf)" +
          (variance > 0.0 ? " (with a semicircular " + x.name + ", " + y.name +
                                " needs at most " + std::to_string(kMostCompoundPoissonJumps) +
                                " atoms and no continuous part)"
                          : "") +
          " (its exact moments are still reported)";
    return std::nullopt;
  } else {
    t.law = free_multiplicative(x2, ly.law);
    t.text = text + " → law(" + x.name + "²) ⊠ law(" + y.name + ") (Voiculescu 1987)";
  }
  tw.use(t, tw.w[0].first);
  if (sandwich3) {
    tw.use(t, tw.w[1].first);
  } else {
    t.random_letters.insert(tw.w[1].first);
    if (declarations::is_random(y.kind)) t.random_letters.insert(tw.w[2].first);
    (tw.spec(1).kind == Kind::haar_orthogonal ? t.haar_orthogonal : t.haar_unitary) = true;
  }
  return t;
}

// X Y Y X: law(X²) ⊠ law(Y²).
std::optional<FreeTerm> gram_sandwich_term(const TermWord& tw, FreeTerm& t, std::string& why) {
  const std::string& text = tw.text;
  const MatrixSpec& x = tw.spec(0);
  const MatrixSpec& y = tw.spec(1);
  LetterLaw lx, ly;
  if (!free_pair_laws(text, x, y, true, lx, ly, why)) return std::nullopt;
  const LawPtr x2 = square_law(x, lx.law);
  const LawPtr y2 = square_law(y, ly.law);
  if (!x2 || !y2) {
    why = "'" + text + "': the law of " + (!x2 ? x.name : y.name) + "² has no closed form here";
    return std::nullopt;
  }
  t.law = free_multiplicative(x2, y2);
  t.text = text + " → law(" + x.name + "²) ⊠ law(" + y.name + "²) (Voiculescu 1987)";
  tw.use(t, tw.w[0].first);
  tw.use(t, tw.w[1].first);
  return t;
}

// A monomial c·w as a free self-adjoint term, or nullopt with `why` set.
std::optional<FreeTerm> term_of(double c, const Letters& w, const std::vector<MatrixSpec>& d,
                            std::string& why) {
  const TermWord tw{w, d, word_text(w, d)};
  const auto spec = [&](std::size_t k) -> const MatrixSpec& { return tw.spec(k); };
  FreeTerm t;
  t.coefficient = c;
  if (w.size() == 1 && declarations::is_self_adjoint(spec(0).kind)) {
    return single_letter_term(tw, t, why);
  }
  // U X U^* or U^* X U: a free copy of X's law.
  if (w.size() == 3 && declarations::is_unitary(spec(0).kind) && w[2].first == w[0].first &&
      w[0].second != w[2].second && declarations::is_self_adjoint(spec(1).kind)) {
    return conjugated_letter_term(tw, t, why);
  }
  // X Y X (or X U Y U^* X): law(X²) ⊠ law(Y) when Y ≥ 0.
  const bool sandwich3 = w.size() == 3 && w[0].first == w[2].first && w[0].first != w[1].first &&
                         declarations::is_self_adjoint(spec(0).kind) &&
                         declarations::is_self_adjoint(spec(1).kind);
  const bool sandwich5 = w.size() == 5 && w[0].first == w[4].first &&
                         declarations::is_self_adjoint(spec(0).kind) &&
                         declarations::is_unitary(spec(1).kind) && w[3].first == w[1].first &&
                         w[1].second != w[3].second && declarations::is_self_adjoint(spec(2).kind);
  if (sandwich3 || sandwich5) return sandwich_term(tw, sandwich3, t, why);
  // X Y Y X (the Gram matrix of Y X, e.g. the singular values of X1 X2): law(X²) ⊠ law(Y²), both
  // on [0, inf). Its moments are those of X² Y² by cyclicity of the trace, and X², Y² are free
  // and positive (Voiculescu 1987).
  const bool sandwich4 = w.size() == 4 && w[0].first == w[3].first && w[1].first == w[2].first &&
                         w[0].first != w[1].first && declarations::is_self_adjoint(spec(0).kind) &&
                         declarations::is_self_adjoint(spec(1).kind);
  if (sandwich4) return gram_sandwich_term(tw, t, why);
  why = "no rule covers the term '" + tw.text + "'";
  return std::nullopt;
}

std::string ginibre_singular_values(const std::vector<expr::Monomial>& terms,
                                    const std::vector<MatrixSpec>& d, DerivedLimit& out) {
  if (terms.size() != 1 || terms[0].letters.empty()) {
    return "singular values are predicted only for a single product of Ginibre matrices";
  }
  const auto& w = terms[0].letters;
  std::set<int> seen;
  for (const auto& [i, adj] : w) {
    const MatrixSpec& m = d[static_cast<std::size_t>(i)];
    if (!ginibre(m.kind)) return "singular values are predicted only for products of Ginibre matrices";
    if (!seen.insert(i).second) return "a Ginibre matrix repeats in the product";
    if (m.ratio != 1.0) return "rectangular Ginibre matrices are not predicted";
  }
  const double c = std::abs(terms[0].coefficient);
  const int s = static_cast<int>(w.size());
  LawPtr law;
  if (s == 1) {
    law = quarter_circle();
    out.rule = "singular values of a square Ginibre matrix → quarter-circle law (Marchenko & Pastur 1967)";
  } else {
    law = square_root(fuss_catalan(s));
    out.rule = "singular values of a product of " + std::to_string(s) +
               " Ginibre matrices → √ of the Fuss–Catalan law π^⊠" + std::to_string(s) +
               " (Banica, Belinschi, Capitaine & Collins 2011)";
  }
  out.law = c == 1.0 ? law : affine(law, c, 0.0);
  return {};
}

}  // namespace

// Powers of one self-adjoint matrix X, or of U X U^* for one Haar U (U X^k U^*), gathered into one
// free term p(X): its law is the image of X's law under p (atoms to atoms, equal images merged;
// the continuous part by the change of variables on each piece where p is monotone; common
// practice). Before, the polynomial solver took these: for U D U^* U D U^* with D atomic its law
// held 0.07 % of the mass (python.check_limit_catalogue), and for X³ − 2X (X a GUE) its CDF
// table lost 8.7 % at the two points where the density is infinite.
struct PowerOf {
  int unitary = -1;             // the conjugating Haar matrix, or −1
  bool first_adjoint = false;   // U^* X^k U rather than U X^k U^*
  int letter = -1;              // X
  bool operator<(const PowerOf& o) const {
    return std::tie(unitary, first_adjoint, letter) < std::tie(o.unitary, o.first_adjoint, o.letter);
  }
};

// The base and power of a word X^k or U X^k U^* (k ≥ 1), or nullopt.
static std::optional<std::pair<PowerOf, int>> power_of(const Letters& w,
                                                       const std::vector<MatrixSpec>& d) {
  if (w.empty()) return std::nullopt;
  PowerOf key;
  std::size_t begin = 0, end = w.size();
  if (declarations::is_unitary(d[static_cast<std::size_t>(w[0].first)].kind)) {
    if (w.size() < 3 || w.back().first != w[0].first || w.back().second == w[0].second) {
      return std::nullopt;
    }
    key.unitary = w[0].first;
    key.first_adjoint = w[0].second;
    begin = 1;
    end = w.size() - 1;
  }
  key.letter = w[begin].first;
  const MatrixSpec& x = d[static_cast<std::size_t>(key.letter)];
  if (!declarations::is_self_adjoint(x.kind) || declarations::is_unitary(x.kind)) return std::nullopt;
  for (std::size_t k = begin; k < end; ++k) {
    if (w[k].first != key.letter) return std::nullopt;
  }
  return std::make_pair(key, static_cast<int>(end - begin));
}

// The exact moments of an eigenvalue model into `out` (or why there are none in moments_note).
// The deterministic matrices (diagonal, Toeplitz, Jacobi, from files; not a multiple of the
// identity) that some term holds outside a Haar conjugation U X U^* or U^* X U. Two or more of
// them are not free of each other. Empty when the expansion is too large to look.
static std::set<std::string> bare_deterministic(const expr::Expression& expression) {
  std::set<std::string> out;
  std::vector<expr::Monomial> terms;
  try {
    terms = expression.expansion(10000);
  } catch (const Error&) {
    return out;
  }
  const auto& d = expression.declared();
  const auto spec = [&](int i) -> const MatrixSpec& { return d[static_cast<std::size_t>(i)]; };
  for (const auto& m : terms) {
    const auto& w = m.letters;
    for (std::size_t i = 0; i < w.size(); ++i) {
      const MatrixSpec& x = spec(w[i].first);
      if (declarations::is_random(x.kind)) continue;
      if (x.kind == Kind::diagonal && x.diagonal.kind == declarations::DiagonalLawKind::atoms &&
          x.diagonal.atoms.size() == 1) {
        continue;  // b·I commutes with everything and is free of everything
      }
      const bool conjugated = i > 0 && i + 1 < w.size() && w[i - 1].first == w[i + 1].first &&
                              w[i - 1].second != w[i + 1].second &&
                              declarations::is_unitary(spec(w[i - 1].first).kind);
      if (!conjugated) out.insert(x.name);
    }
  }
  return out;
}

static std::string names_of(const std::set<std::string>& names) {
  std::string out;
  for (const auto& n : names) out += (out.empty() ? "" : ", ") + n;
  return out;
}

static void exact_moments_into(const expr::Expression& expression, int max_moment,
                               bool eigenvalues, DerivedLimit& out) {
  // Exact moments first: they stand on their own, whatever the rules say. The moment engine takes
  // every matrix as a free variable, which two deterministic matrices outside Haar conjugations
  // are not (they are given at each N, e.g. two diagonals commute): no exact moments then.
  const std::set<std::string> bare = bare_deterministic(expression);
  if (eigenvalues && bare.size() >= 2) {
    out.moments_note = "no exact moments: the deterministic matrices " + names_of(bare) +
                       " are not free of each other, and the moment engine takes every matrix "
                       "as a free variable";
    return;
  }
  if (eigenvalues) {
    try {
      for (const ExactValue& v : limit_moments(expression, std::max(max_moment, 0))) {
        out.exact_moments.push_back(v.value);
        out.exact_moment_text.push_back(v.text);
      }
    } catch (const Stopped&) {
      throw;  // a stop request ends the command, it is not a reason
    } catch (const Error& e) {
      out.moments_note = e.what();
    }
  } else {
    out.moments_note = "exact moments are computed for eigenvalues only (this model's spectrum is its singular values)";
  }
}

// The terms of an expansion sorted for the rules: the constant, the U + U^* pairs and the others.
struct SplitTerms {
  double shift = 0.0;
  std::vector<FreeTerm> free_terms;
  std::map<int, std::vector<const expr::Monomial*>> single_unitary;  // letter → its monomials
};

// Splits `terms` into `split`, leaving out the powers gathered in `polynomial_terms`; false with
// out.reason set when a term has no rule.
static bool split_terms(const std::vector<expr::Monomial>& terms, const std::vector<MatrixSpec>& d,
                        const std::map<PowerOf, std::map<int, double>>& polynomial_terms,
                        SplitTerms& split, DerivedLimit& out) {
  for (const auto& m : terms) {
    // Only a Haar matrix alone (a·U + conj(a)·U^*) may carry a complex coefficient here
    // (derive_by_rules checked), so the others are read as real numbers.
    if (m.letters.empty()) {
      split.shift += m.coefficient.real();
      continue;
    }
    // A point mass D = b·I, alone or conjugated (U D U^* = b·I): a constant.
    const bool conjugated = m.letters.size() == 3 && m.letters[0].first == m.letters[2].first &&
                            declarations::is_unitary(d[static_cast<std::size_t>(m.letters[0].first)].kind);
    const MatrixSpec& inner = d[static_cast<std::size_t>(m.letters[conjugated ? 1 : 0].first)];
    if ((m.letters.size() == 1 || conjugated) && inner.kind == Kind::diagonal &&
        inner.diagonal.kind == declarations::DiagonalLawKind::atoms &&
        inner.diagonal.atoms.size() == 1) {
      split.shift += m.coefficient.real() * inner.diagonal.atoms[0].value;
      continue;
    }
    if (const auto p = power_of(m.letters, d); p && polynomial_terms.count(p->first)) continue;
    if (m.letters.size() == 1 && declarations::is_unitary(d[static_cast<std::size_t>(m.letters[0].first)].kind)) {
      split.single_unitary[m.letters[0].first].push_back(&m);
      continue;
    }
    std::string why;
    auto t = term_of(m.coefficient.real(), m.letters, d, why);
    if (!t) {
      out.reason = "no predictor applies yet: " + why;
      return false;
    }
    split.free_terms.push_back(std::move(*t));
  }
  return true;
}

// Adds one free term p(X) per base of `polynomial_terms`; false with out.reason set when X has
// no law.
static bool add_polynomial_terms(const std::map<PowerOf, std::map<int, double>>& polynomial_terms,
                                 const std::vector<MatrixSpec>& d, SplitTerms& split,
                                 DerivedLimit& out) {
  double& shift = split.shift;
  const bool polynomial_alone =
      polynomial_terms.size() == 1 && split.free_terms.empty() && split.single_unitary.empty();
  for (const auto& [key, coefficients] : polynomial_terms) {
    const MatrixSpec& x = d[static_cast<std::size_t>(key.letter)];
    const LetterLaw l = law_of(x);
    if (!l.law) {
      out.reason = "no predictor applies yet: " + l.reason;
      return false;
    }
    std::vector<double> c(static_cast<std::size_t>(coefficients.rbegin()->first) + 1, 0.0);
    for (const auto& [power, coefficient] : coefficients) c[static_cast<std::size_t>(power)] = coefficient;
    if (polynomial_alone) {
      c[0] = shift;  // the constant goes into p: the law prints as one image
      shift = 0.0;
    }
    FreeTerm t;
    t.law = polynomial_image(l.law, c);
    t.polynomial = true;
    const bool atomic = l.law->support().bands.empty();
    t.text = "a polynomial in " + (key.unitary == -1 ? x.name : "the rotated " + x.name) +
             (polynomial_alone ? " alone" : "") + " → " +
             (atomic ? "the image of its atoms under the polynomial (spectral mapping)"
                     : "the image of " + l.name + " under the polynomial (change of variables on "
                                                 "each piece where it is monotone)");
    if (key.unitary == -1) {
      (declarations::is_random(x.kind) ? t.random_letters : t.deterministic_letters).insert(key.letter);
    } else {
      t.random_letters.insert(key.unitary);
      if (declarations::is_random(x.kind)) t.random_letters.insert(key.letter);
      (d[static_cast<std::size_t>(key.unitary)].kind == Kind::haar_orthogonal ? t.haar_orthogonal
                                                                              : t.haar_unitary) = true;
    }
    split.free_terms.push_back(std::move(t));
  }
  return true;
}

// Adds one free term U + U^* per Haar matrix that appears alone; false with out.reason set when
// it does not appear as such a pair.
static bool add_unitary_pairs(const std::vector<MatrixSpec>& d, SplitTerms& split,
                              DerivedLimit& out) {
  for (const auto& [letter, ms] : split.single_unitary) {
    const MatrixSpec& u = d[static_cast<std::size_t>(letter)];
    // a·U + conj(a)·U^* = |a|·(V + V^*) with V = (a/|a|)·U, again Haar distributed (for a Haar
    // orthogonal U in the limit: its eigenvalues are asymptotically uniform on the circle).
    if (ms.size() != 2 || ms[0]->coefficient != std::conj(ms[1]->coefficient) ||
        ms[0]->letters[0].second == ms[1]->letters[0].second || ms[0]->coefficient == 0.0) {
      out.reason = "no predictor applies yet: " + u.name + " appears alone, not as " + u.name +
                   " + " + u.name + "^*";
      return false;
    }
    FreeTerm t;
    t.law = arcsine();
    const std::complex<double> a = ms[0]->coefficient;
    t.coefficient = std::abs(a);
    t.text = a.imag() == 0.0
                 ? u.name + " + " + u.name + "^* → arcsine law (Kesten 1959)"
                 : "a·" + u.name + " + conj(a)·" + u.name + "^* with a complex = |a| times (a/|a|)·" +
                       u.name + " plus its adjoint, and (a/|a|)·" + u.name +
                       " is again Haar → arcsine law (Kesten 1959)";
    t.random_letters.insert(letter);
    t.unitary_pair = true;
    (u.kind == Kind::haar_orthogonal ? t.haar_orthogonal : t.haar_unitary) = true;
    split.free_terms.push_back(std::move(t));
  }
  return true;
}

// Whether the terms are free of each other; false with out.reason set when they are not.
static bool terms_are_free(const std::vector<FreeTerm>& free_terms,
                           const std::vector<MatrixSpec>& d, DerivedLimit& out) {
  // Freeness: random matrices and unitaries in one term only; a deterministic matrix
  // unconjugated in one term only.
  std::map<int, int> random_owner;
  std::map<int, int> fixed_owner;
  for (std::size_t i = 0; i < free_terms.size(); ++i) {
    for (int l : free_terms[i].random_letters) {
      if (random_owner.count(l)) {
        out.reason = "no predictor applies yet: " + d[static_cast<std::size_t>(l)].name +
                     " appears in more than one term, so the terms are not free of each other";
        return false;
      }
      random_owner[l] = static_cast<int>(i);
    }
    for (int l : free_terms[i].deterministic_letters) fixed_owner.emplace(l, static_cast<int>(i));
  }
  std::set<int> fixed_terms;
  for (const auto& [letter, owner] : fixed_owner) fixed_terms.insert(owner);
  for (std::size_t i = 0; i < free_terms.size(); ++i) {
    for (int l : free_terms[i].deterministic_letters) {
      if (fixed_owner.at(l) != static_cast<int>(i)) {
        out.reason = "no predictor applies yet: " + d[static_cast<std::size_t>(l)].name +
                     " appears unconjugated in more than one term";
        return false;
      }
    }
  }
  if (fixed_terms.size() > 1) {
    out.reason = "no predictor applies yet: two terms hold deterministic matrices without a Haar "
                 "conjugation, and commuting matrices are not free";
    return false;
  }
  return true;
}

// The law of the sum of the free terms shifted by `shift`, and its rule, into `out`.
static void combine_free_terms(const std::vector<FreeTerm>& free_terms, double shift,
                               DerivedLimit& out) {
  // Kesten–McKay: every term is U_i + U_i^* with coefficient 1.
  const bool all_pairs = std::all_of(free_terms.begin(), free_terms.end(), [](const FreeTerm& t) {
    return t.unitary_pair && t.coefficient == 1.0;
  });
  LawPtr law;
  std::string rule;
  if (all_pairs && free_terms.size() > 1) {
    const int deg = static_cast<int>(free_terms.size());
    law = kesten_mckay(deg);
    rule = "a sum of " + std::to_string(deg) + " free U + U^* → Kesten–McKay law of degree " +
           std::to_string(2 * deg) + " (Kesten 1959; McKay 1981)";
  } else {
    for (const FreeTerm& t : free_terms) {
      const LawPtr scaled = t.coefficient == 1.0 ? t.law : affine(t.law, t.coefficient, 0.0);
      law = law ? LawPtr(free_additive(law, scaled)) : scaled;
      rule += (rule.empty() ? "" : "; ") +
              (t.coefficient == 1.0 ? std::string() : text::readable(t.coefficient) + "·") +
              "(" + t.text + ")";
    }
    if (free_terms.size() > 1) {
      rule = "free additive convolution of free terms (Voiculescu 1986; Belinschi & Bercovici "
             "2007): " + rule;
    } else {
      rule = free_terms[0].text;
      if (free_terms[0].coefficient != 1.0) {
        rule += "; scaled by " + text::readable(free_terms[0].coefficient);
      }
    }
  }
  if (shift != 0.0) {
    law = affine(law, 1.0, shift);
    rule += "; shifted by " + text::readable(shift);
  }
  out.law = law;
  out.rule = rule;
}

// Sets out.rate_key for a model of the published-rate table.
static void set_rate_key(const std::vector<FreeTerm>& free_terms,
                         const std::vector<MatrixSpec>& d, DerivedLimit& out) {
  // The published-rate key of the model, when it is one the table knows.
  if (free_terms.size() == 1 && !free_terms[0].unitary_pair && !free_terms[0].polynomial &&
      free_terms[0].random_letters.size() == 1 &&
      free_terms[0].deterministic_letters.empty() && !free_terms[0].haar_unitary &&
      !free_terms[0].haar_orthogonal) {
    switch (d[static_cast<std::size_t>(*free_terms[0].random_letters.begin())].kind) {
      case Kind::gue: out.rate_key = "gue"; break;
      case Kind::goe: out.rate_key = "goe"; break;
      case Kind::wigner_rademacher: out.rate_key = "wigner"; break;
      case Kind::wishart_complex: out.rate_key = "wishart_complex"; break;
      case Kind::wishart_real: out.rate_key = "wishart_real"; break;
      default: break;
    }
  } else if (free_terms.size() > 1 &&
             std::all_of(free_terms.begin(), free_terms.end(), [](const FreeTerm& t) {
               // deterministic matrices, each either as it is or conjugated by its own Haar matrix
               const bool conjugated = t.haar_unitary || t.haar_orthogonal;
               return !t.unitary_pair && t.random_letters.size() == (conjugated ? 1U : 0U);
             })) {
    const bool orth = std::any_of(free_terms.begin(), free_terms.end(),
                                  [](const FreeTerm& t) { return t.haar_orthogonal; });
    out.rate_key = orth ? "haar_orthogonal_sum" : "haar_unitary_sum";
  }
}

static DerivedLimit derive_by_rules(const expr::Expression& expression) {
  DerivedLimit out;
  const auto& d = expression.declared();
  const bool eigenvalues = expression.spectrum() == expr::Spectrum::eigenvalues;

  std::vector<expr::Monomial> terms;
  try {
    terms = expression.expansion(10000);
  } catch (const Stopped&) {
    throw;  // a stop request ends the command, it is not a reason
  } catch (const Error& e) {
    out.reason = std::string("the expression's expansion is too large for the rules: ") + e.what();
    return out;
  }
  if (!eigenvalues) {
    if (expression.self_adjoint()) {
      out.reason = "singular values of a self-adjoint expression (forced) are not predicted; use eigenvalues";
      return out;
    }
    out.reason = ginibre_singular_values(terms, d, out);
    if (!out.reason.empty()) out.reason = "no predictor applies yet: " + out.reason;
    return out;
  }

  // The imaginary unit: the rules take it only in a·U + conj(a)·U^* of a Haar U alone; any other
  // complex coefficient goes to the polynomial solver, which takes complex coefficients.
  for (const auto& m : terms) {
    const bool unitary_alone =
        m.letters.size() == 1 &&
        declarations::is_unitary(d[static_cast<std::size_t>(m.letters[0].first)].kind);
    if (m.coefficient.imag() != 0.0 && !unitary_alone) {
      out.reason = "no predictor applies yet: a complex coefficient (the imaginary unit) outside "
                   "a·U + conj(a)·U^*";
      return out;
    }
  }

  // Powers of one matrix, gathered per base: a base with a power ≥ 2 becomes one term p(X).
  std::map<PowerOf, std::map<int, double>> polynomial_terms;
  for (const auto& m : terms) {
    if (const auto p = power_of(m.letters, d)) {
      polynomial_terms[p->first][p->second] += m.coefficient.real();
    }
  }
  std::erase_if(polynomial_terms, [](const auto& entry) { return entry.second.rbegin()->first < 2; });

  // Split into the constant, the U + U^* pairs and the other terms.
  SplitTerms split;
  if (!split_terms(terms, d, polynomial_terms, split, out)) return out;
  if (!add_polynomial_terms(polynomial_terms, d, split, out)) return out;
  if (!add_unitary_pairs(d, split, out)) return out;
  const std::vector<FreeTerm>& free_terms = split.free_terms;
  if (free_terms.empty()) {
    out.law = atoms({{split.shift, 1.0}});
    out.rule = "a multiple of the identity";
    return out;
  }
  if (!terms_are_free(free_terms, d, out)) return out;
  combine_free_terms(free_terms, split.shift, out);
  set_rate_key(free_terms, d, out);
  return out;
}

// Singular values of a non-self-adjoint P: the square roots of the eigenvalues of P^* P, whose
// law the same derivation gives (rules, then the polynomial solver).
static void singular_values_from_gram(const expr::Expression& expression, int max_moment,
                                      DerivedLimit& out) {
  try {
    const std::string gram = "(" + expression.text() + ")^* (" + expression.text() + ")";
    const expr::Expression q(gram, expression.declared());
    if (q.spectrum() != expr::Spectrum::eigenvalues) return;
    const DerivedLimit inner = derive_limit(q, max_moment);
    if (!inner.law) {
      out.reason += "; nor does the law of P^*P (" + inner.reason + ")";
      return;
    }
    out.law = square_root(inner.law);
    out.rule = "singular values of P = " + expression.text() +
               ": the square roots of the eigenvalues of P^*P, whose limit is " + inner.rule;
    out.reason.clear();
  } catch (const Stopped&) {
    throw;  // a stop request ends the command, it is not a reason
  } catch (const Error& e) {
    out.reason += "; nor does the law of P^*P (" + std::string(e.what()) + ")";
  }
}

namespace {

DerivedLimit derive_in_order(const expr::Expression& expression, int max_moment,
                             Eigen::Index deterministic_size);

}  // namespace

DerivedLimit derive_limit(const expr::Expression& expression, int max_moment,
                          Eigen::Index deterministic_size) {
  // One law whatever order the matrices were declared in: the solvers' rounding depends on the
  // order of the free variables (a pencil's rows, a convolution's operands), and `limit` takes
  // the order of its -m options while a job file's tables come sorted by name; derived in
  // different orders, the same model's edges differed in the tenth digit, and the density at a
  // grid point next to an edge by 1e-6 (found by python.check_limit_catalogue).
  // A spiked diagonal enters as its limit, the point mass at its base (its outliers are
  // predicted apart: outliers.hpp).
  std::vector<declarations::MatrixSpec> specs = expression.declared();
  bool spiked = false;
  for (auto& m : specs) {
    spiked = spiked || m.diagonal.kind == declarations::DiagonalLawKind::spiked;
    m = declarations::limit_spec(m);
  }
  const auto by_name = [](const MatrixSpec& a, const MatrixSpec& b) { return a.name < b.name; };
  if (!spiked && std::is_sorted(specs.begin(), specs.end(), by_name)) {
    return derive_in_order(expression, max_moment, deterministic_size);
  }
  std::stable_sort(specs.begin(), specs.end(), by_name);
  expr::CheckOptions check;
  check.force_singular_values = expression.spectrum() == expr::Spectrum::singular_values;
  DerivedLimit out =
      derive_in_order(expr::Expression(expression.text(), std::move(specs), check), max_moment,
                      deterministic_size);
  if (spiked) {
    out.rate_key.clear();  // published finite-N rates are of the model without the spike
    if (out.law) {
      out.outliers = predict_outliers(expression, *out.law);
    } else {
      out.outliers.spiked = true;
      out.outliers.reason = "no bulk law: " + out.reason;
    }
  }
  return out;
}

namespace {

// A law from the polynomial solver is checked before it is used: its first two moments (by the
// contour integral of G around its support) against the exact ones. A support found too narrow
// (an edge stopped inside the true support) fails it: the contour then crosses the spectrum.
// Found by python.check_limit_catalogue: for 0.5 (U D U^* X + X U D U^*) + 2 X − 0.5 (W X + X W)
// the solver stopped at ±0.70, with m2 = 0.198 against the exact 0.710 (and 0.618 of the mass),
// and that law went into limit and report without a word. Empty when the law passes.
std::string solver_law_fails_check(const PolynomialLaw& law, const expr::Expression& expression,
                                   std::vector<double> exact) {
  if (exact.size() < 3) {
    exact.clear();
    try {
      for (const ExactValue& v : limit_moments(expression, 2)) exact.push_back(v.value);
    } catch (const Stopped&) {
      throw;
    } catch (const Error&) {
      exact.clear();  // no exact moments to check against: the law is used unchecked
    }
  }
  char buffer[200];
  if (exact.size() >= 3) {
    const std::vector<double> m = law.moments(2);
    for (int k = 1; k <= 2; ++k) {
      if (!(std::abs(m[k] - exact[k]) <= 1e-6 * std::max(1.0, std::abs(exact[k])))) {
        std::snprintf(buffer, sizeof buffer, "its m%d is %.6g, the exact m%d is %.6g", k, m[k], k,
                      exact[k]);
        return buffer;
      }
    }
  }
  // Not checked here: the total mass. The solver can miss a point mass narrower than its grid
  // or at a band's edge, and its CDF table can miss a little mass near a singular point; a law
  // whose moments are right is kept, and law_note states the shortfall in `limit` and `report`.
  return {};
}

// Appends the term c·w to a sum's expression text, which parses back to the same coefficient
// (%.17g round-trips): "X", "- 0.5 * T", "(0 + 2 i) * A * B".
void append_term(std::string& sum, const expr::Monomial& m, const std::vector<MatrixSpec>& d) {
  const std::complex<double> c = m.coefficient;
  char re[40], im[40];
  std::snprintf(re, sizeof re, "%.17g", std::abs(c.real()));
  std::snprintf(im, sizeof im, "%.17g", c.imag());
  const bool negative = c.imag() == 0.0 && c.real() < 0.0;
  std::string term;
  if (c.imag() != 0.0) {
    std::snprintf(re, sizeof re, "%.17g", c.real());
    term = "(" + std::string(re) + (c.imag() < 0.0 ? " - " : " + ") +
           std::string(im + (c.imag() < 0.0 ? 1 : 0)) + " i)";
  } else if (std::abs(c.real()) != 1.0 || m.letters.empty()) {
    term = re;
  }
  for (const auto& [letter, adjoint] : m.letters) {
    term += std::string(term.empty() ? "" : " * ") + d[static_cast<std::size_t>(letter)].name +
            (adjoint ? "^*" : "");
  }
  sum += sum.empty() ? (negative ? "-" + term : term) : (negative ? " - " : " + ") + term;
}

// The eigenvalue law of the polynomial `text` in deterministic matrices, formed at size n.
LawPtr deterministic_law(const std::string& text, const std::vector<MatrixSpec>& d, Eigen::Index n,
                         std::size_t& distinct) {
  const expr::Expression q(text, d);
  if (q.spectrum() != expr::Spectrum::eigenvalues) {
    throw InputError("its deterministic terms are not self-adjoint");
  }
  std::vector<ensembles::Sample> samples(d.size());
  for (std::size_t i = 0; i < d.size(); ++i) {
    if (!declarations::is_random(d[i].kind)) samples[i] = ensembles::Sampler(d[i]).draw(n, 0, 0);
  }
  expr::Evaluated value = expr::Evaluation(q, n).evaluate(samples);
  const Eigen::VectorXd eigenvalues = expr::compute_spectrum(expr::Spectrum::eigenvalues, value);
  std::vector<Atom> points;
  for (const auto& a : eigenvalue_atoms(eigenvalues)) points.push_back({a.value, a.weight});
  distinct = points.size();
  return atoms(std::move(points));
}

// The free deterministic equivalent at size n (Speicher & Vargas 2012, "Free deterministic
// equivalents, rectangular random matrix models, and operator-valued free probability", Random
// Matrices Theory Appl. 1) of P = R + Q, Q the terms in deterministic matrices only, R those in
// random matrices only: the random matrices are replaced by their free limits and the
// deterministic ones kept as they are at size n, so R's limit is free from Q_n and the law is
// law(R) ⊞ μ(Q_n), μ the eigenvalue law. Sets `out` when it applies, else adds to its reason.
void deterministic_equivalent(const expr::Expression& e, int max_moment, Eigen::Index n,
                              DerivedLimit& out) {
  const std::set<std::string> bare = bare_deterministic(e);
  if (bare.size() < 2) return;
  if (n <= 0) {
    out.reason += "; with a size (limit --size N, or a job's largest size) the free deterministic "
                  "equivalent is computed when " + names_of(bare) + " make up terms of their own";
    return;
  }
  const auto& d = e.declared();
  std::string q_text, r_text;
  for (const auto& m : e.expansion(10000)) {
    std::size_t deterministic = 0;
    for (const auto& l : m.letters) {
      deterministic += declarations::is_random(d[static_cast<std::size_t>(l.first)].kind) ? 0 : 1;
    }
    if (deterministic != 0 && deterministic != m.letters.size()) {
      std::string term;
      append_term(term, m, d);
      out.reason += "; the free deterministic equivalent is computed when the deterministic "
                    "matrices make up terms of their own, and " + term + " mixes them with "
                    "random ones";
      return;
    }
    append_term(deterministic != 0 || m.letters.empty() ? q_text : r_text, m, d);
  }
  try {
    std::size_t distinct = 0;
    const LawPtr q = deterministic_law(q_text, d, n, distinct);
    std::string rule = "free deterministic equivalent at N = " + std::to_string(n) +
                       " (Speicher & Vargas 2012): " + names_of(bare) +
                       " are given at each N and not free of each other, so their terms Q = " +
                       q_text + " are formed at N = " + std::to_string(n) + " (" +
                       std::to_string(distinct) + " distinct eigenvalues)";
    LawPtr law = q;
    if (!r_text.empty()) {
      const DerivedLimit r = derive_limit(expr::Expression(r_text, d), max_moment);
      if (!r.law) throw InputError("the random terms " + r_text + " have no limit: " + r.reason);
      law = free_additive(r.law, q);
      rule += ", free from the limit of the random terms R = " + r_text + " (" + r.rule +
              "): law(R) ⊞ μ(Q_N), free additive convolution (Voiculescu 1986; Belinschi & "
              "Bercovici 2007)";
    }
    out.law = law;
    out.rule = rule + "; report compares every other size with its own";
    out.deterministic_size = n;
    out.reason.clear();
    out.rate_key.clear();
  } catch (const Stopped&) {
    throw;
  } catch (const Error& err) {
    out.reason += "; the free deterministic equivalent failed: " + std::string(err.what());
  }
}

DerivedLimit derive_in_order(const expr::Expression& expression, int max_moment,
                             Eigen::Index deterministic_size) {
  // The exact moments stand on their own, whatever the rules say. They are computed on a thread
  // of their own while the rules and the solver work: in big rationals they took 1.7 s of the
  // 13 s of catalogue model 12 (−B³ + ½(AB + BA), decimal atoms).
  std::future<DerivedLimit> exact = std::async(std::launch::async, [&expression, max_moment] {
    DerivedLimit m;
    exact_moments_into(expression, max_moment,
                       expression.spectrum() == expr::Spectrum::eigenvalues, m);
    return m;
  });
  DerivedLimit out = derive_by_rules(expression);
  const auto with_moments = [&exact](DerivedLimit& o) -> DerivedLimit& {
    if (exact.valid()) {
      DerivedLimit m = exact.get();
      o.exact_moments = std::move(m.exact_moments);
      o.exact_moment_text = std::move(m.exact_moment_text);
      o.moments_note = std::move(m.moments_note);
    }
    return o;
  };
  if (!out.law && expression.spectrum() == expr::Spectrum::singular_values &&
      !expression.self_adjoint()) {
    singular_values_from_gram(expression, max_moment, out);
    return with_moments(out);
  }
  if (out.law || expression.spectrum() != expr::Spectrum::eigenvalues || !expression.self_adjoint()) {
    return with_moments(out);
  }
  // No closed-form rule: the general solver for self-adjoint polynomials in free variables.
  try {
    PolynomialLimitOptions options;
    options.exact_moment_order = 0;  // the exact moments come from their own thread (above)
    const auto law = polynomial_limit(expression, options);
    const std::string failed = solver_law_fails_check(*law, expression,
                                                      with_moments(out).exact_moments);
    if (!failed.empty()) {
      out.reason += "; the polynomial solver's law failed its check and is not reported (" +
                    failed + ")";
      return out;
    }
    out.rule = "linearization and operator-valued subordination (Anderson 2013; Helton, Rashidi "
               "Far & Speicher 2007; Belinschi, Mai & Speicher 2017), pencil of size " +
               std::to_string(law->pencil_size()) + "; no closed-form rule applies (" +
               out.reason.substr(out.reason.rfind("yet: ") == std::string::npos ? 0 : out.reason.rfind("yet: ") + 5) + ")";
    out.law = law;
    out.reason.clear();
    double mass = law->continuous_mass();
    for (const Atom& a : law->support().atoms) mass += a.weight;
    // 1e-6: the CDF tables are scaled to the bands' contour masses, so a shortfall of the
    // tables' own total (a coarse edge next to a point mass: 1.3e-5 for S W S with S singular)
    // is where the CDF may be off locally.
    if (std::abs(mass - 1.0) > 1e-6) {
      char buffer[320];
      std::snprintf(buffer, sizeof buffer,
                    "the density and the point masses found add up to %.6f instead of 1 (a point "
                    "mass the solver's grid did not resolve, or its CDF table's error near a "
                    "singularity of the density): the CDF is off by up to %.1e, and distances "
                    "to this limit below that mean nothing",
                    mass, std::abs(1.0 - mass));
      out.law_note = buffer;
    }
    for (const auto& u : law->uncertain_weights()) {
      char buffer[320];
      std::snprintf(buffer, sizeof buffer,
                    "the weight %.6g of the point mass at x = %.10g may be off by about %.0e (it "
                    "lies on or next to a band, where the solver weighs it less well)",
                    u.atom.weight, u.atom.value, u.uncertainty);
      out.law_note += (out.law_note.empty() ? "" : "; ") + std::string(buffer);
    }
  } catch (const Stopped&) {
    throw;  // a stop request ends the command, it is not a reason
  } catch (const Error& e) {
    out.reason += "; the polynomial solver does not cover it either: " + std::string(e.what());
  }
  if (!out.law) deterministic_equivalent(expression, max_moment, deterministic_size, out);
  return with_moments(out);
}

}  // namespace

}  // namespace freegap::analysis
