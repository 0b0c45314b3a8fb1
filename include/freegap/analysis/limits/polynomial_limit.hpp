// Limit laws of self-adjoint polynomials in free variables: linearization and operator-valued
// subordination.
//
// What it computes: for a self-adjoint expression P in declared matrices (GUE/GOE/Wigner,
// Wishart, deterministic diagonals, Haar-conjugated U D U^*), the N → ∞ law of P: density,
// CDF, Cauchy transform, support edges (hence the operator-norm limit, by strong convergence:
// Haagerup & Thorbjørnsen 2005; Collins & Male 2014) and moments.
//
// How:
//  1. Reduction (free_polynomial_of): each matrix becomes a free self-adjoint variable (Voiculescu
//     1991). A Haar unitary U that appears only as U D^k U^* (or only as U^* D^k U) with one
//     self-adjoint matrix D is replaced by a new variable with D's law, free from everything else
//     including D itself (U is Haar and independent of the rest).
//  2. Linearization (linearize): a self-adjoint pencil L = b_0 + Σ_i b_i x_i with real symmetric
//     n×n coefficients such that (z − P)^{−1} = [(Λ(z) − L)^{−1}]_{11}, Λ(z) = diag(z, 0, …, 0)
//     (Anderson 2013; Belinschi, Mai & Speicher 2017; docs/check-values.md §4d). A palindromic word
//     (w = w^*) of length k adds k − 1 rows, a pair w, w^* adds 2(k − 1) rows, letters and
//     constants go to the corner.
//  3. Operator-valued Cauchy transform G(β) = E[(β − Σ_i b_i x_i)^{−1}], β = Λ_ε(z) − b_0 with
//     Λ_ε(z) = diag(z, iε, …, iε) (Belinschi, Mai & Speicher 2017). The semicircular variables
//     enter through their covariance η(B) = Σ σ_i² b_i B b_i (Helton, Rashidi Far & Speicher
//     2007: G = (β − η(G))^{−1}); every other variable x_j through its subordination function ω_j,
//     with G = G_{b_j x_j}(ω_j) for each j and Σ_j ω_j = β − η(G) + (m − 1) G^{−1}
//     (the M_n(ℂ)-valued form of Belinschi & Bercovici 2007 for m summands plus a semicircular
//     one). G_{b x}(ω) = ∫ (ω − t b)^{−1} dμ(t) is a finite sum for atoms and, otherwise, exact
//     through a low-rank (Woodbury) reduction to the scalar Cauchy transform of μ.
//     Solve: the averaged fixed-point iteration (HRS) at a distance to the axis where it contracts
//     well, then Newton (finite-difference Jacobian) continued down to the final ε; a point where
//     neither converges is reported as not converged, never as a number.
//  4. Edges: the real-axis solution (ε = 0) is continued from beyond a norm bound towards the
//     support with Newton and step halving; the edge is where the real branch ends (to 1e−9).
//     Solver moments: (1/2πi)∮ z^k G_P(z) dz on a circle around the support (trapezoid rule).
#pragma once

#include <Eigen/Core>
#include <algorithm>
#include <cmath>
#include <complex>
#include <memory>
#include <mutex>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "freegap/analysis/limits/laws.hpp"
#include "freegap/expr.hpp"

