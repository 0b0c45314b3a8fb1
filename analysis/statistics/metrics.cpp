// Finite-N errors with Monte Carlo standard errors (see metrics.hpp).
#include "freegap/analysis/statistics/metrics.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <atomic>
#include <limits>
#include <numbers>
#include <thread>
#include <string>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/rng.hpp"
#include "freegap/stop.hpp"

namespace freegap::analysis {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// 8-point Gauss–Legendre nodes and weights on [−1, 1] (Abramowitz & Stegun 1964, Table 25.4).
constexpr std::array<double, 4> kGl8Nodes = {0.1834346424956498, 0.5255324099163290,
                                             0.7966664774136267, 0.9602898564975363};
constexpr std::array<double, 4> kGl8Weights = {0.3626837833783620, 0.3137066458778873,
                                               0.2223810344533745, 0.1012285362903763};

template <class F>
double gauss_legendre(const F& f, double a, double b) {
  if (!(b > a)) return 0.0;
  const double mid = 0.5 * (a + b), half = 0.5 * (b - a);
  double sum = 0.0;
  for (std::size_t i = 0; i < kGl8Nodes.size(); ++i) {
    sum += kGl8Weights[i] * (f(mid - half * kGl8Nodes[i]) + f(mid + half * kGl8Nodes[i]));
  }
  return sum * half;
}

// ∫_a^b F, exactly through Φ when given (Φ covers the support; outside it F is 0 or 1), else by
// Gauss–Legendre on the pieces inside the support (F is smooth there; the kinks at the support
// ends are piece boundaries).
double integral_of_cdf(const LimitDistribution& limit, double a, double b) {
  if (!(b > a)) return 0.0;
  const double lo = limit.support_low, hi = limit.support_high;
  double total = 0.0;
  const double above_start = std::max(a, hi);
  if (b > above_start) total += b - above_start;  // F = 1 above the support
  const double inner_a = std::max(a, lo), inner_b = std::min(b, hi);
  if (inner_b > inner_a) {
    if (limit.cdf_integral) {
      total += limit.cdf_integral(inner_b) - limit.cdf_integral(inner_a);
    } else {
      total += gauss_legendre(limit.cdf, inner_a, inner_b);
    }
  }
  return total;
}

// A point x in [a, b] with F(x) = c, given F(a) < c < F(b): the quantile when available (clipped),
// else the Illinois variant of regula falsi (Dowell & Jarratt 1971), which keeps a bracket.
double crossing(const LimitDistribution& limit, double c, double a, double b, double fa,
                double fb) {
  if (limit.quantile) return std::clamp(limit.quantile(c), a, b);
  double ga = fa - c, gb = fb - c;
  int side = 0;
  for (int it = 0; it < 100 && (b - a) > 1e-15 * (1.0 + std::fabs(a) + std::fabs(b)); ++it) {
    const double x = (a * gb - b * ga) / (gb - ga);
    const double gx = limit.cdf(x) - c;
    if (gx == 0.0) return x;
    if ((gx < 0.0) == (ga < 0.0)) {
      a = x, ga = gx;
      if (side == -1) gb *= 0.5;
      side = -1;
    } else {
      b = x, gb = gx;
      if (side == 1) ga *= 0.5;
      side = 1;
    }
  }
  return 0.5 * (a + b);
}

// ∫_a^b |c − F(x)| dx for a constant c and non-decreasing F: split where F crosses c.
double piece_distance(const LimitDistribution& limit, double c, double a, double b) {
  if (!(b > a)) return 0.0;
  const double fa = limit.cdf(a), fb = limit.cdf(b);
  if (fa >= c) return integral_of_cdf(limit, a, b) - c * (b - a);
  if (fb <= c) return c * (b - a) - integral_of_cdf(limit, a, b);
  const double x = crossing(limit, c, a, b, fa, fb);
  return (c * (x - a) - integral_of_cdf(limit, a, x)) +
         (integral_of_cdf(limit, x, b) - c * (b - x));
}

void check_histogram(std::span<const double> edges, const observe::Histogram& h) {
  if (edges.size() < 2 || h.counts.size() + 1 != edges.size()) {
    throw InputError("histogram has " + std::to_string(h.counts.size()) + " bins but " +
                     std::to_string(edges.size()) + " edges were given");
  }
}

struct MeanSd {
  double mean = 0.0, sd = kNaN;
};

MeanSd mean_sd(std::span<const double> x) {
  MeanSd out;
  if (x.empty()) return {kNaN, kNaN};
  double sum = 0.0;
  for (double v : x) sum += v;
  out.mean = sum / static_cast<double>(x.size());
  if (x.size() >= 2) {
    double ss = 0.0;
    for (double v : x) ss += (v - out.mean) * (v - out.mean);
    out.sd = std::sqrt(ss / static_cast<double>(x.size() - 1));
  }
  return out;
}

// F_n at each edge from counts (mass below the first edge included at e_0).
std::vector<double> edge_cdf(const observe::Histogram& h) {
  const auto total = static_cast<double>(h.total());
  std::vector<double> fn(h.counts.size() + 1);
  double cum = static_cast<double>(h.below);
  fn[0] = cum / total;
  for (std::size_t i = 0; i < h.counts.size(); ++i) {
    cum += static_cast<double>(h.counts[i]);
    fn[i + 1] = cum / total;
  }
  return fn;
}

// Fixed nodes for the bootstrap replicates of the binned W1: F at the 8 Gauss–Legendre nodes of
// every bin, evaluated once (the limit CDF may be costly), so each replicate needs no F calls.
struct BinNodes {
  std::vector<double> f_edges;                 // F(e_i)
  std::vector<std::array<double, 8>> f_nodes;  // F at the nodes of bin i
  std::vector<std::array<double, 8>> t_nodes;  // node position within the bin, in [0, 1]
  double below_integral = 0.0;                 // ∫ F over [min(lo, e_0), e_0]
  double above_integral = 0.0;                 // ∫ (1 − F) over [e_b, max(hi, e_b)]
};

BinNodes make_nodes(std::span<const double> edges, const LimitDistribution& limit) {
  BinNodes nodes;
  const std::size_t bins = edges.size() - 1;
  nodes.f_edges.resize(edges.size());
  for (std::size_t i = 0; i < edges.size(); ++i) nodes.f_edges[i] = limit.cdf(edges[i]);
  nodes.f_nodes.resize(bins);
  nodes.t_nodes.resize(bins);
  for (std::size_t i = 0; i < bins; ++i) {
    for (std::size_t k = 0; k < 4; ++k) {
      const double t_lo = 0.5 * (1.0 - kGl8Nodes[k]), t_hi = 0.5 * (1.0 + kGl8Nodes[k]);
      nodes.t_nodes[i][2 * k] = t_lo;
      nodes.t_nodes[i][2 * k + 1] = t_hi;
      nodes.f_nodes[i][2 * k] = limit.cdf(edges[i] + t_lo * (edges[i + 1] - edges[i]));
      nodes.f_nodes[i][2 * k + 1] = limit.cdf(edges[i] + t_hi * (edges[i + 1] - edges[i]));
    }
  }
  const double lo = std::min(limit.support_low, edges.front());
  const double hi = std::max(limit.support_high, edges.back());
  nodes.below_integral = integral_of_cdf(limit, lo, edges.front());
  nodes.above_integral = (hi - edges.back()) - integral_of_cdf(limit, edges.back(), hi);
  return nodes;
}

BinnedDistances distances_on_nodes(std::span<const double> edges, const std::vector<double>& fn,
                                   const BinNodes& nodes) {
  BinnedDistances out;
  for (std::size_t i = 0; i < fn.size(); ++i) {
    out.kolmogorov = std::max(out.kolmogorov, std::fabs(fn[i] - nodes.f_edges[i]));
  }
  double w1 = nodes.below_integral + nodes.above_integral;
  for (std::size_t i = 0; i + 1 < edges.size(); ++i) {
    double s = 0.0;
    for (std::size_t k = 0; k < 8; ++k) {
      const double t = nodes.t_nodes[i][k];
      const double fn_t = fn[i] + t * (fn[i + 1] - fn[i]);
      s += kGl8Weights[k / 2] * std::fabs(fn_t - nodes.f_nodes[i][k]);
    }
    w1 += 0.5 * s * (edges[i + 1] - edges[i]);
  }
  out.wasserstein1 = w1;
  return out;
}

}  // namespace

