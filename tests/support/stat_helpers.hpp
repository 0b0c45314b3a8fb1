// Small statistics helpers shared by the stochastic tests: means with standard errors and a
// Kolmogorov–Smirnov statistic. Tolerances in tests are multiples of these standard errors.
#pragma once

#include <algorithm>
#include <cmath>
#include <functional>
#include <vector>

namespace freegap::testing {

struct MeanSe {
  double mean = 0.0;
  double se = 0.0;  ///< sample standard deviation / √n
};

inline MeanSe mean_se(const std::vector<double>& x) {
  const double n = static_cast<double>(x.size());
  double m = 0.0;
  for (double v : x) m += v;
  m /= n;
  double ss = 0.0;
  for (double v : x) ss += (v - m) * (v - m);
  return {m, std::sqrt(ss / (n - 1.0) / n)};
}

/// One-sample Kolmogorov–Smirnov statistic sup|F_n − F| (common practice).
inline double ks_statistic(std::vector<double> x, const std::function<double(double)>& cdf) {
  std::sort(x.begin(), x.end());
  const double n = static_cast<double>(x.size());
  double d = 0.0;
  for (std::size_t i = 0; i < x.size(); ++i) {
    const double f = cdf(x[i]);
    d = std::max({d, (static_cast<double>(i) + 1.0) / n - f, f - static_cast<double>(i) / n});
  }
  return d;
}

/// Two-sample Kolmogorov–Smirnov statistic (common practice).
inline double ks_two_sample(std::vector<double> a, std::vector<double> b) {
  std::sort(a.begin(), a.end());
  std::sort(b.begin(), b.end());
  std::size_t i = 0, j = 0;
  double d = 0.0;
  const double na = static_cast<double>(a.size()), nb = static_cast<double>(b.size());
  while (i < a.size() && j < b.size()) {
    const double t = std::min(a[i], b[j]);
    while (i < a.size() && a[i] <= t) ++i;
    while (j < b.size() && b[j] <= t) ++j;
    d = std::max(d, std::abs(static_cast<double>(i) / na - static_cast<double>(j) / nb));
  }
  return d;
}

/// Critical value of the KS statistic at level 0.001 for sample size n (asymptotic Kolmogorov
/// distribution, K_{0.999} = 1.949; Smirnov 1948 table, value from memory), and for two samples.
inline double ks_critical_001(double n) { return 1.949 / std::sqrt(n); }
inline double ks_two_sample_critical_001(double n, double m) {
  return 1.949 * std::sqrt((n + m) / (n * m));
}

}  // namespace freegap::testing
