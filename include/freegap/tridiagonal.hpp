// Tridiagonal β-ensemble models and observations without diagonalising, for sizes dense methods
// cannot reach (N up to 10^7 in O(N) memory): the β-Hermite and β-Laguerre models of a single
// matrix, and the two-projection model of a·B + b·U B U^* (β-Jacobi corner).
//
// Models (Dumitriu & Edelman 2002, "Matrix models for beta ensembles", J. Math. Phys. 43(11);
// docs/check-values.md §4f), normalised like the dense samplers of
// ensembles.hpp so the same limit laws and finite-N facts apply:
//
//   hermite(β)    X = √(2/β)·H_β/√N, H_β = (1/√2)·tridiag(N(0,2) iid; χ_{β(N−1)}, …, χ_β), i.e.
//                 diag_i = √(2/β)·g_i/√N, off_i = χ_{β(N−1−i)}/√(βN) (0-based i). β = 2 has the
//                 eigenvalue law of the dense `gue`, β = 1 that of the dense `goe` (diagonal
//                 variance 2: E tr X² = 1 + 1/N); any β > 0: E tr X² = 1 + (2/β − 1)/N.
//                 Limit: semicircle on [−2, 2].
//   laguerre(β,c) W = B Bᵀ/(βM), M = ensembles::companion_size(N, c) = round(N/c), B lower
//                 bidiagonal with B_ii = χ_{β(M−i)}, B_{i+1,i} = χ_{β(N−1−i)} (Dumitriu & Edelman's
//                 a = βM/2). β = 1 has the eigenvalue law of the dense `wishart_real`
//                 (W = XXᵀ/M, X N×M), β = 2 that of `wishart_complex`. The tridiagonal entries
//                 come straight from B (diag B_ii² + B_{i,i−1}², off B_ii·B_{i+1,i}); no dense
//                 matrix is formed. Limit: Marchenko–Pastur(c).
//                 When N > M (c > 1) the model needs a > β(N−1)/2, which fails; then the nonzero
//                 eigenvalues of XX^* are those of the M×M matrix X^*X, so the first M rows hold
//                 the M×M model with the roles of N and M swapped (B_ii = χ_{β(N−i)},
//                 B_{i+1,i} = χ_{β(M−1−i)}), still divided by βM, and the last N − M rows are exact
//                 zeros decoupled from it (zero off-diagonal entries). The law is then exactly
//                 that of the dense sampler, including the N − M zero eigenvalues.
//
// Random numbers: one rng::Stream keyed {seed, spec.name, N, trial}, drawn in this order:
// hermite — the N diagonal normals g_0..g_{N−1}, then the N − 1 chi variates off_0..off_{N−2};
// laguerre — for i = 0..m−1 the square B_ii², then (if i < m − 1) B_{i+1,i}², with m = min(N, M).
// The tridiagonal and dense samplers with the same name give matrices with the same eigenvalue
// law, not the same matrices.
//
// Two-projection model (sums a·B + b·U B U^* of a two-valued diagonal B and a Haar U): with
// B = α·I + δ·P, P a rank-k coordinate projection, every such expression (and a·B + b·U C U^* with
// C = γ·I + ε·P on the same coordinates) is c·I + s·P + t·Q, Q = U P U^* (here s = aδ, t = bε,
// c = aα + bγ). When k > N/2 the complement is used: c + sP + tQ = (c + s + t) − s(I − P) −
// t·U(I − P)U^*, so from here on k ≤ N/2 (TwoProjectionSpec → canonical()). With σ_1..σ_k the
// singular values of the k×k corner of U (the cosines of the principal angles between the ranges
// of P and Q; Davis & Kahan 1970, Halmos 1969, from memory), s·P + t·Q is an orthogonal sum of k
// 2×2 blocks [[s + tσ², tσ√(1−σ²)], [tσ√(1−σ²), t(1 − σ²)]] with eigenvalues
//   λ± = ((s + t) ± √((s − t)² + 4 s t σ²))/2     (trace s + t, determinant s t (1 − σ²)),
// and N − 2k zeros (so N − 2k eigenvalues c, or c + s + t in the original k > N/2 terms; checked
// against LAPACK in tests/tridiagonal/test_two_projection.cpp). The same λ± are the eigenvalues
// of [[s, wσ], [wσ, t]] with w = √(st) when st > 0, and of [[s + t, wτ], [wτ, 0]] with
// w = √(−st), τ = √(1 − σ²), when st < 0. So the whole spectrum is that of one N×N symmetric
// tridiagonal matrix: c plus the Golub–Kahan form of the corner bidiagonal B11 (st > 0) or of the
// sine bidiagonal B21 with B21ᵀB21 = I − B11ᵀB11 (st < 0), shuffled (column 0, row 0, column 1,
// …) with diagonal (t, s, t, s, …) or (0, s + t, 0, s + t, …), followed by N − 2k decoupled rows
// c. Every observation of the tridiagonal path then applies unchanged.
//   The corner: the squared singular values of the k×k corner of an N×N Haar unitary (β = 2) or
// orthogonal (β = 1) matrix, k ≤ N/2, have the Jacobi density ∝ Π λ^(β/2·(a+1)−1)
// (1−λ)^(β/2·(b+1)−1) Π|λ_i − λ_j|^β with a = 0, b = N − 2k (Collins 2005 for β = 2; Edelman &
// Sutton 2008 for the p×q blocks of Haar matrices, a = q − p, b = N − p − q). The β-Jacobi matrix
// model of Edelman & Sutton (2008), "The beta-Jacobi matrix model, the CS decomposition, and
// generalized singular value problems", Found. Comput. Math. 8(2), has exactly this law for
// cos²: B11 upper bidiagonal with diagonal (c_k s'_k) and superdiagonal (−s_{k+1} c'_k), rows
// k = m, m − 1, …, 1 (s'_m = 1), where c_k = cos θ_k, c'_k = cos φ_k are independent with
//   c_k² ~ Beta(β/2·(a + k), β/2·(b + k)),   c'_k² ~ Beta(β/2·k, β/2·(a + b + 1 + k));
// The sine block used here, B21 with diagonal (−s_k s'_k) and superdiagonal (−c_{k+1} c'_k), is
// our construction: B11ᵀB11 + B21ᵀB21 = I holds entry by entry (c² + s² = 1, c'² + s'² = 1; the
// off-diagonal terms cancel), so its singular values are √(1 − σ²) with B11's right vectors.
// Signs are dropped (they do not change singular values). Verified against the singular values of dense Haar corners by
// two-sample KS tests (tests/tridiagonal/test_two_projection.cpp).
//
// Random numbers: one rng::Stream keyed {seed, name of U, N, trial}; for j = 0..m−1 (k = m − j):
// cos² θ_k as X/(X + Y) from X ~ Gamma(β/2·(a + k)) then Y ~ Gamma(β/2·(b + k)), then, if j ≥ 1,
// cos² φ_k likewise (X then Y). The model and the dense path have the same eigenvalue law, not the
// same matrices.
//
// Observations: #{λ < x} by the Sturm count (the inertia of the LDLᵀ factorisation of T − xI,
// Sylvester's law; bisection on it: Barth, Martin & Wilkinson 1967), histograms from counts at the
// bin edges (the same bin rule as observe::Histogram), the extremes by bisection, the moments
// (1/N) Tr T^k from the entries, and the operator norm max(|λ_min|, |λ_max|).
#pragma once

