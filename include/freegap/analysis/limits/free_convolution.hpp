// Free additive and multiplicative convolution of limit laws by analytic subordination, and the
// moment / free-cumulant conversions that give their exact moments.
#pragma once

#include <array>
#include <complex>
#include <memory>
#include <mutex>
#include <span>
#include <string>
#include <vector>

#include "freegap/analysis/limits/laws.hpp"

namespace freegap::analysis {

/// Knobs of the subordination solver.
struct SubordinationOptions {
  /// Distance to the real axis for Stieltjes inversion, relative to the width of the support of
  /// the result (absolute distance = epsilon · max(1, width)). The density is then polished to the
  /// limit ε → 0 by Newton where the subordination function stays off the axis (the bulk).
  double epsilon = 1e-10;
  int max_averaged_steps = 2000;
  int max_newton_steps = 200;
};

/// One solve of the subordination equation at a point z.
struct SubordinationPoint {
  std::complex<double> z;       // the point (for ⊠: the point x + iε, not 1/z)
  std::complex<double> omega1;  // subordination function of the first law
  std::complex<double> omega2;  // subordination function of the second law
  std::complex<double> cauchy;  // G of the convolution at z
  int averaged_steps = 0;       // averaged fixed-point steps taken (0 for a warm start)
  int newton_steps = 0;
};

/// A law obtained by subordination: density by Stieltjes inversion (continued along a grid),
/// CDF by adaptive Gauss–Legendre on a graded table, quantiles by bisection on the CDF.
class SubordinatedLaw : public Law {
 public:
  double density(double x) const override;
  std::vector<double> densities(std::span<const double> xs) const override;
  double cdf(double x) const override;
  std::complex<double> cauchy(std::complex<double> z) const override;
  Support support() const override { return support_; }
  /// Solve at z off the axis; `start` (in the right half-plane) warms Newton, else (or when
  /// Newton from it fails and `cold` is true) a cold start. NumericalError if that fails.
  virtual SubordinationPoint solve(std::complex<double> z,
                                   const std::complex<double>* start = nullptr,
                                   bool cold = true) const = 0;
  /// solve(), and where it fails, continuation along the vertical line from far above the axis
  /// down to z, each step warm-started from the last (the fixed point moves continuously with z;
  /// common practice for Stieltjes inversion near the axis). Needed inside gaps of the support.
  SubordinationPoint solve_robust(std::complex<double> z,
                                  const std::complex<double>* start = nullptr) const;
  /// The absolute distance to the axis used for densities.
  double epsilon() const { return epsilon_abs_; }
  /// Points inside a band where the density may be infinite (interior_singular_points): where a
  /// quadrature of the density must not lay a panel across (TabulatedCdf's breakpoints).
  std::vector<double> singular_points() const { return interior_singular_points(); }

 protected:
  /// Density at real x from a solve at x + iε, polished to ε → 0; updates `warm`.
  double density_at(double x, std::complex<double>& warm, bool& have_warm) const;
  /// Atom contributions to G, subtracted before Stieltjes inversion.
  std::complex<double> atom_cauchy(std::complex<double> z) const;
  virtual bool polish(double x, std::complex<double>& omega1, std::complex<double>& g) const = 0;
  /// The subordination map f_x(w) and f_x'(w) at real x and real w, where both are real (false
  /// elsewhere: w on a law's support, or a pole). `form` 0 is the map of ω1; a law may offer a
  /// second form (1: the map of ω2), used where ω1 runs off to infinity (a zero of G in a gap).
  virtual bool real_map(int form, double x, double w, double& f, double& df) const = 0;
  /// How many forms real_map has (1 or 2).
  virtual int real_forms() const { return 1; }
  /// The other form's variable from this form's fixed point w (false where it is not real).
  virtual bool other_form(int form, double x, double w, double& out) const;
  /// Finds the bands of the continuous part inside [continuous_lo_, continuous_hi_] and sets
  /// support_.bands. Constructors call it after finish_support().
  void find_bands();
  /// How many atoms the two input laws have together (sets the resolution of find_bands).
  virtual std::size_t atoms_in_inputs() const = 0;
  /// Points inside a band where the density may be infinite although no atom sits there; the CDF
  /// table splits its band at each, so that the singularity is an edge of a table (graded
  /// towards it, with a fitted power law in the last layer) instead of a point in its middle.
  virtual std::vector<double> interior_singular_points() const { return {}; }
  /// Sorts support_.atoms and sets support_.lo/hi from the continuous edges and the atoms (the
  /// continuous part collapses onto the first atom when the atoms carry all the mass).
  void finish_support();
  /// solve() at z below the real axis by conjugate symmetry: every quantity is conj of its value
  /// at conj(z).
  SubordinationPoint solve_below_axis(std::complex<double> z, const std::complex<double>* start,
                                      bool cold) const;

