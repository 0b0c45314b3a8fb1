// Limit laws of random-matrix models: density, CDF, Cauchy transform, moments and support of each
// law the analysis compares finite-N spectra against.
#pragma once

#include <complex>
#include <memory>
#include <span>
#include <string>
#include <utility>
#include <vector>

#include "freegap/declarations.hpp"

namespace freegap::analysis {

/// A point mass of a law: its value and its weight (the same type as a declared atom).
using declarations::Atom;

/// An interval (lo, hi) of the real line.
struct Interval {
  double lo;
  double hi;
};

/// Where a law lives: the closed interval [lo, hi] holds every atom and the continuous part, and
/// the continuous part lives on its bands: closed, disjoint intervals, sorted, with no mass
/// between them (a semicircle plus well separated atoms has one band around each atom; a law of
/// atoms alone has no band). Every law fills `bands`.
struct Support {
  double lo = 0.0;
  double hi = 0.0;
  std::vector<Atom> atoms;      // sorted by value, masses > 0
  std::vector<Interval> bands;  // the continuous part's components; empty: no continuous part
};

/// A probability law on the real line (or, for a radial law, of |λ| for a non-normal model).
///
/// density() is the density of the absolutely continuous part only (atoms excluded); cdf() is
/// P(X ≤ x) and includes atoms. cauchy() is G(z) = ∫ dμ(t)/(z − t) for z off the support, with the
/// branch G(z) ~ 1/z at infinity (Im G < 0 when Im z > 0). Laws are immutable and thread-safe.
class Law {
 public:
  virtual ~Law() = default;
  virtual double density(double x) const = 0;
  virtual double cdf(double x) const = 0;
  virtual std::complex<double> cauchy(std::complex<double> z) const = 0;
  /// G'(z); the default is a complex central difference with a step well below Im z.
  virtual std::complex<double> cauchy_derivative(std::complex<double> z) const;
  /// G(z) and G'(z) together; the default calls both. Laws whose two sums share their terms
  /// (atoms) compute them in one pass: the subordination solvers always ask for both.
  virtual std::pair<std::complex<double>, std::complex<double>> cauchy_with_derivative(
      std::complex<double> z) const;
  /// m_0..m_k (m_0 = 1).
  virtual std::vector<double> moments(int k) const = 0;
  virtual Support support() const = 0;
  /// Smallest x with cdf(x) ≥ p, p ∈ [0, 1]; bisection on cdf unless a law knows better.
  virtual double quantile(double p) const;
  virtual std::string describe() const = 0;
  /// Densities on a grid; laws that solve an equation per point continue along the grid.
  virtual std::vector<double> densities(std::span<const double> xs) const;
  /// True for a radial law (the circular law): then the law is that of |λ|, see circular().
  virtual bool radial() const { return false; }
  /// Mass of the atom at x (0 when there is none).
  double mass_at(double x) const;
};

using LawPtr = std::shared_ptr<const Law>;

/// Semicircle of the given variance on [−2√v, 2√v] (Wigner 1955; variance 1: GUE/GOE limit).
LawPtr semicircle(double variance = 1.0);
/// Marchenko–Pastur of ratio c = N/M (Marchenko & Pastur 1967), with an atom 1 − 1/c at 0 when c
/// > 1.
LawPtr marchenko_pastur(double ratio);
/// Arcsine law on [−2, 2], density 1/(π√(4 − x²)).
LawPtr arcsine();
/// Kesten–McKay law of the 2d-regular tree (Kesten 1959; McKay 1981) on [−2√(2d−1), 2√(2d−1)].
LawPtr kesten_mckay(int d);
/// A finite sum of point masses; weights must be ≥ 0 and sum to 1 (within 1e−9).
LawPtr atoms(std::vector<Atom> points);
/// Uniform law on [a, b], a < b.
LawPtr uniform(double a, double b);
/// Quarter-circle law √(4 − s²)/π on [0, 2]: singular values of G/√N.
LawPtr quarter_circle();
/// Fuss–Catalan law π^{⊠s} (s ≥ 1): free multiplicative power of the free Poisson law, on
/// [0, (s+1)^{s+1}/s^s] (Banica, Belinschi, Capitaine & Collins 2011; Penson & Życzkowski 2011).
LawPtr fuss_catalan(int s);
/// Circular law (uniform on the unit disk; Ginibre 1965, Girko 1984) as a radial law: the law of
/// the modulus r = |λ|, so density(r) = 2r and cdf(r) = r² on [0, 1], moments(k)[j] = E|λ|^j =
/// 2/(j+2) (E|λ|^{2k} = 1/(k+1)), and cauchy() is the Cauchy transform of that modulus law. The
/// holomorphic moments E λ^j (j ≥ 1) of the circular law itself are all 0.
LawPtr circular();
/// The empirical law (1/n) Σ δ_{λ_i} of a spectrum (repeated values merged).
LawPtr empirical(std::span<const double> values);
/// The law of √Y for Y ~ law on [0, ∞) (singular values from squared singular values). Even
/// moments are Y's moments; odd moments and the Cauchy transform are computed by quadrature.
LawPtr square_root(LawPtr law);
/// The law of a·X + b for X ~ law (a ≠ 0; for a radial law only a > 0, b = 0).
LawPtr affine(LawPtr law, double a, double b);
/// The law of p(X) for X ~ law and p(x) = Σ_k c[k] x^k: atoms map to atoms (equal images merged),
/// the continuous part by the change of variables on each piece where p is monotone, so the CDF
/// is X's CDF at the preimages (no quadrature: singular points of the density lose no mass), and
/// G(z) = Σ_k G_X(r_k)/p′(r_k) over the roots of p(x) = z. Degree 1 is affine(); degree 0 an atom.
LawPtr polynomial_image(LawPtr law, std::vector<double> coefficients);
/// The law of f(θ) = c_0 + 2 Σ_{j≥1} c_j cos(jθ), θ uniform on [0, 2π): the limit eigenvalue law of
/// the Toeplitz and circulant matrices of the symbol f (Szegő 1920; Grenander & Szegő 1958, ch. 5).
/// With x = 2 cos θ, arcsine-distributed on [−2, 2], 2 cos(jθ) = S_j(x) (S_0 = 2, S_1 = x,
/// S_{j+1} = x S_j − S_{j−1}): the image of the arcsine law under c_0 + Σ_{j≥1} c_j S_j(x).
LawPtr toeplitz_symbol_law(const std::vector<double>& coefficients);

/// The eigenvalue law of Jacobi matrices with period-p coefficients (diagonal a_0 … a_{p−1},
/// off-diagonal b_0 … b_{p−1}, every b_k ≠ 0): the preimage of the arcsine law under the
/// discriminant Δ, mass 1/p per band (laws_jacobi.cpp; Toda 1981, Teschl 2000).
LawPtr periodic_jacobi_law(std::vector<double> a, std::vector<double> b);
/// The power-basis coefficients of c_0 + Σ_{j≥1} c_j S_j(x) (above).
std::vector<double> toeplitz_symbol_polynomial(const std::vector<double>& coefficients);

/// The density at each x, NaN where its solver fails there (law.densities first, which continues
/// along the grid; where that throws, point by point). `limit` and `report` both draw their
/// density tables through it, so a point that fails is the same missing value in both.
std::vector<double> densities_or_nan(const Law& law, std::span<const double> xs);

}  // namespace freegap::analysis
