// Convergence-rate fits (see fit.hpp).
#include "freegap/analysis/statistics/fit.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstdio>
#include <limits>
#include <map>
#include <numbers>
#include <string>
#include <utility>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/rng.hpp"
#include "freegap/stop.hpp"

namespace freegap::analysis {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

std::string format(const char* fmt, double a) {
  char buf[64];
  std::snprintf(buf, sizeof buf, fmt, a);
  return buf;
}

std::vector<ErrorPoint> sorted_by_n(std::span<const ErrorPoint> points) {
  std::vector<ErrorPoint> v(points.begin(), points.end());
  std::stable_sort(v.begin(), v.end(),
                   [](const ErrorPoint& a, const ErrorPoint& b) { return a.n < b.n; });
  return v;
}

// Student t density (standard formula).
double t_density(double t, double dof) {
  const double logc = std::lgamma(0.5 * (dof + 1.0)) - std::lgamma(0.5 * dof) -
                      0.5 * std::log(dof * std::numbers::pi);
  return std::exp(logc - 0.5 * (dof + 1.0) * std::log1p(t * t / dof));
}

// P(0 ≤ T ≤ t) by composite Simpson on a substitution t = tan θ-like stretch: integrate over
// u ∈ [0, atan(t)] with t = tan u, dt = sec² u du, which tames the heavy tails for small ν.
double t_central_mass(double t, double dof) {
  const double upper = std::atan(t);
  const int steps = 2000;  // even
  const double h = upper / steps;
  double sum = 0.0;
  for (int i = 0; i <= steps; ++i) {
    const double u = i * h;
    const double c = std::cos(u);
    const double f = t_density(std::tan(u), dof) / (c * c);
    sum += f * (i == 0 || i == steps ? 1.0 : (i % 2 == 1 ? 4.0 : 2.0));
  }
  return sum * h / 3.0;
}

}  // namespace

double student_t_quantile(double dof, double p) {
  if (!(dof >= 1.0) || !(p > 0.0 && p < 1.0)) {
    throw InputError("student_t_quantile needs dof ≥ 1 and 0 < p < 1");
  }
  if (p == 0.5) return 0.0;
  // Fits ask for the same few quantiles over and over (bootstrap replicates): remember them.
  thread_local std::map<std::pair<double, double>, double> cache;
  if (auto it = cache.find({dof, p}); it != cache.end()) return it->second;
  const double target = std::fabs(p - 0.5);
  double lo = 0.0, hi = 1.0;
  while (t_central_mass(hi, dof) < target) hi *= 2.0;
  for (int it = 0; it < 100 && hi - lo > 1e-12 * hi; ++it) {
    const double mid = 0.5 * (lo + hi);
    (t_central_mass(mid, dof) < target ? lo : hi) = mid;
  }
  const double q = 0.5 * (lo + hi);
  const double result = p > 0.5 ? q : -q;
  if (cache.size() < 1000) cache.emplace(std::make_pair(dof, p), result);
  return result;
}

double normal_quantile(double p) {
  if (!(p > 0.0 && p < 1.0)) throw InputError("normal_quantile needs 0 < p < 1");
  if (p == 0.5) return 0.0;
  // Bisection on Φ(x) = erfc(−x/√2)/2 (std::erfc is accurate in both tails).
  double lo = -40.0, hi = 40.0;
  for (int it = 0; it < 200 && hi - lo > 1e-15 * std::max(1.0, std::fabs(hi)); ++it) {
    const double mid = 0.5 * (lo + hi);
    (0.5 * std::erfc(-mid / std::numbers::sqrt2) < p ? lo : hi) = mid;
  }
  return 0.5 * (lo + hi);
}

