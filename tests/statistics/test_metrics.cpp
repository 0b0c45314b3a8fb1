// Distances, moment and edge errors with their Monte Carlo errors, and the unresolved marking.
// Hand-computable cases use the uniform law on [0, 1] (F(x) = x); the semicircle CDF and its
// antiderivative are those of docs/check-values.md §1.1.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <numbers>
#include <vector>

#include "freegap/analysis/statistics/metrics.hpp"
#include "freegap/errors.hpp"
#include "freegap/observe.hpp"
#include "freegap/rng.hpp"

namespace fa = freegap::analysis;
namespace ob = freegap::observe;

namespace {

fa::LimitDistribution uniform01(bool with_integral, bool with_quantile) {
  fa::LimitDistribution d;
  d.cdf = [](double x) { return std::clamp(x, 0.0, 1.0); };
  if (with_integral) d.cdf_integral = [](double x) { return 0.5 * x * x; };
  if (with_quantile) d.quantile = [](double u) { return u; };
  d.support_low = 0.0;
  d.support_high = 1.0;
  return d;
}

// ref §1.1: F(x) = 1/2 + x√(4−x²)/(4π) + arcsin(x/2)/π and Φ(x) = ∫_{−2}^x F.
fa::LimitDistribution semicircle(bool with_integral) {
  fa::LimitDistribution d;
  d.cdf = [](double x) {
    x = std::clamp(x, -2.0, 2.0);
    return 0.5 + x * std::sqrt(4 - x * x) / (4 * std::numbers::pi) +
           std::asin(x / 2) / std::numbers::pi;
  };
  if (with_integral) {
    d.cdf_integral = [](double x) {
      x = std::clamp(x, -2.0, 2.0);
      const double r = 4 - x * x;
      return x / 2 + (x * std::asin(x / 2) + std::sqrt(r)) / std::numbers::pi -
             std::pow(r, 1.5) / (12 * std::numbers::pi);
    };
  }
  d.support_low = -2.0;
  d.support_high = 2.0;
  return d;
}

ob::Histogram histogram(std::vector<std::int64_t> counts, std::int64_t below = 0,
                        std::int64_t above = 0) {
  ob::Histogram h;
  h.counts = std::move(counts);
  h.below = below;
  h.above = above;
  return h;
}

}  // namespace

// Two points {1/4, 3/4} against U[0,1]: D = 1/4 and W1 = 1/32 + 1/16 + 1/32 = 1/8 by hand;
// {−1, 2}: D = 1/2 and W1 = ∫_0^1 |F_n^{−1}(u) − u| du = 5/8 + 5/8 = 5/4. Every code path (with
// or without Φ and F^{−1}) must agree.
TEST(SampleDistances, UniformByHand) {
  for (bool integral : {false, true}) {
    for (bool quantile : {false, true}) {
      const auto law = uniform01(integral, quantile);
      const auto a = fa::sample_distances({0.75, 0.25}, law);
      EXPECT_NEAR(a.kolmogorov, 0.25, 1e-15);
      EXPECT_NEAR(a.wasserstein1, 0.125, 1e-13);
      const auto b = fa::sample_distances({2.0, -1.0}, law);
      EXPECT_NEAR(b.kolmogorov, 0.5, 1e-15);
      EXPECT_NEAR(b.wasserstein1, 1.25, 1e-13);
      const auto c = fa::sample_distances({0.5}, law);
      EXPECT_NEAR(c.kolmogorov, 0.5, 1e-15);
      EXPECT_NEAR(c.wasserstein1, 0.25, 1e-13);
    }
  }
  EXPECT_THROW(fa::sample_distances({}, uniform01(false, false)), freegap::InputError);
}

