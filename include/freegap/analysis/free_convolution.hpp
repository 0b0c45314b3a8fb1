// Free additive and multiplicative convolution of limit laws by analytic subordination, and the
// moment / free-cumulant conversions that give their exact moments.
#pragma once

#include <complex>
#include <memory>
#include <mutex>
#include <span>
#include <string>
#include <vector>

#include "freegap/analysis/laws.hpp"

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
  /// Solve at z off the axis; `start` (in the right half-plane) warms Newton, else a cold start.
  virtual SubordinationPoint solve(std::complex<double> z,
                                   const std::complex<double>* start = nullptr) const = 0;
  /// The absolute distance to the axis used for densities.
  double epsilon() const { return epsilon_abs_; }

 protected:
  /// Density at real x from a solve at x + iε, polished to ε → 0; updates `warm`.
  double density_at(double x, std::complex<double>& warm, bool& have_warm) const;
  /// Atom contributions to G, subtracted before Stieltjes inversion.
  std::complex<double> atom_cauchy(std::complex<double> z) const;
  virtual bool polish(double x, std::complex<double>& omega1, std::complex<double>& g) const = 0;
  /// Sorts support_.atoms and sets support_.lo/hi from the continuous edges and the atoms (the
  /// continuous part collapses onto the first atom when the atoms carry all the mass).
  void finish_support();
  /// solve() at z below the real axis by conjugate symmetry: every quantity is conj of its value
  /// at conj(z).
  SubordinationPoint solve_below_axis(std::complex<double> z, const std::complex<double>* start) const;

  SubordinationOptions options_;
  Support support_;
  double continuous_lo_ = 0.0;
  double continuous_hi_ = 0.0;
  double epsilon_abs_ = 1e-10;

 private:
  void build_table() const;
  mutable std::once_flag table_once_;
  mutable std::vector<double> table_theta_;  // leaf boundaries in θ, x = lo + w(1 − cos θ)/2
  mutable std::vector<double> table_cumulative_;
  mutable double left_tail_ = 0.0;  // mass of the unsampled layer at each edge, and its exponent
  mutable double left_beta_ = 0.0;
  mutable double right_beta_ = 0.0;
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
  SubordinationPoint solve(std::complex<double> z,
                           const std::complex<double>* start = nullptr) const override;

 private:
  bool polish(double x, std::complex<double>& omega1, std::complex<double>& g) const override;
  LawPtr mu_;
  LawPtr nu_;
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
  SubordinationPoint solve(std::complex<double> z,
                           const std::complex<double>* start = nullptr) const override;

 private:
  bool polish(double x, std::complex<double>& omega1, std::complex<double>& g) const override;
  LawPtr mu_;
  LawPtr nu_;
};

/// μ ⊞ ν for any two laws with compact support (atoms and empirical spectra included).
std::shared_ptr<const FreeAdditiveConvolution> free_additive(LawPtr mu, LawPtr nu,
                                                             SubordinationOptions options = {});
/// μ ⊠ ν for μ and ν on [0, ∞); InputError otherwise.
std::shared_ptr<const FreeMultiplicativeConvolution> free_multiplicative(
    LawPtr mu, LawPtr nu, SubordinationOptions options = {});

/// Free cumulants κ_1..κ_n from moments m_0..m_n (index 0 of the result is unused, 0), by the
/// first-block recursion m_n = Σ_s κ_s [z^{n−s}] M(z)^s (Nica & Speicher 2006).
std::vector<double> free_cumulants(std::span<const double> moments);
/// Moments m_0..m_n from free cumulants κ_1..κ_n (index 0 ignored).
std::vector<double> moments_from_free_cumulants(std::span<const double> cumulants);

}  // namespace freegap::analysis