BinnedDistances binned_distances(std::span<const double> edges, const observe::Histogram& histogram,
                                 const LimitDistribution& limit) {
  check_histogram(edges, histogram);
  if (histogram.total() <= 0) throw InputError("histogram is empty: no distances");
  if (!limit.cdf) throw InputError("no limit CDF: no distances");
  const std::vector<double> fn = edge_cdf(histogram);
  BinnedDistances out;
  const auto total = static_cast<double>(histogram.total());
  std::vector<double> f(edges.size());
  for (std::size_t i = 0; i < edges.size(); ++i) f[i] = limit.cdf(edges[i]);
  for (std::size_t i = 0; i < edges.size(); ++i) {
    out.kolmogorov = std::max(out.kolmogorov, std::fabs(fn[i] - f[i]));
  }
  for (std::size_t i = 0; i < histogram.counts.size(); ++i) {
    out.resolution = std::max(
        {out.resolution, static_cast<double>(histogram.counts[i]) / total, f[i + 1] - f[i]});
  }
  // W1: outside the edges F_n is 0 (below) or 1 (above); inside each bin F_n is linear. Where
  // F_n − F changes sign inside a bin the bin is split at the linear-interpolation crossing so the
  // quadrature never straddles the kink of |·|.
  const double lo = std::min(limit.support_low, edges.front());
  const double hi = std::max(limit.support_high, edges.back());
  double w1 = integral_of_cdf(limit, lo, edges.front());
  w1 += (hi - edges.back()) - integral_of_cdf(limit, edges.back(), hi);
  for (std::size_t i = 0; i + 1 < edges.size(); ++i) {
    const double a = edges[i], b = edges[i + 1];
    const double slope = (fn[i + 1] - fn[i]) / (b - a);
    const auto diff = [&](double x) { return std::fabs(fn[i] + slope * (x - a) - limit.cdf(x)); };
    const double da = fn[i] - f[i], db = fn[i + 1] - f[i + 1];
    if ((da < 0.0 && db > 0.0) || (da > 0.0 && db < 0.0)) {
      const double x = a + (b - a) * da / (da - db);
      w1 += gauss_legendre(diff, a, x) + gauss_legendre(diff, x, b);
    } else {
      w1 += gauss_legendre(diff, a, b);
    }
  }
  out.wasserstein1 = w1;
  return out;
}