namespace {

// The points a fit uses, sorted by N: resolved, with a finite nonzero error at a positive N. The
// points left out are counted in the fit's warnings.
std::vector<ErrorPoint> points_to_fit(std::span<const ErrorPoint> points, PowerLawFit& fit) {
  std::vector<ErrorPoint> used;
  int dropped_zero = 0, dropped_unresolved = 0;
  for (const ErrorPoint& p : sorted_by_n(points)) {
    if (!p.resolved) {
      ++dropped_unresolved;
    } else if (!(std::fabs(p.error) > 0.0) || !std::isfinite(p.error) || !(p.n > 0.0)) {
      ++dropped_zero;
    } else {
      used.push_back(p);
    }
  }
  if (dropped_unresolved > 0) {
    fit.warnings.push_back(std::to_string(dropped_unresolved) +
                           " size(s) unresolved (error below its noise floor): left out");
  }
  if (dropped_zero > 0) {
    fit.warnings.push_back(std::to_string(dropped_zero) + " size(s) with zero error: left out");
  }
  return used;
}

// Fewer than 3 points: no fit, only the slope through two points when there are two.
PowerLawFit too_few_points(const std::vector<ErrorPoint>& used, PowerLawFit fit) {
  fit.warnings.push_back("only " + std::to_string(used.size()) + " size(s): no fit");
  if (used.size() == 2) {
    fit.alpha =
        -std::log(std::fabs(used[1].error / used[0].error)) / std::log(used[1].n / used[0].n);
  } else {
    fit.alpha = kNaN;
  }
  fit.alpha_standard_error = fit.ci_low = fit.ci_high = kNaN;
  return fit;
}

// The least-squares line through (log N, log |error|) with the fit's weights: sets the exponent,
// the constant, the degrees of freedom and χ², and returns the exponent's standard error.
double fit_log_log_line(const std::vector<ErrorPoint>& used, PowerLawFit& fit) {
  const std::size_t m = used.size();
  std::vector<double> x(m), y(m), w(m);
  for (std::size_t j = 0; j < m; ++j) {
    x[j] = std::log(used[j].n);
    y[j] = std::log(std::fabs(used[j].error));
    w[j] = fit.weighted
               ? (used[j].error * used[j].error) / (used[j].standard_error * used[j].standard_error)
               : 1.0;
  }
  double sw = 0.0, sx = 0.0, sy = 0.0;
  for (std::size_t j = 0; j < m; ++j) {
    sw += w[j];
    sx += w[j] * x[j];
    sy += w[j] * y[j];
  }
  const double xbar = sx / sw, ybar = sy / sw;
  double sxx = 0.0, sxy = 0.0;
  for (std::size_t j = 0; j < m; ++j) {
    sxx += w[j] * (x[j] - xbar) * (x[j] - xbar);
    sxy += w[j] * (x[j] - xbar) * (y[j] - ybar);
  }
  const double slope = sxy / sxx;
  const double intercept = ybar - slope * xbar;
  fit.alpha = -slope;
  fit.constant = std::exp(intercept);
  fit.dof = static_cast<int>(m) - 2;
  double chi2 = 0.0;
  for (std::size_t j = 0; j < m; ++j) {
    const double r = y[j] - (intercept + slope * x[j]);
    chi2 += w[j] * r * r;
  }
  fit.chi2 = chi2;
  double se = 0.0;
  if (fit.weighted) {
    se = std::sqrt(1.0 / sxx);
    if (chi2 > fit.dof) {  // scatter beyond the stated errors: inflate (§4h)
      se *= std::sqrt(chi2 / fit.dof);
      fit.inflated = true;
    }
  } else {
    se = std::sqrt(chi2 / fit.dof / sxx);
  }
  return se;
}

}  // namespace

PowerLawFit fit_power_law(std::span<const ErrorPoint> points, const FitOptions& options) {
  PowerLawFit fit;
  fit.level = options.level;
  const std::vector<ErrorPoint> used = points_to_fit(points, fit);
  fit.points = static_cast<int>(used.size());
  if (used.size() < 3) return too_few_points(used, std::move(fit));
  if (used.back().n / used.front().n < options.min_span) {
    fit.warnings.push_back("sizes span less than a factor " + format("%g", options.min_span) +
                           ": the exponent is poorly determined");
  }
  if (used.front().n < options.small_n) {
    fit.warnings.push_back("smallest N below " + format("%g", options.small_n) +
                           ": pre-asymptotic curvature likely");
  }
  // Weights from the delta method: var(log e) ≈ s²/e².
  fit.weighted = std::all_of(used.begin(), used.end(), [](const ErrorPoint& p) {
    return std::isfinite(p.standard_error) && p.standard_error > 0.0;
  });
  const double se = fit_log_log_line(used, fit);
  fit.alpha_standard_error = se;
  // Known standard errors: a normal interval (scaled by the Birge ratio when inflated). Errors
  // estimated from the residuals alone: Student t with m − 2 degrees of freedom.
  const double t = fit.weighted ? normal_quantile(0.5 * (1.0 + options.level))
                                : student_t_quantile(fit.dof, 0.5 * (1.0 + options.level));
  fit.ci_low = fit.alpha - t * se;
  fit.ci_high = fit.alpha + t * se;
  fit.ok = true;
  return fit;
}

PowerLawFit fit_top_window(std::span<const ErrorPoint> points, std::size_t window,
                           const FitOptions& options) {
  std::vector<ErrorPoint> v = sorted_by_n(points);
  if (window > 0 && v.size() > window)
    v.erase(v.begin(), v.end() - static_cast<std::ptrdiff_t>(window));
  return fit_power_law(v, options);
}

