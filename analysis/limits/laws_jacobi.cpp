// The eigenvalue law of periodic Jacobi matrices (laws.hpp, periodic_jacobi_law): the density of
// states of the periodic Jacobi operator with diagonal a_k and off-diagonal b_k of period p.
//
// With the transfer matrices T_k(x) = [[(x − a_k)/b_k, −b_{k−1}/b_k], [1, 0]] (b_{−1} = b_{p−1})
// and the discriminant Δ(x) = tr T_{p−1}(x) ⋯ T_0(x), a polynomial of degree p, the spectrum is
// {x : |Δ(x)| ≤ 2}, p bands whose edges are the eigenvalues of the periodic and antiperiodic
// p × p matrices J(0) and J(π), and the law is the preimage of the arcsine law under Δ with mass
// 1/p on each band: density |Δ'(x)| / (p π √(4 − Δ(x)²)), Cauchy transform
// G(z) = Δ'(z) / (p √(Δ(z)² − 4)) on the branch with G ~ 1/z (Toda 1981, "Theory of nonlinear
// lattices", ch. 4; Teschl 2000, "Jacobi operators and completely integrable nonlinear
// lattices", ch. 7; both from memory). For p = 1 it is the arcsine law on [a − 2|b|, a + 2|b|].
#include <algorithm>
#include <array>
#include <cmath>
#include <complex>
#include <numbers>
#include <string>
#include <vector>

#include "freegap/analysis/limits/laws.hpp"
#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/text.hpp"

namespace freegap::analysis {

namespace {

using cd = std::complex<double>;

class PeriodicJacobi final : public Law {
 public:
  PeriodicJacobi(std::vector<double> a, std::vector<double> b) : a_(std::move(a)), b_(std::move(b)) {
    p_ = a_.size();
    std::vector<double> edges;
    for (const double theta : {0.0, std::numbers::pi}) {
      linalg::CMatrix j = bloch(theta);
      const linalg::Vector e = linalg::eigenvalues(j);
      edges.insert(edges.end(), e.data(), e.data() + e.size());
    }
    std::sort(edges.begin(), edges.end());
    for (std::size_t k = 0; k < p_; ++k) bands_.push_back({edges[2 * k], edges[2 * k + 1]});
    support_.lo = edges.front();
    support_.hi = edges.back();
    for (const Interval& band : bands_) {  // touching bands (a closed gap) are one component
      if (!support_.bands.empty() && band.lo <= support_.bands.back().hi) {
        support_.bands.back().hi = std::max(support_.bands.back().hi, band.hi);
      } else {
        support_.bands.push_back(band);
      }
    }
  }

  double density(double x) const override {
    if (x <= support_.lo || x >= support_.hi) return 0.0;
    const auto [d, d1, d2] = discriminant(cd(x, 0.0));
    const double delta = d.real();
    if (std::abs(delta) >= 2.0) return 0.0;
    return std::abs(d1.real()) /
           (static_cast<double>(p_) * std::numbers::pi * std::sqrt(4.0 - delta * delta));
  }

  double cdf(double x) const override {
    if (x <= support_.lo) return 0.0;
    if (x >= support_.hi) return 1.0;
    double below = 0.0;
    for (const Interval& band : bands_) {
      if (x >= band.hi) {
        below += 1.0;
      } else if (x > band.lo) {
        // Δ is monotone on a band and runs between ±2: the share of the band below x.
        const double start = std::acos(std::clamp(discriminant(cd(band.lo, 0.0))[0].real() / 2, -1.0, 1.0));
        const double here = std::acos(std::clamp(discriminant(cd(x, 0.0))[0].real() / 2, -1.0, 1.0));
        below += std::abs(here - start) / std::numbers::pi;
      }
    }
    return std::clamp(below / static_cast<double>(p_), 0.0, 1.0);
  }

  cd cauchy(cd z) const override { return cauchy_with_derivative(z).first; }
  cd cauchy_derivative(cd z) const override { return cauchy_with_derivative(z).second; }

  std::pair<cd, cd> cauchy_with_derivative(cd z) const override {
    const auto [d, d1, d2] = discriminant(z);
    const cd s = std::sqrt(d * d - 4.0);
    const double p = static_cast<double>(p_);
    cd g = d1 / (p * s);
    cd dg = (d2 * s - d1 * (d * d1 / s)) / (p * s * s);
    // The branch of a Cauchy transform: Im G < 0 above the axis, > 0 below, and on the axis off
    // the support G decreasing (G' = −∫ dμ/(x − t)² < 0).
    const bool flip = z.imag() > 0.0   ? g.imag() > 0.0
                      : z.imag() < 0.0 ? g.imag() < 0.0
                                       : dg.real() > 0.0;
    if (flip) {
      g = -g;
      dg = -dg;
    }
    return {g, dg};
  }