namespace freegap::analysis {

/// One free self-adjoint variable of a reduced polynomial.
struct FreeLetter {
  std::string name;           ///< "X1", or "U B U^*" for a Haar-conjugated copy of B
  bool semicircular = false;  ///< enters through the covariance map (HRS)
  double variance = 1.0;      ///< semicircular only
  LawPtr law;                 ///< its law (semicircle too: used for bounds)
  std::vector<Atom> atoms;    ///< non-empty when the law is a finite sum of atoms
};

/// c · x_{i_1} ⋯ x_{i_k} over FreeLetter indices (the empty word is the identity).
struct RealTerm {
  std::complex<double> coefficient = 0.0;  ///< real for expressions; complex allowed in pairs
  std::vector<int> word;
};

/// A self-adjoint polynomial in free self-adjoint variables (each word once; c_{w^*} = conj c_w).
struct FreePolynomial {
  std::vector<FreeLetter> letters;
  std::vector<RealTerm> terms;
  std::string text;  ///< the expression it came from
};

/// The free variables and polynomial of a self-adjoint expression. Throws InputError naming the
/// matrix and the reason when something is not covered: a non-self-adjoint expression, a Ginibre
/// matrix, a Haar unitary that is not only U D^k U^* with one self-adjoint D (or only U^* D^k U),
/// two deterministic diagonals in one product structure (they commute, so they are not free), a
/// diagonal law read from a file, a β-ensemble (tridiagonal model only).
FreePolynomial free_polynomial_of(const expr::Expression& expression);

/// P ≥ 0 for every choice of self-adjoint values of its letters with the letters' laws, proven
/// term by term (a sufficient test, common practice): a constant c ≥ 0; or c > 0 times a word
/// that reads the same backwards, u u^* (even length) or u m u^* with the middle letter's law on
/// [0, ∞) (odd length). X², A B A with B ≥ 0, S W S pass; X³ − 2X, X Y + Y X do not. The solver
/// then never reports a lower edge below 0 (its edge search ends within rounding of 0 there).
bool proven_positive(const FreePolynomial& polynomial);

/// A self-adjoint linear pencil L = b_0 + Σ_i b_i x_i (Hermitian n×n coefficients, real for real
/// polynomials) with
/// P = a − u Q^{−1} v for L = [[a, u], [v, Q]], so that (z − P)^{−1} = [(Λ(z) − L)^{−1}]_{11}.
struct Pencil {
  int size = 0;
  Eigen::MatrixXcd constant;                   ///< b_0
  std::vector<Eigen::MatrixXcd> coefficients;  ///< b_i, one per letter
};

/// The largest pencil the limit solver takes. Its Newton steps form finite-difference Jacobians
/// in the n² entries of G, so the cost climbs steeply with n: `freegap limit -e "X^n - 1"`
/// (pencil n, 10 points) took 2.2 s at n = 4, 14 s at n = 8, 82 s at n = 12 and over 120 s at
/// n = 16 (tests/benchmarks/RESULTS-inputs.md). Polynomial models of studies (anticommutators,
/// X B X + B, quartic potentials) need pencils of 2–10, so 12 leaves room; beyond it `freegap
/// limit` and reports refuse before any solving instead of running for hours.
inline constexpr int kMaxPencilSize = 12;

/// The size n of the pencil linearize builds, without building it (saturating at INT_MAX).
long long pencil_size(const FreePolynomial& polynomial);

/// The pencil of a polynomial (see the header comment for its shape). Throws InputError when it
/// would be larger than kMaxPencilSize.
Pencil linearize(const FreePolynomial& polynomial);
/// The pencil on matrices: the (n·N)×(n·N) matrix with blocks b_0(r,c)·I + Σ_i b_i(r,c)·X_i.
Eigen::MatrixXcd pencil_matrix(const Pencil& pencil, const std::vector<Eigen::MatrixXcd>& xs);
/// The polynomial on matrices (one N×N matrix per letter).
Eigen::MatrixXcd evaluate_polynomial(const FreePolynomial& polynomial,
                                     const std::vector<Eigen::MatrixXcd>& xs);

struct PolynomialLimitOptions {
  /// Distance to the real axis for densities, relative to the norm bound of P.
  double epsilon = 1e-10;
  int max_averaged_steps = 20000;
  int max_newton_steps = 40;
  /// Highest order of exact moments (free-cumulant engine) computed at construction; 0: none.
  int exact_moment_order = 6;
  /// Gauss–Legendre panels (8 nodes each) of the density table behind the CDF, shared among the
  /// bands in proportion to their widths (at least 8 per band).
  int table_panels = 48;
  /// Grid points over [−‖P‖ bound, ‖P‖ bound] on which the bands of the continuous part are
  /// looked for; a band or gap narrower than the grid's spacing can be missed (the law's moment
  /// check and mass note then say so).
  int scan_points = 800;
  /// Work the band search may spend before it gives up with a reason: over all points, the
  /// averaged steps times the fixed point's number d of unknowns plus the Newton steps times d²
  /// (a forward-difference Jacobian; times d when the Jacobian is analytic). The sharpening of each edge gets half of it, past which
  /// an edge keeps its coarse value (about 10⁻⁴ of the norm bound).
  long long scan_work = 50000000;
};

/// What one solve of the operator-valued equation did.
struct SolveReport {
  std::complex<double> z;
  std::complex<double> cauchy;  ///< G_P(z) = [G(Λ(z) − b_0)]_{11}
  int averaged_steps = 0;
  int newton_steps = 0;
  bool converged = false;
  std::string reason;  ///< why not, when not converged
};

/// A density value with how it was obtained.
struct DensityReport {
  double x = 0.0;
  double density = 0.0;  ///< NaN when not converged
  int averaged_steps = 0;
  int newton_steps = 0;
  bool converged = false;
  std::string reason;
};

class OperatorValuedSolver;

/// The limit law of a self-adjoint polynomial in free variables.
class PolynomialLaw final : public Law {
 public:
  PolynomialLaw(FreePolynomial polynomial, std::vector<double> exact_moments,
                PolynomialLimitOptions options);
  ~PolynomialLaw() override;