// The exact-antiderivative path and the Gauss–Legendre path agree on the semicircle, and the
// midpoint quantiles x_i = F^{−1}((i − 1/2)/n) have D = 1/(2n) exactly (each jump is centred).
TEST(SampleDistances, SemicircleQuantiles) {
  const auto exact = semicircle(true), quad = semicircle(false);
  const int n = 200;
  std::vector<double> x;
  for (int i = 1; i <= n; ++i) {
    const double u = (i - 0.5) / n;
    double lo = -2, hi = 2;
    for (int it = 0; it < 200; ++it) {
      const double mid = 0.5 * (lo + hi);
      (exact.cdf(mid) < u ? lo : hi) = mid;
    }
    x.push_back(0.5 * (lo + hi));
  }
  const auto a = fa::sample_distances(x, exact);
  const auto b = fa::sample_distances(x, quad);
  EXPECT_NEAR(a.kolmogorov, 1.0 / (2 * n), 1e-12);
  EXPECT_NEAR(a.wasserstein1, b.wasserstein1, 1e-9);
  // W1 of midpoint quantiles is O(1/n) and well below the D-bound times the support width.
  EXPECT_GT(a.wasserstein1, 0.0);
  EXPECT_LT(a.wasserstein1, 4.0 / (2 * n));
}

// Edges 0, 1/4, 1/2, 3/4, 1 on U[0,1]. Counts [1,1,1,1]: F_n = F, both distances 0. Counts
// [2,0,0,2]: F_n(edges) = 0, 1/2, 1/2, 1/2, 1, so D = 1/4; with F_n linear in bins, |F_n − F| is
// x, 1/2 − x, x − 1/2, 1 − x on the four bins: W1 = 4 · 1/32 = 1/8; the bin resolution is 1/2.
TEST(BinnedDistances, UniformByHand) {
  const std::vector<double> edges = {0, 0.25, 0.5, 0.75, 1};
  const auto law = uniform01(false, false);
  const auto flat = fa::binned_distances(edges, histogram({1, 1, 1, 1}), law);
  EXPECT_NEAR(flat.kolmogorov, 0.0, 1e-15);
  EXPECT_NEAR(flat.wasserstein1, 0.0, 1e-15);
  EXPECT_NEAR(flat.resolution, 0.25, 1e-15);
  const auto split = fa::binned_distances(edges, histogram({2, 0, 0, 2}), law);
  EXPECT_NEAR(split.kolmogorov, 0.25, 1e-15);
  EXPECT_NEAR(split.wasserstein1, 0.125, 1e-14);
  EXPECT_NEAR(split.resolution, 0.5, 1e-15);
  // Counts [3,0,1,0]: F_n(edges) = 0, 3/4, 3/4, 1, 1; |F_n − F| is 2x, 3/4 − x, 1/4, 1 − x on
  // the four bins: W1 = 1/16 + 3/32 + 1/16 + 1/32 = 1/4, D = 1/2 at e = 1/4.
  const auto steep = fa::binned_distances(edges, histogram({3, 0, 1, 0}), law);
  EXPECT_NEAR(steep.kolmogorov, 0.5, 1e-15);
  EXPECT_NEAR(steep.wasserstein1, 0.25, 1e-14);
  // Counts [0,2,0,0]: on bin 2 F_n − F = 3x − 1 changes sign inside the bin at x = 1/3, where the
  // bin is split: ∫_{1/4}^{1/2} |3x − 1| = 1/96 + 1/24 = 5/96; the other bins give 1/32, 3/32,
  // 1/32, so W1 = 5/24; D = 1/2 at e = 1/2.
  const auto crossing = fa::binned_distances(edges, histogram({0, 2, 0, 0}), law);
  EXPECT_NEAR(crossing.kolmogorov, 0.5, 1e-15);
  EXPECT_NEAR(crossing.wasserstein1, 5.0 / 24.0, 1e-14);
  // Mass outside the edges sits on the nearest edge: all of it below 0 → F_n = 1 from 0 on:
  // W1 = ∫_0^1 (1 − x) = 1/2, D = 1.
  const auto below = fa::binned_distances(edges, histogram({0, 0, 0, 0}, 4, 0), law);
  EXPECT_NEAR(below.kolmogorov, 1.0, 1e-15);
  EXPECT_NEAR(below.wasserstein1, 0.5, 1e-14);
  EXPECT_THROW(fa::binned_distances(edges, histogram({1, 1}), law), freegap::InputError);
  EXPECT_THROW(fa::binned_distances(edges, histogram({0, 0, 0, 0}), law), freegap::InputError);
}

