// Scoring estimators against their truths (include/freegap/analysis/reporting/estimator_scores.hpp): the
// built-in estimators' bias and RMSE shrink at the rates their theory gives, on a size ladder of
// run files written through the store with the same per-trial path as the runner (model trial,
// then every estimator on its spectrum).
#include <gtest/gtest.h>

#include <cmath>
#include <filesystem>
#include <string>
#include <unistd.h>

#include "freegap/analysis/reporting/estimator_scores.hpp"
#include "freegap/estimate.hpp"
#include "freegap/job.hpp"
#include "freegap/model.hpp"
#include "freegap/store.hpp"

namespace {

namespace fs = std::filesystem;
using namespace freegap;

// Runs `text` into a run file at `path` on one process, unit by unit, like the runner's
// per-trial path (src/run/run.cpp compute_unit).
void write_run(const std::string& text, const std::string& path) {
  const job::Job j = job::parse_job(text, "rates.toml");
  model::Model m;
  m.matrices = j.matrices;
  m.expression = j.expression;
  m.force_dense = true;
  estimate::EstimatorSet estimators(j);
  store::RunHeader h;
  h.job_text = j.text;
  h.job_canonical = j.canonical();
  h.job_hash = j.hash();
  h.expression = j.expression;
  std::vector<model::SizeRunner> runners;
  for (const auto n : j.sizes) runners.emplace_back(m, n);
  for (std::size_t i = 0; i < j.sizes.size(); ++i) {
    store::SizeLayout s;
    s.n = j.sizes[i];
    s.trials = j.trials[i];
    s.trials_per_unit = j.trials_per_unit;
    s.observe.bin_edges = observe::uniform_edges(-1.0, 100.0, 4);
    s.observe.max_moment = 2;
    h.sizes.push_back(s);
  }
  for (const auto& e : j.estimators) {
    for (std::size_t k = 0; k < e.estimates.size(); ++k) {
      h.estimates.push_back({e.name, e.estimates[k], e.truths[k]});
    }
  }
  fs::remove(path);
  auto file = store::RunFile::create(path, h);
  file.begin_session(1, {"test"});
  std::vector<double> values;
  std::vector<std::string> reasons;
  for (std::size_t i = 0; i < runners.size(); ++i) {
    const auto& layout = h.sizes[i];
    for (std::int64_t u = 0; u < layout.units(); ++u) {
      store::UnitResult r;
      r.size_index = i;
      r.unit = u;
      r.obs = observe::start_observations(layout.observe);
      for (std::int64_t t = layout.unit_begin(u); t < layout.unit_end(u); ++t) {
        const auto outcome = runners[i].run(j.seed, static_cast<std::uint64_t>(t));
        model::record(r.obs, outcome);
        ASSERT_FALSE(outcome.failed) << outcome.reason;
        estimate::TrialInput in;
        in.n = layout.n;
        in.trial = static_cast<std::uint64_t>(t);
        in.seed = j.seed;
        in.spectrum = {outcome.spectrum.data(), static_cast<std::size_t>(outcome.spectrum.size())};
        estimators.run(in, values, reasons);
        r.estimates.insert(r.estimates.end(), values.begin(), values.end());
        r.estimate_failures.insert(r.estimate_failures.end(), reasons.begin(), reasons.end());
      }
      file.write_unit(r, store::UnitProvenance{0, "test", 0.0});
    }
  }
  file.end_session("finished");
}

std::string temp_path(const std::string& name) {
  return (fs::temp_directory_path() / ("freegap-scores-" + std::to_string(::getpid()) + "-" + name))
      .string();
}

const analysis::EstimateScore& find(const std::vector<analysis::EstimateScore>& scores,
                                    const std::string& estimator, const std::string& estimate) {
  for (const auto& s : scores) {
    if (s.estimator == estimator && s.estimate == estimate) return s;
  }
  throw std::runtime_error("no score " + estimator + "." + estimate);
}

// A scenario of our own: a two-level population of sensor gains T (Σ = T² has atoms 1 and 4, so
// σ₁ = 2.5 and σ₂ = (1 + 16)/2 = 8.5), observed through a real Wishart sample covariance W with
// c = N/M = 1/2, S = T W T. 1000 trials per size: the plain bias ≈ σ₂c/N and the standard
// error ≈ 26/(N√T) (measured) shrink alike, so their ratio, ≈ 5 here, is set by T alone. Sizes
// are even so that T holds each atom exactly N/2 times and the finite-N population is the
// truth (at N = 25 it would be 13 ones and 12 twos, σ₂ = 8.2).
const char* kSecondMoment = R"(seed = 11
sizes = [24, 48, 96, 192]
trials = 1000
expression = "T W T"
[matrices.T]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [2.0, 0.5]]
[matrices.W]
ensemble = "wishart_real"
ratio = 0.5
[run]
trials_per_unit = 125
[[estimator]]
name = "moments"
builtin = "population_second_moment"
[estimator.parameters]
ratio = 0.5
entries = "real"
[estimator.truth]
second_moment = "matrix_moment:T:4"
second_moment_unbiased = "matrix_moment:T:4"
[[estimator]]
name = "trace"
builtin = "operator_norm"
[estimator.truth]
norm = "none"
)";

