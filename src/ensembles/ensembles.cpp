// Samplers for the declared matrices; normalisations in include/freegap/ensembles.hpp.
#include "freegap/ensembles.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <numeric>
#include <sstream>

#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/rng.hpp"

namespace freegap::ensembles {

namespace {

constexpr double pi = 3.14159265358979323846;

struct KindName {
  Kind kind;
  const char* name;
};
constexpr std::array<KindName, 12> kind_names{{
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
}};

std::string num(double x) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.12g", x);
  return buf;
}

[[noreturn]] void fail(const MatrixSpec& spec, const std::string& what) {
  throw InputError("matrix '" + spec.name + "': " + what);
}

bool has_ratio(Kind k) {
  return k == Kind::wishart_complex || k == Kind::wishart_real || k == Kind::ginibre_complex ||
         k == Kind::ginibre_real || k == Kind::beta_laguerre;
}

// ---- quantiles of the continuous laws -------------------------------------------------------

// Standard semicircle CDF on [−2, 2]: F(x) = 1/2 + x√(4−x²)/(4π) + arcsin(x/2)/π
// (docs/check-values.md §1.1).
double semicircle_cdf(double x) {
  if (x <= -2.0) return 0.0;
  if (x >= 2.0) return 1.0;
  return 0.5 + x * std::sqrt(4.0 - x * x) / (4.0 * pi) + std::asin(x / 2.0) / pi;
}
double semicircle_density(double x) {
  return std::abs(x) >= 2.0 ? 0.0 : std::sqrt(4.0 - x * x) / (2.0 * pi);
}

// Marchenko–Pastur(c) absolutely continuous part on [a, b], a = (1−√c)², b = (1+√c)², density
// √((b−t)(t−a))/(2πct) (Marchenko & Pastur 1967). Its antiderivative (checked against scipy
// quadrature to 1e-12 when this was written) is
//   P(t) = [r + (a+b)/2·asin((2t−a−b)/(b−a)) − √(ab)·asin(((a+b)t − 2ab)/(t(b−a)))]/(2πc),
// r = √((b−t)(t−a)); both arcsines are written as atan2 so they stay accurate near the edges.
struct MarchenkoPastur {
  double c, a, b;
  explicit MarchenkoPastur(double ratio)
      : c(ratio), a((1 - std::sqrt(ratio)) * (1 - std::sqrt(ratio))),
        b((1 + std::sqrt(ratio)) * (1 + std::sqrt(ratio))) {}
  double antiderivative(double t) const {
    const double r = std::sqrt(std::max((b - t) * (t - a), 0.0));
    double v = r + 0.5 * (a + b) * std::atan2(2 * t - a - b, 2 * r);
    if (a > 0) v -= std::sqrt(a * b) * std::atan2((a + b) * t - 2 * a * b, 2 * std::sqrt(a * b) * r);
    return v / (2 * pi * c);
  }
  double atom() const { return c > 1 ? 1 - 1 / c : 0.0; }
  double cdf(double x) const {
    if (x < 0) return 0.0;
    if (x <= a) return atom();
    if (x >= b) return 1.0;
    const double continuous_mass = 1.0 - atom();
    const double lo = antiderivative(a), hi = antiderivative(b);
    return atom() + continuous_mass * (antiderivative(x) - lo) / (hi - lo);
  }
  double density(double x) const {
    if (x <= a || x >= b) return 0.0;
    return std::sqrt((b - x) * (x - a)) / (2 * pi * c * x);
  }
};

// Quantile by Newton's method safeguarded with bisection on [lo, hi] (common practice).
template <class Cdf, class Density>
double invert_cdf(double p, double lo, double hi, Cdf cdf, Density density) {
  double x = 0.5 * (lo + hi);
  for (int it = 0; it < 200; ++it) {
    const double f = cdf(x) - p;
    if (f > 0) hi = x; else lo = x;
    const double d = density(x);
    double next = d > 0 ? x - f / d : 0.5 * (lo + hi);
    if (!(next > lo && next < hi)) next = 0.5 * (lo + hi);
    if (std::abs(next - x) <= 1e-15 * (1 + std::abs(x)) || hi - lo <= 1e-15 * (1 + std::abs(x))) {
      return next;
    }
    x = next;
  }
  return x;
}

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

void require_size(const MatrixSpec& spec, Index n) {
  if (n <= 0) fail(spec, "size N must be positive (got " + std::to_string(n) + ")");
}

}  // namespace

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
         k == Kind::beta_hermite || k == Kind::beta_laguerre;
}
bool is_unitary(Kind k) { return k == Kind::haar_unitary || k == Kind::haar_orthogonal; }
bool is_real(Kind k) {
  return k == Kind::goe || k == Kind::wigner_rademacher || k == Kind::wishart_real ||
         k == Kind::ginibre_real || k == Kind::haar_orthogonal || k == Kind::diagonal ||
         k == Kind::beta_hermite || k == Kind::beta_laguerre;
}
bool is_random(Kind k) { return k != Kind::diagonal; }

Index companion_size(Index n, double ratio) {
  return static_cast<Index>(std::llround(static_cast<double>(n) / ratio));
}

