// Free additive and multiplicative convolution by analytic subordination, with exact moments from
// free cumulants and S-transforms, support edges from the real-axis subordination functions, and
// CDFs by graded Gauss–Legendre quadrature of the density.
#include "freegap/analysis/limits/free_convolution.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>
#include <sstream>

#include "freegap/errors.hpp"
#include "freegap/stop.hpp"
#include "freegap/text.hpp"
#include "laws_quadrature.hpp"

namespace freegap::analysis {

using cd = std::complex<double>;
constexpr double kPi = std::numbers::pi;

namespace {

bool finite(cd z) { return std::isfinite(z.real()) && std::isfinite(z.imag()); }

struct MapValue {
  cd f;   // f(w)
  cd df;  // f'(w)
};

// Damped Newton on φ(w) = f(w) − w, keeping w strictly in the half-plane sign·Im w > 0 (where the
// subordination function lives; Belinschi & Bercovici 2007): a step is halved until it stays in
// that half-plane and decreases |φ| (backtracking, standard practice), which keeps Newton from
// wandering when f is close to a Möbius automorphism (near the centre of Bernoulli ⊞ Bernoulli).
template <class Map>
bool newton(const Map& map, cd& w, double sign, int max_steps, int& steps) {
  MapValue v = map(w);
  for (steps = 1; steps <= max_steps; ++steps) {
    const cd phi = v.f - w;
    const cd dphi = v.df - 1.0;
    if (!finite(phi) || !finite(dphi) || dphi == 0.0) return false;
    // Residual at rounding level: converged, even where φ' is tiny (ill-conditioned points).
    if (std::abs(phi) <= 4.0 * std::numeric_limits<double>::epsilon() * (1.0 + std::abs(w))) {
      return true;
    }
    cd step = phi / dphi;
    cd next = w - step;
    MapValue next_v{};
    bool accepted = false;
    for (int halvings = 0; halvings < 60; ++halvings, step *= 0.5, next = w - step) {
      if (sign * next.imag() <= 0.0 || !finite(next)) continue;
      next_v = map(next);
      if (!finite(next_v.f)) continue;
      // Near convergence |φ| sits at rounding level: accept tiny steps unconditionally.
      if (std::abs(next_v.f - next) < std::abs(phi) ||
          std::abs(step) <= 1e-13 * (1.0 + std::abs(w))) {
        accepted = true;
        break;
      }
    }
    if (!accepted) return false;
    w = next;
    v = next_v;
    if (std::abs(step) <= 1e-14 * (1.0 + std::abs(w))) {
      return std::abs(v.f - w) <= 1e-10 * (1.0 + std::abs(w));
    }
  }
  return false;
}

// The fixed point of f: warm Newton if a start is given, else (or if that fails) the averaged
// iteration w ← (w + f(w))/2 from w0, finished by Newton. The plain iteration w ← f(w) stalls near
// the axis when a law has atoms (f is then close to a real Möbius automorphism); averaging keeps
// the fixed point and restores convergence (measured: docs/check-values.md §4a).
template <class Map>
SubordinationPoint fixed_point(const Map& map, cd w0, const cd* start, bool cold, double sign,
                               const SubordinationOptions& options, const char* who, cd z) {
  SubordinationPoint out;
  out.z = z;
  if (start != nullptr && sign * start->imag() > 0.0) {
    cd w = *start;
    int steps = 0;
    if (newton(map, w, sign, 50, steps)) {
      out.omega1 = w;
      out.newton_steps = steps;
      return out;
    }
  }
  if (!cold && start != nullptr) throw NumericalError(std::string(who) + ": warm start failed");
  cd w = w0;
  int k = 0;
  for (; k < options.max_averaged_steps; ++k) {
    const cd f = map(w).f;
    if (!finite(f)) break;
    cd next = 0.5 * (w + f);
    if (sign * next.imag() <= 0.0) next = cd(next.real(), 0.5 * w.imag());
    const double change = std::abs(next - w);
    w = next;
    if (change < 1e-6 * (1.0 + std::abs(w))) break;
  }
  out.averaged_steps = k + 1;
  int steps = 0;
  bool converged = newton(map, w, sign, options.max_newton_steps, steps);
  // Retry from other points of the half-plane: the fixed point is unique there, so any
  // converged start gives it.
  for (double lift : {1.0, 0.25, 4.0, 16.0}) {
    if (converged) break;
    w = cd(w0.real(), sign * lift * (1.0 + std::abs(w0)));
    converged = newton(map, w, sign, options.max_newton_steps, steps);
  }
  if (!converged) {
    // Last resort: the averaged iteration alone, run to a tight residual. Where the convolution
    // has a gap and G(z) → 0 (a symmetric law at its centre), ω1 runs off to infinity; G_μ(ω1)
    // is then ≈ 0 as it should be, and a large |ω1| is accepted as that limit.
    w = w0;
    for (int i = 0; i < 20 * options.max_averaged_steps && !converged; ++i) {
      const cd f = map(w).f;
      if (!finite(f)) break;
      w = 0.5 * (w + f);
      if (sign * w.imag() <= 0.0) break;
      converged = std::abs(f - w) <= 1e-12 * (1.0 + std::abs(w)) ||
                  std::abs(w) > 1e10 * (1.0 + std::abs(z));
      out.averaged_steps = i + 1;
    }
  }
  if (!converged) {
    throw NumericalError(std::string(who) +
                         ": subordination did not converge at z = " + text::readable(z.real()) +
                         (z.imag() >= 0 ? "+" : "") + text::readable(z.imag()) + "i");
  }
  out.omega1 = w;
  out.newton_steps = steps;
  return out;
}

// h = F − id = 1/G − id and its derivative −G'/G² − 1.
struct HValue {
  cd h;
  cd dh;
};
HValue h_additive(const Law& law, cd w) {
  const auto [g, dg] = law.cauchy_with_derivative(w);
  return {1.0 / g - w, -dg / (g * g) - 1.0};
}

// The expansion of h at infinity: G(w) = u M(u) with u = 1/w and M(u) = Σ m_k u^k, so
// h(w) = 1/G − w = Σ_{k≥1} r_k u^{k−1} with Σ r_k u^k = 1/M(u) (standard series inversion).
// far[0] is the radius beyond which the five terms are used: 10³ times the support's scale,
// where the truncation (~(s/|w|)^5 s) and the cancellation in 1/G − w (~ε|w|) are both below
// 1e-12 s.
std::array<double, 6> far_field(const Law& law) {
  std::array<double, 6> far{};
  const Support s = law.support();
  const double scale = std::max({1.0, std::abs(s.lo), std::abs(s.hi)});
  const std::vector<double> m = law.moments(5);
  std::array<double, 6> r{};
  r[0] = 1.0;
  for (int k = 1; k <= 5; ++k) {
    double sum = 0.0;
    for (int j = 1; j <= k; ++j) sum += m[j] * r[k - j];
    r[k] = -sum;
  }
  far[0] = 1e3 * scale;
  for (int k = 1; k <= 5; ++k) far[k] = r[k];
  return far;
}

HValue h_additive(const Law& law, const std::array<double, 6>& far, cd w) {
  if (!(std::abs(w) > far[0])) return h_additive(law, w);
  const cd u = 1.0 / w;
  cd h = 0.0, dh = 0.0, power = 1.0;  // power = u^{k−1}
  for (int k = 1; k <= 5; ++k) {
    h += far[k] * power;
    dh -= static_cast<double>(k - 1) * far[k] * power * u;  // d/dw u^{k−1} = −(k−1) u^k
    power *= u;
  }
  return {h, dh};
}

// Multiplicative h(w) = η(w)/w with η(w) = 1 − w/G(1/w) (η = ψ/(1+ψ), 1 + ψ(w) = G(1/w)/w), so
// h(w) = 1/w − 1/G(1/w) and h'(w) = −1/w² − G'(1/w)/(G(1/w)² w²).
HValue h_multiplicative(const Law& law, cd w) {
  const cd u = 1.0 / w;
  const auto [g, dg] = law.cauchy_with_derivative(u);
  return {u - 1.0 / g, -u * u - dg / (g * g) * u * u};
}

double real_f(const Law& law, double t) {
  const double g = law.cauchy(cd(t, 0.0)).real();
  if (!std::isfinite(g)) return 0.0;
  return 1.0 / g;
}

double real_eta(const Law& law, double t) {
  const double g = law.cauchy(cd(1.0 / t, 0.0)).real();
  if (!std::isfinite(g)) return 1.0;
  return 1.0 - t / g;
}

// Bisection for an increasing function: the t in [a, b] with f(t) = target (f(a) ≤ target ≤ f(b)).
template <class F>
double invert_increasing(const F& f, double a, double b, double target) {
  for (int i = 0; i < 200; ++i) {
    const double mid = 0.5 * (a + b);
    if (mid <= a || mid >= b) break;
    if (f(mid) < target) {
      a = mid;
    } else {
      b = mid;
    }
  }
  return 0.5 * (a + b);
}

// The first local minimum of x(t) met when t walks from far (t_min + d) towards t_min, refined by
// golden-section search; the value there is the edge. Outside the support the subordination
// functions are real and x(t) is the inverse of ω1 along the real axis; it turns back exactly
// where the fixed point stops being attracting (f' = 1), i.e. at the edge.
template <class X>
double first_minimum(const X& x, double t_min, double distance) {
  const double q = 0.85;
  const int steps = static_cast<int>(std::ceil(std::log(1e-14 / 8.0) / std::log(q)));
  double previous_t = t_min + distance;
  double previous_x = x(previous_t);
  double before_t = previous_t;
  for (int k = 1; k <= steps; ++k) {
    const double t = t_min + distance * std::pow(q, k);
    const double value = x(t);
    if (value > previous_x) {
      // Minimum bracketed by [t, before_t]; golden-section search.
      double a = t;
      double b = before_t;
      const double r = 0.5 * (std::sqrt(5.0) - 1.0);
      double c = b - r * (b - a);
      double d = a + r * (b - a);
      double xc = x(c);
      double xd = x(d);
      for (int i = 0; i < 200 && b - a > 1e-15 * std::max(1.0, std::abs(a)); ++i) {
        if (xc < xd) {
          b = d;
          d = c;
          xd = xc;
          c = b - r * (b - a);
          xc = x(c);
        } else {
          a = c;
          c = d;
          xc = xd;
          d = a + r * (b - a);
          xd = x(d);
        }
      }
      return std::min({xc, xd, previous_x});
    }
    before_t = previous_t;
    previous_t = t;
    previous_x = value;
  }
  return std::min(previous_x, x(t_min));
}

// Right edge of the continuous part of μ ⊞ ν. For real x above the support, ω1(x) = t > hi_μ and
// ω2 > hi_ν are real with F_μ(t) = F_ν(ω2) = F(x) and ω1 + ω2 = x + F(x) (Belinschi & Bercovici
// 2007), so x(t) = t + ω2(t) − F_μ(t) with ω2(t) = F_ν^{-1}(F_μ(t)).
double additive_right_edge(const Law& mu, const Law& nu) {
  const Support sm = mu.support();
  const Support sn = nu.support();
  const double width = (sm.hi - sm.lo) + (sn.hi - sn.lo);
  if (width <= 0.0) return sm.hi + sn.hi;
  const double hm = sm.hi;
  const double hn = sn.hi;
  const double fn_edge = real_f(nu, hn);
  auto fnu = [&](double w) { return real_f(nu, w); };
  auto fmu = [&](double t) { return real_f(mu, t); };
  auto omega2 = [&](double g) {
    if (g <= fn_edge) return hn;
    double b = hn + width;
    while (fnu(b) < g) b = hn + 2.0 * (b - hn);
    return invert_increasing(fnu, hn, b, g);
  };
  double t_min = hm;
  if (fmu(hm) < fn_edge) {
    double b = hm + width;
    while (fmu(b) < fn_edge) b = hm + 2.0 * (b - hm);
    t_min = invert_increasing(fmu, hm, b, fn_edge);
  }
  auto x_of = [&](double t) {
    const double g = fmu(t);
    return t + omega2(g) - g;
  };
  double distance = 8.0 * width;
  for (int i = 0; i < 20 && x_of(t_min + distance / 0.85) < x_of(t_min + distance); ++i) {
    distance *= 4.0;
  }
  return first_minimum(x_of, t_min, distance);
}

// Right edge of μ ⊠ ν (μ, ν on [0, ∞)). With ζ = 1/x below 1/edge, ω1(ζ) = t ∈ (0, 1/hi_μ) and
// ω2 ∈ (0, 1/hi_ν) are real, η_μ(t) = η_ν(ω2) = η(ζ) and ω1ω2 = ζη(ζ) (Belinschi & Bercovici 2007),
// so x(t) = η_μ(t)/(t ω2(t)); the edge is its first minimum from t → 0 (where x → ∞).
double multiplicative_right_edge(const Law& mu, const Law& nu) {
  const double hm = mu.support().hi;
  const double hn = nu.support().hi;
  if (hm <= 0.0 || hn <= 0.0) return 0.0;
  const double wn_max = 1.0 / hn;
  const double eta_n_edge = real_eta(nu, wn_max);
  auto eta_nu = [&](double w) { return real_eta(nu, w); };
  auto eta_mu = [&](double t) { return real_eta(mu, t); };
  double t_max = 1.0 / hm;
  if (eta_mu(t_max) > eta_n_edge) t_max = invert_increasing(eta_mu, 0.0, t_max, eta_n_edge);
  auto x_of_s = [&](double s) {  // s = t_max − t, so that the walk goes towards s → 0
    const double t = t_max - s;
    const double eta = eta_mu(t);
    const double w2 = eta >= eta_n_edge ? wn_max : invert_increasing(eta_nu, 0.0, wn_max, eta);
    return eta / (t * w2);
  };
  double distance = 0.999 * t_max;
  return first_minimum(x_of_s, 0.0, distance);
}

// The law of 1/X for X on (0, ∞): G_{1/X}(z) = (1/z)(1 − G_X(1/z)/z). Used only for edges.
class Reciprocal final : public Law {
 public:
  explicit Reciprocal(LawPtr law) : law_(std::move(law)) {}
  double density(double x) const override { return x > 0 ? law_->density(1.0 / x) / (x * x) : 0.0; }
  double cdf(double x) const override { return x > 0 ? 1.0 - law_->cdf(1.0 / x) : 0.0; }
  cd cauchy(cd z) const override { return (1.0 - law_->cauchy(1.0 / z) / z) / z; }
  std::vector<double> moments(int) const override {
    throw InputError("reciprocal law: moments are not available");
  }
  Support support() const override {
    const Support s = law_->support();
    return {1.0 / s.hi, 1.0 / s.lo, {}, {{1.0 / s.hi, 1.0 / s.lo}}};
  }
  std::string describe() const override { return "1/(" + law_->describe() + ")"; }

