// Outliers of finite-rank spikes (analysis/limits/outliers.hpp): the predicted locations and
// thresholds against published closed forms, the expressions that get no prediction, and sampled
// largest eigenvalues at N = 400 against the prediction.
//
// Closed forms (the outside sources of the checks):
//  - GUE/GOE (semicircle on [−2, 2]) plus a rank-one spike θ: an outlier at θ + 1/θ when |θ| > 1,
//    none otherwise (Péché 2006, PTRF 134; Féral & Péché 2007, CMP 272); with bulk variance v
//    (e.g. X1 + X2, v = 2) the location is θ + v/θ above |θ| > √v (the same rule, scaled).
//  - Sample covariance with population spike ℓ and ratio c = N/M: an outlier at ℓ(1 + c/(ℓ − 1))
//    when ℓ > 1 + √c (Baik, Ben Arous & Péché 2005, Ann. Probab. 33; Baik & Silverstein 2006,
//    JMVA 97), and below the bulk when ℓ < 1 − √c (Baik & Silverstein 2006).
#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <string>
#include <vector>

#include "freegap/analysis/limits/limit.hpp"
#include "freegap/errors.hpp"
#include "freegap/model.hpp"
#include "stat_helpers.hpp"

namespace fa = freegap::analysis;

namespace {

fa::DerivedLimit derive(const std::vector<std::string>& declarations, const std::string& text) {
  std::vector<freegap::declarations::MatrixSpec> specs;
  for (const auto& d : declarations) specs.push_back(freegap::model::parse_declaration(d));
  return fa::derive_limit(freegap::expr::Expression(text, specs), 4);
}

std::string spike(double value, double base = 0.0) {
  char text[120];
  std::snprintf(text, sizeof text, "S=diagonal:law=spiked:spikes=%.17g:base=%.17g", value, base);
  return text;
}

TEST(Outliers, GueRankOneSpikeSeparatesAboveOne) {
  for (const double theta : {1.5, 2.0, 3.0, 5.0, -1.5, -4.0}) {
    const auto d = derive({"X=gue", spike(theta)}, "X + S");
    ASSERT_TRUE(d.outliers.predicted()) << d.outliers.reason;
    ASSERT_EQ(d.outliers.outliers.size(), 1u);
    const auto& o = d.outliers.outliers[0];
    EXPECT_TRUE(o.separates) << theta;
    EXPECT_NEAR(o.location, theta + 1.0 / theta, 1e-12) << theta;  // Péché 2006
    EXPECT_NEAR(std::abs(o.threshold), 1.0, 1e-6) << theta;
    EXPECT_NEAR(theta > 0 ? d.outliers.largest : d.outliers.smallest, theta + 1.0 / theta, 1e-12);
    EXPECT_NEAR(theta > 0 ? d.outliers.smallest : d.outliers.largest, theta > 0 ? -2.0 : 2.0,
                1e-12);
  }
}

TEST(Outliers, GueSpikeBelowOneStaysInTheBulk) {
  for (const double theta : {0.3, 0.9, 0.999, -0.5}) {
    const auto d = derive({"X=gue", spike(theta)}, "X + S");
    ASSERT_TRUE(d.outliers.predicted()) << d.outliers.reason;
    EXPECT_FALSE(d.outliers.outliers[0].separates) << theta;
    EXPECT_NEAR(d.outliers.largest, 2.0, 1e-12);
    EXPECT_NEAR(d.outliers.smallest, -2.0, 1e-12);
  }
}

TEST(Outliers, RealWignerAndScaledForms) {
  // GOE: the same location (Capitaine, Donati-Martin & Féral 2009 for Wigner matrices).
  auto d = derive({"X=goe", spike(2.0)}, "X + S");
  ASSERT_TRUE(d.outliers.predicted()) << d.outliers.reason;
  EXPECT_NEAR(d.outliers.largest, 2.5, 1e-12);
  // A coefficient on the spike: θ = 2·1.
  d = derive({"X=gue", spike(1.0)}, "X + 2 S");
  EXPECT_NEAR(d.outliers.largest, 2.5, 1e-12);
  // A base value shifts the bulk: X + S with base 1 and spike 4 is X + 1 + (rank one of 3).
  d = derive({"X=gue", spike(4.0, 1.0)}, "X + S");
  EXPECT_NEAR(d.outliers.largest, 1.0 + 3.0 + 1.0 / 3.0, 1e-12);
  EXPECT_NEAR(d.outliers.smallest, -1.0, 1e-12);
  // The spike rotated by its own Haar matrix: the same outliers (the GUE is invariant).
  d = derive({"X=gue", "V=haar_unitary", spike(2.0)}, "X + V S V^*");
  ASSERT_TRUE(d.outliers.predicted()) << d.outliers.reason;
  EXPECT_NEAR(d.outliers.largest, 2.5, 1e-12);
  // Two GUE: bulk variance 2, outlier θ + 2/θ above √2 (the semicircle rule scaled).
  d = derive({"X1=gue", "X2=gue", spike(3.0)}, "X1 + X2 + S");
  ASSERT_TRUE(d.outliers.predicted()) << d.outliers.reason;
  EXPECT_NEAR(d.outliers.largest, 3.0 + 2.0 / 3.0, 1e-10);
  EXPECT_NEAR(d.outliers.outliers[0].threshold, std::sqrt(2.0), 1e-6);
}

// A Haar-rotated bulk U D U^* with D uniform on [−1, 1]: G(z) = ½ log((z + 1)/(z − 1)) (the
// uniform law's Cauchy transform, elementary), so G(ρ) = 1/θ gives ρ = coth(1/θ); G is infinite
// at the hard edges, so every spike separates (threshold 0).
TEST(Outliers, HaarRotatedBulkWithHardEdges) {
  for (const double theta : {1.0, 0.5, -0.2}) {
    const auto d = derive({"U=haar_unitary", "D=diagonal:law=uniform:low=-1:high=1", spike(theta)},
                          "U D U^* + S");
    ASSERT_TRUE(d.outliers.predicted()) << d.outliers.reason;
    const auto& o = d.outliers.outliers[0];
    EXPECT_TRUE(o.separates) << theta;
    EXPECT_NEAR(o.location, 1.0 / std::tanh(1.0 / theta), 1e-10) << theta;
    EXPECT_EQ(o.threshold, 0.0) << theta;
  }
  // D also unrotated beside it: not invariant, no prediction, and the reason names D.
  const auto d = derive({"U=haar_unitary", "D=diagonal:law=uniform:low=-1:high=1", spike(1.0)},
                        "U D U^* + D + S");
  EXPECT_FALSE(d.outliers.predicted());
  EXPECT_NE(d.outliers.reason.find("'D'"), std::string::npos) << d.outliers.reason;
}

TEST(Outliers, SpikedSampleCovarianceAtTheBbpLocation) {
  const double c = 0.5;
  for (const double ell : {2.0, 4.0, 9.0}) {
    const auto d = derive({"W=wishart_complex:ratio=0.5", spike(std::sqrt(ell), 1.0)}, "S W S");
    ASSERT_TRUE(d.outliers.predicted()) << d.outliers.reason;
    const auto& o = d.outliers.outliers[0];
    EXPECT_TRUE(o.separates) << ell;
    EXPECT_NEAR(o.location, ell * (1.0 + c / (ell - 1.0)), 1e-10) << ell;  // BBP 2005
    EXPECT_NEAR(o.threshold, std::sqrt(c), 1e-6) << ell;                  // ℓ − 1 > √c
  }
  // Below the threshold ℓ = 1 + √c ≈ 1.707: no outlier, the largest eigenvalue goes to (1 + √c)².
  auto d = derive({"W=wishart_complex:ratio=0.5", spike(std::sqrt(1.6), 1.0)}, "S W S");
  EXPECT_FALSE(d.outliers.outliers[0].separates);
  EXPECT_NEAR(d.outliers.largest, std::pow(1.0 + std::sqrt(c), 2), 1e-10);
  // A small population value ℓ = 0.1 < 1 − √c: an outlier below the bulk (Baik & Silverstein 2006).
  d = derive({"W=wishart_complex:ratio=0.5", spike(std::sqrt(0.1), 1.0)}, "S W S");
  ASSERT_TRUE(d.outliers.outliers[0].separates);
  EXPECT_NEAR(d.outliers.smallest, 0.1 * (1.0 + c / (0.1 - 1.0)), 1e-10);
  // A scale on S: base 2 is a population covariance 4·(I + rank one), the bulk 4·MP(c).
  d = derive({"W=wishart_complex:ratio=0.5", spike(4.0, 2.0)}, "S W S");
  EXPECT_NEAR(d.outliers.largest, 4.0 * 4.0 * (1.0 + c / 3.0), 1e-9);
}

TEST(Outliers, ExpressionsWithoutARuleSaySo) {
  struct Case {
    std::vector<std::string> declarations;
    std::string expression;
    std::string says;
  };
  const std::vector<Case> cases = {
      {{"X=gue", "D=diagonal:atoms=1@0.5,-1@0.5", spike(3.0)}, "X + D + S", "'D'"},
      {{"X=gue", spike(3.0)}, "S X S", "Wishart"},
      {{"X=gue", spike(3.0)}, "X S X", "no outlier rule"},
      {{"X=gue", spike(3.0), "T=diagonal:law=spiked:spikes=2"}, "X + S + T", "one spiked matrix"},
      {{spike(3.0)}, "S", "no random matrix"},
      {{"X=gue", "V=haar_unitary", "D=diagonal:law=uniform:low=0:high=1", spike(3.0)},
       "X + V S V^* + V D V^*", "rotates other terms"},
  };
  for (const auto& c : cases) {
    const auto d = derive(c.declarations, c.expression);
    EXPECT_TRUE(d.outliers.spiked) << c.expression;
    EXPECT_FALSE(d.outliers.predicted()) << c.expression;
    EXPECT_NE(d.outliers.reason.find(c.says), std::string::npos)
        << c.expression << ": " << d.outliers.reason;
  }
  // Without a spiked matrix there is nothing to say.
  EXPECT_FALSE(derive({"X=gue"}, "X").outliers.spiked);
  // A spiked law without its values is refused where it is declared.
  EXPECT_THROW(freegap::model::parse_declaration("S=diagonal:law=spiked"), freegap::InputError);
}

// Sampled: 100 trials at N = 400 (seed 2026). The outlier fluctuates on the scale N^(−1/2)
// (Féral & Péché 2007), so its mean's standard error is about 0.005; the mean's own bias is O(1/N)
// (recalled from memory), allowed for by 2/N beside 4 standard errors.
freegap::testing::MeanSe sampled_largest(const std::vector<std::string>& declarations,
                                         const std::string& expression, int n, int trials) {
  freegap::model::Model model;
  for (const auto& d : declarations) model.matrices.push_back(freegap::model::parse_declaration(d));
  model.expression = expression;
  const freegap::model::SizeRunner runner(model, n);
  std::vector<double> tops;
  for (int t = 0; t < trials; ++t) {
    const auto outcome = runner.run(2026, static_cast<std::uint64_t>(t));
    EXPECT_FALSE(outcome.failed) << outcome.reason;
    tops.push_back(outcome.spectrum.maxCoeff());
  }
  return freegap::testing::mean_se(tops);
}

TEST(Outliers, SampledLargestEigenvalueMeetsThePrediction) {
  const int n = 400, trials = 100;
  const double allowance = 2.0 / n;
  // GUE + 3·e1e1^*: θ + 1/θ = 3.3333 (Péché 2006).
  auto top = sampled_largest({"X=gue", spike(3.0)}, "X + S", n, trials);
  std::printf("GUE + 3: largest %.5f ± %.5f (predicted %.5f)\n", top.mean, top.se, 3.0 + 1.0 / 3.0);
  EXPECT_NEAR(top.mean, 3.0 + 1.0 / 3.0, 4.0 * top.se + allowance);
  // GUE + 0.5·e1e1^*: no outlier; the largest eigenvalue sits at the edge 2, below it on the
  // Tracy–Widom scale N^(−2/3) (about 0.03 here), far from where a separated one would be (2.5).
  top = sampled_largest({"X=gue", spike(0.5)}, "X + S", n, trials);
  std::printf("GUE + 0.5: largest %.5f ± %.5f (edge 2)\n", top.mean, top.se);
  EXPECT_LT(top.mean, 2.0 + 4.0 * top.se);
  EXPECT_GT(top.mean, 2.0 - 0.1);
  // Spiked complex sample covariance, c = 0.5, ℓ = 4: ℓ(1 + c/(ℓ − 1)) = 4.6667 (BBP 2005).
  top = sampled_largest({"W=wishart_complex:ratio=0.5", spike(2.0, 1.0)}, "S W S", n, trials);
  std::printf("spiked covariance: largest %.5f ± %.5f (predicted %.5f)\n", top.mean, top.se,
              4.0 * (1.0 + 0.5 / 3.0));
  EXPECT_NEAR(top.mean, 4.0 * (1.0 + 0.5 / 3.0), 4.0 * top.se + 4.0 * allowance);
}

}  // namespace