  std::vector<double> moments(int k) const override {
    // m_n = (1/2π) ∫ (1/p) tr J(θ)ⁿ dθ: a trigonometric polynomial of degree ≤ n in θ, which the
    // trapezoid rule with more than n points integrates exactly.
    std::vector<double> m(static_cast<std::size_t>(std::max(k, 0)) + 1, 0.0);
    const int points = std::max(k, 0) + 2;
    for (int q = 0; q < points; ++q) {
      linalg::CMatrix j = bloch(2.0 * std::numbers::pi * q / points);
      const linalg::Vector e = linalg::eigenvalues(j);
      for (Eigen::Index i = 0; i < e.size(); ++i) {
        double power = 1.0;
        for (std::size_t n = 0; n < m.size(); ++n) {
          m[n] += power / (static_cast<double>(points) * static_cast<double>(p_));
          power *= e(i);
        }
      }
    }
    return m;
  }

  Support support() const override { return support_; }

  std::string describe() const override {
    std::string out = "periodic Jacobi(a = [";
    for (std::size_t k = 0; k < p_; ++k) out += (k ? ", " : "") + text::readable(a_[k]);
    out += "], b = [";
    for (std::size_t k = 0; k < p_; ++k) out += (k ? ", " : "") + text::readable(b_[k]);
    return out + "])";
  }

 private:
  // The p × p Bloch matrix J(θ): the period's block with the wrap-around entry b_{p−1} e^{iθ}.
  linalg::CMatrix bloch(double theta) const {
    linalg::CMatrix j = linalg::CMatrix::Zero(static_cast<Eigen::Index>(p_), static_cast<Eigen::Index>(p_));
    const auto last = static_cast<Eigen::Index>(p_) - 1;
    for (Eigen::Index i = 0; i <= last; ++i) {
      const double b = b_[static_cast<std::size_t>(i)];
      j(i, i) += a_[static_cast<std::size_t>(i)];
      if (i < last) {
        j(i, i + 1) += b;
        j(i + 1, i) += b;
      } else {
        j(last, 0) += b * std::polar(1.0, theta);
        j(0, last) += b * std::polar(1.0, -theta);
      }
    }
    return j;
  }

  // Δ(z), Δ'(z), Δ''(z) from the product of the transfer matrices and its derivatives.
  std::array<cd, 3> discriminant(cd z) const {
    using M = std::array<cd, 4>;  // row-major 2 × 2
    const auto mul = [](const M& x, const M& y) {
      return M{x[0] * y[0] + x[1] * y[2], x[0] * y[1] + x[1] * y[3], x[2] * y[0] + x[3] * y[2],
               x[2] * y[1] + x[3] * y[3]};
    };
    const auto add = [](const M& x, const M& y, double c) {
      return M{x[0] + c * y[0], x[1] + c * y[1], x[2] + c * y[2], x[3] + c * y[3]};
    };
    M prod{1.0, 0.0, 0.0, 1.0}, first{}, second{};
    for (std::size_t k = 0; k < p_; ++k) {
      const double b = b_[k], before = b_[(k + p_ - 1) % p_];
      const M t{(z - a_[k]) / b, -before / b, 1.0, 0.0};
      const M dt{1.0 / b, 0.0, 0.0, 0.0};
      second = add(mul(t, second), mul(dt, first), 2.0);
      first = add(mul(t, first), mul(dt, prod), 1.0);
      prod = mul(t, prod);
    }
    return {prod[0] + prod[3], first[0] + first[3], second[0] + second[3]};
  }

  std::vector<double> a_, b_;
  std::size_t p_ = 0;
  std::vector<Interval> bands_;  // the p bands as the edges pair them (touching ones apart)
  Support support_;
};

}  // namespace

LawPtr periodic_jacobi_law(std::vector<double> a, std::vector<double> b) {
  if (a.empty() || a.size() != b.size()) {
    throw InputError("periodic_jacobi_law: a and b must have one entry per site of the period");
  }
  for (std::size_t k = 0; k < a.size(); ++k) {
    if (!std::isfinite(a[k]) || !std::isfinite(b[k]) || b[k] == 0.0) {
      throw InputError("periodic_jacobi_law: a must be finite and b finite and non-zero");
    }
  }
  return std::make_shared<PeriodicJacobi>(std::move(a), std::move(b));
}

}  // namespace freegap::analysis