// Bootstrap over units: 20 units of 500 U[0,1] draws, 20 bins. Against the true law the pooled
// distances are pure noise and must be marked unresolved; against a law shifted by 0.05 they are
// resolved. The noise floor of D is sup_e sd(F_n(e)); for iid draws sd = √(F(1−F)/n) ≤
// √(0.25/10000) = 0.005. The bootstrap estimate from 20 units has a relative error of roughly
// 1/√(2·19) ≈ 16% per edge (and the sup picks the largest), so we accept 0.0035–0.0075.
TEST(PooledDistances, BootstrapNoiseFloorAndResolution) {
  const auto edges = ob::uniform_edges(0.0, 1.0, 20);
  std::vector<ob::Histogram> units;
  for (int u = 0; u < 20; ++u) {
    freegap::rng::Stream s({5, "pooled-uniform", 1, static_cast<std::uint64_t>(u)});
    ob::Histogram h = histogram(std::vector<std::int64_t>(20, 0));
    std::vector<double> v(500);
    s.fill_uniform(v);
    ob::add_counts(v, edges, h);
    units.push_back(h);
  }
  const auto same = fa::pooled_distances(edges, units, uniform01(false, false));
  EXPECT_GT(same.kolmogorov.noise_floor, 0.0035);
  EXPECT_LT(same.kolmogorov.noise_floor, 0.0075);
  EXPECT_FALSE(same.kolmogorov.resolved);
  EXPECT_FALSE(same.wasserstein1.resolved);
  EXPECT_GT(same.kolmogorov.standard_error, 0.0);

  fa::LimitDistribution shifted;
  shifted.cdf = [](double x) { return std::clamp(x - 0.05, 0.0, 1.0); };
  shifted.support_low = 0.05;
  shifted.support_high = 1.05;
  const auto off = fa::pooled_distances(edges, units, shifted);
  EXPECT_NEAR(off.kolmogorov.value, 0.05, 4 * same.kolmogorov.noise_floor);
  EXPECT_NEAR(off.wasserstein1.value, 0.05, 0.01);  // W1 of a shift is the shift (bins add ≤ 0.05)
  EXPECT_TRUE(off.kolmogorov.resolved);
  EXPECT_TRUE(off.wasserstein1.resolved);

  // One unit: no bootstrap, so nothing can be resolved.
  const auto single = fa::pooled_distances(edges, std::span(units).first(1), shifted);
  EXPECT_TRUE(std::isnan(single.kolmogorov.standard_error));
  EXPECT_FALSE(single.kolmogorov.resolved);
}

TEST(SignedError, MeanSeAndResolution) {
  // {1, 2, 3, 4}: mean 2.5, sd √(5/3), SE √(5/3)/2 = 0.6455; error vs 2 is 0.5 < 2 SE.
  const std::vector<double> v = {1, 2, 3, 4};
  const auto e = fa::signed_error(v, 2.0);
  EXPECT_DOUBLE_EQ(e.mean, 2.5);
  EXPECT_NEAR(e.error.value, 0.5, 1e-15);
  EXPECT_NEAR(e.error.standard_error, std::sqrt(5.0 / 3.0) / 2.0, 1e-15);
  EXPECT_FALSE(e.error.resolved);
  EXPECT_TRUE(fa::signed_error(v, 0.0).error.resolved);  // 2.5 ≥ 2 · 0.6455
  EXPECT_TRUE(std::isnan(fa::signed_error(v, std::nan("")).error.value));
}