SampleDistances sample_distances(std::vector<double> sample, const LimitDistribution& limit) {
  if (sample.empty()) throw InputError("empty sample: no distances");
  if (!limit.cdf) throw InputError("no limit CDF: no distances");
  std::sort(sample.begin(), sample.end());
  const std::size_t n = sample.size();
  const auto nd = static_cast<double>(n);
  SampleDistances out;
  // Kolmogorov: D = max_i max(i/n − F(λ_(i)), F(λ_(i)) − (i−1)/n) (docs/check-values.md §4h).
  for (std::size_t i = 0; i < n; ++i) {
    const double f = limit.cdf(sample[i]);
    out.kolmogorov = std::max(
        {out.kolmogorov, static_cast<double>(i + 1) / nd - f, f - static_cast<double>(i) / nd});
  }
  // W1 = Σ_{i=0}^{n} ∫_{λ_(i)}^{λ_(i+1)} |i/n − F| with λ_(0), λ_(n+1) the support ends (§4h);
  // pieces are also split at the support ends, where F has kinks.
  const double lo = std::min(limit.support_low, sample.front());
  const double hi = std::max(limit.support_high, sample.back());
  double w1 = 0.0;
  for (std::size_t i = 0; i <= n; ++i) {
    const double a = i == 0 ? lo : sample[i - 1];
    const double b = i == n ? hi : sample[i];
    const double c = static_cast<double>(i) / nd;
    double cuts[4] = {a, a, b, b};
    cuts[1] = std::clamp(limit.support_low, a, b);
    cuts[2] = std::clamp(limit.support_high, a, b);
    for (int k = 0; k < 3; ++k) w1 += piece_distance(limit, c, cuts[k], cuts[k + 1]);
  }
  out.wasserstein1 = w1;
  return out;
}

PooledDistances pooled_distances(std::span<const double> edges,
                                 std::span<const observe::Histogram> units,
                                 const LimitDistribution& limit, const MetricsOptions& options) {
  if (units.empty()) throw InputError("no unit histograms: no pooled distances");
  observe::Histogram sum = units[0];
  check_histogram(edges, sum);
  for (std::size_t u = 1; u < units.size(); ++u) observe::merge_into(sum, units[u]);
  const BinnedDistances full = binned_distances(edges, sum, limit);
  PooledDistances out;
  out.kolmogorov.value = full.kolmogorov;
  out.wasserstein1.value = full.wasserstein1;
  out.resolution = full.resolution;
  if (units.size() < 2 || options.bootstrap_replicates < 2) {
    for (MetricValue* m : {&out.kolmogorov, &out.wasserstein1}) {
      m->standard_error = m->noise_floor = kNaN;
      m->resolved = false;
    }
    return out;
  }
  // Bootstrap over work units (Efron & Tibshirani 1993, from memory): units are independent
  // blocks of trials, so resampling them keeps whatever correlation lives inside a unit.
  const BinNodes nodes = make_nodes(edges, limit);
  rng::Stream stream(rng::StreamKey{options.seed, "metrics-bootstrap-units", 0, 0});
  const std::size_t b = edges.size();
  std::vector<double> fn_sum(b, 0.0), fn_sq(b, 0.0), ks, w1;
  observe::Histogram draw = sum;
  for (int r = 0; r < options.bootstrap_replicates; ++r) {
    check_stop();  // a report's bootstraps can be long: a stop request ends them
    std::fill(draw.counts.begin(), draw.counts.end(), 0);
    draw.below = draw.above = 0;
    for (std::size_t u = 0; u < units.size(); ++u) {
      auto pick = static_cast<std::size_t>(stream.uniform() * static_cast<double>(units.size()));
      pick = std::min(pick, units.size() - 1);
      observe::merge_into(draw, units[pick]);
    }
    if (draw.total() <= 0) continue;
    const std::vector<double> fn = edge_cdf(draw);
    for (std::size_t i = 0; i < b; ++i) {
      fn_sum[i] += fn[i];
      fn_sq[i] += fn[i] * fn[i];
    }
    const BinnedDistances d = distances_on_nodes(edges, fn, nodes);
    ks.push_back(d.kolmogorov);
    w1.push_back(d.wasserstein1);
  }
  const auto reps = static_cast<double>(ks.size());
  double floor_ks = 0.0, floor_w1 = 0.0;
  std::vector<double> sd(b);
  for (std::size_t i = 0; i < b; ++i) {
    const double mean = fn_sum[i] / reps;
    sd[i] = std::sqrt(std::max(0.0, (fn_sq[i] / reps - mean * mean) * reps / (reps - 1.0)));
    floor_ks = std::max(floor_ks, sd[i]);
  }
  for (std::size_t i = 0; i + 1 < b; ++i)
    floor_w1 += 0.5 * (sd[i] + sd[i + 1]) * (edges[i + 1] - edges[i]);
  out.kolmogorov.standard_error = mean_sd(ks).sd;
  out.wasserstein1.standard_error = mean_sd(w1).sd;
  out.kolmogorov.noise_floor = floor_ks;
  out.wasserstein1.noise_floor = floor_w1;
  for (MetricValue* m : {&out.kolmogorov, &out.wasserstein1}) {
    m->resolved = m->value >= kDistanceResolutionFactor * m->noise_floor;
  }
  return out;
}