Shape shape(const MatrixSpec& spec, Index n) {
  if (spec.kind == Kind::ginibre_complex || spec.kind == Kind::ginibre_real) {
    return {n, companion_size(n, spec.ratio)};
  }
  return {n, n};
}

Index Sample::rows() const {
  switch (storage) {
    case Storage::real_dense:
      return real.rows();
    case Storage::complex_dense:
      return complex.rows();
    case Storage::real_diagonal:
      return diagonal.size();
  }
  return 0;
}

Index Sample::cols() const {
  switch (storage) {
    case Storage::real_dense:
      return real.cols();
    case Storage::complex_dense:
      return complex.cols();
    case Storage::real_diagonal:
      return diagonal.size();
  }
  return 0;
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

Sampler::Sampler(MatrixSpec spec) : spec_(std::move(spec)) {
  if (spec_.name.empty()) throw InputError("a matrix has an empty name; give every matrix a name");
  if (has_ratio(spec_.kind) && !(std::isfinite(spec_.ratio) && spec_.ratio > 0)) {
    fail(spec_, "ratio c = N/M must be a positive finite number (got " + num(spec_.ratio) + ")");
  }
  if ((spec_.kind == Kind::beta_hermite || spec_.kind == Kind::beta_laguerre) &&
      !(std::isfinite(spec_.beta) && spec_.beta > 0)) {
    fail(spec_, "beta must be a positive finite number (got " + num(spec_.beta) + ")");
  }
  if (spec_.kind != Kind::diagonal) return;
  const DiagonalLaw& law = spec_.diagonal;
  switch (law.kind) {
    case DiagonalLawKind::atoms: {
      if (law.atoms.empty()) fail(spec_, "the atom list is empty; give at least one value and weight");
      double total = 0;
      for (const Atom& atom : law.atoms) {
        if (!std::isfinite(atom.value)) fail(spec_, "atom value must be finite");
        if (!(atom.weight >= 0) || !std::isfinite(atom.weight)) {
          fail(spec_, "atom weight must be non-negative (got " + num(atom.weight) + " for value " +
                          num(atom.value) + ")");
        }
        total += atom.weight;
      }
      if (std::abs(total - 1.0) > 1e-12) {
        fail(spec_, "atom weights sum to " + num(total) + ", not 1; rescale them");
      }
      break;
    }
    case DiagonalLawKind::uniform:
      if (!(std::isfinite(law.low) && std::isfinite(law.high) && law.low < law.high)) {
        fail(spec_, "uniform law needs finite low < high (got low = " + num(law.low) +
                        ", high = " + num(law.high) + ")");
      }
      break;
    case DiagonalLawKind::semicircle_quantiles:
      if (!(std::isfinite(law.variance) && law.variance > 0)) {
        fail(spec_, "semicircle variance must be positive (got " + num(law.variance) + ")");
      }
      break;
    case DiagonalLawKind::marchenko_pastur_quantiles:
      if (!(std::isfinite(law.ratio) && law.ratio > 0)) {
        fail(spec_, "Marchenko-Pastur ratio must be positive (got " + num(law.ratio) + ")");
      }
      break;
    case DiagonalLawKind::file:
      file_values_ = read_number_file(spec_);
      break;
  }
}

std::vector<Atom> file_law_atoms(const MatrixSpec& spec, std::vector<std::size_t>* counts) {
  const std::vector<double> values = read_number_file(spec);  // sorted
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

Eigen::VectorXd Sampler::diagonal_values(Index n) const {
  require_size(spec_, n);
  Eigen::VectorXd d(n);
  const DiagonalLaw& law = spec_.diagonal;
  auto p_of = [n](Index k) { return (static_cast<double>(k) + 0.5) / static_cast<double>(n); };
  switch (law.kind) {
    case DiagonalLawKind::atoms: {
      const auto counts = atom_counts(law.atoms, n);
      Index at = 0;
      for (std::size_t i = 0; i < counts.size(); ++i) {
        d.segment(at, counts[i]).setConstant(law.atoms[i].value);
        at += counts[i];
      }
      break;
    }
    case DiagonalLawKind::uniform:
      for (Index k = 0; k < n; ++k) d(k) = law.low + (law.high - law.low) * p_of(k);
      break;
    case DiagonalLawKind::semicircle_quantiles: {
      const double sigma = std::sqrt(law.variance);
      for (Index k = 0; k < n; ++k) {
        d(k) = sigma * invert_cdf(p_of(k), -2.0, 2.0, semicircle_cdf, semicircle_density);
      }
      break;
    }
    case DiagonalLawKind::marchenko_pastur_quantiles: {
      const MarchenkoPastur mp(law.ratio);
      for (Index k = 0; k < n; ++k) {
        const double p = p_of(k);
        d(k) = p <= mp.atom() ? 0.0
                              : invert_cdf(
                                    p, mp.a, mp.b, [&](double x) { return mp.cdf(x); },
                                    [&](double x) { return mp.density(x); });
      }
      break;
    }
    case DiagonalLawKind::file: {
      const auto k_values = static_cast<double>(file_values_.size());
      for (Index k = 0; k < n; ++k) {
        // Left-continuous inverse of the empirical CDF: the ⌈pK⌉-th smallest value.
        auto idx = static_cast<std::size_t>(std::ceil(p_of(k) * k_values)) - 1;
        d(k) = file_values_[std::min(idx, file_values_.size() - 1)];
      }
      break;
    }
  }
  return d;
}

Sample Sampler::draw(Index n, std::uint64_t seed, std::uint64_t trial) const {
  require_size(spec_, n);
  Sample out;
  if (spec_.kind == Kind::diagonal) {
    out.storage = Sample::Storage::real_diagonal;
    out.diagonal = diagonal_values(n);
    return out;
  }
  rng::Stream stream({seed, spec_.name, static_cast<std::uint64_t>(n), trial});
  const double inv_sqrt_n = 1.0 / std::sqrt(static_cast<double>(n));
  Index m = n;
  if (has_ratio(spec_.kind)) {
    m = companion_size(n, spec_.ratio);
    if (m < 1) {
      fail(spec_, "N/ratio = " + num(static_cast<double>(n) / spec_.ratio) +
                      " rounds to 0 columns; use a smaller ratio or a larger N");
    }
  }
  switch (spec_.kind) {
    case Kind::gue: {
      // Lower triangle column by column: H_jj ~ N(0,1), H_ij (i > j) complex normal, E|H_ij|^2 = 1.
      out.storage = Sample::Storage::complex_dense;
      auto& h = out.complex;
      h.resize(n, n);
      for (Index j = 0; j < n; ++j) {
        h(j, j) = stream.normal();
        for (Index i = j + 1; i < n; ++i) h(i, j) = stream.complex_normal();
      }
      linalg::mirror_lower(h);
      h *= inv_sqrt_n;
      break;
    }
    case Kind::goe:
    case Kind::wigner_rademacher: {
      out.storage = Sample::Storage::real_dense;
      auto& h = out.real;
      h.resize(n, n);
      const bool gauss = spec_.kind == Kind::goe;
      for (Index j = 0; j < n; ++j) {
        h(j, j) = gauss ? std::sqrt(2.0) * stream.normal() : 0.0;  // GOE diagonal variance 2
        for (Index i = j + 1; i < n; ++i) h(i, j) = gauss ? stream.normal() : stream.rademacher();
      }
      linalg::mirror_lower(h);
      h *= inv_sqrt_n;
      break;
    }
    case Kind::wishart_complex: {
      Eigen::MatrixXcd x(n, m);
      stream.fill_complex_normal({x.data(), static_cast<std::size_t>(x.size())});
      out.storage = Sample::Storage::complex_dense;
      linalg::herk(x, linalg::Op::none, out.complex, 1.0 / static_cast<double>(m));
      linalg::mirror_lower(out.complex);
      break;
    }
    case Kind::wishart_real: {
      Eigen::MatrixXd x(n, m);
      stream.fill_normal({x.data(), static_cast<std::size_t>(x.size())});
      out.storage = Sample::Storage::real_dense;
      linalg::syrk(x, linalg::Op::none, out.real, 1.0 / static_cast<double>(m));
      linalg::mirror_lower(out.real);
      break;
    }
    case Kind::ginibre_complex: {
      out.storage = Sample::Storage::complex_dense;
      out.complex.resize(n, m);
      stream.fill_complex_normal({out.complex.data(), static_cast<std::size_t>(out.complex.size())});
      out.complex *= 1.0 / std::sqrt(static_cast<double>(m));
      break;
    }
    case Kind::ginibre_real: {
      out.storage = Sample::Storage::real_dense;
      out.real.resize(n, m);
      stream.fill_normal({out.real.data(), static_cast<std::size_t>(out.real.size())});
      out.real *= 1.0 / std::sqrt(static_cast<double>(m));
      break;
    }
    case Kind::haar_unitary: {
      out.storage = Sample::Storage::complex_dense;
      Eigen::MatrixXcd z(n, n);
      stream.fill_complex_normal({z.data(), static_cast<std::size_t>(z.size())});
      if (spec_.haar == HaarMethod::qr) {
        linalg::haar_from_qr(z);
        out.complex = std::move(z);
      } else {
        out.complex = linalg::polar_factor(std::move(z));
      }
      break;
    }
    case Kind::haar_orthogonal: {
      out.storage = Sample::Storage::real_dense;
      Eigen::MatrixXd z(n, n);
      stream.fill_normal({z.data(), static_cast<std::size_t>(z.size())});
      if (spec_.haar == HaarMethod::qr) {
        linalg::haar_from_qr(z);
        out.real = std::move(z);
      } else {
        out.real = linalg::polar_factor(std::move(z));
      }
      break;
    }
    case Kind::diagonal:
      break;
    case Kind::beta_hermite:
    case Kind::beta_laguerre:
      // Reached only through a misuse of the API: the model refuses dense use of these kinds.
      fail(spec_, "has only a tridiagonal model; it cannot be drawn as a dense matrix");
  }
  return out;
}

}  // namespace freegap::ensembles