TEST(EstimatorScores, SecondMomentBiasAndRmseShrinkLikeOneOverN) {
  const std::string path = temp_path("second.h5");
  write_run(kSecondMoment, path);
  const auto scores = analysis::score_estimators(path);
  ASSERT_EQ(scores.size(), 3u);
  const auto& plain = find(scores, "moments", "second_moment");
  const auto& unbiased = find(scores, "moments", "second_moment_unbiased");
  // Truth: the 4th moment of T's law (Σ = T²): (1 + 16)/2.
  ASSERT_TRUE(plain.truth.known);
  EXPECT_DOUBLE_EQ(plain.truth.value, 8.5);
  EXPECT_FALSE(find(scores, "trace", "norm").truth.known);
  for (std::size_t i = 0; i < plain.sizes.size(); ++i) {
    const auto& z = plain.sizes[i];
    ASSERT_EQ(z.trials, 1000);
    ASSERT_EQ(z.failed, 0);
    // Exact finite-N mean of the plain estimator for real Gaussian entries:
    // σ₂ (M − 1)(M + 2)/M² (Srivastava 2005; Muirhead 1982 §3.2 Wishart moments, from memory;
    // derivation in src/estimate/builtin.cpp). 4 standard errors of the mean.
    const double m = static_cast<double>(z.n) / 0.5;
    const double expected = 8.5 * (m - 1) * (m + 2) / (m * m);
    EXPECT_NEAR(z.mean, expected, 4 * z.bias_se) << "N = " << z.n;
    // The corrected estimator is unbiased: its bias is within 4 SE of 0.
    EXPECT_LT(std::abs(unbiased.sizes[i].bias), 4 * unbiased.sizes[i].bias_se) << "N = " << z.n;
    // The plain bias σ₂(M − 2)/M² ≈ σ₂ c/N is resolved on this ladder (> 2 SE).
    EXPECT_GT(std::abs(z.bias), 2 * z.bias_se) << "N = " << z.n;
    // Bootstrap intervals hold their point estimates.
    EXPECT_LE(z.bias_low, z.bias);
    EXPECT_GE(z.bias_high, z.bias);
    EXPECT_LE(z.rmse_low, z.rmse);
    EXPECT_GE(z.rmse_high, z.rmse);
  }
  // Rates. |bias| ∝ N^(−1) from the exact mean above; RMSE ∝ N^(−1) because a linear spectral
  // statistic Σ f(λ_i) has O(1) fluctuations (Bai & Silverstein 2004, Ann. Probab. 32), so m₁
  // and m₂ have standard deviations O(1/N), and the bias is O(1/N) too. The exponent 1 must lie
  // within 3 standard errors of the fitted one.
  ASSERT_TRUE(plain.bias_rate.ok);
  ASSERT_TRUE(plain.rmse_rate.ok);
  EXPECT_NEAR(plain.bias_rate.alpha, 1.0, 3 * plain.bias_rate.alpha_standard_error);
  EXPECT_NEAR(plain.rmse_rate.alpha, 1.0, 3 * plain.rmse_rate.alpha_standard_error);
  EXPECT_NEAR(unbiased.rmse_rate.alpha, 1.0, 3 * unbiased.rmse_rate.alpha_standard_error);
  std::printf("second moment: bias alpha %.3f ± %.3f, rmse alpha %.3f ± %.3f\n",
              plain.bias_rate.alpha, plain.bias_rate.alpha_standard_error,
              plain.rmse_rate.alpha, plain.rmse_rate.alpha_standard_error);

  // The report pieces: one table per truth, both estimates of matrix_moment:T:4 side by side.
  const std::string md = analysis::estimator_scores_markdown(scores);
  EXPECT_NE(md.find("### Truth `matrix_moment:T:4` = 8.5"), std::string::npos) << md;
  EXPECT_NE(md.find("| 24 | moments.second_moment | 1000 | 0 |"), std::string::npos) << md;
  EXPECT_LT(md.find("| 24 | moments.second_moment_unbiased |"),
            md.find("| 48 | moments.second_moment |"));
  EXPECT_NE(md.find("### Truth `none` (unknown)"), std::string::npos);
  const std::string csv = analysis::estimator_scores_csv(scores);
  EXPECT_EQ(csv.substr(0, csv.find('\n')),
            "estimator,estimate,truth,truth_value,n,trials,failed,mean,bias,bias_se,bias_low,"
            "bias_high,sd,sd_low,sd_high,rmse,rmse_se,rmse_low,rmse_high,bias_alpha,bias_alpha_se,"
            "rmse_alpha,rmse_alpha_se");
  EXPECT_EQ(std::count(csv.begin(), csv.end(), '\n'), 1 + 3 * 4);
  // Scores are a pure function of the file: scoring again gives the same text.
  EXPECT_EQ(analysis::estimator_scores_csv(analysis::score_estimators(path)), csv);
  fs::remove(path);
}