namespace {

// ∫_a^b |c − L| for L linear from fa at a to fb at b (fa ≤ fb), h = b − a.
inline double linear_piece(double c, double fa, double fb, double h) {
  if (c <= fa) return h * (0.5 * (fa + fb) - c);
  if (c >= fb) return h * (c - 0.5 * (fa + fb));
  return h * ((c - fa) * (c - fa) + (fb - c) * (fb - c)) / (2.0 * (fb - fa));
}

// The grid of spectra_distances: nodes x_g with F(x_g), the running integral Φ_g of the linear
// interpolant, and for each pooled value (sorted) its node.
struct SpectraGrid {
  std::vector<double> x, f, phi;
  std::vector<std::size_t> below;  // cell g: number of pooled values ≤ x_g
  std::vector<std::size_t> node_of_value;
  double bound = 0.0;
};

// ∫_{x_a}^{x_b} |c − F_L| between two nodes: Φ where F_L is on one side of c, and the crossing
// (binary search on the monotone F values, then inside its cell) where it changes side.
double grid_piece(const SpectraGrid& g, double c, std::size_t a, std::size_t b) {
  if (b <= a) return 0.0;
  const double len = g.x[b] - g.x[a], area = g.phi[b] - g.phi[a];
  if (g.f[a] >= c) return area - c * len;
  if (g.f[b] <= c) return c * len - area;
  // First node in (a, b] with F ≥ c; the crossing lies in the cell before it.
  const auto it = std::lower_bound(g.f.begin() + static_cast<std::ptrdiff_t>(a) + 1,
                                   g.f.begin() + static_cast<std::ptrdiff_t>(b) + 1, c);
  const auto k = static_cast<std::size_t>(it - g.f.begin());
  const double fa = g.f[k - 1], fb = g.f[k], h = g.x[k] - g.x[k - 1];
  const double t = fb > fa ? (c - fa) / (fb - fa) : 0.0;
  const double xs = g.x[k - 1] + t * h;
  const double phis = g.phi[k - 1] + h * t * (fa + 0.5 * t * (fb - fa));
  return (c * (xs - g.x[a]) - (phis - g.phi[a])) + ((g.phi[b] - phis) - c * (g.x[b] - xs));
}

// The number of kept eigenvalues to pool, after the checks that the spectra can be pooled.
std::size_t checked_value_count(std::span<const std::vector<double>> spectra,
                                const LimitDistribution& limit) {
  if (spectra.empty()) throw InputError("no kept spectra: no distances from spectra");
  if (spectra.size() >= (std::size_t{1} << 32)) throw InputError("too many kept spectra (2^32 or more)");
  if (!limit.cdf) throw InputError("no limit CDF: no distances");
  std::size_t m = 0;
  for (const auto& s : spectra) {
    if (s.empty()) throw InputError("an empty kept spectrum: no distances from spectra");
    for (double v : s) {
      if (!std::isfinite(v)) throw InputError("a kept spectrum holds a non-finite value: no distances from spectra");
    }
    m += s.size();
  }
  if (m >= (std::size_t{1} << 32)) throw InputError("2^32 or more kept eigenvalues in one size: too many to pool");
  return m;
}

using PooledValues = std::vector<std::pair<double, std::uint32_t>>;

// Pooled values with their trial, sorted by value (then trial: the order is reproducible).
PooledValues pooled_values(std::span<const std::vector<double>> spectra, std::size_t m) {
  const std::size_t r = spectra.size();
  PooledValues pooled;
  pooled.reserve(m);
  for (std::size_t t = 0; t < r; ++t) {
    for (double v : spectra[t]) pooled.emplace_back(v, static_cast<std::uint32_t>(t));
  }
  std::sort(pooled.begin(), pooled.end());
  return pooled;
}

// The nodes x_g of the grid, and each pooled value's node.
void place_grid_nodes(const PooledValues& pooled, const LimitDistribution& limit, SpectraGrid& g) {
  const std::size_t m = pooled.size();
  // Breakpoints: the pooled values and the support's ends; each gap split into k equal cells.
  std::vector<double> points;
  points.reserve(m + 2);
  for (const auto& p : pooled) points.push_back(p.first);
  for (double e : {limit.support_low, limit.support_high}) {
    points.insert(std::upper_bound(points.begin(), points.end(), e), e);
  }
  const std::size_t k =
      std::clamp<std::size_t>((kSpectraGridCells + points.size() - 2) / (points.size() - 1), 1, 4096);
  g.x.reserve((points.size() - 1) * k + 1);
  g.node_of_value.resize(m);
  {
    std::size_t v = 0;  // pooled values placed so far
    for (std::size_t i = 0; i < points.size(); ++i) {
      // Each pooled value is a breakpoint; match them in order (ties share a node).
      if (i > 0 && points[i] == points[i - 1]) {
        // same node as before
      } else {
        if (i > 0) {
          const double a = points[i - 1], b = points[i];
          for (std::size_t j = 1; j < k; ++j) {
            g.x.push_back(a + (b - a) * static_cast<double>(j) / static_cast<double>(k));
          }
        }
        g.x.push_back(points[i]);
      }
      while (v < m && pooled[v].first == points[i]) g.node_of_value[v++] = g.x.size() - 1;
    }
  }
}

// F at the grid's nodes, the running integral Φ of its linear interpolant, the pooled values up
// to each node and the bound of the grid's W1 error; m is the number of pooled values.
void fill_grid_values(const LimitDistribution& limit, std::size_t m, SpectraGrid& g) {
  const std::size_t nodes = g.x.size();
  g.f.resize(nodes);
  for (std::size_t i = 0; i < nodes; ++i) {
    if ((i & 4095) == 0) check_stop();
    g.f[i] = std::clamp(limit.cdf(g.x[i]), 0.0, 1.0);
    if (i > 0) g.f[i] = std::max(g.f[i], g.f[i - 1]);  // monotone against rounding
  }
  g.phi.assign(nodes, 0.0);
  g.below.assign(nodes, 0);
  {
    std::size_t v = 0;
    for (std::size_t i = 0; i < nodes; ++i) {
      while (v < m && g.node_of_value[v] <= i) ++v;
      g.below[i] = v;
      if (i > 0) {
        const double h = g.x[i] - g.x[i - 1];
        g.phi[i] = g.phi[i - 1] + 0.5 * h * (g.f[i] + g.f[i - 1]);
        g.bound += h * (g.f[i] - g.f[i - 1]);
      }
    }
  }
}

// Distances of the pooled distribution with trial weights w (Σ w = 1): the value of each pooled
// value is w_t / n_t. cum[v] = weight of the first v pooled values.
// cum0: the data's own (all trials weigh 1/R). Each call also gives the distances of the
// reweighted distribution to the data's (ks0, w10): the distance noise alone produces.
struct WeightedDistances {
  WeightedDistances(std::span<const std::vector<double>> spectra_of_trials, const SpectraGrid& grid,
                    const PooledValues& pooled)
      : spectra(spectra_of_trials), g(grid), r(spectra_of_trials.size()), m(pooled.size()) {
    const std::size_t nodes = g.x.size();
    // Flat arrays for the replicate loops (they run B times over every value and cell).
    value_trial.resize(m);
    value_f.resize(m);
    dx.resize(nodes > 0 ? nodes - 1 : 0);
    cell_below.resize(dx.size());
    for (std::size_t v = 0; v < m; ++v) {
      value_trial[v] = pooled[v].second;
      value_f[v] = g.f[g.node_of_value[v]];
    }
    for (std::size_t i = 0; i < dx.size(); ++i) {
      dx[i] = g.x[i + 1] - g.x[i];
      cell_below[i] = static_cast<std::uint32_t>(g.below[i]);
    }
  }

