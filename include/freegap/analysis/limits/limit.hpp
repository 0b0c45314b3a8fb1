// The deterministic limit of a job's model: which law its spectrum converges to, by which rule,
// and the exact limit moments beside it.
//
// Rules, tried on the expression's expansion into monomials (expr::Expression::expansion), with
// each monomial read as one free term:
//   - one self-adjoint matrix a·X + b: GUE, GOE, Wigner and β-Hermite → semicircle (Wigner 1955);
//     Wishart and β-Laguerre → Marchenko–Pastur(c) (Marchenko & Pastur 1967); a deterministic
//     diagonal → its own law (atoms, uniform, semicircle or Marchenko–Pastur quantiles);
//   - a Haar conjugation U D U^* (U Haar unitary or orthogonal, D self-adjoint) → a free copy of
//     the law of D (Voiculescu 1991);
//   - the powers of one self-adjoint matrix, p(X) or p(U X U^*) with p of degree ≥ 2, gathered
//     into one term → the image of X's law under p (atoms to atoms; the continuous part by the
//     change of variables on each piece where p is monotone, so no mass is lost where the
//     density is infinite; common practice);
//   - U + U^* → arcsine; a sum of d terms U_i + U_i^* → Kesten–McKay of degree 2d (Kesten 1959;
//     McKay 1981);
//   - X Y X with X and Y free, X semicircular or a deterministic diagonal, Y with a law on
//     [0, ∞) → law(X²) ⊠ law(Y) (Voiculescu 1987; law(X²) = free Poisson for a semicircular X);
//   - a sum of such terms that are free of each other (every random matrix and every Haar
//     unitary in one term only; deterministic matrices unconjugated in one term only) → the free
//     additive convolution of their laws (Voiculescu 1986; Belinschi & Bercovici 2007);
//   - singular values of a product G_1 ⋯ G_s of distinct square Ginibre matrices → √ of the
//     Fuss–Catalan law π^{⊠s} (Banica, Belinschi, Capitaine & Collins 2011; s = 1: the
//     quarter-circle law).
// Any other self-adjoint expression (eigenvalues) goes to the general solver for polynomials in
// free variables (polynomial_limit.hpp: linearization and operator-valued subordination). What
// neither covers gets a plain sentence saying why no predictor applies, and the finite-N data is
// still reported.
#pragma once

#include <string>
#include <vector>

#include "freegap/analysis/limits/laws.hpp"
#include "freegap/analysis/limits/outliers.hpp"
#include "freegap/expr.hpp"

namespace freegap::analysis {

struct DerivedLimit {
  LawPtr law;          ///< the limit law of the computed spectrum; null when no rule applies
  std::string rule;    ///< the rule and its source, when law is set
  std::string reason;  ///< why no predictor applies, when law is null
  /// Key of the model in the published-rate table ("gue", "goe", "wigner", "wishart_complex",
  /// "wishart_real", "haar_unitary_sum", "haar_orthogonal_sum"), or empty.
  std::string rate_key;
  /// Exact limit moments m_0..m_K (free cumulants over non-crossing partitions), when every
  /// matrix has them and the spectrum is the eigenvalues; else empty and moments_note says why.
  std::vector<double> exact_moments;
  std::vector<std::string> exact_moment_text;  ///< the same as exact rationals
  std::string moments_note;
  /// What the law is known to miss, when something (the polynomial solver's density and point
  /// masses adding up to less or more than 1); shown beside the law by `limit` and `report`.
  std::string law_note;
  /// The outliers of a spiked diagonal (outliers.hpp); `law` is then the bulk's law.
  OutlierPrediction outliers;
  /// > 0: `law` is the free deterministic equivalent formed at this size (derive_limit), and each
  /// other size has its own; 0 for an N → ∞ law.
  Eigen::Index deterministic_size = 0;
};

/// The eigenvalue law of a matrix read from a file (ensemble "file"): the matrix of its
/// reference size (the largest of the job; its only matrix for one file), made self-adjoint as
/// the sampler makes it, its eigenvalues by LAPACK; each distinct eigenvalue once, ascending,
/// with weight (its count)/n (eigenvalues within 8 n ε max|λ| of their neighbour count as one,
/// at their mean). With one file this is the eigenvalue law at every size (k copies on
/// the diagonal); with a file per size, the law at the largest. `counts` receives the counts.
/// Computed once per file in a process. InputError when the file cannot be read.
std::vector<declarations::Atom> file_matrix_eigenvalue_law(
    const declarations::MatrixSpec& spec, std::vector<std::size_t>* counts = nullptr);

/// The eigenvalue law of a self-adjoint matrix's eigenvalues (ascending): each distinct value
/// once with weight (its count)/n, eigenvalues within 8 n ε max|λ| of their neighbour counting as
/// one, at their mean (LAPACK's backward error; common practice). `counts` receives the counts.
std::vector<declarations::Atom> eigenvalue_atoms(const Eigen::VectorXd& ascending,
                                                 std::vector<std::size_t>* counts = nullptr);

/// The limit of `expression` (as checked for the run) with its exact moments up to max_moment.
/// Never throws for a model it cannot predict: it says so in `reason`.
///
/// `deterministic_size` > 0: when two or more deterministic matrices (diagonal, Toeplitz, Jacobi,
/// from files) enter outside Haar conjugations, they are not free of each other and have no
/// N → ∞ law together; if they make up terms of their own (P = R + Q, Q a polynomial in them
/// only, R in the random matrices only), the law is the free deterministic equivalent at that
/// size (Speicher & Vargas 2012): law(R) ⊞ the eigenvalue law of Q formed at that size. The rule
/// says so. 0: no such law (the reason says to give a size).
DerivedLimit derive_limit(const expr::Expression& expression, int max_moment,
                          Eigen::Index deterministic_size = 0);

}  // namespace freegap::analysis