#include <Eigen/Core>
#include <cstdint>
#include <span>
#include <string>
#include <utility>
#include <vector>

#include "freegap/observe.hpp"
#include "freegap/rng.hpp"

namespace freegap::tridiagonal {

using Index = Eigen::Index;

enum class Family { hermite, laguerre };

/// One tridiagonal model. `name` keys its random stream, like a dense matrix's name.
struct ModelSpec {
  Family family = Family::hermite;
  double beta = 2.0;   ///< β > 0 (1: real, 2: complex, any other value allowed)
  double ratio = 1.0;  ///< Laguerre only: c = N/M > 0
  std::string name;    ///< stream name
};

/// A real symmetric tridiagonal matrix: diag.size() == N, off.size() == N − 1.
struct Tridiagonal {
  Eigen::VectorXd diag;
  Eigen::VectorXd off;

  Index size() const { return diag.size(); }
};

/// Checks a spec (β and ratio finite and > 0); throws InputError naming the key and the fix.
void validate(const ModelSpec& spec);

/// Samples the normalised model at size n ≥ 1 for (seed, trial). Deterministic in
/// (seed, spec.name, n, trial). Throws InputError on a bad spec or size (n < 1, n ≥ 2^32, or a
/// Laguerre M that rounds to 0).
Tridiagonal sample(const ModelSpec& spec, Index n, std::uint64_t seed, std::uint64_t trial);

/// The matrix scale·T + shift·I, itself tridiagonal (diag scale·d + shift, off scale·e). Its
/// eigenvalues are scale·λ + shift; a negative scale is fine (Sturm counts depend on off² only).
Tridiagonal affine(const Tridiagonal& t, double scale, double shift);

/// Gamma(shape, scale 1) variate, shape > 0: Marsaglia & Tsang (2000), "A simple method for
/// generating gamma variables", ACM TOMS 26(3), for shape ≥ 1; for shape < 1,
/// Gamma(shape + 1)·U^(1/shape) (the boost noted in the same paper). Deterministic in the stream.
double gamma_variate(rng::Stream& stream, double shape);
/// Square of a chi variate with k > 0 degrees of freedom (not necessarily an integer):
/// χ²_k = 2·Gamma(k/2).
double chi_square_variate(rng::Stream& stream, double k);

/// #{λ < x} for every point x, by Sturm counts with the ratio recurrence
/// q_i = (d_i − x) − e_{i−1}²/q_{i−1} (the LDLᵀ pivots of T − xI; counting q_i < 0), vectorised
/// across points. A pivot that is exactly 0 is replaced by +pivmin (tiny): this is the count of
/// T − xI + pivmin·e_i e_iᵀ, a positive semidefinite perturbation, so an eigenvalue exactly at x is
/// not counted as below it — the rule `#{λ < x}` holds at ties, matching observe::Histogram.
/// The ratio form keeps the pivots (not the determinants, which overflow) and an infinite pivot
/// after a zero one propagates harmlessly (e²/∞ = 0) — Kahan's scaled-Sturm-count practice
/// (Kahan 1966, "Accurate eigenvalues of a symmetric tri-diagonal matrix", from memory). Entries
/// beyond 2^±400, whose squares could leave the double range, are first scaled by an exact power
/// of two (points too). Entries must be finite. Points may be in any order (±Inf allowed); NaN
/// points are refused (InputError). O(N · points), vectorised 4-wide on AVX2 CPUs.
std::vector<std::int64_t> counts_below(const Tridiagonal& t, std::span<const double> points);

/// Gershgorin interval [low, high] containing every eigenvalue (common practice).
std::pair<double, double> gershgorin(const Tridiagonal& t);

/// Smallest and largest eigenvalue, each to within tolerance/2 of the eigenvalue of a matrix
/// within a few ulps of T (the Sturm count is backward stable: Kahan 1966; Demmel, Dhillon & Ren
/// 1995, from memory), by multisection: each pass evaluates 8 points per unconverged extreme in
/// one vectorised Sturm sweep, shrinking each bracket 9-fold. Start: Gershgorin. A tolerance
/// below 4 ulps of the spectral bound is raised to it. Throws InputError if tolerance is not > 0
/// or the Gershgorin bound overflows double. O(N·log(width/tolerance)/log 9).
struct Extremes {
  double min = 0.0;
  double max = 0.0;
};
Extremes extremes(const Tridiagonal& t, double tolerance);
double smallest(const Tridiagonal& t, double tolerance);
double largest(const Tridiagonal& t, double tolerance);
/// Operator norm ‖T‖₂ = max(|λ_min|, |λ_max|), from `extremes` (same tolerance).
double operator_norm(const Tridiagonal& t, double tolerance);

/// m_k = (1/N) Tr T^k for k = 0..max_moment (≤ observe::kMaxMomentLimit), from the entries.
/// Method: the rows of T^j (bandwidth j) for j ≤ ⌈K/2⌉ by T^{j+1} = T^j·T on the upper half-band,
/// and Tr T^{2j} = ‖T^j‖_F², Tr T^{2j+1} = ⟨T^j, T^{j+1}⟩_F. Cost O(N·K²): ≈ 0.6·N·K² flops
/// (not O(N·K); measured in RESULTS-tridiagonal.md), memory O(N + K·B) (rows in blocks of
/// B = 2048 with a margin of ⌈K/2⌉ + 2, so each block's rows are exact).
/// Accuracy: T is scaled by a power of two 2^e ≥ its Gershgorin bound (exact), the per-row terms
/// are summed with Neumaier's (1974) compensated sum; a moment too large for double is ±Inf.
/// Throws InputError for max_moment outside 0..kMaxMomentLimit or a non-finite entry.
std::vector<double> moments(const Tridiagonal& t, int max_moment);

/// How observe_tridiagonal_trial transforms the sampled matrix: P = scale·T + shift·I (the runner's affine
/// expressions such as `2 X + 1`), and how precisely it locates the extremes.
struct TrialOptions {
  double scale = 1.0;
  double shift = 0.0;
  /// Bisection tolerance for min and max (absolute, in the units of P).
  double extreme_tolerance = 1e-10;
};

/// One trial observed without diagonalising, into the same record and histogram the dense path
/// produces (observe::observe_spectrum on the eigenvalues of P): histogram from Sturm counts at the
/// bin edges, moments from `moments`, min/max by bisection (started from the bins the histogram
/// found them in), norm = max(|min|, |max|). A non-finite entry, a moment that overflows double, or
/// Sturm counts that are not monotone in x record a failed trial (nothing added to `into`). If the
/// configuration keeps this trial's spectrum, all eigenvalues are computed by LAPACK dsterf
/// (O(N²) time: 110 s at N = 10^5) and kept ascending. Throws InputError for a bad configuration,
/// a config.kind other than eigenvalues, a histogram that does not match the bins, or a
/// non-finite scale/shift.
observe::TrialRecord observe_tridiagonal_trial(const ModelSpec& spec, Index n, std::uint64_t seed,
                                   std::uint64_t trial, const observe::ObserveConfig& config,
                                   observe::Histogram& into, const TrialOptions& options = {});

/// The same for a matrix already sampled (and mapped): the observation half of observe_tridiagonal_trial.
observe::TrialRecord observe_matrix(std::uint64_t trial, const Tridiagonal& p,
                                    const observe::ObserveConfig& config, observe::Histogram& into,
                                    double extreme_tolerance);

/// The two-projection model c·I + s·P + t·U P U^* (see the top of this file): β = 1 (U Haar
/// orthogonal) or 2 (Haar unitary), P the coordinate projection of rank `rank` (0..N).
struct TwoProjectionSpec {
  double beta = 2.0;
  Index rank = 0;     ///< k
  double s = 1.0;     ///< coefficient of P, nonzero
  double t = 1.0;     ///< coefficient of Q = U P U^*, nonzero
  double shift = 0.0; ///< c
  std::string name;   ///< stream name: the Haar matrix's
};
/// Checks β ∈ {1, 2}, 0 ≤ rank ≤ n, 1 ≤ n < 2^32, s, t, shift finite with s, t ≠ 0 (InputError).
void validate(const TwoProjectionSpec& spec, Index n);
/// The same matrix with rank ≤ n/2 (complement when rank > n/2: shift + s + t, −s, −t).
TwoProjectionSpec canonical(const TwoProjectionSpec& spec, Index n);

/// The β-Jacobi bidiagonal corner (magnitudes): B11 (cosines: diagonal, superdiagonal) and B21
/// (sines), each m×m upper bidiagonal, with B11ᵀB11 + B21ᵀB21 = I.
struct JacobiCorner {
  Eigen::VectorXd cos_diag, cos_super, sin_diag, sin_super;
};
/// Samples the corner of size m (0 ≤ 2m ≤ n) of an n×n Haar matrix for (seed, name, n, trial),
/// in the draw order at the top of this file.
JacobiCorner sample_jacobi_corner(double beta, Index corner, Index n, std::uint64_t seed,
                                  std::uint64_t trial, const std::string& name);
/// The N×N tridiagonal matrix with the eigenvalues of c + sP + tQ for this corner (whose size
/// must be min(k, N − k)).
Tridiagonal two_projection_matrix(const TwoProjectionSpec& spec, const JacobiCorner& corner,
                                  Index n);
/// sample_jacobi_corner + two_projection_matrix. O(N) time and memory.
Tridiagonal sample(const TwoProjectionSpec& spec, Index n, std::uint64_t seed,
                   std::uint64_t trial);
/// One trial of the two-projection model observed like observe_tridiagonal_trial (the same
/// record and histogram as the dense path's).
observe::TrialRecord observe_two_projection_trial(const TwoProjectionSpec& spec, Index n,
                                                  std::uint64_t seed, std::uint64_t trial,
                                                  const observe::ObserveConfig& config,
                                                  observe::Histogram& into,
                                                  double extreme_tolerance = 1e-10);

}  // namespace freegap::tridiagonal