// The operator norm of a real Wishart matrix with c = 1/2: its limit is the upper edge of
// Marchenko–Pastur, (1 + √c)² (Geman 1980); the largest eigenvalue fluctuates on the scale
// N^(−2/3) around it with a Tracy–Widom (β = 1) law of negative mean (Johnstone 2001, Ann.
// Statist. 29), so bias, sd and RMSE of the plain estimator all shrink like N^(−2/3).
// 120 trials per size.
const char* kNorm = R"(seed = 12
sizes = [50, 100, 200, 400]
trials = 120
expression = "W"
[matrices.W]
ensemble = "wishart_real"
ratio = 0.5
[run]
trials_per_unit = 40
[[estimator]]
name = "edge"
builtin = "operator_norm"
[estimator.truth]
norm = "limit_norm"
)";

TEST(EstimatorScores, OperatorNormErrorShrinksLikeNToTheMinusTwoThirds) {
  const std::string path = temp_path("norm.h5");
  write_run(kNorm, path);
  const auto scores = analysis::score_estimators(path);
  ASSERT_EQ(scores.size(), 1u);
  const auto& s = scores[0];
  ASSERT_TRUE(s.truth.known);
  // Upper edge of Marchenko–Pastur(1/2): (1 + √0.5)² (Marchenko & Pastur 1967).
  EXPECT_NEAR(s.truth.value, std::pow(1 + std::sqrt(0.5), 2), 1e-12);
  for (const auto& z : s.sizes) {
    // The Tracy–Widom mean is negative: the largest eigenvalue sits below the edge on average
    // (Johnstone 2001), resolved at every size of the ladder.
    EXPECT_LT(z.bias, -2 * z.bias_se) << "N = " << z.n;
  }
  ASSERT_TRUE(s.bias_rate.ok);
  ASSERT_TRUE(s.rmse_rate.ok);
  std::printf("operator norm: bias alpha %.3f ± %.3f, rmse alpha %.3f ± %.3f\n",
              s.bias_rate.alpha, s.bias_rate.alpha_standard_error, s.rmse_rate.alpha,
              s.rmse_rate.alpha_standard_error);
  EXPECT_NEAR(s.bias_rate.alpha, 2.0 / 3.0, 3 * s.bias_rate.alpha_standard_error);
  EXPECT_NEAR(s.rmse_rate.alpha, 2.0 / 3.0, 3 * s.rmse_rate.alpha_standard_error);
  fs::remove(path);
}