 private:
  LawPtr law_;
};

// Power series helpers (coefficients by power of z) for the S-transform route.
std::vector<long double> multiply(const std::vector<long double>& a,
                                  const std::vector<long double>& b, int n) {
  std::vector<long double> c(n + 1, 0.0L);
  for (int i = 0; i <= n && i < static_cast<int>(a.size()); ++i) {
    for (int j = 0; i + j <= n && j < static_cast<int>(b.size()); ++j) c[i + j] += a[i] * b[j];
  }
  return c;
}

// Compositional inverse g of f (f[0] = 0, f[1] ≠ 0): f(g(z)) = z, coefficient by coefficient.
std::vector<long double> revert(const std::vector<long double>& f, int n) {
  std::vector<long double> g(n + 1, 0.0L);
  g[1] = 1.0L / f[1];
  for (int m = 2; m <= n; ++m) {
    // Coefficient of z^m in f(g) with g[m] = 0; g[m] then enters only as f[1]·g[m].
    std::vector<long double> power = g;  // g^1
    long double c = 0.0L;
    for (int k = 1; k <= m; ++k) {
      if (k > 1) power = multiply(power, g, m);
      c += f[k] * power[m];
    }
    g[m] = -c / f[1];
  }
  return g;
}

}  // namespace

// ------------------------------------------------------------------------- cumulants ↔ moments
std::vector<double> free_cumulants(std::span<const double> moments) {
  const int n = static_cast<int>(moments.size()) - 1;
  std::vector<double> kappa(std::max(n + 1, 1), 0.0);
  if (n < 1) return kappa;
  // powers[s][j] = [z^j] M(z)^s, M(z) = Σ m_k z^k.
  std::vector<std::vector<long double>> powers(n + 1, std::vector<long double>(n + 1, 0.0L));
  powers[0][0] = 1.0L;
  std::vector<long double> m(moments.begin(), moments.end());
  for (int s = 1; s <= n; ++s) powers[s] = multiply(powers[s - 1], m, n);
  for (int k = 1; k <= n; ++k) {
    long double rest = 0.0L;
    for (int s = 1; s < k; ++s) rest += kappa[s] * powers[s][k - s];
    kappa[k] = static_cast<double>(m[k] - rest);
  }
  return kappa;
}

std::vector<double> moments_from_free_cumulants(std::span<const double> cumulants) {
  const int n = static_cast<int>(cumulants.size()) - 1;
  std::vector<long double> m(std::max(n + 1, 1), 0.0L);
  m[0] = 1.0L;
  for (int k = 1; k <= n; ++k) {
    // m_k = Σ_s κ_s [z^{k−s}] M^s with M known to degree k−1 (the s = 1 term uses m_{k−1}).
    std::vector<long double> power(k, 0.0L);
    power[0] = 1.0L;
    std::vector<long double> mk(m.begin(), m.begin() + k);
    long double sum = 0.0L;
    for (int s = 1; s <= k; ++s) {
      power = multiply(power, mk, k - 1);
      sum += cumulants[s] * power[k - s];
    }
    m[k] = sum;
  }
  return std::vector<double>(m.begin(), m.end());
}

// -------------------------------------------------------------------------- SubordinatedLaw
cd SubordinatedLaw::atom_cauchy(cd z) const {
  cd sum = 0.0;
  for (const Atom& a : support_.atoms) sum += a.weight / (z - a.value);
  return sum;
}

SubordinationPoint SubordinatedLaw::solve_robust(cd z, const cd* start) const {
  const double scale = std::max({1.0, support_.hi - support_.lo, std::abs(z.real())});
  // A cold start close to the axis goes down from far above it at once: near a singular point
  // of the density (f' → 1 there) the averaged iteration at z itself ran its whole budget of
  // 2,000 steps, 80 times the cost of an ordinary point, while the descent costs the same
  // ~10 warm Newton solves everywhere.
  // (Only inside the hull of the support: outside it ω approaches the axis, where the descent
  // can stall.)
  const bool descend = start == nullptr && std::abs(z.imag()) < 1e-6 * scale &&
                       z.real() > support_.lo && z.real() < support_.hi;
  if (!descend) {
    try {
      return solve(z, start, start == nullptr);
    } catch (const NumericalError&) {
    }
  }
  if (z.imag() < 0.0) {
    const cd conj_start = start ? std::conj(*start) : cd();
    SubordinationPoint p = solve_robust(std::conj(z), start ? &conj_start : nullptr);
    p.z = z;
    p.omega1 = std::conj(p.omega1);
    p.omega2 = std::conj(p.omega2);
    p.cauchy = std::conj(p.cauchy);
    return p;
  }
  // Far above the axis the fixed point is strongly attracting and a cold start finds it; each
  // step down is warm-started from the last, with a shorter step after a failure and a longer
  // one after a success.
  const double target = z.imag();
  double height = std::max(4.0 * scale, 2.0 * target);
  SubordinationPoint p = solve(cd(z.real(), height));
  double ratio = 0.25;
  for (int failures = 0; height > target;) {
    const double next = std::max(target, height * ratio);
    try {
      p = solve(cd(z.real(), next), &p.omega1, false);
      height = next;
      ratio = std::max(1e-3, 0.5 * ratio);
    } catch (const NumericalError&) {
      ratio = std::sqrt(ratio);
      if (++failures > 40) {
        // The continuation stalled: a cold start at z itself is the last resort.
        if (start != nullptr || descend) {
          try {
            return solve(z);
          } catch (const NumericalError&) {
          }
        }
        throw NumericalError(describe() + ": subordination did not converge at z = " +
                             text::readable(z.real()) + "+" +
                             text::readable(z.imag()) + "i (continuation stalled at " +
                             text::readable(height) + "i)");
      }
    }
  }
  p.z = z;
  return p;
}

const Interval* SubordinatedLaw::band_of(double x) const {
  const auto& bands = support_.bands;
  auto it = std::upper_bound(bands.begin(), bands.end(), x,
                             [](double v, const Interval& b) { return v < b.lo; });
  if (it == bands.begin()) return nullptr;
  --it;
  return x <= it->hi ? &*it : nullptr;
}

double SubordinatedLaw::density_at(double x, cd& warm, bool& have_warm) const {
  const Interval* band = band_of(x);
  if (band == nullptr || !(x > band->lo && x < band->hi)) return 0.0;
  // Distance to the axis: ε·width in the bulk, shrinking in proportion to the distance to the
  // nearest edge of the band, so the Cauchy-kernel smoothing error (relative size ε/distance)
  // stays ~ε up to the edges; for ⊠ with its support starting at 0 this is ε·x, the
  // scale-invariant choice.
  const double width = continuous_hi_ - continuous_lo_;
  const double gap = std::min({x - band->lo, band->hi - x, width});
  double distance = std::max(options_.epsilon * gap, 1e-300);
  cd z(x, distance);
  SubordinationPoint p;
  for (;;) {
    try {
      p = solve_robust(z, have_warm ? &warm : nullptr);
      break;
    } catch (const NumericalError&) {
      // Very close to an edge the fixed point is ill-conditioned (f' → 1 there); step back from
      // the axis, up to the bulk distance, before giving up.
      if (distance >= epsilon_abs_) throw;
      distance = std::min(epsilon_abs_, 100.0 * distance);
      z = cd(x, distance);
      have_warm = false;
    }
  }
  warm = p.omega1;
  have_warm = true;
  // Polish to ε → 0: the boundary value of the subordination function at real x solves the same
  // equation, and where it stays off the axis Newton from the ε-solution reaches it.
  cd omega = p.omega1;
  cd g;
  double value;
  if (polish(x, omega, g)) {
    value = -g.imag() / kPi;  // atoms off x contribute real terms only
  } else {
    value = -(p.cauchy - atom_cauchy(z)).imag() / kPi;
  }
  return std::max(0.0, value);
}

double SubordinatedLaw::density(double x) const {
  cd warm;
  bool have_warm = false;
  return density_at(x, warm, have_warm);
}

std::vector<double> SubordinatedLaw::densities(std::span<const double> xs) const {
  std::vector<double> out;
  out.reserve(xs.size());
  cd warm;
  bool have_warm = false;
  for (double x : xs) out.push_back(density_at(x, warm, have_warm));
  return out;
}

cd SubordinatedLaw::cauchy(cd z) const {
  if (z.imag() < 0.0) return std::conj(cauchy(std::conj(z)));
  if (z.imag() == 0.0) {
    // On the real axis outside the support G is real: take it from just above the axis.
    const cd g = solve_robust(cd(z.real(), 1e-3 * epsilon_abs_)).cauchy;
    if (band_of(z.real()) == nullptr) return g.real();
    return g;
  }
  return solve_robust(z).cauchy;
}

// -------------------------------------------------------------------------------------- bands
//
// A real x lies outside the support exactly when the subordination map f_x has a real fixed point
// w with f_x'(w) < 1: inside the support the Denjoy–Wolff point of f_x lies off the axis, and then
// every fixed point on the axis is repelling, f_x'(w) > 1 (Julia–Wolff–Carathéodory; the boundary
// behaviour of subordination functions is Belinschi & Bercovici 2007). At an edge the attracting
// real fixed point meets a repelling one (f_x' = 1) and leaves the axis, so near an edge on the
// outside q(x) = (1 − f_x'(w))² vanishes linearly in the distance to the edge: the secant of q
// through two outside points lands on the edge with an error of the order of the squared distance.
bool SubordinatedLaw::other_form(int, double, double, double&) const { return false; }

bool SubordinatedLaw::axis_fixed_point(int form, double x, double& w, double& slope) const {
  // Newton on φ(v) = f_x(v) − v, to a tiny step or until the residual stops falling at the
  // rounding level of the map (which can sit near 1e-11 where a law's G is a difference of logs).
  double v = w;
  double best = std::numeric_limits<double>::infinity();
  int stalls = 0;
  for (int i = 0; i < 100; ++i) {
    double f = 0.0, df = 0.0;
    if (!real_map(form, x, v, f, df)) return false;
    const double phi = f - v;
    const double dphi = df - 1.0;
    if (dphi == 0.0 || !std::isfinite(phi) || !std::isfinite(dphi)) return false;
    const double size = 1.0 + std::abs(v);
    if (std::abs(phi) >= best && std::abs(phi) <= 1e-10 * size) ++stalls;
    best = std::min(best, std::abs(phi));
    const double step = phi / dphi;
    // A residual that stalls at rounding level is a fixed point only if Newton's step there is
    // small too. Where the map is nearly the identity (½δ₋₁ + ½δ₁ twice, near x = 0: f(v) − v =
    // O(x) for every v) the residual is tiny everywhere while the step is of order 1.
    if (stalls >= 2 && std::abs(step) > 1e-6 * size) return false;
    if (std::abs(step) <= 1e-13 * size || stalls >= 2) {
      if (!(df < 1.0) || std::abs(phi) > 1e-10 * size) return false;
      w = v;
      slope = 1.0 - df;
      return true;
    }
    v -= step;
    if (!std::isfinite(v)) return false;
  }
  return false;
}

SubordinatedLaw::AxisPoint SubordinatedLaw::axis_start(const SubordinationPoint& p) const {
  // The subordination function that stayed finite (ω1 runs off to infinity where G vanishes in
  // a gap), real part only.
  if (real_forms() > 1 && !(std::abs(p.omega1) <= std::abs(p.omega2))) {
    return AxisPoint{1, p.omega2.real(), 0.0};
  }
  return AxisPoint{0, p.omega1.real(), 0.0};
}

bool SubordinatedLaw::outside(double x, AxisPoint& p) const {
  double w = p.w;
  if (axis_fixed_point(p.form, x, w, p.slope)) {
    p.w = w;
    return true;
  }
  for (int form = 0; form < real_forms(); ++form) {
    if (form == p.form || !other_form(p.form, x, p.w, w)) continue;
    if (axis_fixed_point(form, x, w, p.slope)) {
      p.form = form;
      p.w = w;
      return true;
    }
  }
  return false;
}

bool SubordinatedLaw::x_of_fixed_point(int form, double w, double x0, double& x,
                                       double& slope) const {
  // The secant method in x on φ(x) = f_x(w) − w: at an edge ∂φ/∂x stays away from 0 while
  // ∂φ/∂w vanishes, so this is well conditioned exactly where Newton in w is not.
  double f = 0.0, df = 0.0;
  auto phi = [&](double at) {
    if (!real_map(form, at, w, f, df)) return std::numeric_limits<double>::quiet_NaN();
    return f - w;
  };
  double xa = x0;
  double pa = phi(xa);
  double xb = x0 + 1e-6 * (1.0 + std::abs(x0));
  double pb = phi(xb);
  for (int i = 0; i < 60; ++i) {
    if (!std::isfinite(pa) || !std::isfinite(pb)) return false;
    if (std::abs(pb) <= 1e-15 * (1.0 + std::abs(w)) || pb == pa) break;
    const double next = xb - pb * (xb - xa) / (pb - pa);
    xa = xb;
    pa = pb;
    xb = next;
    pb = phi(xb);
  }
  if (!std::isfinite(pb) || std::abs(pb) > 1e-12 * (1.0 + std::abs(w))) return false;
  x = xb;
  slope = 1.0 - df;
  return true;
}

double SubordinatedLaw::edge_between(double x_out, AxisPoint p, double x_in) const {
  if (!outside(x_out, p)) return 0.5 * (x_out + x_in);
  // 1. Bisection on "outside" down to a bracket of 1e-9 of the scale: reliable while the
  //    distance to the edge is far above the rounding level of the map.
  const double scale = std::max({1.0, std::abs(x_out), std::abs(x_in),
                                 continuous_hi_ - continuous_lo_});
  double xa = x_out, xb = x_in;
  AxisPoint pa = p, pp = p;
  double x_previous = x_out;
  bool have_previous = false;
  while (std::abs(xb - xa) > 1e-9 * scale) {
    const double mid = 0.5 * (xa + xb);
    AxisPoint pc = pa;
    if (outside(mid, pc)) {
      pp = pa;
      x_previous = xa;
      have_previous = true;
      xa = mid;
      pa = pc;
    } else {
      xb = mid;
    }
  }
  const double fallback = 0.5 * (xa + xb);
  if (have_previous && pp.form != pa.form) {
    // Newton fell back to the other form near the fold: carry the farther point over to it.
    double w = 0.0;
    if (other_form(pp.form, x_previous, pp.w, w)) pp = AxisPoint{pa.form, w, pp.slope};
  }
  if (!have_previous || pp.form != pa.form || pp.w == pa.w) return fallback;
  // 2. Along the real fixed point: the edge is where it turns from attracting (1 − f' > 0) to
  //    repelling, a simple sign change of 1 − f' in w; x(w) solves f_x(w) = w. March in w (the
  //    direction the fixed point moved towards the edge) until the sign changes, then bisect.
  // The march starts from the farther of the last two outside points: the nearer one may sit
  // within the rounding level of the fold, where its w is inaccurate.
  const int form = pa.form;
  const double direction = pa.w > pp.w ? 1.0 : -1.0;
  double step = 0.25 * std::abs(pa.w - pp.w);
  double w_lo = pp.w, x_lo = x_previous;
  double w_hi = 0.0;
  bool bracketed = false;
  for (int k = 0; k < 80 && !bracketed; ++k) {
    const double w = w_lo + direction * step;
    double xw = 0.0, g = 0.0;
    if (!x_of_fixed_point(form, w, x_lo, xw, g)) {
      step *= 0.5;
      continue;
    }
    if (g <= 0.0) {
      w_hi = w;
      bracketed = true;
    } else {
      w_lo = w;
      x_lo = xw;
      step *= 2.0;
    }
  }
  if (!bracketed) return fallback;
  double x_edge = x_lo;
  for (int i = 0; i < 200; ++i) {
    if (std::abs(w_hi - w_lo) <= 4.0 * std::numeric_limits<double>::epsilon() *
                                      (1.0 + std::abs(w_lo))) {
      break;
    }
    const double w = 0.5 * (w_lo + w_hi);
    double xw = 0.0, g = 0.0;
    if (!x_of_fixed_point(form, w, x_lo, xw, g)) break;
    if (g > 0.0) {
      w_lo = w;
      x_lo = xw;
      x_edge = xw;
    } else {
      w_hi = w;
    }
  }
  // The edge must lie where the bisection on "outside" put it.
  if (std::abs(x_edge - fallback) > 1e-6 * scale) return fallback;
  return x_edge;
}

namespace {

// The gaps of the grid's runs of outside points: each run's edges, located by
// `edge(x_out, w_out, x_in)` from its first and last points towards their neighbours inside.
template <class Point, class Edge>
std::vector<Interval> gaps_of_outside_runs(const std::vector<double>& xs,
                                           const std::vector<Point>& ws,
                                           const std::vector<char>& out, double lo, double hi,
                                           const Edge& edge) {
  const int kGrid = static_cast<int>(xs.size());
  std::vector<Interval> gaps;
  for (int i = 0; i < kGrid;) {
    if (!out[i]) {
      ++i;
      continue;
    }
    int j = i;
    while (j + 1 < kGrid && out[j + 1]) ++j;
    const double left = edge(xs[i], ws[i], i > 0 ? xs[i - 1] : lo);
    const double right = edge(xs[j], ws[j], j + 1 < kGrid ? xs[j + 1] : hi);
    if (right > left) gaps.push_back({left, right});
    i = j + 1;
  }
  return gaps;
}

// A golden-section search of [a, b] for the minimum of the density, stopped at the first point
// `probe` finds outside the support: true with that point (the last one when both first probes
// are outside) in x_found, w_found.
template <class Point, class Probe>
bool golden_section_outside(double a, double b, const Probe& probe, double& x_found,
                            Point& w_found) {
  const double r = 0.5 * (std::sqrt(5.0) - 1.0);
  double c = b - r * (b - a), d = a + r * (b - a);
  double fc = 0.0, fd = 0.0;
  Point wc, wd;
  bool found = false;
  auto look = [&](double x, double& f, Point& w) {
    if (probe(x, f, w)) {
      found = true;
      x_found = x;
      w_found = w;
    }
  };
  look(c, fc, wc);
  look(d, fd, wd);
  for (int k = 0; k < 60 && !found; ++k) {
    if (fc < fd) {
      b = d;
      d = c;
      fd = fc;
      c = b - r * (b - a);
      look(c, fc, wc);
    } else {
      a = c;
      c = d;
      fc = fd;
      d = a + r * (b - a);
      look(d, fd, wd);
    }
    if (b - a <= 1e-15 * std::max(1.0, std::abs(a))) break;
  }
  return found;
}

// Adds to `gaps` the gaps narrower than the grid: at each local minimum of the density between
// inside points, a golden-section search for an outside point, whose edges `edge` locates.
template <class Point, class Probe, class Edge>
void add_gaps_at_density_minima(const std::vector<double>& xs, const std::vector<double>& dens,
                                const std::vector<char>& out, const Probe& probe,
                                const Edge& edge, std::vector<Interval>& gaps) {
  const int kGrid = static_cast<int>(xs.size());
  int searches = 0;
  for (int i = 1; i + 1 < kGrid && searches < 4 * kGrid; ++i) {
    if (out[i - 1] || out[i] || out[i + 1]) continue;
    if (!(dens[i] < dens[i - 1] && dens[i] <= dens[i + 1])) continue;
    ++searches;
    double x_found = 0.0;
    Point w_found;
    if (!golden_section_outside(xs[i - 1], xs[i + 1], probe, x_found, w_found)) continue;
    const double left = edge(x_found, w_found, xs[i - 1]);
    const double right = edge(x_found, w_found, xs[i + 1]);
    if (right > left) gaps.push_back({left, right});
  }
}

// Appends to `bands` the pieces of [lo, hi] between the gaps (sorted here, merged where they
// overlap or touch).
void add_bands_between_gaps(std::vector<Interval>& gaps, double lo, double hi,
                            std::vector<Interval>& bands) {
  std::sort(gaps.begin(), gaps.end(),
            [](const Interval& l, const Interval& r) { return l.lo < r.lo; });
  double start = lo;
  for (const Interval& g : gaps) {
    if (g.lo <= start) {  // overlapping or touching the previous gap: merge
      start = std::max(start, g.hi);
      continue;
    }
    bands.push_back({start, std::min(g.lo, hi)});
    start = g.hi;
  }
  if (hi > start) bands.push_back({start, hi});
}

}  // namespace

void SubordinatedLaw::find_bands() {
  support_.bands.clear();
  if (!(continuous_hi_ > continuous_lo_)) return;
  // The outer edges, first found by walking the real subordination functions in from infinity,
  // are polished by the same criterion as the interior ones (1 − f' changing sign), which
  // takes them from about 1e-8 to rounding level.
  auto polish_edge = [&](double edge, double direction) {
    const double h = 1e-6 * std::max(1.0, continuous_hi_ - continuous_lo_);
    const double x_out = edge + direction * h;
    const double x_in = edge - direction * h;
    try {
      AxisPoint a = axis_start(solve_robust(cd(x_out, 1e-3 * h)));
      AxisPoint inside = a;
      if (!outside(x_out, a) || outside(x_in, inside)) return edge;
      return edge_between(x_out, a, x_in);
    } catch (const NumericalError&) {
      return edge;
    }
  };
  continuous_hi_ = polish_edge(continuous_hi_, 1.0);
  if (continuous_lo_ != 0.0) continuous_lo_ = polish_edge(continuous_lo_, -1.0);
  finish_support();
  const double lo = continuous_lo_;
  const double hi = continuous_hi_;
  if (!(hi > lo)) return;
  // A grid over the hull: each point is inside or outside; a run of outside points is a gap
  // whose two edges are then located exactly. A gap narrower than the grid shows as a local
  // minimum of the density, which a golden-section search takes down to its bottom.
  // Laws with many atoms have many narrow bands: the grid grows with their number.
  const int kGrid = static_cast<int>(std::clamp<std::size_t>(16 * atoms_in_inputs(), 512, 16384));
  const double height = 1e-6 * (hi - lo);
  std::vector<double> xs(kGrid), dens(kGrid);
  std::vector<AxisPoint> ws(kGrid);
  std::vector<char> out(static_cast<std::size_t>(kGrid), 0);
  cd warm;
  bool have_warm = false;
  auto probe = [&](double x, double& density, AxisPoint& w) {
    const cd z(x, height);
    const SubordinationPoint p = solve_robust(z, have_warm ? &warm : nullptr);
    warm = p.omega1;
    have_warm = finite(warm);
    density = -(p.cauchy - atom_cauchy(z)).imag() / kPi;
    w = axis_start(p);
    return outside(x, w);
  };
  for (int i = 0; i < kGrid; ++i) {
    xs[i] = lo + (hi - lo) * (i + 0.5) / kGrid;
    out[i] = probe(xs[i], dens[i], ws[i]) ? 1 : 0;
  }
  const auto edge = [&](double x_out, const AxisPoint& w, double x_in) {
    return edge_between(x_out, w, x_in);
  };
  std::vector<Interval> gaps = gaps_of_outside_runs(xs, ws, out, lo, hi, edge);
  add_gaps_at_density_minima<AxisPoint>(xs, dens, out, probe, edge, gaps);
  add_bands_between_gaps(gaps, lo, hi, support_.bands);
  snap_edges_to_singular_points();
  drop_traces_of_atoms();
}

// A band narrower than 1e-6 of the hull that holds a point mass is that mass's trace, not a band:
// the ⊠ rule with a point mass at 0 (S W S, S singular) showed [0, 5.1e-9] beside the mass 0.3
// at 0, a band of mass 1e-33, because the gap's edge next to the point mass is located only to
// about 1e-8 of the hull.
void SubordinatedLaw::drop_traces_of_atoms() {
  if (support_.bands.size() < 2) return;
  const double hull = support_.bands.back().hi - support_.bands.front().lo;
  const double tolerance = 1e-6 * hull;
  const auto trace = [&](const Interval& b) {
    return b.hi - b.lo <= tolerance &&
           std::any_of(support_.atoms.begin(), support_.atoms.end(), [&](const Atom& a) {
             return a.value >= b.lo - tolerance && a.value <= b.hi + tolerance;
           });
  };
  const std::size_t before = support_.bands.size();
  std::erase_if(support_.bands, trace);
  if (support_.bands.size() == before || support_.bands.empty()) return;
  continuous_lo_ = support_.bands.front().lo;
  continuous_hi_ = support_.bands.back().hi;
  finish_support();
}

// An edge at a singular point (a double critical point of the subordination map, where the
// density grows like |x − c|^(−1/2)) is located only to about 1e-8 by the sign change of 1 − f'
// (for s b s with b = −1, +1 of weights 0.3, 0.7 the edge at 0 came out at −6.8e-9, which left
// a sliver of gap inside the table). Such an edge is the singular point itself: it is set to it.
void SubordinatedLaw::snap_edges_to_singular_points() {
  const std::vector<double> points = interior_singular_points();
  if (points.empty() || support_.bands.empty()) return;
  const double tolerance =
      1e-6 * std::max(1.0, support_.bands.back().hi - support_.bands.front().lo);
  std::vector<Interval> kept;
  for (Interval band : support_.bands) {
    for (const double c : points) {
      if (std::abs(band.lo - c) <= tolerance) band.lo = c;
      if (std::abs(band.hi - c) <= tolerance) band.hi = c;
    }
    if (band.hi > band.lo) kept.push_back(band);
  }
  support_.bands = std::move(kept);
  if (support_.bands.empty()) return;
  continuous_lo_ = support_.bands.front().lo;
  continuous_hi_ = support_.bands.back().hi;
  finish_support();
}

namespace {

// x = lo + half(1 − cos θ), written so that both edges keep full relative precision.
double x_of_theta(double lo, double hi, double theta) {
  const double half = 0.5 * (hi - lo);
  if (theta <= 0.5 * kPi) return lo + 2.0 * half * std::pow(std::sin(0.5 * theta), 2);
  return hi - 2.0 * half * std::pow(std::cos(0.5 * theta), 2);
}

double theta_of_x(double lo, double hi, double x) {
  const double half = 0.5 * (hi - lo);
  if (x - lo <= hi - x)
    return 2.0 * std::asin(std::sqrt(std::clamp((x - lo) / (2.0 * half), 0.0, 1.0)));
  return kPi - 2.0 * std::asin(std::sqrt(std::clamp((hi - x) / (2.0 * half), 0.0, 1.0)));
}

// The width of the unsampled layer next to `edge` of a band of width `width`; at a singular
// point it is 100 ε wide (ε = epsilon_abs, the distance of the solves to the axis).
double edge_layer(double edge, bool singular, double width, double epsilon_abs) {
  const double floor = 64.0 * std::numeric_limits<double>::epsilon() * std::abs(edge);
  const double d = std::max(1e-30 * width, std::max(1e-13 * width * (edge != 0.0), floor));
  return singular ? std::max(d, std::min(100.0 * epsilon_abs, 0.25 * width)) : d;
}

// The base breakpoints in θ of a band's table, from theta_lo to theta_hi.
std::vector<double> theta_breakpoints(double theta_lo, double theta_hi) {
  // Graded breakpoints in θ: geometric (ratio 4) towards both edges, uniform in between; the
  // adaptive refinement below adds what a band needs (a square-root edge is smooth in θ).
  std::vector<double> breaks{theta_lo};
  for (int j = 60; j >= 3; j -= 2) {
    const double th = 0.5 * kPi * std::ldexp(1.0, -j);
    if (th > theta_lo) breaks.push_back(th);
  }
  for (int i = 0; i <= 8; ++i) breaks.push_back(0.125 * kPi + 0.75 * kPi * i / 8.0);
  for (int j = 3; j <= 60; j += 2) {
    const double th = kPi - 0.5 * kPi * std::ldexp(1.0, -j);
    if (th < theta_hi) breaks.push_back(th);
  }
  breaks.push_back(theta_hi);
  return breaks;
}

// Integrates `panel` adaptively between the breakpoints, appending each leaf's right end to
// `theta` and the mass up to it (starting from `cumulative`, updated) to `cumulatives`.
template <class Panel>
void integrate_adaptively(const std::vector<double>& breaks, const Panel& panel,
                          double& cumulative, std::vector<double>& theta,
                          std::vector<double>& cumulatives) {
  struct Piece {
    double a, b, whole;
    int depth;
  };
  // The base panels first: their sum estimates the band's mass, and the adaptive refinement
  // stops at 1e-13 of it (a band with a small share of the mass needs no more absolute
  // precision than that; the density itself is accurate to ~1e-12 relative).
  std::vector<double> wholes(breaks.size() - 1);
  double band_mass = 0.0;
  for (std::size_t i = 0; i + 1 < breaks.size(); ++i) {
    wholes[i] = panel(breaks[i], breaks[i + 1]);
    band_mass += wholes[i];
  }
  // The floor of 1e-16 (of the law's unit mass): a band with next to no mass (the ⊠ rule's
  // [0, 5e-9] beside a point mass at 0, of mass 1e-33) otherwise asks for 1e-46, below the
  // density's rounding, and every panel went 24 halvings deep: `limit -o` of S W S with S
  // singular ran for over ten minutes.
  const double tolerance = std::max(1e-13 * band_mass, 1e-16);
  for (std::size_t i = 0; i + 1 < breaks.size(); ++i) {
    std::vector<Piece> stack{{breaks[i], breaks[i + 1], wholes[i], 0}};
    while (!stack.empty()) {
      check_stop();
      Piece p = stack.back();
      stack.pop_back();
      const double mid = 0.5 * (p.a + p.b);
      const double left = panel(p.a, mid);
      const double right = panel(mid, p.b);
      if (p.depth >= 24 || std::abs(left + right - p.whole) <= tolerance) {
        cumulative += left + right;
        theta.push_back(p.b);
        cumulatives.push_back(cumulative);
      } else {
        stack.push_back({mid, p.b, right, p.depth + 1});  // right half after the left one
        stack.push_back({p.a, mid, left, p.depth + 1});
      }
    }
  }
}

}  // namespace

SubordinatedLaw::BandTable SubordinatedLaw::build_table(double lo, double hi, bool singular_lo,
                                                        bool singular_hi) const {
  BandTable t;
  t.lo = lo;
  t.hi = hi;
  if (!(hi > lo)) return t;
  const double width = hi - lo;
  const double half = 0.5 * width;
  // The last layer next to an edge is not sampled (doubles cannot resolve it next to a nonzero
  // edge); its mass comes from the local power law f ≈ A d^β fitted at d and 2d (d the layer
  // width), which covers square-root, inverse-square-root and x^{−2/3} edges alike.
  // At a singular point the density is accurate only from about 100 ε from it (ε the distance
  // of the solves to the axis; closer, Newton from x + iε no longer reaches the axis's value),
  // so the layer there is 100 ε wide: the power law holds across it to far below 1e-9 of mass.
  const double d_left = edge_layer(lo, singular_lo, width, epsilon_abs_);
  const double d_right = edge_layer(hi, singular_hi, width, epsilon_abs_);
  cd warm;
  bool have_warm = false;
  auto tail = [&](double edge, double d, double direction, double& beta) {
    const double f1 = density_at(edge + direction * d, warm, have_warm);
    const double f2 = density_at(edge + direction * 2.0 * d, warm, have_warm);
    have_warm = false;
    beta = (f1 > 0.0 && f2 > 0.0) ? std::log2(f2 / f1) : 0.0;
    if (!(f1 > 0.0) || !(beta > -1.0)) return 0.0;
    return f1 * d / (beta + 1.0);
  };
  t.left_tail = tail(lo, d_left, 1.0, t.left_beta);
  const double right_tail = tail(hi, d_right, -1.0, t.right_beta);
  const double theta_lo = theta_of_x(lo, hi, lo + d_left);
  const double theta_hi = theta_of_x(lo, hi, hi - d_right);
  const std::vector<double> breaks = theta_breakpoints(theta_lo, theta_hi);
  const detail::GaussRule& rule = detail::gauss_legendre(16);
  auto panel = [&](double a, double b) {
    double sum = 0.0;
    for (std::size_t i = 0; i < rule.nodes.size(); ++i) {
      const double th = 0.5 * (a + b) + 0.5 * (b - a) * rule.nodes[i];
      sum +=
          rule.weights[i] * density_at(x_of_theta(lo, hi, th), warm, have_warm) * half * std::sin(th);
    }
    return 0.5 * (b - a) * sum;
  };
  double cumulative = t.left_tail;
  t.theta.push_back(theta_lo);
  t.cumulative.push_back(cumulative);
  integrate_adaptively(breaks, panel, cumulative, t.theta, t.cumulative);
  t.theta.push_back(kPi);
  t.cumulative.push_back(cumulative + right_tail);
  return t;
}

// The continuous mass of one band up to x, lo < x < hi.
double SubordinatedLaw::band_cdf(const BandTable& t, double x) const {
  const double lo = t.lo;
  const double hi = t.hi;
  if (t.theta.size() < 2) return 0.0;
  const double half = 0.5 * (hi - lo);
  const double theta = theta_of_x(lo, hi, x);
  if (theta <= t.theta.front()) {
    // Inside the unsampled edge layer: the fitted power law.
    const double d_layer = x_of_theta(lo, hi, t.theta.front()) - lo;
    return t.left_tail * std::pow((x - lo) / d_layer, t.left_beta + 1.0);
  }
  if (theta >= t.theta[t.theta.size() - 2]) {
    const double d_layer = hi - x_of_theta(lo, hi, t.theta[t.theta.size() - 2]);
    const double right_tail = t.cumulative.back() - t.cumulative[t.cumulative.size() - 2];
    return t.cumulative.back() - right_tail * std::pow((hi - x) / d_layer, t.right_beta + 1.0);
  }
  const auto it = std::upper_bound(t.theta.begin(), t.theta.end(), theta);
  const std::size_t leaf = static_cast<std::size_t>(std::distance(t.theta.begin(), it)) - 1;
  const double a = t.theta[leaf];
  const detail::GaussRule& rule = detail::gauss_legendre(16);
  cd warm;
  bool have_warm = false;
  double sum = 0.0;
  for (std::size_t i = 0; i < rule.nodes.size(); ++i) {
    const double th = 0.5 * (a + theta) + 0.5 * (theta - a) * rule.nodes[i];
    sum += rule.weights[i] * density_at(x_of_theta(lo, hi, th), warm, have_warm) * half *
           std::sin(th);
  }
  return t.cumulative[leaf] + 0.5 * (theta - a) * sum;
}

double SubordinatedLaw::cdf(double x) const {
  std::call_once(table_once_, [this] {
    try {
      std::vector<BandTable> tables;
      std::vector<double> splits = interior_singular_points();
      std::sort(splits.begin(), splits.end());
      for (const Interval& band : support_.bands) {
        double lo = band.lo;
        auto singular = [&](double x) {
          return std::find(splits.begin(), splits.end(), x) != splits.end();
        };
        for (const double c : splits) {
          if (c > lo && c < band.hi) {
            tables.push_back(build_table(lo, c, singular(lo), true));
            lo = c;
          }
        }
        tables.push_back(build_table(lo, band.hi, singular(lo), singular(band.hi)));
      }
      tables_ = std::move(tables);
    } catch (const NumericalError& e) {
      table_error_ = std::string("the CDF of ") + describe() + " could not be tabulated: " + e.what();
    }
  });
  if (!table_error_.empty()) throw NumericalError(table_error_);
  double total = 0.0;
  for (const Atom& a : support_.atoms) {
    if (a.value <= x) total += a.weight;
  }
  for (const BandTable& t : tables_) {
    if (t.cumulative.empty() || x <= t.lo) continue;
    total += x >= t.hi ? t.cumulative.back() : band_cdf(t, x);
  }
  return std::clamp(total, 0.0, 1.0);
}

// ------------------------------------------------------------------------------------- ⊞
// Where an atom a of μ and an atom b of ν have masses summing to exactly 1, μ ⊞ ν has no atom at
// a + b (the mass max(0, μ({a}) + ν({b}) − 1) is 0) but its density can be unbounded there: for
// two free Poisson laws of rate ½ with jumps +1 and −1 (the law of s b s, s semicircular,
// b = ±1) it grows like |x|^(−1/3) at 0, as the inverse of z = w³/(w² − 1) near w = 0 shows
// (common practice: the local inversion of the subordination equation); with weights 0.3, 0.7
// the point 0 is an inverse-square-root edge. It need not be singular (for two laws ½δ₋₁ + ½δ₁
// the point 0 is a regular point of the arcsine law); splitting a table there costs only time.
std::vector<double> FreeAdditiveConvolution::interior_singular_points() const {
  std::vector<double> out;
  for (const Atom& a : mu_->support().atoms) {
    for (const Atom& b : nu_->support().atoms) {
      if (std::abs(a.weight + b.weight - 1.0) <= 1e-12) out.push_back(a.value + b.value);
    }
  }
  return out;
}

FreeAdditiveConvolution::FreeAdditiveConvolution(LawPtr mu, LawPtr nu, SubordinationOptions options)
    : mu_(std::move(mu)), nu_(std::move(nu)) {
  options_ = options;
  const Support sm = mu_->support();
  const Support sn = nu_->support();
  // Atoms: (μ⊞ν)({a+b}) = max(0, μ({a}) + ν({b}) − 1) (Bercovici & Voiculescu 1998, from memory).
  for (const Atom& a : sm.atoms) {
    for (const Atom& b : sn.atoms) {
      if (a.weight + b.weight > 1.0 + 1e-15)
        support_.atoms.push_back({a.value + b.value, a.weight + b.weight - 1.0});
    }
  }
  epsilon_abs_ = options_.epsilon * std::max(1.0, (sm.hi - sm.lo) + (sn.hi - sn.lo));
  far_mu_ = far_field(*mu_);
  far_nu_ = far_field(*nu_);
  continuous_hi_ = additive_right_edge(*mu_, *nu_);
  continuous_lo_ = -additive_right_edge(*affine(mu_, -1.0, 0.0), *affine(nu_, -1.0, 0.0));
  finish_support();
  find_bands();
}

void SubordinatedLaw::finish_support() {
  std::sort(support_.atoms.begin(), support_.atoms.end(),
            [](const Atom& l, const Atom& r) { return l.value < r.value; });
  double atom_mass = 0.0;
  for (const Atom& a : support_.atoms) atom_mass += a.weight;
  if (atom_mass >= 1.0 - 1e-12) continuous_lo_ = continuous_hi_ = support_.atoms.front().value;
  support_.lo = continuous_lo_;
  support_.hi = continuous_hi_;
  for (const Atom& a : support_.atoms) {
    support_.lo = std::min(support_.lo, a.value);
    support_.hi = std::max(support_.hi, a.value);
  }
}

SubordinationPoint SubordinatedLaw::solve_below_axis(cd z, const cd* start, bool cold) const {
  const cd conj_start = start ? std::conj(*start) : cd();
  SubordinationPoint p = solve(std::conj(z), start ? &conj_start : nullptr, cold);
  p.z = z;
  p.omega1 = std::conj(p.omega1);
  p.omega2 = std::conj(p.omega2);
  p.cauchy = std::conj(p.cauchy);
  return p;
}

SubordinationPoint FreeAdditiveConvolution::solve(cd z, const cd* start, bool cold) const {
  if (z.imag() < 0.0) return solve_below_axis(z, start, cold);
  if (z.imag() == 0.0) throw InputError("free_additive: solve needs z off the real axis");
  auto map = [&](cd w) {
    const HValue hm = h_additive(*mu_, far_mu_, w);
    const HValue hn = h_additive(*nu_, far_nu_, z + hm.h);
    return MapValue{z + hn.h, hn.dh * hm.dh};
  };
  try {
    SubordinationPoint p =
        fixed_point(map, z + cd(0.0, 2.0), start, cold, 1.0, options_, "free_additive", z);
    p.omega2 = z + h_additive(*mu_, far_mu_, p.omega1).h;
    p.cauchy = mu_->cauchy(p.omega1);
    if (finite(p.cauchy) && finite(p.omega2)) return p;
  } catch (const NumericalError&) {
  }
  // Where G(z) is near 0 (in a gap of the support), ω1 runs off to infinity while ω2 stays
  // finite: solve for ω2 instead, from ω2 = z + h_μ(ω1) of the start.
  cd start2;
  if (start != nullptr) start2 = z + h_additive(*mu_, far_mu_, *start).h;
  return solve_second(z, start != nullptr && finite(start2) ? &start2 : nullptr, cold);
}

SubordinationPoint FreeAdditiveConvolution::solve_second(cd z, const cd* start, bool cold) const {
  auto map = [&](cd w) {
    const HValue hn = h_additive(*nu_, far_nu_, w);
    const HValue hm = h_additive(*mu_, far_mu_, z + hn.h);
    return MapValue{z + hm.h, hm.dh * hn.dh};
  };
  SubordinationPoint p =
      fixed_point(map, z + cd(0.0, 2.0), start, cold, 1.0, options_, "free_additive", z);
  p.omega2 = p.omega1;
  p.omega1 = z + h_additive(*nu_, far_nu_, p.omega2).h;
  p.cauchy = nu_->cauchy(p.omega2);
  return p;
}

bool FreeAdditiveConvolution::polish(double x, cd& omega1, cd& g) const {
  auto map = [&](cd w) {
    const HValue hm = h_additive(*mu_, far_mu_, w);
    const HValue hn = h_additive(*nu_, far_nu_, x + hm.h);
    return MapValue{x + hn.h, hn.dh * hm.dh};
  };
  cd w = omega1;
  int steps = 0;
  if (!newton(map, w, 1.0, 40, steps)) return false;
  if ((x + h_additive(*mu_, far_mu_, w).h).imag() <= 0.0) return false;
  omega1 = w;
  g = mu_->cauchy(w);
  return finite(g);
}

namespace {
bool real_enough(cd v) {
  return finite(v) && std::abs(v.imag()) <= 1e-9 * (1.0 + std::abs(v.real()));
}
}  // namespace

// Form 0: ω1 ↦ x + h_ν(x + h_μ(ω1)); form 1: ω2 ↦ x + h_μ(x + h_ν(ω2)).
bool FreeAdditiveConvolution::real_map(int form, double x, double w, double& f, double& df) const {
  const Law& first = form == 0 ? *mu_ : *nu_;
  const Law& second = form == 0 ? *nu_ : *mu_;
  const HValue hm = h_additive(first, form == 0 ? far_mu_ : far_nu_, cd(w, 0.0));
  if (!real_enough(hm.h) || !real_enough(hm.dh)) return false;
  const HValue hn = h_additive(second, form == 0 ? far_nu_ : far_mu_, cd(x + hm.h.real(), 0.0));
  const cd value = x + hn.h;
  const cd slope = hn.dh * hm.dh;
  if (!real_enough(value) || !real_enough(slope)) return false;
  f = value.real();
  df = slope.real();
  return true;
}

bool FreeAdditiveConvolution::other_form(int form, double x, double w, double& out) const {
  const cd h = h_additive(form == 0 ? *mu_ : *nu_, form == 0 ? far_mu_ : far_nu_, cd(w, 0.0)).h;
  if (!real_enough(h)) return false;
  out = x + h.real();
  return std::isfinite(out);
}

cd FreeAdditiveConvolution::cauchy_derivative(cd z) const {
  if (z.imag() < 0.0) return std::conj(cauchy_derivative(std::conj(z)));
  if (z.imag() == 0.0) return Law::cauchy_derivative(z);
  // G = G_μ(ω1), ω1 = f(z, ω1): ω1' = ∂_z f / (1 − ∂_w f), ∂_z f = 1 + h_ν'(ω2).
  const SubordinationPoint p = solve_robust(z);
  const HValue hm = h_additive(*mu_, far_mu_, p.omega1);
  const HValue hn = h_additive(*nu_, far_nu_, p.omega2);
  const cd d_omega = (1.0 + hn.dh) / (1.0 - hn.dh * hm.dh);
  return mu_->cauchy_derivative(p.omega1) * d_omega;
}

// R-transform additivity: κ_n(μ⊞ν) = κ_n(μ) + κ_n(ν) (Voiculescu 1986).
std::vector<double> FreeAdditiveConvolution::moments(int k) const {
  if (k < 0) throw InputError("moments: order must be >= 0 (got " + std::to_string(k) + ")");
  const std::vector<double> a = free_cumulants(mu_->moments(k));
  const std::vector<double> b = free_cumulants(nu_->moments(k));
  std::vector<double> kappa(k + 1, 0.0);
  for (int n = 1; n <= k; ++n) kappa[n] = a[n] + b[n];
  return moments_from_free_cumulants(kappa);
}

std::size_t FreeAdditiveConvolution::atoms_in_inputs() const {
  return mu_->support().atoms.size() + nu_->support().atoms.size();
}

std::string FreeAdditiveConvolution::describe() const {
  return "(" + mu_->describe() + ") ⊞ (" + nu_->describe() + ")";
}

// ------------------------------------------------------------------------------------- ⊠
FreeMultiplicativeConvolution::FreeMultiplicativeConvolution(LawPtr mu, LawPtr nu,
                                                             SubordinationOptions options)
    : mu_(std::move(mu)), nu_(std::move(nu)) {
  options_ = options;
  const Support sm = mu_->support();
  const Support sn = nu_->support();
  // Atoms (Belinschi 2003, from memory): at 0 the larger of the two masses at 0; at ab ≠ 0 the
  // mass μ({a}) + ν({b}) − 1 when positive.
  const double zero = std::max(mu_->mass_at(0.0), nu_->mass_at(0.0));
  if (zero > 0.0) support_.atoms.push_back({0.0, zero});
  for (const Atom& a : sm.atoms) {
    for (const Atom& b : sn.atoms) {
      if (a.value != 0.0 && b.value != 0.0 && a.weight + b.weight > 1.0 + 1e-15) {
        support_.atoms.push_back({a.value * b.value, a.weight + b.weight - 1.0});
      }
    }
  }
  epsilon_abs_ = options_.epsilon * std::max(1.0, sm.hi * sn.hi);
  continuous_hi_ = multiplicative_right_edge(*mu_, *nu_);
  if (sm.lo > 0.0 && sn.lo > 0.0) {
    const Reciprocal rm(mu_);
    const Reciprocal rn(nu_);
    continuous_lo_ = 1.0 / multiplicative_right_edge(rm, rn);
  } else {
    continuous_lo_ = 0.0;
  }
  finish_support();
  find_bands();
}

SubordinationPoint FreeMultiplicativeConvolution::solve(cd z, const cd* start, bool cold) const {
  if (z.imag() < 0.0) return solve_below_axis(z, start, cold);
  if (z.imag() == 0.0) throw InputError("free_multiplicative: solve needs z off the real axis");
  // ζ = 1/z lies in the lower half-plane, and so does ω1(ζ); G(z) = ζ/(1 − η_μ(ω1(ζ))).
  const cd zeta = 1.0 / z;
  auto map = [&](cd w) {
    const HValue hm = h_multiplicative(*mu_, w);
    const HValue hn = h_multiplicative(*nu_, zeta * hm.h);
    return MapValue{zeta * hn.h, zeta * hn.dh * zeta * hm.dh};
  };
  SubordinationPoint p =
      fixed_point(map, zeta, start, cold, -1.0, options_, "free_multiplicative", z);
  const HValue hm = h_multiplicative(*mu_, p.omega1);
  p.omega2 = zeta * hm.h;
  p.cauchy = zeta / (1.0 - p.omega1 * hm.h);
  return p;
}

bool FreeMultiplicativeConvolution::polish(double x, cd& omega1, cd& g) const {
  if (x <= 0.0) return false;
  const double zeta = 1.0 / x;
  auto map = [&](cd w) {
    const HValue hm = h_multiplicative(*mu_, w);
    const HValue hn = h_multiplicative(*nu_, zeta * hm.h);
    return MapValue{zeta * hn.h, zeta * hn.dh * zeta * hm.dh};
  };
  cd w = omega1;
  int steps = 0;
  if (!newton(map, w, -1.0, 40, steps)) return false;
  const HValue hm = h_multiplicative(*mu_, w);
  if ((zeta * hm.h).imag() >= 0.0) return false;
  omega1 = w;
  g = zeta / (1.0 - w * hm.h);
  return finite(g);
}

bool FreeMultiplicativeConvolution::real_map(int, double x, double w, double& f,
                                             double& df) const {
  if (!(x > 0.0)) return false;
  const double zeta = 1.0 / x;
  const HValue hm = h_multiplicative(*mu_, cd(w, 0.0));
  if (!real_enough(hm.h) || !real_enough(hm.dh)) return false;
  const HValue hn = h_multiplicative(*nu_, cd(zeta * hm.h.real(), 0.0));
  const cd value = zeta * hn.h;
  const cd slope = zeta * hn.dh * zeta * hm.dh;
  if (!real_enough(value) || !real_enough(slope)) return false;
  f = value.real();
  df = slope.real();
  return true;
}

cd FreeMultiplicativeConvolution::cauchy_derivative(cd z) const {
  if (z.imag() < 0.0) return std::conj(cauchy_derivative(std::conj(z)));
  if (z.imag() == 0.0) return Law::cauchy_derivative(z);
  // G = ζ/(1 − η), η = η_μ(ω1(ζ)), η_μ' = h + w h'; ω1' = ∂_ζ f/(1 − ∂_w f) with
  // ∂_ζ f = h_ν(ω2) + ζ h_ν'(ω2) h_μ(ω1); dG/dz = −(1/z²) dG/dζ.
  const SubordinationPoint p = solve_robust(z);
  const cd zeta = 1.0 / z;
  const HValue hm = h_multiplicative(*mu_, p.omega1);
  const HValue hn = h_multiplicative(*nu_, p.omega2);
  const cd eta = p.omega1 * hm.h;
  const cd d_eta_dw = hm.h + p.omega1 * hm.dh;
  const cd df_dzeta = hn.h + zeta * hn.dh * hm.h;
  const cd df_dw = zeta * hn.dh * zeta * hm.dh;
  const cd d_omega = df_dzeta / (1.0 - df_dw);
  const cd dg_dzeta = 1.0 / (1.0 - eta) + zeta * d_eta_dw * d_omega / ((1.0 - eta) * (1.0 - eta));
  return -dg_dzeta * zeta * zeta;
}

// S_{μ⊠ν} = S_μ S_ν with S = χ(z)(1 + z)/z, χ the inverse of ψ(z) = Σ_{n≥1} m_n zⁿ (Voiculescu
// 1987), all as truncated power series.
std::vector<double> FreeMultiplicativeConvolution::moments(int k) const {
  if (k < 0) throw InputError("moments: order must be >= 0 (got " + std::to_string(k) + ")");
  std::vector<double> out(k + 1, 0.0);
  out[0] = 1.0;
  if (k == 0) return out;
  const std::vector<double> a = mu_->moments(k);
  const std::vector<double> b = nu_->moments(k);
  if (a[1] == 0.0 || b[1] == 0.0) return out;  // one factor is δ_0, so is the product
  auto s_series = [&](const std::vector<double>& m) {
    std::vector<long double> psi(k + 1, 0.0L);
    for (int n = 1; n <= k; ++n) psi[n] = m[n];
    const std::vector<long double> chi = revert(psi, k);
    std::vector<long double> s(k, 0.0L);  // S to degree k − 1
    for (int n = 0; n < k; ++n) s[n] = chi[n + 1] + (n > 0 ? chi[n] : 0.0L);
    return s;
  };
  const std::vector<long double> s = multiply(s_series(a), s_series(b), k - 1);
  std::vector<long double> chi(k + 1, 0.0L);  // χ = S·z/(1 + z)
  for (int n = 1; n <= k; ++n) {
    long double sum = 0.0L;
    for (int j = 0; j < n; ++j) sum += s[j] * (((n - 1 - j) % 2) ? -1.0L : 1.0L);
    chi[n] = sum;
  }
  const std::vector<long double> psi = revert(chi, k);
  for (int n = 1; n <= k; ++n) out[n] = static_cast<double>(psi[n]);
  return out;
}

std::size_t FreeMultiplicativeConvolution::atoms_in_inputs() const {
  return mu_->support().atoms.size() + nu_->support().atoms.size();
}

std::string FreeMultiplicativeConvolution::describe() const {
  return "(" + mu_->describe() + ") ⊠ (" + nu_->describe() + ")";
}

// ------------------------------------------------------------------------------- factories
std::shared_ptr<const FreeAdditiveConvolution> free_additive(LawPtr mu, LawPtr nu,
                                                             SubordinationOptions options) {
  if (!mu || !nu) throw InputError("free_additive: a law is null");
  if (mu->radial() || nu->radial()) {
    throw InputError(
        "free_additive: a radial law (circular) has no free additive convolution here");
  }
  if (!(options.epsilon > 0.0)) throw InputError("free_additive: epsilon must be > 0");
  return std::make_shared<FreeAdditiveConvolution>(std::move(mu), std::move(nu), options);
}

std::shared_ptr<const FreeMultiplicativeConvolution> free_multiplicative(
    LawPtr mu, LawPtr nu, SubordinationOptions options) {
  if (!mu || !nu) throw InputError("free_multiplicative: a law is null");
  if (mu->radial() || nu->radial()) {
    throw InputError("free_multiplicative: a radial law (circular) is not supported");
  }
  for (const auto& [law, which] : {std::pair{mu.get(), "first"}, std::pair{nu.get(), "second"}}) {
    const Support s = law->support();
    if (s.lo < 0.0) {
      throw InputError(std::string("free_multiplicative: the ") + which + " law " +
                       law->describe() + " must lie on [0, inf) (its support starts at " +
                       text::readable(s.lo) + ")");
    }
  }
  if (!(options.epsilon > 0.0)) throw InputError("free_multiplicative: epsilon must be > 0");
  return std::make_shared<FreeMultiplicativeConvolution>(std::move(mu), std::move(nu), options);
}

LawPtr free_compound_poisson(const std::vector<Atom>& jumps, SubordinationOptions options) {
  // One free Poisson law per jump value t of weight p: rate p, jump t, free cumulants p tⁿ; as a
  // Marchenko–Pastur law MP(c) has free cumulants c^(n−1), that is t p · MP(1/p).
  std::vector<LawPtr> parts;
  double total = 0.0;
  for (const Atom& a : jumps) {
    if (!(a.weight >= 0.0) || !std::isfinite(a.value)) {
      throw InputError("free_compound_poisson: a jump needs a finite value and a weight >= 0");
    }
    total += a.weight;
    if (a.value != 0.0 && a.weight > 0.0) {
      parts.push_back(affine(marchenko_pastur(1.0 / a.weight), a.value * a.weight, 0.0));
    }
  }
  if (total > 1.0 + 1e-12) {
    throw InputError("free_compound_poisson: the jump weights sum to " +
                     text::readable(total) + ", more than the rate 1");
  }
  if (parts.empty()) return atoms({{0.0, 1.0}});
  // Folded as a balanced tree, so that k parts nest only ⌈log₂ k⌉ subordinations deep.
  while (parts.size() > 1) {
    std::vector<LawPtr> next;
    for (std::size_t i = 0; i + 1 < parts.size(); i += 2) {
      next.push_back(free_additive(parts[i], parts[i + 1], options));
    }
    if (parts.size() % 2 == 1) next.push_back(parts.back());
    parts = std::move(next);
  }
  return parts.front();
}

}  // namespace freegap::analysis
