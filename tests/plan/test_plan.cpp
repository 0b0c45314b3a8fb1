// The planner's deterministic parts: durations, the non-negative cost fit, the wall-time model
// of the runner's largest-first scheduling, the calibration file and its machine check.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <iterator>
#include <sstream>

#include "freegap/errors.hpp"
#include "freegap/job.hpp"
#include "freegap/plan.hpp"

namespace fp = freegap::plan;

namespace {

void expect_input_error(const std::string& text, const std::string& message) {
  try {
    fp::parse_duration(text);
    FAIL() << "no error for '" << text << "'";
  } catch (const freegap::InputError& e) {
    EXPECT_EQ(std::string(e.what()), message);
  }
}

}  // namespace

TEST(Plan, ParsesDurations) {
  EXPECT_DOUBLE_EQ(fp::parse_duration("90"), 90.0);
  EXPECT_DOUBLE_EQ(fp::parse_duration("90s"), 90.0);
  EXPECT_DOUBLE_EQ(fp::parse_duration("10m"), 600.0);
  EXPECT_DOUBLE_EQ(fp::parse_duration("1h30m"), 5400.0);
  EXPECT_DOUBLE_EQ(fp::parse_duration("1h30m15s"), 5415.0);
  EXPECT_DOUBLE_EQ(fp::parse_duration("2d"), 172800.0);
  EXPECT_DOUBLE_EQ(fp::parse_duration("1.5h"), 5400.0);
  EXPECT_DOUBLE_EQ(fp::parse_duration("1H"), 3600.0);
  EXPECT_DOUBLE_EQ(fp::parse_duration("0.5"), 0.5);
}

TEST(Plan, RefusesBadDurations) {
  const std::string fix = "; write e.g. 90s, 10m or 1h30m";
  expect_input_error("", ": no duration given" + fix);
  expect_input_error("0", "0: must be positive" + fix);
  expect_input_error("0s", "0s: must be positive" + fix);
  expect_input_error("10m1h",
                     "10m1h: units must come in the order d, h, m, s, each at most once" + fix);
  expect_input_error("1m1m",
                     "1m1m: units must come in the order d, h, m, s, each at most once" + fix);
  expect_input_error("1h30", "1h30: the last number has no unit" + fix);
  expect_input_error("5x", "5x: unknown unit 'x' (use d, h, m, s)" + fix);
  expect_input_error("h", "h: expected a number at character 1" + fix);
  expect_input_error("-5s", "-5s: expected a number at character 1" + fix);
  expect_input_error("1.2.3s", "1.2.3s: '1.2.3' is not a number" + fix);
}

TEST(Plan, FormatsDurationsAndSlurmTimes) {
  EXPECT_EQ(fp::format_duration(42.0), "42s");
  EXPECT_EQ(fp::format_duration(600.0), "10m00s");
  EXPECT_EQ(fp::format_duration(5400.0), "1h30m");
  EXPECT_EQ(fp::format_duration(5401.0), "1h31m");  // rounded up, never down
  EXPECT_EQ(fp::format_duration(2 * 86400.0 + 3 * 3600.0), "2d03h");
  EXPECT_EQ(fp::slurm_time(1.0), "1:00");
  EXPECT_EQ(fp::slurm_time(61.0), "2:00");
  EXPECT_EQ(fp::slurm_time(5400.0), "1:30:00");
  EXPECT_EQ(fp::slurm_time(90000.0), "1-01:00:00");
}

TEST(Plan, FitRecoversExactCubicCosts) {
  // Exact data t = 2e-9 N³ + 3e-7 N² + 1e-4: the fit must give these coefficients back.
  std::vector<std::int64_t> n = {32, 64, 128, 256, 512};
  std::vector<double> t;
  for (auto x : n) t.push_back(2e-9 * x * x * x + 3e-7 * x * x + 1e-4);
  const auto fit = fp::fit_cost({3, 2, 0}, n, t);
  ASSERT_EQ(fit.coefficients.size(), 3u);
  EXPECT_NEAR(fit.coefficients[0], 2e-9, 2e-9 * 1e-8);
  EXPECT_NEAR(fit.coefficients[1], 3e-7, 3e-7 * 1e-7);
  EXPECT_NEAR(fit.coefficients[2], 1e-4, 1e-4 * 1e-6);
  EXPECT_NEAR(fit.predict(1000), 2.0 + 0.3 + 1e-4, 1e-9);
  EXPECT_EQ(fit.formula(), "2e-09·N^3 + 3e-07·N^2 + 0.0001 s");
}

TEST(Plan, FitNeverGoesNegative) {
  // Data that an unconstrained cubic fit would match with a negative N² term: pure N³ with a
  // dip in the middle. Every coefficient must stay ≥ 0, and predictions positive.
  std::vector<std::int64_t> n = {100, 200, 400};
  std::vector<double> t = {1e-3, 6e-3, 6.4e-2};
  const auto fit = fp::fit_cost({3, 2, 0}, n, t);
  for (double c : fit.coefficients) EXPECT_GE(c, 0.0);
  EXPECT_GT(fit.predict(800), fit.predict(400));
  EXPECT_THROW(fp::fit_cost({3}, {100, 200}, {1.0}), freegap::InputError);
}