std::vector<LocalSlope> local_slopes(std::span<const ErrorPoint> points) {
  const std::vector<ErrorPoint> v = sorted_by_n(points);
  std::vector<LocalSlope> out;
  for (std::size_t j = 0; j + 1 < v.size(); ++j) {
    if (v[j].error == 0.0 || v[j + 1].error == 0.0 || v[j].n == v[j + 1].n) continue;
    out.push_back(
        {v[j].n, v[j + 1].n,
         -std::log(std::fabs(v[j + 1].error / v[j].error)) / std::log(v[j + 1].n / v[j].n)});
  }
  return out;
}

namespace {
// The fit a bootstrap replicate gets: the window's or all sizes'.
PowerLawFit replicate_fit(const std::vector<ErrorPoint>& pts, const BootstrapOptions& options) {
  return options.window > 0 ? fit_top_window(pts, options.window, options.fit)
                            : fit_power_law(pts, options.fit);
}

// Keeps a replicate's exponent, or counts the replicate as failed.
void keep_alpha(const PowerLawFit& f, std::vector<double>& alphas, BootstrapInterval& out) {
  if (f.ok && std::isfinite(f.alpha)) {
    alphas.push_back(f.alpha);
  } else {
    ++out.failed;
  }
}

// The percentile interval of sorted replicate exponents, linear between order statistics.
void percentile_interval(std::vector<double>& alphas, BootstrapInterval& out) {
  out.replicates = static_cast<int>(alphas.size());
  if (alphas.empty()) {
    out.low = out.high = kNaN;
    return;
  }
  std::sort(alphas.begin(), alphas.end());
  const auto quantile = [&](double q) {
    const double pos = q * static_cast<double>(alphas.size() - 1);
    const auto i = static_cast<std::size_t>(std::floor(pos));
    const double frac = pos - static_cast<double>(i);
    return i + 1 < alphas.size() ? alphas[i] * (1.0 - frac) + alphas[i + 1] * frac : alphas[i];
  };
  out.low = quantile(0.5 * (1.0 - out.level));
  out.high = quantile(0.5 * (1.0 + out.level));
}
}  // namespace

BootstrapInterval bootstrap_alpha(std::span<const std::size_t> replicates_per_size,
                                  const ResampledPoint& point, const BootstrapOptions& options) {
  const std::size_t sizes = replicates_per_size.size();
  BootstrapInterval out;
  out.level = options.level;
  {
    std::vector<ErrorPoint> pts;
    for (std::size_t j = 0; j < sizes; ++j) {
      std::vector<std::size_t> all(replicates_per_size[j]);
      for (std::size_t r = 0; r < all.size(); ++r) all[r] = r;
      pts.push_back(point(j, all));
    }
    out.alpha = replicate_fit(pts, options).alpha;
  }
  rng::Stream stream(rng::StreamKey{options.seed, "fit-bootstrap", 0, 0});
  std::vector<double> alphas;
  std::vector<std::size_t> draw;
  for (int b = 0; b < options.replicates; ++b) {
    check_stop();  // a report's bootstraps can be long: a stop request ends them
    std::vector<ErrorPoint> pts;
    for (std::size_t j = 0; j < sizes; ++j) {
      const std::size_t r = replicates_per_size[j];
      draw.resize(r);
      for (std::size_t i = 0; i < r; ++i) {
        draw[i] =
            std::min(r - 1, static_cast<std::size_t>(stream.uniform() * static_cast<double>(r)));
      }
      ErrorPoint p = point(j, draw);
      p.resolved = true;  // every replicate is fitted as it is; resolution is judged on the data
      pts.push_back(p);
    }
    keep_alpha(replicate_fit(pts, options), alphas, out);
  }
  percentile_interval(alphas, out);
  return out;
}

BootstrapInterval bootstrap_alpha_from_replicates(std::span<const ErrorPoint> points,
                                                  std::span<const std::vector<double>> replicates,
                                                  const BootstrapOptions& options) {
  if (replicates.size() != points.size()) {
    throw InputError("bootstrap_alpha_from_replicates: " + std::to_string(replicates.size()) +
                     " replicate sets for " + std::to_string(points.size()) + " sizes");
  }
  BootstrapInterval out;
  out.level = options.level;
  out.alpha = replicate_fit(std::vector<ErrorPoint>(points.begin(), points.end()), options).alpha;
  std::size_t b_max = replicates.empty() ? 0 : replicates.front().size();
  for (const auto& r : replicates) b_max = std::min(b_max, r.size());
  std::vector<double> alphas;
  for (std::size_t b = 0; b < b_max; ++b) {
    std::vector<ErrorPoint> pts(points.begin(), points.end());
    for (std::size_t j = 0; j < pts.size(); ++j) pts[j].error = replicates[j][b];
    keep_alpha(replicate_fit(pts, options), alphas, out);
  }
  percentile_interval(alphas, out);
  return out;
}