  /// Density of the continuous part at x; NaN where the solver did not converge.
  double density(double x) const override;
  std::vector<double> densities(std::span<const double> xs) const override;
  /// Densities on a grid (continued along it) with iteration counts and convergence per point.
  std::vector<DensityReport> evaluate(std::span<const double> xs) const;
  double cdf(double x) const override;
  std::complex<double> cauchy(std::complex<double> z) const override;
  /// The solve behind cauchy(z), with its iteration counts (z off the real axis).
  SolveReport solve(std::complex<double> z) const;
  /// Exact moments when known to that order, otherwise the solver's.
  std::vector<double> moments(int k) const override;
  /// m_0..m_k from the exact free-cumulant engine (empty when not available).
  const std::vector<double>& exact_moments() const { return exact_moments_; }
  /// m_0..m_k by the contour integral of the solver's Cauchy transform.
  std::vector<double> solver_moments(int k) const;
  Support support() const override { return support_; }
  std::string describe() const override;

  /// lim ‖P(X_1, …, X_r)‖ = max(|lo|, |hi|) of the support (strong convergence).
  double norm_limit() const;
  int pencil_size() const { return pencil_.size; }
  const Pencil& pencil() const { return pencil_; }
  const FreePolynomial& polynomial() const { return polynomial_; }
  /// Mass of the continuous part found by integrating the density over its bands (1 when there
  /// are no atoms); continuous_mass() + Σ atoms < 1 says that mass was not found.
  double continuous_mass() const;
  /// A point mass (also in support().atoms) whose weight is known only to ± `uncertainty`, above
  /// the solver's accuracy: one on a band that only the band's contour mass less its density
  /// table shows (find_hidden_atom), or one whose weight extrapolation did not settle.
  struct UncertainWeight {
    Atom atom;
    double uncertainty = 0.0;
  };
  const std::vector<UncertainWeight>& uncertain_weights() const { return uncertain_weights_; }
  /// Each band's mass from the contour integral of the Cauchy transform around it (point masses
  /// inside taken out): what the CDF table of the band is scaled to; negative where a solve
  /// failed.
  std::vector<double> band_masses() const;

