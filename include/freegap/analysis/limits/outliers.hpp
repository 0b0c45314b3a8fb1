// Outliers of finite-rank perturbations: where the eigenvalues that a spiked diagonal pushes out of
// the bulk converge, and below which strength there are none.
//
// A spiked diagonal S (declarations.hpp, law "spiked": r values s_i, every other entry b) has the
// point mass at b as its limit law, so the bulk of P is the limit law ν that limit.hpp derives with
// S replaced by b. The spikes move single eigenvalues. Two forms are predicted, from ν alone:
//
//  - additive, P = X + c·S (+ a constant), X a sum of a polynomial in matrices whose law is
//    invariant under unitary conjugation (GUE, Wishart; orthogonal for GOE and real Wishart) and of
//    Haar conjugations U D U^* of deterministic matrices, or one Wigner matrix; S in no other
//    term. With θ_i = c·(s_i − b), an eigenvalue converges to each ρ outside the support of ν with
//    G_ν(ρ) = 1/θ_i, G the Cauchy transform; none when 1/θ_i is beyond G's value at the support's
//    edge (G infinite at a hard edge: every spike separates) (Benaych-Georges & Nadakuditi 2011,
//    Adv. Math. 227, Thm 2.1; for Wigner matrices Péché 2006 and Féral & Péché 2007 (GUE,
//    ρ = θ + 1/θ for θ > 1), Capitaine, Donati-Martin & Féral 2009 and Pizzo, Renfrew & Soshnikov
//    2013 (general entries)).
//  - multiplicative, P = c·S X S with X one Wishart matrix (a sample covariance with population
//    covariance S², b ≠ 0, c > 0). With θ_i = (s_i/b)² − 1, the outliers are the ρ outside the
//    support of ν with T_ν(ρ) = 1/θ_i, T(z) = z·G(z) − 1 (Benaych-Georges & Nadakuditi 2011,
//    Thm 2.3); for the Marchenko–Pastur law this is the location ℓ(1 + c/(ℓ − 1)) above the
//    threshold ℓ > 1 + √c of Baik, Ben Arous & Péché 2005 and Baik & Silverstein 2006.
//
// Every other expression with a spiked diagonal gets a sentence saying why no prediction applies.
#pragma once

#include <string>
#include <vector>

#include "freegap/analysis/limits/laws.hpp"
#include "freegap/expr.hpp"

namespace freegap::analysis {

struct PredictedOutlier {
  double spike = 0.0;      ///< s_i as declared
  double theta = 0.0;      ///< the strength θ_i the rule uses
  double threshold = 0.0;  ///< the smallest |θ| of θ_i's sign that separates an eigenvalue
  bool separates = false;  ///< |θ_i| beyond the threshold
  double location = 0.0;  ///< the limit ρ_i of the outlier (NaN when it does not separate)
};

struct OutlierPrediction {
  bool spiked = false;  ///< the expression has a spiked diagonal
  std::string rule;     ///< the form and the theorem, when predicted
  std::string reason;   ///< why there is no prediction, when spiked and none
  std::vector<PredictedOutlier> outliers;  ///< one per spike value, in the declared order
  /// The limits of the largest and the smallest eigenvalue: the outermost separated outlier on
  /// each side, else ν's edge (NaN without a prediction).
  double largest = 0.0;
  double smallest = 0.0;
  bool predicted() const { return spiked && reason.empty(); }
};

/// The outliers of `expression` (as checked for the run) against its bulk law ν (the limit of the
/// expression with every spiked diagonal at its base). Never throws for an expression it cannot
/// predict: it says why in `reason`.
OutlierPrediction predict_outliers(const expr::Expression& expression, const Law& bulk);

}  // namespace freegap::analysis