ErrorPoint mean_error_point(double n, std::span<const double> values, double target) {
  ErrorPoint p;
  p.n = n;
  double sum = 0.0;
  for (double v : values) sum += v;
  const double r = static_cast<double>(values.size());
  const double mean = sum / r;
  double ss = 0.0;
  for (double v : values) ss += (v - mean) * (v - mean);
  p.error = mean - target;
  p.standard_error = values.size() >= 2 ? std::sqrt(ss / (r - 1.0) / r) : kNaN;
  p.resolved = std::isfinite(p.standard_error) && std::fabs(p.error) >= 2.0 * p.standard_error;
  return p;
}

BootstrapInterval bootstrap_alpha_of_means(std::span<const double> sizes,
                                           const std::vector<std::vector<double>>& values,
                                           double target, const BootstrapOptions& options) {
  if (sizes.size() != values.size()) throw InputError("one value list per size is needed");
  std::vector<std::size_t> counts;
  for (const auto& v : values) counts.push_back(v.size());
  std::vector<double> scratch;
  const ResampledPoint point = [&](std::size_t j, std::span<const std::size_t> draw) {
    scratch.resize(draw.size());
    for (std::size_t i = 0; i < draw.size(); ++i) scratch[i] = values[j][draw[i]];
    ErrorPoint p = mean_error_point(sizes[j], scratch, target);
    p.resolved = true;
    return p;
  };
  return bootstrap_alpha(counts, point, options);
}

std::span<const PublishedRate> published_rates() {
  // docs/check-values.md §3.3 (and §2.1–2.3, §3.2 for the sources named there).
  static constexpr std::array<PublishedRate, 10> kRates = {{
      {"moments/gue", "GUE moments E tr X^k − Cat", 2.0,
       "Harer & Zagier 1986 (from memory), genus expansion in 1/N^2"},
      {"moments/goe", "GOE moments E tr X^k − Cat", 1.0, "Ledoux 2009; exact polynomials §2.2"},
      {"moments/wishart_complex", "complex Wishart moments", 2.0,
       "Hanlon, Stanley & Stembridge 1992 (from memory)"},
      {"moments/wishart_real", "real Wishart moments", 1.0,
       "exact polynomials, docs/check-values.md §2.3"},
      {"moments/haar_unitary_sum", "Haar-unitary-rotated sums A + U B U^*", 2.0,
       "Collins 2003 (from memory)"},
      {"moments/haar_orthogonal_sum", "Haar-orthogonal-rotated sums A + O B O^T", 1.0,
       "Collins & Śniady 2006 (from memory)"},
      {"kolmogorov_mean_esd/gue", "sup|E F_N − F|, GUE/LUE", 1.0,
       "Götze & Tikhomirov 2005 (from memory)"},
      {"kolmogorov_mean_esd/wigner", "sup|E F_N − F|, Wigner with 4 moments", 1.0,
       "Götze & Tikhomirov, arXiv 1405.7820"},
      {"edge/gue", "mean largest eigenvalue − 2 (Tracy–Widom scaling)", 2.0 / 3.0,
       "Tracy & Widom 1994 (from memory)"},
      {"norm/polynomial", "operator norm of a polynomial (edge scaling)", 2.0 / 3.0,
       "arXiv 2308.16778 (quadratic Wigner polynomials)"},
  }};
  return kRates;
}

std::optional<PublishedRate> find_published_rate(std::string_view key) {
  for (const PublishedRate& r : published_rates()) {
    if (r.key == key) return r;
  }
  return std::nullopt;
}

std::string describe_fit(const PowerLawFit& fit, const std::optional<PublishedRate>& published) {
  std::string s;
  if (fit.ok) {
    s = "α = " + format("%.3f", fit.alpha) + " ± " + format("%.3f", fit.alpha_standard_error) +
        " (" + format("%.0f", 100.0 * fit.level) + "% CI " + format("%.3f", fit.ci_low) + "–" +
        format("%.3f", fit.ci_high) + ", " + std::to_string(fit.points) + " sizes)";
  } else {
    s = "no fit";
    if (std::isfinite(fit.alpha)) s += " (two-point slope " + format("%.3f", fit.alpha) + ")";
  }
  if (published) {
    s += "; published " + format("%.4g", published->alpha) + " (" + std::string(published->source) +
         ")";
  } else {
    s += "; no published exponent";
  }
  for (const std::string& w : fit.warnings) s += "\n  warning: " + w;
  return s;
}

}  // namespace freegap::analysis