  SubordinationOptions options_;
  Support support_;
  double continuous_lo_ = 0.0;
  double continuous_hi_ = 0.0;
  double epsilon_abs_ = 1e-10;

 private:
  /// The band holding x, or nullptr.
  const Interval* band_of(double x) const;
  /// A real fixed point: its form, value and 1 − f_x'(w).
  struct AxisPoint {
    int form = 0;
    double w = 0.0;
    double slope = 0.0;
  };
  /// Is x outside the support (a real fixed point w of f_x with f_x'(w) < 1, found by Newton from
  /// p.w in form p.form, then in the other form)? On success p is that fixed point.
  bool outside(double x, AxisPoint& p) const;
  /// Where Newton on the axis starts from a solve just above it: the finite one of ω1, ω2.
  AxisPoint axis_start(const SubordinationPoint& p) const;
  bool axis_fixed_point(int form, double x, double& w, double& slope) const;
  /// The x at which w is a fixed point of f_x (form `form`), from x0; slope = 1 − f_x'(w).
  bool x_of_fixed_point(int form, double w, double x0, double& x, double& slope) const;
  /// The edge between x_out (outside, fixed point p) and x_in (inside the support).
  double edge_between(double x_out, AxisPoint p, double x_in) const;

  // The CDF table of one band: leaf boundaries in θ (x = lo + w(1 − cos θ)/2) and the mass up to
  // each; the unsampled layer at each edge has a fitted power law.
  struct BandTable {
    double lo = 0.0, hi = 0.0;
    std::vector<double> theta;
    std::vector<double> cumulative;
    double left_tail = 0.0, left_beta = 0.0, right_beta = 0.0;
  };
  /// The table of [lo, hi]; a side marked singular is a singular point of the density.
  BandTable build_table(double lo, double hi, bool singular_lo, bool singular_hi) const;
  /// Sets every band edge within 1e-6 of the hull's width of a singular point to that point.
  void snap_edges_to_singular_points();
  void drop_traces_of_atoms();
  double band_cdf(const BandTable& t, double x) const;
  mutable std::once_flag table_once_;
  mutable std::vector<BandTable> tables_;
  mutable std::string table_error_;  // why the tables could not be built (then cdf() throws it)
};

/// μ ⊞ ν: the law of a + b for free a ~ μ, b ~ ν (Voiculescu 1986), computed by analytic
/// subordination (Belinschi & Bercovici 2007): G_{μ⊞ν}(z) = G_μ(ω1(z)), ω1 the fixed point of
/// f_z(w) = z + h_ν(z + h_μ(w)), h = 1/G − id.
class FreeAdditiveConvolution final : public SubordinatedLaw {
 public:
  FreeAdditiveConvolution(LawPtr mu, LawPtr nu, SubordinationOptions options);
  std::complex<double> cauchy_derivative(std::complex<double> z) const override;
  std::vector<double> moments(int k) const override;
  std::string describe() const override;
  SubordinationPoint solve(std::complex<double> z, const std::complex<double>* start = nullptr,
                           bool cold = true) const override;