TEST(Plan, WallTimeOfLargestFirstScheduling) {
  // Units 5, 4, 3, 3, 3 (largest first): on 2 ranks: r0 = 5, r1 = 4; r1 +3 = 7, r0 +3 = 8,
  // r1 +3 = 10 -> 10, plus the 1 s start-up. On 1 rank the sum, on 5 or more the largest.
  EXPECT_DOUBLE_EQ(fp::simulate_wall({3, 5, 3, 4, 3}, 2), 11.0);
  EXPECT_DOUBLE_EQ(fp::simulate_wall({3, 5, 3, 4, 3}, 1), 19.0);
  EXPECT_DOUBLE_EQ(fp::simulate_wall({3, 5, 3, 4, 3}, 5), 6.0);
  EXPECT_DOUBLE_EQ(fp::simulate_wall({3, 5, 3, 4, 3}, 64), 6.0);
}

TEST(Plan, CalibrationFileIsReusedOnlyOnTheSameMachine) {
  namespace fs = std::filesystem;
  const fs::path dir =
      fs::temp_directory_path() / ("freegap-plan-test-" + std::to_string(::getpid()));
  fs::remove_all(dir);
  const std::string path = (dir / "sub" / "calibration.toml").string();
  fp::Machine m{"Test CPU 9000", 4, "SomeBLAS 1.0", "0.1.0 (abc)"};
  fp::CostFit fit;
  fit.powers = {3, 2, 0};
  fit.coefficients = {1.25e-9, 0.0, 3.5e-4};
  fit.sizes = {32, 64};
  fit.seconds = {0.001, 0.002};
  {
    auto cal = fp::Calibration::load(path, m);
    EXPECT_FALSE(cal.stale());
    EXPECT_EQ(cal.find("k1"), nullptr);
    cal.put("k1", "A + B (dense)", fit);
    cal.save();  // creates the directory
  }
  {
    const auto cal = fp::Calibration::load(path, m);
    EXPECT_FALSE(cal.stale());
    const auto* got = cal.find("k1");
    ASSERT_NE(got, nullptr);
    EXPECT_EQ(got->powers, fit.powers);
    EXPECT_EQ(got->coefficients, fit.coefficients);  // exact round trip of the doubles
    EXPECT_EQ(got->sizes, fit.sizes);
    EXPECT_EQ(got->seconds, fit.seconds);
  }
  for (auto other : {fp::Machine{"Other CPU", 4, "SomeBLAS 1.0", "0.1.0 (abc)"},
                     fp::Machine{"Test CPU 9000", 8, "SomeBLAS 1.0", "0.1.0 (abc)"},
                     fp::Machine{"Test CPU 9000", 4, "OtherBLAS", "0.1.0 (abc)"},
                     fp::Machine{"Test CPU 9000", 4, "SomeBLAS 1.0", "0.2.0 (def)"}}) {
    const auto cal = fp::Calibration::load(path, other);
    EXPECT_TRUE(cal.stale()) << other.key();
    EXPECT_EQ(cal.find("k1"), nullptr) << other.key();
  }
  {
    // A calibration file of ours that no longer parses: measured again and replaced.
    std::ofstream(path) << "# freegap plan: seconds per trial\nthis is [not toml";
    const auto cal = fp::Calibration::load(path, m);
    EXPECT_TRUE(cal.stale());
    EXPECT_EQ(cal.find("k1"), nullptr);
    EXPECT_NO_THROW(cal.save());
  }
  {
    // A file plan did not write is read as nothing and never replaced (issue 20: freegap
    // replaces only what it can prove it wrote).
    std::ofstream(path) << "this is [not toml";
    auto cal = fp::Calibration::load(path, m);
    EXPECT_EQ(cal.find("k1"), nullptr);
    cal.put("k1", "A + B (dense)", fit);
    EXPECT_THROW(cal.save(), freegap::Error);
    std::ifstream in(path);
    const std::string kept((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
    EXPECT_EQ(kept, "this is [not toml");
  }
  fs::remove_all(dir);
}

TEST(Plan, CostKeyIgnoresSeedSizesAndTrialsButNotTheModelOrThreads) {
  const std::string base = R"(seed = 1
sizes = [10, 20]
trials = 4
expression = "X"
[matrices.X]
ensemble = "gue"
)";
  const auto a = freegap::job::parse_job(base, "a.toml");
  auto other = base;
  other.replace(other.find("seed = 1"), 8, "seed = 7");
  other.replace(other.find("[10, 20]"), 8, "[30, 40]");
  const auto b = freegap::job::parse_job(other, "b.toml");
  EXPECT_EQ(fp::cost_key(a, 1), fp::cost_key(b, 1));
  EXPECT_NE(fp::cost_key(a, 1), fp::cost_key(a, 2));
  auto goe = base;
  goe.replace(goe.find("gue"), 3, "goe");
  EXPECT_NE(fp::cost_key(a, 1), fp::cost_key(freegap::job::parse_job(goe, "c.toml"), 1));
}
