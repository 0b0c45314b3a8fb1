// The matrices a job declares: names and kinds, validity, shapes, and an eigenvalue file's numbers.
#include "freegap/declarations.hpp"
#include "freegap/text.hpp"

#include <algorithm>
#include <complex>
#include <array>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <numeric>
#include <sstream>

#include "freegap/errors.hpp"

namespace freegap::declarations {

namespace {

struct KindName {
  Kind kind;
  const char* name;
};
constexpr std::array<KindName, 15> kind_names{{
    {Kind::gue, "gue"},
    {Kind::goe, "goe"},
    {Kind::wigner_rademacher, "wigner_rademacher"},
    {Kind::wishart_complex, "wishart_complex"},
    {Kind::wishart_real, "wishart_real"},
    {Kind::ginibre_complex, "ginibre_complex"},
    {Kind::ginibre_real, "ginibre_real"},
    {Kind::haar_unitary, "haar_unitary"},
    {Kind::haar_orthogonal, "haar_orthogonal"},
    {Kind::diagonal, "diagonal"},
    {Kind::beta_hermite, "beta_hermite"},
    {Kind::beta_laguerre, "beta_laguerre"},
    {Kind::toeplitz, "toeplitz"},
    {Kind::file_matrix, "file"},
    {Kind::jacobi, "jacobi"},
}};

std::string num(double x) { return text::readable(x); }
[[noreturn]] void fail(const MatrixSpec& spec, const std::string& what) { refuse(spec, what); }

// A word of a file the job names, as a message may quote it: the file may be anyone's (a job
// can name any readable file), so at most kQuotedChars printable ASCII characters, every other
// byte (control characters, escape sequences, non-ASCII) shown as '?', and "..." when cut.
constexpr std::size_t kQuotedChars = 24;
std::string quoted_word(const std::string& word) {
  std::string out;
  for (std::size_t i = 0; i < word.size() && i < kQuotedChars; ++i) {
    const auto c = static_cast<unsigned char>(word[i]);
    out += (c >= 0x20 && c < 0x7f) ? static_cast<char>(c) : '?';
  }
  if (word.size() > kQuotedChars) out += "...";
  return out;
}

std::vector<double> read_number_file(const MatrixSpec& spec) {
  const std::string& path = spec.diagonal.path;
  std::ifstream in(path);
  if (!in) fail(spec, "cannot read eigenvalue file '" + path + "'; check the path");
  std::vector<double> values;
  std::string line;
  int line_no = 0;
  while (std::getline(in, line)) {
    ++line_no;
    if (const auto hash = line.find('#'); hash != std::string::npos) line.erase(hash);
    std::istringstream words(line);
    std::string word;
    while (words >> word) {
      std::size_t used = 0;
      double v = 0;
      try {
        v = std::stod(word, &used);
      } catch (const std::exception&) {
        used = 0;
      }
      if (used != word.size() || !std::isfinite(v)) {
        fail(spec, "eigenvalue file '" + path + "' line " + std::to_string(line_no) + ": '" +
                       quoted_word(word) + "' is not a finite number");
      }
      values.push_back(v);
    }
  }
  if (values.empty()) fail(spec, "eigenvalue file '" + path + "' holds no numbers");
  std::sort(values.begin(), values.end());
  return values;
}

}  // namespace

void refuse(const MatrixSpec& spec, const std::string& what) {
  throw InputError("matrix '" + spec.name + "': " + what);
}

bool uses_ratio(Kind k) {

  return k == Kind::wishart_complex || k == Kind::wishart_real || k == Kind::ginibre_complex ||
         k == Kind::ginibre_real || k == Kind::beta_laguerre;
}

Kind parse_kind(std::string_view text) {
  for (const auto& kn : kind_names) {
    if (text == kn.name) return kn.kind;
  }
  throw InputError("unknown ensemble '" + std::string(text) + "' (known: " + known_kinds() + ")");
}

std::string_view kind_name(Kind kind) {
  for (const auto& kn : kind_names) {
    if (kn.kind == kind) return kn.name;
  }
  return "?";
}

std::string known_kinds() {
  std::string out;
  for (const auto& kn : kind_names) {
    if (!out.empty()) out += ", ";
    out += kn.name;
  }
  return out;
}

bool is_self_adjoint(Kind k) {
  return k == Kind::gue || k == Kind::goe || k == Kind::wigner_rademacher ||
         k == Kind::wishart_complex || k == Kind::wishart_real || k == Kind::diagonal ||
         k == Kind::beta_hermite || k == Kind::beta_laguerre || k == Kind::toeplitz ||
         k == Kind::file_matrix || k == Kind::jacobi;
}
bool is_unitary(Kind k) { return k == Kind::haar_unitary || k == Kind::haar_orthogonal; }
bool is_real(Kind k) {
  return k == Kind::goe || k == Kind::wigner_rademacher || k == Kind::wishart_real ||
         k == Kind::ginibre_real || k == Kind::haar_orthogonal || k == Kind::diagonal ||
         k == Kind::beta_hermite || k == Kind::beta_laguerre || k == Kind::toeplitz ||
         k == Kind::jacobi;
}
bool is_real(const MatrixSpec& spec) {
  return spec.kind == Kind::file_matrix ? !spec.file.complex : is_real(spec.kind);
}
bool is_random(Kind k) {
  return k != Kind::diagonal && k != Kind::toeplitz && k != Kind::file_matrix && k != Kind::jacobi;
}

Index companion_size(Index n, double ratio) {
  return static_cast<Index>(std::llround(static_cast<double>(n) / ratio));
}

Shape shape(const MatrixSpec& spec, Index n) {
  if (spec.kind == Kind::ginibre_complex || spec.kind == Kind::ginibre_real) {
    return {n, companion_size(n, spec.ratio)};
  }
  return {n, n};
}

std::vector<Index> atom_counts(const std::vector<Atom>& atoms, Index n) {
  std::vector<Index> counts(atoms.size(), 0);
  std::vector<double> remainder(atoms.size(), 0.0);
  Index used = 0;
  for (std::size_t i = 0; i < atoms.size(); ++i) {
    double share = static_cast<double>(n) * atoms[i].weight;
    // N·w that is an integer up to rounding (0.3·10 = 3.0000000000000004) counts as that integer.
    const double nearest = std::round(share);
    if (std::abs(share - nearest) <= 1e-9 * std::max(1.0, share)) share = nearest;
    counts[i] = static_cast<Index>(std::floor(share));
    remainder[i] = share - static_cast<double>(counts[i]);
    used += counts[i];
  }
  std::vector<std::size_t> order(atoms.size());
  std::iota(order.begin(), order.end(), 0);
  std::stable_sort(order.begin(), order.end(),
                   [&](std::size_t x, std::size_t y) { return remainder[x] > remainder[y]; });
  for (std::size_t j = 0; used < n && j < order.size(); ++j, ++used) ++counts[order[j]];
  return counts;
}

// A Jacobi matrix's coefficients: 1 to kMostJacobiPeriod of each kind, finite, every b_k ≠ 0.
static void validate_jacobi(const MatrixSpec& spec) {
  const std::size_t p = spec.jacobi_diagonal.size();
  if (p == 0 || p > kMostJacobiPeriod || spec.jacobi_off_diagonal.size() != p) {
    fail(spec, "a Jacobi matrix needs its period's diagonal and off-diagonal coefficients, 1 to " +
                   std::to_string(kMostJacobiPeriod) + " of each and as many of one as of the "
                   "other (got " + std::to_string(p) + " and " +
                   std::to_string(spec.jacobi_off_diagonal.size()) + ")");
  }
  for (std::size_t k = 0; k < p; ++k) {
    if (!std::isfinite(spec.jacobi_diagonal[k]) || !std::isfinite(spec.jacobi_off_diagonal[k])) {
      fail(spec, "Jacobi coefficients must be finite");
    }
    if (spec.jacobi_off_diagonal[k] == 0.0) {
      fail(spec, "off-diagonal coefficient b_" + std::to_string(k) + " is 0, which splits the "
                 "matrix into blocks; give every b_k a non-zero value");
    }
  }
}

void validate(const MatrixSpec& spec) {
  if (spec.name.empty()) throw InputError("a matrix has an empty name; give every matrix a name");
  if (uses_ratio(spec.kind) && !(std::isfinite(spec.ratio) && spec.ratio > 0)) {
    fail(spec, "ratio c = N/M must be a positive finite number (got " + num(spec.ratio) + ")");
  }
  if ((spec.kind == Kind::beta_hermite || spec.kind == Kind::beta_laguerre) &&
      !(std::isfinite(spec.beta) && spec.beta > 0)) {
    fail(spec, "beta must be a positive finite number (got " + num(spec.beta) + ")");
  }
  if (spec.kind == Kind::toeplitz) {
    if (spec.coefficients.empty() || spec.coefficients.size() > kMostToeplitzCoefficients) {
      fail(spec, "a Toeplitz matrix needs 1 to " + std::to_string(kMostToeplitzCoefficients) +
                     " coefficients c_0, c_1, … (got " + std::to_string(spec.coefficients.size()) +
                     ")");
    }
    for (const double c : spec.coefficients) {
      if (!std::isfinite(c)) fail(spec, "Toeplitz coefficients must be finite");
    }
    return;
  }
  if (spec.kind == Kind::jacobi) {
    validate_jacobi(spec);
    return;
  }
  if (spec.kind == Kind::file_matrix && spec.file.path.empty()) {
    fail(spec, "a matrix from a file needs its path");
  }
  if (spec.kind != Kind::diagonal) return;
  const DiagonalLaw& law = spec.diagonal;
  switch (law.kind) {
    case DiagonalLawKind::atoms: {
      if (law.atoms.empty()) fail(spec, "the atom list is empty; give at least one value and weight");
      double total = 0;
      for (const Atom& atom : law.atoms) {
        if (!std::isfinite(atom.value)) fail(spec, "atom value must be finite");
        if (!(atom.weight >= 0) || !std::isfinite(atom.weight)) {
          fail(spec, "atom weight must be non-negative (got " + num(atom.weight) + " for value " +
                          num(atom.value) + ")");
        }
        total += atom.weight;
      }
      if (std::abs(total - 1.0) > 1e-12) {
        fail(spec, "atom weights sum to " + num(total) + ", not 1; rescale them");
      }
      break;
    }
    case DiagonalLawKind::uniform:
      if (!(std::isfinite(law.low) && std::isfinite(law.high) && law.low < law.high)) {
        fail(spec, "uniform law needs finite low < high (got low = " + num(law.low) +
                        ", high = " + num(law.high) + ")");
      }
      break;
    case DiagonalLawKind::semicircle_quantiles:
      if (!(std::isfinite(law.variance) && law.variance > 0)) {
        fail(spec, "semicircle variance must be positive (got " + num(law.variance) + ")");
      }
      break;
    case DiagonalLawKind::marchenko_pastur_quantiles:
      if (!(std::isfinite(law.ratio) && law.ratio > 0)) {
        fail(spec, "Marchenko-Pastur ratio must be positive (got " + num(law.ratio) + ")");
      }
      break;
    case DiagonalLawKind::file:
      break;  // its numbers are checked as file_values() reads them
    case DiagonalLawKind::spiked:
      if (law.spikes.empty() || law.spikes.size() > kMostSpikes) {
        fail(spec, "a spiked law needs 1 to " + std::to_string(kMostSpikes) + " spike values (got " +
                       std::to_string(law.spikes.size()) + ")");
      }
      for (const double v : law.spikes) {
        if (!std::isfinite(v)) fail(spec, "spike values must be finite");
      }
      if (!std::isfinite(law.base)) fail(spec, "the base value must be finite");
      break;
  }
}

MatrixSpec limit_spec(const MatrixSpec& spec) {
  MatrixSpec out = spec;
  if (spec.kind == Kind::diagonal && spec.diagonal.kind == DiagonalLawKind::spiked) {
    out.diagonal = DiagonalLaw{};
    out.diagonal.atoms = {{spec.diagonal.base, 1.0}};
  }
  return out;
}

std::vector<double> planned_entries(const MatrixSpec& spec, Index n) {
  std::vector<double> d;
  if (spec.kind != Kind::diagonal || n <= 0) return d;
  const DiagonalLaw& law = spec.diagonal;
  if (law.kind == DiagonalLawKind::atoms && !law.atoms.empty()) {
    const auto counts = atom_counts(law.atoms, n);
    for (std::size_t i = 0; i < counts.size(); ++i) {
      d.insert(d.end(), static_cast<std::size_t>(counts[i]), law.atoms[i].value);
    }
  } else if (law.kind == DiagonalLawKind::spiked && static_cast<Index>(law.spikes.size()) <= n) {
    d = law.spikes;
    d.resize(static_cast<std::size_t>(n), law.base);
  }
  return d;
}

std::vector<double> file_values(const MatrixSpec& spec) { return read_number_file(spec); }

bool file_matrix_per_size(const MatrixSpec& spec) {
  return spec.file.path.find("{N}") != std::string::npos;
}

std::string file_matrix_path(const MatrixSpec& spec, Index n) {
  std::string path = spec.file.path;
  const std::string size = std::to_string(n);
  for (std::size_t at = path.find("{N}"); at != std::string::npos; at = path.find("{N}", at)) {
    path.replace(at, 3, size);
    at += size.size();
  }
  return path;
}

std::shared_ptr<const matrix_file::Matrix> file_matrix_at(const MatrixSpec& spec, Index n) {
  const std::string path = file_matrix_path(spec, n);
  std::shared_ptr<const matrix_file::Matrix> m;
  try {
    m = matrix_file::read_shared(path, spec.file.dataset);
  } catch (const InputError& e) {
    fail(spec, e.what());
  }
  const std::string where = "matrix file '" + path + "': ";
  const std::string shape = std::to_string(m->rows) + " × " + std::to_string(m->cols);
  if (m->rows != m->cols || m->rows == 0) {
    fail(spec, where + "holds a " + shape + " matrix; a matrix in an expression must be square");
  }
  if (file_matrix_per_size(spec) && m->rows != n) {
    fail(spec, where + "holds " + shape + ", but it is the file for size N = " + std::to_string(n) +
                   "; write the N × N matrix there");
  }
  if (!file_matrix_per_size(spec) && n % m->rows != 0) {
    fail(spec, where + "holds " + shape + "; the sizes must be multiples of " +
                   std::to_string(m->rows) + " (got N = " + std::to_string(n) +
                   "), or give one file per size with {N} in the path");
  }
  // Self-adjoint up to rounding: |A − A^*| ≤ 1e-12 max|A| entrywise (common practice for a
  // matrix computed in floating point, e.g. X X^T from a BLAS product).
  double largest = 0.0, asymmetry = 0.0;
  Index worst_i = 0, worst_j = 0;
  for (Index j = 0; j < m->cols; ++j) {
    for (Index i = j; i < m->rows; ++i) {
      const double gap = m->complex ? std::abs(m->values(i, j) - std::conj(m->values(j, i)))
                                    : std::abs(m->real(i, j) - m->real(j, i));
      largest = std::max(largest, m->complex ? std::abs(m->values(i, j)) : std::abs(m->real(i, j)));
      if (gap > asymmetry) {
        asymmetry = gap;
        worst_i = i;
        worst_j = j;
      }
    }
  }
  if (asymmetry > 1e-12 * largest) {
    fail(spec, where + "is not self-adjoint: entries (" + std::to_string(worst_i + 1) + ", " +
                   std::to_string(worst_j + 1) + ") and (" + std::to_string(worst_j + 1) + ", " +
                   std::to_string(worst_i + 1) + ") differ by " + num(asymmetry) +
                   "; freegap reads real symmetric or complex Hermitian matrices (write (A + A^*)/2)");
  }
  if (m->complex != spec.file.complex) {
    fail(spec, where + "holds " + (m->complex ? "complex" : "real") + " entries where the file for N = " +
                   std::to_string(spec.file.reference_size) + " holds " +
                   (spec.file.complex ? "complex" : "real") + " ones; make them all one kind");
  }
  return m;
}

std::vector<Atom> file_law_atoms(const MatrixSpec& spec, std::vector<std::size_t>* counts) {
  const std::vector<double> values = file_values(spec);  // sorted
  const auto k = static_cast<double>(values.size());
  std::vector<Atom> out;
  if (counts != nullptr) counts->clear();
  for (std::size_t i = 0; i < values.size();) {
    std::size_t j = i;
    while (j < values.size() && values[j] == values[i]) ++j;
    out.push_back({values[i], static_cast<double>(j - i) / k});
    if (counts != nullptr) counts->push_back(j - i);
    i = j;
  }
  return out;
}

}  // namespace freegap::declarations
