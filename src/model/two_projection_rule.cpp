// When an expression is the two-projection model c + s·P + t·U P U^* (include/freegap/model.hpp,
// two_projection_form; the algebra is at the top of include/freegap/tridiagonal.hpp).
#include <algorithm>
#include <cmath>
#include <optional>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/errors.hpp"
#include "freegap/model.hpp"
#include "freegap/tridiagonal.hpp"

namespace freegap::model {
namespace {

using ensembles::Kind;

// A diagonal of finitely many atoms taking exactly two distinct values: α at atom 0, α + δ at
// the others that differ from it.
bool two_valued(const ensembles::MatrixSpec& spec) {
  if (spec.kind != Kind::diagonal || spec.diagonal.kind != ensembles::DiagonalLawKind::atoms) {
    return false;
  }
  const auto& atoms = spec.diagonal.atoms;
  if (atoms.empty()) return false;
  const auto differs = [&](const ensembles::Atom& a) { return a.value != atoms[0].value; };
  const auto other = std::find_if(atoms.begin(), atoms.end(), differs);
  if (other == atoms.end()) return false;
  return std::all_of(atoms.begin(), atoms.end(), [&](const ensembles::Atom& a) {
    return a.value == atoms[0].value || a.value == other->value;
  });
}

// (α, δ) of a two-valued diagonal: D = α·I + δ·P with P on the atoms whose value is not atom 0's.
std::pair<double, double> offset_and_step(const ensembles::MatrixSpec& spec) {
  const auto& atoms = spec.diagonal.atoms;
  for (const auto& a : atoms) {
    if (a.value != atoms[0].value) return {atoms[0].value, a.value - atoms[0].value};
  }
  return {atoms[0].value, 0.0};
}

// Whether two two-valued diagonals put their values on the same coordinates at every N: the same
// weights in the same order (atom_counts depends on nothing else) and the same pattern of which
// atoms equal atom 0.
bool same_blocks(const ensembles::MatrixSpec& a, const ensembles::MatrixSpec& b) {
  const auto& x = a.diagonal.atoms;
  const auto& y = b.diagonal.atoms;
  if (x.size() != y.size()) return false;
  for (std::size_t i = 0; i < x.size(); ++i) {
    if (x[i].weight != y[i].weight) return false;
    if ((x[i].value == x[0].value) != (y[i].value == y[0].value)) return false;
  }
  return true;
}

// The terms of the expansion: constants, D and U D U^* (or U^* D U throughout).
struct Terms {
  double constant = 0.0;
  std::vector<std::pair<int, double>> plain, conjugated;  // (diagonal letter, coefficient)
  int haar = -1;
  bool adjoint_first = false;
};

std::optional<Terms> collect(const std::vector<expr::Monomial>& expansion,
                             const std::vector<ensembles::MatrixSpec>& declared) {
  Terms terms;
  const auto diagonal = [&](const std::pair<int, bool>& l) {
    return !l.second && two_valued(declared[static_cast<std::size_t>(l.first)]);
  };
  for (const auto& m : expansion) {
    const auto& w = m.letters;
    if (w.empty()) {
      terms.constant += m.coefficient.real();
    } else if (w.size() == 1 && diagonal(w[0])) {
      terms.plain.emplace_back(w[0].first, m.coefficient.real());
    } else if (w.size() == 3 && diagonal(w[1]) && w[0].first == w[2].first &&
               w[0].second != w[2].second) {
      const Kind kind = declared[static_cast<std::size_t>(w[0].first)].kind;
      if (kind != Kind::haar_unitary && kind != Kind::haar_orthogonal) return std::nullopt;
      if (terms.haar >= 0 && (terms.haar != w[0].first || terms.adjoint_first != w[0].second)) {
        return std::nullopt;  // two Haar letters, or U B U^* beside U^* B U
      }
      terms.haar = w[0].first;
      terms.adjoint_first = w[0].second;
      terms.conjugated.emplace_back(w[1].first, m.coefficient.real());
    } else {
      return std::nullopt;
    }
  }
  if (terms.plain.empty() || terms.conjugated.empty()) return std::nullopt;
  return terms;
}

}  // namespace

std::optional<tridiagonal::TwoProjectionSpec> two_projection_form(const expr::Expression& e,
                                                                  Index n) {
  if (e.spectrum() != expr::Spectrum::eigenvalues) return std::nullopt;
  std::vector<expr::Monomial> expansion;
  try {
    expansion = e.expansion(64);
  } catch (const Error&) {
    return std::nullopt;  // more terms than the form has: not this path
  }
  if (!expr::real_coefficients(expansion)) return std::nullopt;  // collect reads real parts
  const auto& declared = e.declared();
  const auto terms = collect(expansion, declared);
  if (!terms) return std::nullopt;
  // Every diagonal is α·I + δ·P for the P of the first one.
  const auto& reference = declared[static_cast<std::size_t>(terms->plain.front().first)];
  tridiagonal::TwoProjectionSpec spec;
  spec.shift = terms->constant;
  spec.s = 0.0;
  spec.t = 0.0;
  const auto add = [&](const std::vector<std::pair<int, double>>& list, double& coefficient) {
    for (const auto& [letter, a] : list) {
      const auto& d = declared[static_cast<std::size_t>(letter)];
      if (!same_blocks(reference, d)) return false;
      const auto [alpha, delta] = offset_and_step(d);
      spec.shift += a * alpha;
      coefficient += a * delta;
    }
    return true;
  };
  if (!add(terms->plain, spec.s) || !add(terms->conjugated, spec.t)) return std::nullopt;
  if (spec.s == 0.0 || spec.t == 0.0 || !std::isfinite(spec.s) || !std::isfinite(spec.t) ||
      !std::isfinite(spec.shift)) {
    return std::nullopt;
  }
  const auto counts = ensembles::atom_counts(reference.diagonal.atoms, n);
  spec.rank = 0;
  for (std::size_t i = 0; i < counts.size(); ++i) {
    if (reference.diagonal.atoms[i].value != reference.diagonal.atoms[0].value) {
      spec.rank += counts[i];
    }
  }
  const auto& u = declared[static_cast<std::size_t>(terms->haar)];
  spec.beta = u.kind == Kind::haar_unitary ? 2.0 : 1.0;
  spec.name = u.name;
  return spec;
}

}  // namespace freegap::model
