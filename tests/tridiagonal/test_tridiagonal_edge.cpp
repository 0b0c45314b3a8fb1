// The edge of GUE at N = 10^6 through the tridiagonal model: the scaled largest eigenvalue
// N^(2/3)(λ_max − 2) against the Tracy–Widom β = 2 law.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <string>
#include <vector>

#include "freegap/tridiagonal.hpp"
#include "stat_helpers.hpp"

namespace {

namespace tri = freegap::tridiagonal;

// Source: Tracy & Widom (1994), "Level-spacing distributions and the Airy kernel", CMP 159: for
// GUE normalised to [−2, 2], N^(2/3)(λ_max − 2) → TW₂. Mean −1.7710868 and variance 0.8131947928
// from Bornemann (2010), "On the numerical evaluation of distributions in random matrix theory"
// (values as quoted in docs/check-values.md §3.2, recomputed there).
// The finite-N error of the TW approximation is O(N^(−2/3)) (Johnstone & Ma 2012, "Fast approach
// to the Tracy–Widom law at the edge of GOE and GUE"), ≈ 10^-4 in these units at N = 10^6:
// negligible against the standard errors of 150 trials (≈ 0.07 for the mean, ≈ 0.09 for the
// variance). About 0.2 s of CPU per trial (sample 0.09 s, λ_max by bisection 0.12 s); λ_max to
// 1e-9 (1e-5 in TW units); tolerance 4 standard errors. The standard error of the sample variance
// uses the sample fourth central moment: Var(s²) ≈ (μ₄ − σ⁴)/n (common practice).
TEST(TridiagonalEdge, GueLargestEigenvalueIsTracyWidom2AtOneMillion) {
  constexpr Eigen::Index n = 1'000'000;
  constexpr int kTrials = 150;
  tri::ModelSpec spec;
  spec.family = tri::Family::hermite;
  spec.beta = 2.0;
  spec.name = "edge";
  const double scale = std::pow(static_cast<double>(n), 2.0 / 3.0);
  std::vector<double> s(kTrials);
  for (int t = 0; t < kTrials; ++t) {
    const auto m = tri::sample(spec, n, 20261204, static_cast<std::uint64_t>(t));
    s[static_cast<std::size_t>(t)] = scale * (tri::largest(m, 1e-9) - 2.0);
  }
  const auto mean = freegap::testing::mean_se(s);
  double m2 = 0.0, m4 = 0.0;
  for (const double v : s) {
    const double d = v - mean.mean;
    m2 += d * d;
    m4 += d * d * d * d;
  }
  const double count = kTrials;
  const double variance = m2 / (count - 1.0);
  const double variance_se = std::sqrt((m4 / count - (m2 / count) * (m2 / count)) / count);
  EXPECT_NEAR(mean.mean, -1.7710868, 4 * mean.se);
  EXPECT_NEAR(variance, 0.8131947928, 4 * variance_se);
  RecordProperty("mean", std::to_string(mean.mean) + " +- " + std::to_string(mean.se));
  RecordProperty("variance", std::to_string(variance) + " +- " + std::to_string(variance_se));
  std::printf(
      "N^(2/3)(lambda_max - 2): mean %.4f +- %.4f (TW2 -1.7711), variance %.4f +- %.4f "
      "(TW2 0.8132)\n",
      mean.mean, mean.se, variance, variance_se);
}

}  // namespace