  void operator()(std::span<const double> w, double& ks, double& w1, double& ks0, double& w10,
                  std::vector<double>& cum, std::vector<double>& wt) const {
    for (std::size_t t = 0; t < r; ++t) wt[t] = w[t] / static_cast<double>(spectra[t].size());
    const bool noise = !cum0.empty();
    double c = 0.0, k1 = 0.0, k0 = 0.0;
    cum[0] = 0.0;
    for (std::size_t v = 0; v < m; ++v) {
      const double prev = c, f = value_f[v];
      c += wt[value_trial[v]];
      cum[v + 1] = c;
      k1 = std::max(k1, std::max(c - f, f - prev));
      if (noise) k0 = std::max(k0, std::fabs(c - cum0[v + 1]));
    }
    ks = k1;
    ks0 = k0;
    double a1 = 0.0, a0 = 0.0;
    for (std::size_t i = 0; i < dx.size(); ++i) {
      const double cc = std::min(1.0, cum[cell_below[i]]);
      a1 += linear_piece(cc, g.f[i], g.f[i + 1], dx[i]);
      if (noise) a0 += std::fabs(cc - std::min(1.0, cum0[cell_below[i]])) * dx[i];
    }
    w1 = a1;
    w10 = a0;
  }

  std::span<const std::vector<double>> spectra;
  const SpectraGrid& g;
  std::size_t r = 0, m = 0;  // trials, pooled values
  std::vector<std::uint32_t> value_trial;
  std::vector<double> value_f, dx;
  std::vector<std::uint32_t> cell_below;
  std::vector<double> cum0;  // empty until the data's own distances are computed
};

// The bootstrap replicates of the distances (ks, w1) and of the noise alone (ks0, w10).
struct ReplicateDistances {
  std::vector<double> ks, w1, ks0, w10;
};

// The trial weights of every resample, drawn first, in order, from one stream.
std::vector<double> resample_weights(std::size_t r, std::size_t b_count, std::uint64_t stream_size,
                                     const MetricsOptions& options) {
  std::vector<double> weights(b_count * r, 0.0);
  rng::Stream stream(rng::StreamKey{options.seed, "metrics-bootstrap-trials", stream_size, 0});
  for (std::size_t b = 0; b < b_count; ++b) {
    for (std::size_t t = 0; t < r; ++t) {
      auto pick = static_cast<std::size_t>(stream.uniform() * static_cast<double>(r));
      weights[b * r + std::min(pick, r - 1)] += 1.0 / static_cast<double>(r);
    }
  }
  return weights;
}

// The distances of every resample, on up to kSpectraThreads threads, each replicate by itself
// into its own slot.
ReplicateDistances replicate_distances(const WeightedDistances& distances,
                                       const std::vector<double>& weights, std::size_t b_count) {
  const std::size_t r = distances.r, m = distances.m;
  ReplicateDistances out;
  std::vector<double>& ks = out.ks;
  std::vector<double>& w1 = out.w1;
  std::vector<double>& ks0 = out.ks0;
  std::vector<double>& w10 = out.w10;
  ks.assign(b_count, 0.0);
  w1.assign(b_count, 0.0);
  ks0.assign(b_count, 0.0);
  w10.assign(b_count, 0.0);
  const std::size_t threads = std::clamp<std::size_t>(std::thread::hardware_concurrency(), 1,
                                                      std::min(kSpectraThreads, b_count));
  std::atomic<std::size_t> next{0};
  std::atomic<bool> stop{false};
  const auto work = [&] {
    std::vector<double> my_cum(m + 1), my_wt(r);
    for (std::size_t b = next++; b < b_count && !stop; b = next++) {
      distances(std::span<const double>(weights).subspan(b * r, r), ks[b], w1[b], ks0[b], w10[b],
                my_cum, my_wt);
    }
  };
  std::vector<std::thread> pool;
  for (std::size_t i = 1; i < threads; ++i) pool.emplace_back(work);
  try {
    // This thread works too, and answers a stop request between its replicates.
    std::vector<double> my_cum(m + 1), my_wt(r);
    for (std::size_t b = next++; b < b_count; b = next++) {
      check_stop();
      distances(std::span<const double>(weights).subspan(b * r, r), ks[b], w1[b], ks0[b], w10[b],
                my_cum, my_wt);
    }
  } catch (...) {
    stop = true;
    for (auto& th : pool) th.join();
    throw;
  }
  for (auto& th : pool) th.join();
  return out;
}

// A distance from its plug-in value and its replicates: bias-corrected value, standard error,
// noise floor, the bound of the bias the correction may leave, and the corrected replicates.
void finish_distance(const std::vector<double>& reps, const std::vector<double>& noise,
                     double plugin, MetricValue& mv, double& bias, double& zero_level,
                     double& residual_bound, std::vector<double>& corrected) {
  if (reps.size() < 2) {
    mv.value = plugin;
    mv.standard_error = mv.noise_floor = kNaN;
    mv.resolved = false;
    bias = zero_level = residual_bound = kNaN;
    return;
  }
  const MeanSd ms = mean_sd(reps);
  bias = ms.mean - plugin;
  mv.value = plugin - bias;
  mv.standard_error = ms.sd;
  // The noise floor: where the corrected value of a zero distance lies, (2 − √2)·mean(D0*)
  // (see metrics.hpp), plus kSignedResolutionFactor standard errors.
  zero_level = (2.0 - std::numbers::sqrt2) * mean_sd(noise).mean;
  mv.noise_floor = zero_level + kSignedResolutionFactor * ms.sd;
  mv.resolved = std::isfinite(ms.sd) && mv.value > mv.noise_floor;
  // What the correction may leave: at most √2 × the bias it removed, and never more than the
  // level of a zero distance (metrics.hpp).
  residual_bound = std::min(zero_level, std::numbers::sqrt2 * std::fabs(bias));
  corrected.reserve(reps.size());
  for (double x : reps) corrected.push_back(x - bias);
}

// Per trial: its values' nodes in order; KS from F at them, W1 piecewise on the grid.
void per_trial_distances(std::span<const std::vector<double>> spectra, const SpectraGrid& g,
                         const std::vector<std::uint32_t>& value_trial, SpectraDistances& out) {
  const std::size_t r = spectra.size(), m = value_trial.size(), nodes = g.x.size();
  std::vector<std::vector<std::size_t>> trial_nodes(r);
  for (std::size_t t = 0; t < r; ++t) trial_nodes[t].reserve(spectra[t].size());
  for (std::size_t v = 0; v < m; ++v) trial_nodes[value_trial[v]].push_back(g.node_of_value[v]);
  out.per_trial_kolmogorov.resize(r);
  out.per_trial_wasserstein1.resize(r);
  for (std::size_t t = 0; t < r; ++t) {
    if ((t & 63) == 0) check_stop();
    const auto& idx = trial_nodes[t];
    const auto n = static_cast<double>(idx.size());
    double d = 0.0, area = 0.0;
    for (std::size_t i = 0; i < idx.size(); ++i) {
      const double f = g.f[idx[i]];
      d = std::max({d, static_cast<double>(i + 1) / n - f, f - static_cast<double>(i) / n});
    }
    area += grid_piece(g, 0.0, 0, idx.front());
    for (std::size_t i = 0; i + 1 < idx.size(); ++i) {
      area += grid_piece(g, static_cast<double>(i + 1) / n, idx[i], idx[i + 1]);
    }
    area += grid_piece(g, 1.0, idx.back(), nodes - 1);
    out.per_trial_kolmogorov[t] = d;
    out.per_trial_wasserstein1[t] = area;
  }
}

}  // namespace