 private:
  bool polish(double x, std::complex<double>& omega1, std::complex<double>& g) const override;
  bool real_map(int form, double x, double w, double& f, double& df) const override;
  std::size_t atoms_in_inputs() const override;
  std::vector<double> interior_singular_points() const override;
  int real_forms() const override { return 2; }
  bool other_form(int form, double x, double w, double& out) const override;
  /// The fixed point of ω2 instead of ω1 (where ω1 is near infinity).
  SubordinationPoint solve_second(std::complex<double> z, const std::complex<double>* start,
                                  bool cold) const;
  LawPtr mu_;
  LawPtr nu_;
  // Far from the support h = 1/G − id is a difference of two large numbers; there it comes from
  // its expansion in 1/w instead: [0] the radius beyond which, [1..5] the coefficients.
  std::array<double, 6> far_mu_{};
  std::array<double, 6> far_nu_{};
};

/// μ ⊠ ν for μ, ν on [0, ∞): the law of √b a √b (Voiculescu 1987), by multiplicative
/// subordination (Belinschi & Bercovici 2007): η_{μ⊠ν}(ζ) = η_μ(ω1(ζ)), ω1 the fixed point of
/// f_ζ(w) = ζ h_ν(ζ h_μ(w)), η = ψ/(1 + ψ), h(w) = η(w)/w; moments from S_{μ⊠ν} = S_μ S_ν.
class FreeMultiplicativeConvolution final : public SubordinatedLaw {
 public:
  FreeMultiplicativeConvolution(LawPtr mu, LawPtr nu, SubordinationOptions options);
  std::complex<double> cauchy_derivative(std::complex<double> z) const override;
  std::vector<double> moments(int k) const override;
  std::string describe() const override;
  SubordinationPoint solve(std::complex<double> z, const std::complex<double>* start = nullptr,
                           bool cold = true) const override;

 private:
  bool polish(double x, std::complex<double>& omega1, std::complex<double>& g) const override;
  bool real_map(int form, double x, double w, double& f, double& df) const override;
  std::size_t atoms_in_inputs() const override;
  LawPtr mu_;
  LawPtr nu_;
};

/// μ ⊞ ν for any two laws with compact support (atoms and empirical spectra included).
std::shared_ptr<const FreeAdditiveConvolution> free_additive(LawPtr mu, LawPtr nu,
                                                             SubordinationOptions options = {});
/// μ ⊠ ν for μ and ν on [0, ∞); InputError otherwise.
std::shared_ptr<const FreeMultiplicativeConvolution> free_multiplicative(
    LawPtr mu, LawPtr nu, SubordinationOptions options = {});

/// The free compound Poisson law of rate 1 whose jumps take the value t with weight p (weights
/// summing to at most 1; the rest is a jump 0): free cumulants κ_n = Σ p tⁿ (Nica & Speicher 2006,
/// Prop. 12.11, from memory). It is the law of s b s for s standard semicircular free from b with
/// b's law the jumps' (ibid. Prop. 12.18, from memory; checked against the exact moments in
/// tests/limits). Computed as the free additive convolution of one free Poisson law per jump
/// value, each t p · MP(1/p), so its atoms' masses, bands and singular points come from ⊞.
LawPtr free_compound_poisson(const std::vector<Atom>& jumps, SubordinationOptions options = {});

/// Free cumulants κ_1..κ_n from moments m_0..m_n (index 0 of the result is unused, 0), by the
/// first-block recursion m_n = Σ_s κ_s [z^{n−s}] M(z)^s (Nica & Speicher 2006).
std::vector<double> free_cumulants(std::span<const double> moments);
/// Moments m_0..m_n from free cumulants κ_1..κ_n (index 0 ignored).
std::vector<double> moments_from_free_cumulants(std::span<const double> cumulants);

}  // namespace freegap::analysis