TEST(SizeMetrics, CombinesEverything) {
  fa::SizeData data;
  data.n = 4;
  data.edges = {0, 0.25, 0.5, 0.75, 1};
  ob::ObserveConfig config;
  config.bin_edges = data.edges;
  config.max_moment = 2;
  config.keep_spectrum_trials = {0, 1};
  const std::vector<std::vector<double>> spectra = {
      {0.1, 0.3, 0.6, 0.9}, {0.2, 0.4, 0.55, 0.8}, {0.15, 0.35, 0.65, 0.95}};
  for (std::size_t t = 0; t < spectra.size(); ++t) {
    ob::Histogram h = ob::empty_histogram(config);
    data.trials.push_back(ob::observe_spectrum(t, spectra[t], config, h));
    data.unit_histograms.push_back(h);
  }
  data.trials.push_back(ob::failed_trial(3, "solver failed"));
  fa::LimitReference limit;
  limit.distribution = uniform01(true, true);
  limit.moments = {1.0, 0.5, 1.0 / 3.0};  // uniform law
  limit.edge_low = 0.0;
  limit.edge_high = 1.0;
  limit.norm = 1.0;
  const fa::SizeMetrics m = fa::compute_size_metrics(data, limit);
  EXPECT_EQ(m.trials_used, 3);
  ASSERT_TRUE(m.has_pooled);
  ASSERT_TRUE(m.has_per_trial);
  EXPECT_EQ(m.per_trial.trials, 2);
  // Per-trial D by hand (max over i of i/4 − x_i and x_i − (i−1)/4): trial 0 {0.1, 0.3, 0.6, 0.9}
  // reaches 0.5 − 0.3 = 0.2; trial 1 {0.2, 0.4, 0.55, 0.8} reaches 0.2 − 0 = 0.2.
  EXPECT_NEAR(fa::sample_distances(spectra[0], limit.distribution).kolmogorov, 0.2, 1e-15);
  EXPECT_NEAR(fa::sample_distances(spectra[1], limit.distribution).kolmogorov, 0.2, 1e-15);
  EXPECT_NEAR(m.per_trial.kolmogorov.value, 0.2, 1e-15);
  EXPECT_NEAR(m.per_trial.kolmogorov_sd, 0.0, 1e-15);
  double mean_d = 0.0;
  for (int t = 0; t < 2; ++t)
    mean_d += fa::sample_distances(spectra[t], limit.distribution).kolmogorov / 2;
  EXPECT_NEAR(m.per_trial.kolmogorov.value, mean_d, 1e-15);
  ASSERT_EQ(m.moment_errors.size(), 3u);
  // Mean of m_1 over the three trials: (1.9 + 1.95 + 2.1)/12 = 5.95/12.
  EXPECT_NEAR(m.moment_errors[1].mean, 5.95 / 12.0, 1e-14);
  EXPECT_NEAR(m.moment_errors[1].error.value, 5.95 / 12.0 - 0.5, 1e-14);
  EXPECT_NEAR(m.max_edge.mean, (0.9 + 0.8 + 0.95) / 3, 1e-15);
  EXPECT_NEAR(m.max_edge.error.value, (0.9 + 0.8 + 0.95) / 3 - 1.0, 1e-15);
  EXPECT_TRUE(m.max_edge.error.resolved);  // ≈ −0.117 with SE ≈ 0.044
  EXPECT_NEAR(m.min_edge.mean, 0.15, 1e-15);

  fa::LimitReference bare;
  bare.edge_low = bare.edge_high = bare.norm = std::nan("");
  const fa::SizeMetrics none = fa::compute_size_metrics(data, bare);
  EXPECT_FALSE(none.has_pooled);
  EXPECT_FALSE(none.has_per_trial);
  EXPECT_TRUE(none.moment_errors.empty());
  ASSERT_EQ(none.notes.size(), 2u);
  EXPECT_EQ(none.notes[0], "no limit CDF: no distances");
  EXPECT_EQ(none.notes[1], "no exact limit moments: no moment errors");
}