SpectraDistances spectra_distances(std::span<const std::vector<double>> spectra,
                                   const LimitDistribution& limit, std::uint64_t stream_size,
                                   const MetricsOptions& options) {
  const std::size_t m = checked_value_count(spectra, limit);
  const std::size_t r = spectra.size();
  PooledValues pooled = pooled_values(spectra, m);
  SpectraGrid g;
  place_grid_nodes(pooled, limit, g);
  fill_grid_values(limit, m, g);

  WeightedDistances distances(spectra, g, pooled);
  std::vector<double> cum_data(m + 1), wt_data(r);
  // What the loops below do not need (about 40 % of the memory at 10^7 values).
  PooledValues().swap(pooled);
  std::vector<std::size_t>().swap(g.below);

  SpectraDistances out;
  out.trials = static_cast<std::int64_t>(r);
  out.values = static_cast<std::int64_t>(m);
  out.wasserstein1_grid_bound = g.bound;
  std::vector<double> w(r, 1.0 / static_cast<double>(r));
  {
    double unused0 = 0.0, unused1 = 0.0;
    distances(w, out.kolmogorov_plugin, out.wasserstein1_plugin, unused0, unused1, cum_data, wt_data);
    distances.cum0 = std::move(cum_data);
  }

  // The replicates: every resample drawn first, in order, from one stream; then computed on up to
  // kSpectraThreads threads, each replicate by itself into its own slot, so the numbers do not
  // depend on the thread count.
  ReplicateDistances reps;
  if (r >= 2 && options.bootstrap_replicates >= 2) {
    const auto b_count = static_cast<std::size_t>(options.bootstrap_replicates);
    const std::vector<double> weights = resample_weights(r, b_count, stream_size, options);
    reps = replicate_distances(distances, weights, b_count);
  }
  finish_distance(reps.ks, reps.ks0, out.kolmogorov_plugin, out.kolmogorov, out.kolmogorov_bias,
                  out.kolmogorov_zero_level, out.kolmogorov_residual_bound,
                  out.kolmogorov_replicates);
  finish_distance(reps.w1, reps.w10, out.wasserstein1_plugin, out.wasserstein1,
                  out.wasserstein1_bias, out.wasserstein1_zero_level,
                  out.wasserstein1_residual_bound, out.wasserstein1_replicates);

  per_trial_distances(spectra, g, distances.value_trial, out);
  return out;
}