TEST(EstimatorScores, TruthsResolveAgainstTheJob) {
  store::RunHeader h;
  h.job_text = std::string(kSecondMoment);
  // Second limit moment of T W T: σ₂ + c σ₁² = 8.5 + 0.5 · 2.5² (the generalized
  // Marchenko–Pastur moments, Silverstein 1995, from memory).
  const auto m2 = analysis::resolve_truth("limit_moment:2", h);
  ASSERT_TRUE(m2.known) << m2.note;
  EXPECT_NEAR(m2.value, 11.625, 1e-12);
  EXPECT_EQ(analysis::resolve_truth("matrix_ratio:W", h).value, 0.5);
  EXPECT_EQ(analysis::resolve_truth("2.25", h).value, 2.25);
  // The upper edge of the limit of T W T (law(T²) ⊠ Marchenko–Pastur, derived as the report
  // does): between √m₂ = √11.625 and ‖T‖²·(1 + √c)² = 4 (1 + √0.5)² (norm bounds, common practice).
  const auto edge = analysis::resolve_truth("limit_edge:upper", h);
  ASSERT_TRUE(edge.known) << edge.note;
  EXPECT_NE(edge.note.find(" ⊠ "), std::string::npos) << edge.note;
  EXPECT_GT(edge.value, std::sqrt(11.625));
  EXPECT_LT(edge.value, 4.0 * std::pow(1.0 + std::sqrt(0.5), 2));
  analysis::ScoreOptions given;
  given.limit_edges = std::make_pair(0.0, 30.0);
  EXPECT_EQ(analysis::resolve_truth("limit_edge:upper", h, given).value, 30.0);
  EXPECT_EQ(analysis::resolve_truth("limit_norm", h, given).value, 30.0);
  h.job_text = std::string(kNorm);
  // Lower edge of Marchenko–Pastur(1/2): (1 − √0.5)².
  EXPECT_NEAR(analysis::resolve_truth("limit_edge:lower", h).value, std::pow(1 - std::sqrt(0.5), 2),
              1e-12);
}

TEST(EstimatorScores, TruthsReadTheEigenvalueFileBesideTheRunFile) {
  // A diagonal read from a file named by a relative path: the truths take it from beside the
  // run file (where the report looks), not from the current directory, and only with the numbers
  // the run used. Before, the truths parsed the job relative to the current directory: run from
  // elsewhere, every truth of such a job was unknown (or read another file of the same name).
  const fs::path dir = fs::path(::testing::TempDir()) /
                       ("freegap_truths_" + std::to_string(::getpid()));
  fs::create_directories(dir);
  const auto write = [&](const std::string& numbers) {
    std::FILE* f = std::fopen((dir / "levels.txt").c_str(), "w");
    ASSERT_NE(f, nullptr);
    std::fputs(numbers.c_str(), f);
    std::fclose(f);
  };
  write("-1\n1\n2\n2\n");
  const std::string text = R"(seed = 3
sizes = [8]
trials = 4
expression = "X + D"
[matrices.X]
ensemble = "gue"
[matrices.D]
ensemble = "diagonal"
law = "file"
path = "levels.txt"
)";
  const job::Job j = job::parse_job(text, (dir / "job.toml").string());
  store::RunHeader h;
  h.job_text = j.text;
  h.job_canonical = j.canonical();
  analysis::ScoreOptions beside;
  beside.run_file = (dir / "run.h5").string();
  // D's law: δ₋₁/4 + δ₁/4 + δ₂/2, so m₂(D) = (1 + 1 + 8)/4 = 5/2 and, X semicircular free from D,
  // m₂(X + D) = m₂(X) + m₂(D) + 2 m₁(X) m₁(D) = 1 + 5/2 (freeness, Voiculescu 1986).
  const auto d2 = analysis::resolve_truth("matrix_moment:D:2", h, beside);
  ASSERT_TRUE(d2.known) << d2.note;
  EXPECT_DOUBLE_EQ(d2.value, 2.5);
  const auto m2 = analysis::resolve_truth("limit_moment:2", h, beside);
  ASSERT_TRUE(m2.known) << m2.note;
  EXPECT_DOUBLE_EQ(m2.value, 3.5);
  // Without the run file's place (the current directory holds no levels.txt): unknown, with why.
  const auto nowhere = analysis::resolve_truth("limit_moment:2", h);
  EXPECT_FALSE(nowhere.known);
  EXPECT_NE(nowhere.note.find("levels.txt"), std::string::npos) << nowhere.note;
  // Other numbers under the same name: refused, never read as the run's.
  write("0\n");
  const auto other = analysis::resolve_truth("limit_moment:2", h, beside);
  EXPECT_FALSE(other.known);
  EXPECT_NE(other.note.find("SHA-256"), std::string::npos) << other.note;
  fs::remove_all(dir);
}

}  // namespace