// Distances from kept spectra (docs/check-values.md §4i). With equal-length trials the pooled
// empirical CDF is that of the concatenated sample, so the plug-in values must equal
// sample_distances of the concatenation (exact formulas, Φ-based W1): Kolmogorov to rounding, W1
// within the grid bound the function states; each trial's own distances must equal
// sample_distances of that trial within the same bound.
TEST(SpectraDistances, PlugInEqualsTheExactDistancesOfThePooledSample) {
  const auto law = semicircle(true);
  freegap::rng::Stream stream(freegap::rng::StreamKey{7, "spectra-test", 0, 0});
  std::vector<std::vector<double>> spectra(12);
  std::vector<double> pooled;
  for (auto& s : spectra) {
    for (int i = 0; i < 40; ++i) {
      // Points spread a little beyond the support, so the pieces outside it count too.
      s.push_back(-2.2 + 4.4 * stream.uniform());
      pooled.push_back(s.back());
    }
  }
  const fa::SpectraDistances d = fa::spectra_distances(spectra, law, 40);
  const fa::SampleDistances exact = fa::sample_distances(pooled, law);
  EXPECT_EQ(d.trials, 12);
  EXPECT_EQ(d.values, 480);
  EXPECT_NEAR(d.kolmogorov_plugin, exact.kolmogorov, 1e-13);
  EXPECT_GT(d.wasserstein1_grid_bound, 0.0);
  EXPECT_LT(d.wasserstein1_grid_bound, 1e-4);  // support width 4.4 over ≥ 2^19 cells
  EXPECT_NEAR(d.wasserstein1_plugin, exact.wasserstein1, d.wasserstein1_grid_bound);
  ASSERT_EQ(d.per_trial_kolmogorov.size(), 12u);
  for (std::size_t t = 0; t < spectra.size(); ++t) {
    const fa::SampleDistances e = fa::sample_distances(spectra[t], law);
    EXPECT_NEAR(d.per_trial_kolmogorov[t], e.kolmogorov, 1e-13) << "trial " << t;
    EXPECT_NEAR(d.per_trial_wasserstein1[t], e.wasserstein1, d.wasserstein1_grid_bound) << "trial " << t;
  }
  // Bootstrap: 200 replicates by default, bias = mean(D*) − D̂ > 0 for a distance of a noisy
  // estimate whose true distance is small, value = D̂ − bias.
  ASSERT_EQ(d.kolmogorov_replicates.size(), 200u);
  EXPECT_GT(d.kolmogorov_bias, 0.0);
  EXPECT_NEAR(d.kolmogorov.value, d.kolmogorov_plugin - d.kolmogorov_bias, 1e-15);
  EXPECT_GT(d.kolmogorov.standard_error, 0.0);
  EXPECT_GT(d.kolmogorov.noise_floor, 0.0);
  EXPECT_EQ(d.kolmogorov.resolved, d.kolmogorov.value > d.kolmogorov.noise_floor);
  EXPECT_THROW(fa::spectra_distances(std::vector<std::vector<double>>{}, law, 1), freegap::InputError);
  EXPECT_THROW(fa::spectra_distances(std::vector<std::vector<double>>{{}}, law, 1), freegap::InputError);
  EXPECT_THROW(fa::spectra_distances(std::vector<std::vector<double>>{{0.5, std::nan("")}}, law, 1),
               freegap::InputError);
}