 private:
  void build_table() const;
  // Point masses: forced ones (dimension count) weighed by extrapolation, then by refine_atom at
  // the constant term and the scan's candidates and band edges; support_.atoms sorted. Returns
  // the places whose extrapolated weight settled to 1e-9.
  std::vector<double> locate_point_masses(std::vector<double> candidates, double from);
  void trim_bands_beside_atoms();
  FreePolynomial polynomial_;
  Pencil pencil_;
  std::vector<double> exact_moments_;
  PolynomialLimitOptions options_;
  std::unique_ptr<OperatorValuedSolver> solver_;
  Support support_;
  std::vector<UncertainWeight> uncertain_weights_;
  double scale_ = 1.0;
  mutable std::once_flag table_once_;
  /// One band's density table: x = lo + w(1 − cos θ)/2 over θ ∈ [0, π].
  struct BandTable {
    double lo = 0.0, width = 0.0;
    std::vector<double> theta;       // panel boundaries
    std::vector<double> integrand;   // density·dx/dθ at the 8 nodes of each panel
    std::vector<double> cumulative;  // mass up to each boundary, from the band's lower edge
    /// A singular point of the density inside the band (build_table): the panel `window`
    /// (−1: none) is [window_lo, window_hi] around `centre`; its mass is a contour integral and,
    /// inside it, the CDF and density follow the laws c·d^{−α}(1 + b·d), d = |x − centre|,
    /// fitted on each side, scaled by `window_scale` to that mass.
    int window = -1;
    double centre = 0.0, window_lo = 0.0, window_hi = 0.0, window_scale = 1.0;
    double left_c = 0.0, left_alpha = 0.0, left_b = 0.0;
    double right_c = 0.0, right_alpha = 0.0, right_b = 0.0;
    /// The band's mass from the contour integral of G (exact to the solver's accuracy), and the
    /// density table's own integral before it was scaled to that mass.
    double exact_mass = -1.0, table_mass = 0.0;
    /// The contour's first moment ∫ t dμ over the band (point masses known before excluded), and
    /// a point mass at or in the band that only the difference between contour and table shows
    /// (find_hidden_atom).
    double exact_first = 0.0;
    std::optional<Atom> hidden_atom;
    /// The table's substitution x = lo + width·(1 − cos θ)/2, and its inverse (clamped to the band).
    double x_of(double theta) const { return lo + 0.5 * width * (1.0 - std::cos(theta)); }
    double theta_of(double x) const {
      return std::acos(std::clamp(1.0 - 2.0 * (x - lo) / width, -1.0, 1.0));
    }
  };
  void find_hidden_atom(BandTable& table, double table_first) const;
  // The band's table from the densities at its nodes (from `node` on), less the shares of the
  // point masses known, and of `without` when given; returns the table's first moment.
  double integrate_band(BandTable& table, const std::vector<DensityReport>& ds,
                        const std::vector<double>& jacobian, std::size_t node,
                        const Atom* without) const;
  std::vector<DensityReport> solve_densities(std::span<const double> xs) const;
  void solve_chunk(std::span<const double> xs, std::span<DensityReport> out) const;
  // A window around a singular point `centre` of the density, on the sides asked for; at a band's
  // end (one side) its contour crosses the axis `beyond` the end.
  void add_singular_window(BandTable& table, double centre, bool left_side, bool right_side,
                           double beyond) const;
  void add_end_window(BandTable& table, std::size_t band) const;
  std::pair<double, double> neighbours(std::size_t band, double apart) const;
  // The nodes of every table's panels (the window's excepted), in order, with dx/dθ.
  void table_nodes(std::vector<double>& xs, std::vector<double>& jacobian) const;
  bool split_unresolved_panels(const std::vector<DensityReport>& ds,
                               const std::vector<double>& jacobian, double c0) const;
  static double window_mass(const BandTable& table, double x);
  void set_exact_mass(BandTable& table, std::size_t band) const;
  static void grade_towards(BandTable& table, double centre);
  void fill_tables(const std::vector<DensityReport>& nodes,
                   const std::vector<double>& jacobian) const;
  mutable std::vector<BandTable> tables_;
  mutable double mass_ = 1.0;
};

/// The limit law of a self-adjoint expression in declared matrices by linearization and
/// operator-valued subordination. Throws InputError with a plain reason when the expression or
/// one of its matrices is not covered (which and why).
std::shared_ptr<const PolynomialLaw> polynomial_limit(const expr::Expression& e,
                                                      PolynomialLimitOptions options = {});

}  // namespace freegap::analysis