SignedError signed_error(std::span<const double> values, double limit) {
  SignedError out;
  out.limit = limit;
  const MeanSd ms = mean_sd(values);
  out.mean = ms.mean;
  out.error.value = ms.mean - limit;
  out.error.standard_error = ms.sd / std::sqrt(static_cast<double>(values.size()));
  out.error.noise_floor = out.error.standard_error;
  out.error.resolved =
      std::isfinite(out.error.value) && std::isfinite(out.error.standard_error) &&
      std::fabs(out.error.value) >= kSignedResolutionFactor * out.error.standard_error;
  return out;
}

namespace {

using TrialPointers = std::vector<const observe::TrialRecord*>;

// The distances of the mean spectral distribution: from every trial's kept spectrum when all of
// at least 2 trials kept one, else from the work units' histograms.
void pooled_distances_of_size(const SizeData& data, const TrialPointers& ok,
                              const LimitReference& limit, const MetricsOptions& options,
                              SizeMetrics& out) {
  const bool all_kept =
      ok.size() >= 2 && std::all_of(ok.begin(), ok.end(), [](const observe::TrialRecord* t) {
        return !t->spectrum.empty();
      });
  if (all_kept) {
    std::vector<std::vector<double>> spectra;
    spectra.reserve(ok.size());
    for (const auto* t : ok) spectra.push_back(t->spectrum);
    out.spectra = spectra_distances(spectra, limit.distribution,
                                    static_cast<std::uint64_t>(data.n), options);
    out.has_pooled = true;
    out.pooled_from_spectra = true;
    out.pooled_kolmogorov = out.spectra.kolmogorov;
    out.pooled_wasserstein1 = out.spectra.wasserstein1;
    out.pooled_resolution = 0.0;
  } else if (data.edges.empty()) {
    out.notes.push_back("only the extremes were observed (extremes_only): no distances");
  } else if (data.unit_histograms.empty()) {
    out.notes.push_back("no histograms: no pooled distances");
  } else {
    const PooledDistances p =
        pooled_distances(data.edges, data.unit_histograms, limit.distribution, options);
    out.has_pooled = true;
    out.pooled_kolmogorov = p.kolmogorov;
    out.pooled_wasserstein1 = p.wasserstein1;
    out.pooled_resolution = p.resolution;
    if (data.unit_histograms.size() < 2) {
      out.notes.push_back("one work unit: no bootstrap, pooled distances unresolved");
    }
  }
}

// Each trial's own distances to the limit, where it kept its spectrum, and their means.
void per_trial_distances_of_size(const TrialPointers& ok, const LimitReference& limit,
                                 SizeMetrics& out) {
  std::vector<double> ks, w1;
  if (out.pooled_from_spectra) {
    ks = out.spectra.per_trial_kolmogorov;
    w1 = out.spectra.per_trial_wasserstein1;
  } else {
    for (const auto* t : ok) {
      if (t->spectrum.empty()) continue;
      const SampleDistances d = sample_distances(t->spectrum, limit.distribution);
      ks.push_back(d.kolmogorov);
      w1.push_back(d.wasserstein1);
    }
  }
  if (!ks.empty()) {
    out.has_per_trial = true;
    out.per_trial.trials = static_cast<std::int64_t>(ks.size());
    const auto fill = [](std::span<const double> x, MetricValue& m, double& sd) {
      const SignedError e = signed_error(x, 0.0);
      m = e.error;
      sd = mean_sd(x).sd;
    };
    fill(ks, out.per_trial.kolmogorov, out.per_trial.kolmogorov_sd);
    fill(w1, out.per_trial.wasserstein1, out.per_trial.wasserstein1_sd);
    out.per_trial.kolmogorov_values = std::move(ks);
    out.per_trial.wasserstein1_values = std::move(w1);
  } else {
    out.notes.push_back("no kept spectra: no per-trial distances");
  }
}

// The error of every moment both the trials and the limit know (at least one trial is given).
void moment_errors_of_size(const TrialPointers& ok, const LimitReference& limit,
                           SizeMetrics& out) {
  const std::size_t k_max = std::min(limit.moments.size(), ok.front()->moments.size());
  for (std::size_t k = 0; k < k_max; ++k) {
    std::vector<double> v;
    v.reserve(ok.size());
    double scale = 1.0;  // the size of the terms of (1/N) Σ x^k: max |x|^k over trials
    for (const auto* t : ok) {
      v.push_back(t->moments[k]);
      scale = std::max(scale, std::pow(std::max(std::fabs(t->min), std::fabs(t->max)), static_cast<double>(k)));
    }
    SignedError e = signed_error(v, limit.moments[k]);
    // An error at the level of rounding (odd moments of a symmetric model are 0 up to the last
    // bits of the sum) is not a finite-N effect: never resolved.
    if (std::fabs(e.error.value) <= kRoundingResolution * scale) e.error.resolved = false;
    out.moment_errors.push_back(e);
  }
}

}  // namespace

SizeMetrics compute_size_metrics(const SizeData& data, const LimitReference& limit,
                                 const MetricsOptions& options) {
  SizeMetrics out;
  out.n = data.n;
  TrialPointers ok;
  for (const auto& t : data.trials) {
    if (!t.failed) ok.push_back(&t);
  }
  out.trials_used = static_cast<std::int64_t>(ok.size());

  if (!limit.distribution.cdf) {
    out.notes.push_back("no limit CDF: no distances");
  } else {
    pooled_distances_of_size(data, ok, limit, options, out);
    per_trial_distances_of_size(ok, limit, out);
  }

  if (!limit.moments.empty() && !ok.empty()) {
    moment_errors_of_size(ok, limit, out);
  } else if (limit.moments.empty()) {
    out.notes.push_back("no exact limit moments: no moment errors");
  }

  std::vector<double> mx, mn, nm;
  for (const auto* t : ok) {
    mx.push_back(t->max);
    mn.push_back(t->min);
    nm.push_back(t->norm);
  }
  out.max_edge = signed_error(mx, limit.edge_high);
  out.min_edge = signed_error(mn, limit.edge_low);
  out.norm = signed_error(nm, limit.norm);
  return out;
}

}  // namespace freegap::analysis