// The bias correction and noise floor do what they are for: samples drawn from the limit itself
// (the true distance of the mean distribution is 0) give plug-in distances that are pure noise;
// they are unresolved (for this seed; over 300 seeds 2–4 % are called resolved, metrics.hpp). Samples from a shifted law (true distance sup|F(x) − F(x − 0.3)| ≈ 0.095
// for the semicircle, where the density near 0 is 1/π) are resolved and the corrected value is
// within 4 standard errors of the truth. 100 trials of 50 values, fixed seed.
TEST(SpectraDistances, BiasCorrectionLeavesPureNoiseUnresolved) {
  const auto law = semicircle(true);
  const auto quantile = [&](double u) {
    double lo = -2, hi = 2;
    for (int it = 0; it < 100; ++it) {
      const double mid = 0.5 * (lo + hi);
      (law.cdf(mid) < u ? lo : hi) = mid;
    }
    return 0.5 * (lo + hi);
  };
  freegap::rng::Stream stream(freegap::rng::StreamKey{11, "spectra-bias", 0, 0});
  std::vector<std::vector<double>> same(100), shifted(100);
  for (std::size_t t = 0; t < 100; ++t) {
    for (int i = 0; i < 50; ++i) {
      const double x = quantile(stream.uniform());
      same[t].push_back(x);
      shifted[t].push_back(x + 0.3);
    }
  }
  const fa::SpectraDistances a = fa::spectra_distances(same, law, 50);
  EXPECT_FALSE(a.kolmogorov.resolved) << a.kolmogorov.value << " ± " << a.kolmogorov.standard_error;
  EXPECT_FALSE(a.wasserstein1.resolved) << a.wasserstein1.value << " ± " << a.wasserstein1.standard_error;
  // Pure noise: the correction can leave the whole zero level, and the bound says so.
  EXPECT_DOUBLE_EQ(a.kolmogorov_residual_bound,
                   std::min(a.kolmogorov_zero_level, std::numbers::sqrt2 * std::fabs(a.kolmogorov_bias)));
  EXPECT_GT(a.kolmogorov_residual_bound, 0.5 * a.kolmogorov_zero_level);
  const fa::SpectraDistances b = fa::spectra_distances(shifted, law, 50);
  double truth = 0.0;  // sup_x |F(x) − F(x − 0.3)| on a fine grid
  for (int i = 0; i <= 40000; ++i) {
    const double x = -2.5 + 5.0 * i / 40000.0;
    truth = std::max(truth, std::fabs(law.cdf(x) - law.cdf(x - 0.3)));
  }
  EXPECT_TRUE(b.kolmogorov.resolved);
  EXPECT_NEAR(b.kolmogorov.value, truth, 4.0 * b.kolmogorov.standard_error);
  // W1 of a pure shift is the shift (the law is moved rigidly).
  EXPECT_TRUE(b.wasserstein1.resolved);
  EXPECT_NEAR(b.wasserstein1.value, 0.3, 4.0 * b.wasserstein1.standard_error + b.wasserstein1_grid_bound);
  // Far above the noise a smooth functional keeps almost no bias (metrics.hpp): the W1 bound is
  // √2 × a small bias, well below the zero level that the fits used to add in full.
  EXPECT_DOUBLE_EQ(b.wasserstein1_residual_bound, std::numbers::sqrt2 * std::fabs(b.wasserstein1_bias));
  EXPECT_LT(b.wasserstein1_residual_bound, 0.5 * b.wasserstein1_zero_level);
}

// When every trial kept its spectrum the size's pooled distances come from the spectra (no
// bins); when one did not, from the histograms.
TEST(SizeMetrics, PooledDistancesFromSpectraWhenEveryTrialKeptOne) {
  fa::SizeData data;
  data.n = 4;
  data.edges = {0, 0.25, 0.5, 0.75, 1};
  ob::ObserveConfig config;
  config.bin_edges = data.edges;
  config.max_moment = 2;
  config.keep_spectrum_trials = {0, 1, 2};
  const std::vector<std::vector<double>> spectra = {
      {0.1, 0.3, 0.6, 0.9}, {0.2, 0.4, 0.55, 0.8}, {0.15, 0.35, 0.65, 0.95}};
  for (std::size_t t = 0; t < spectra.size(); ++t) {
    ob::Histogram h = ob::empty_histogram(config);
    data.trials.push_back(ob::observe_spectrum(t, spectra[t], config, h));
    data.unit_histograms.push_back(h);
  }
  fa::LimitReference limit;
  limit.distribution = uniform01(true, true);
  limit.edge_low = limit.edge_high = limit.norm = std::nan("");
  const fa::SizeMetrics m = fa::compute_size_metrics(data, limit);
  ASSERT_TRUE(m.has_pooled);
  EXPECT_TRUE(m.pooled_from_spectra);
  std::vector<double> all;
  for (const auto& s : spectra) all.insert(all.end(), s.begin(), s.end());
  EXPECT_NEAR(m.spectra.kolmogorov_plugin, fa::sample_distances(all, limit.distribution).kolmogorov, 1e-15);
  EXPECT_EQ(m.per_trial.kolmogorov_values.size(), 3u);
  data.trials[2].spectrum.clear();  // trial 2 kept none
  const fa::SizeMetrics binned = fa::compute_size_metrics(data, limit);
  ASSERT_TRUE(binned.has_pooled);
  EXPECT_FALSE(binned.pooled_from_spectra);
  EXPECT_GT(binned.pooled_resolution, 0.0);
}
