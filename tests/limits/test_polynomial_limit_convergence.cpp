// End to end: sampled spectra of two models outside the special-case rules converge, as N grows,
// toward the polynomial limit law (Kolmogorov distance) and its right edge (largest eigenvalue).
//
// Models: the anticommutator X1 X2 + X2 X1 of independent GUE matrices, and X1 B X1 + B with
// X1 GUE and B = diag(±1). Asymptotic freeness (Voiculescu 1991) makes the limit of the spectrum
// the law of the same polynomial in free variables; strong convergence (Haagerup & Thorbjørnsen
// 2005 for GUE; Male 2012 / Collins & Male 2014 with deterministic matrices, from memory for the
// former) makes the largest eigenvalue converge to the right edge of the support.
//
// Statistics: at each N the trials are split into K = 4 batches with R·N = 3200 pooled eigenvalues
// per batch at every N, so the Monte Carlo noise of a batch's distance is comparable across N;
// the distance's standard error is that of the K batch values. Largest eigenvalues: mean and
// standard error over all trials. Expected behaviour: the Kolmogorov distance of the expected ESD
// falls like 1/N (Götze & Tikhomirov 2005, GUE, from memory; docs/check-values.md §3.3), edges move
// like N^{−2/3} (docs/check-values.md §3.1, §3.2).
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <string>
#include <vector>

#include "freegap/analysis/limits/polynomial_limit.hpp"
#include "freegap/model.hpp"
#include "stat_helpers.hpp"

namespace fa = freegap::analysis;

namespace {

struct SizeResult {
  int n = 0;
  freegap::testing::MeanSe distance;  // Kolmogorov distance, over batches
  freegap::testing::MeanSe top;       // largest eigenvalue, over trials
};

std::vector<SizeResult> run(const std::string& expression,
                            const std::vector<std::string>& declarations, const fa::Law& law) {
  freegap::model::Model model;
  for (const auto& d : declarations) {
    model.matrices.push_back(freegap::model::parse_declaration(d));
  }
  model.expression = expression;
  const int batches = 4;
  const int pooled = 3200;
  std::vector<SizeResult> out;
  for (int n : {100, 200, 400}) {
    const freegap::model::SizeRunner runner(model, n);
    const int per_batch = pooled / n;
    std::vector<double> distances, tops;
    for (int b = 0; b < batches; ++b) {
      std::vector<double> values;
      for (int t = 0; t < per_batch; ++t) {
        const auto outcome = runner.run(2026, static_cast<std::uint64_t>(b * per_batch + t));
        EXPECT_FALSE(outcome.failed) << outcome.reason;
        for (Eigen::Index i = 0; i < outcome.spectrum.size(); ++i) {
          values.push_back(outcome.spectrum(i));
        }
        tops.push_back(outcome.spectrum.maxCoeff());
      }
      // sup_x |F_n(x) − F(x)| (docs/check-values.md §4h).
      distances.push_back(
          freegap::testing::ks_statistic(values, [&](double x) { return law.cdf(x); }));
    }
    out.push_back({n, freegap::testing::mean_se(distances), freegap::testing::mean_se(tops)});
  }
  return out;
}

void expect_convergence(const std::vector<SizeResult>& r, const fa::PolynomialLaw& law) {
  const double edge = law.support().hi;
  for (const auto& s : r) {
    std::printf("N = %d: Kolmogorov %.5f ± %.5f, largest eigenvalue %.5f ± %.5f (edge %.6f)\n", s.n,
                s.distance.mean, s.distance.se, s.top.mean, s.top.se, edge);
  }
  const auto& first = r.front();
  const auto& last = r.back();
  for (std::size_t i = 1; i < r.size(); ++i) {
    EXPECT_LT(r[i].distance.mean, r[i - 1].distance.mean) << "N = " << r[i].n;
    EXPECT_GT(r[i].top.mean, r[i - 1].top.mean) << "N = " << r[i].n;
  }
  EXPECT_GT(first.distance.mean - last.distance.mean,
            3.0 * std::hypot(first.distance.se, last.distance.se));
  EXPECT_GT(last.top.mean - first.top.mean, 3.0 * std::hypot(first.top.se, last.top.se));
  for (const auto& s : r) {
    // Never beyond the predicted edge by more than noise; within a few N^{−2/3} of it.
    EXPECT_LT(s.top.mean, edge + 3.0 * s.top.se) << "N = " << s.n;
  }
  EXPECT_LT(edge - last.top.mean, 4.0 * std::pow(last.n, -2.0 / 3.0) * std::max(1.0, edge));
}

}  // namespace

TEST(PolynomialLimitEndToEnd, AnticommutatorOfGUEMatrices) {
  const std::vector<std::string> declarations = {"X1=gue", "X2=gue"};
  const std::string text = "X1 X2 + X2 X1";
  std::vector<freegap::declarations::MatrixSpec> specs;
  for (const auto& d : declarations) specs.push_back(freegap::model::parse_declaration(d));
  fa::PolynomialLimitOptions options;
  options.exact_moment_order = 0;
  const auto law = fa::polynomial_limit(freegap::expr::Expression(text, specs), options);
  expect_convergence(run(text, declarations, *law), *law);
}

TEST(PolynomialLimitEndToEnd, GUESandwichOfASignMatrixPlusIt) {
  const std::vector<std::string> declarations = {"X1=gue", "B=diagonal:atoms=-1@0.5,1@0.5"};
  const std::string text = "X1 B X1 + B";
  std::vector<freegap::declarations::MatrixSpec> specs;
  for (const auto& d : declarations) specs.push_back(freegap::model::parse_declaration(d));
  fa::PolynomialLimitOptions options;
  options.exact_moment_order = 0;
  const auto law = fa::polynomial_limit(freegap::expr::Expression(text, specs), options);
  expect_convergence(run(text, declarations, *law), *law);
}
