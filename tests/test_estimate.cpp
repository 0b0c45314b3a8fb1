// Estimators: the [[estimator]] job tables, the plug-in ABI through the forked helper, the command
// bridge and its text format, the built-ins, and every documented failure (src/estimate/PLUGINS.md).
#include <gtest/gtest.h>

#include <cmath>
#include <string>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/estimate.hpp"
#include "freegap/job.hpp"

namespace {

using freegap::InputError;
namespace estimate = freegap::estimate;
namespace job = freegap::job;

const std::string kDir = std::string(FREEGAP_BINARY_DIR) + "/tests/estimate";

std::string plugin(const std::string& behaviour) {
  return kDir + "/libtest_plugin_" + behaviour + ".so";
}

// A scenario of our own: a two-level population of antenna gains T and a real Wishart sample
// covariance W, observed as T W T.
std::string job_text(const std::string& estimator) {
  return "seed = 4\nsizes = [20]\ntrials = 6\nexpression = \"T W T\"\n"
         "[matrices.T]\nensemble = \"diagonal\"\natoms = [[1.0, 0.5], [2.0, 0.5]]\n"
         "[matrices.W]\nensemble = \"wishart_real\"\nratio = 0.5\n" +
         estimator;
}

std::string library_estimator(const std::string& behaviour, double timeout = 5) {
  return "[[estimator]]\nname = \"lib\"\nlibrary = \"" + plugin(behaviour) +
         "\"\ntimeout = " + std::to_string(timeout) +
         "\n[estimator.parameters]\nscale = 2\n[estimator.truth]\ntop = \"limit_edge:upper\"\n"
         "mean_square = \"limit_moment:2\"\n";
}

std::string command_estimator(const std::string& mode, double timeout = 5) {
  return "[[estimator]]\nname = \"cmd\"\ncommand = [\"" + kDir + "/estimate_command\", \"" + mode +
         "\"]\ntimeout = " + std::to_string(timeout) +
         "\n[estimator.truth]\ntop = 5.5\nmean_square = \"none\"\n";
}

std::string message_of(const std::string& text) {
  try {
    job::parse_job(text, "j.toml");
  } catch (const InputError& e) {
    return e.what();
  }
  return "(no error)";
}

std::string open_message(const std::string& text) {
  try {
    const auto j = job::parse_job(text, "j.toml");
    estimate::EstimatorSet set(j);
  } catch (const InputError& e) {
    return e.what();
  }
  return "(no error)";
}

const std::vector<double> kSpectrum = {0.5, 1.25, 3.0, 2.0};

estimate::TrialInput input(std::uint64_t trial) {
  estimate::TrialInput in;
  in.n = 4;
  in.trial = trial;
  in.seed = 4;
  in.spectrum = kSpectrum;
  return in;
}

// What the test plug-in and command compute (plugin.c), in sorted order: mean_square, top.
const double kMeanSquare = (0.25 + 1.5625 + 9.0 + 4.0) / 4.0;
const double kTop = 3.0;

TEST(EstimatorJob, ParsesTablesAndEntersTheCanonicalText) {
  const auto j = job::parse_job(job_text(library_estimator("ok") + command_estimator("ok")), "j.toml");
  ASSERT_EQ(j.estimators.size(), 2u);
  EXPECT_EQ(j.estimators[0].name, "lib");
  EXPECT_EQ(j.estimators[0].source, job::EstimatorSpec::Source::library);
  EXPECT_EQ(j.estimators[0].library_digest.size(), 64u);
  EXPECT_EQ(j.estimators[0].estimates, (std::vector<std::string>{"mean_square", "top"}));
  EXPECT_EQ(j.estimators[0].truths, (std::vector<std::string>{"limit_moment:2", "limit_edge:upper"}));
  EXPECT_EQ(j.estimators[0].parameters,
            (std::vector<std::pair<std::string, std::string>>{{"scale", "2"}}));
  EXPECT_EQ(j.estimators[1].truths, (std::vector<std::string>{"none", "5.5"}));
  EXPECT_NE(j.canonical().find("estimator lib: library sha256 = " + j.estimators[0].library_digest),
            std::string::npos);
  EXPECT_NE(j.canonical().find("  estimate top: truth = 3:5.5\n"), std::string::npos);
  // A job without estimators keeps the canonical text it had before they existed.
  const auto plain = job::parse_job(job_text(""), "j.toml");
  EXPECT_EQ(plain.canonical().find("estimator"), std::string::npos);
  // Changing a truth changes the hash.
  const auto other = job::parse_job(
      job_text(library_estimator("ok") + command_estimator("ok")).replace(
          job_text(library_estimator("ok") + command_estimator("ok")).find("top = 5.5"), 9,
          "top = 5.6"),
      "j.toml");
  EXPECT_NE(other.hash(), j.hash());
}

TEST(EstimatorJob, BadTablesGetFileAndLine) {
  EXPECT_EQ(message_of(job_text("[[estimator]]\nname = \"a\"\nbuiltin = \"operator_norm\"\n"
                                "timeot = 3\n[estimator.truth]\nnorm = \"limit_norm\"\n")),
            "j.toml:14: estimator.a.timeot: unknown key 'timeot' (did you mean 'timeout'?); known "
            "keys in an [[estimator]]: name, builtin, library, command, timeout, parameters, truth");
  EXPECT_EQ(message_of(job_text("[[estimator]]\nname = \"a\"\nbuiltin = \"operator_norm\"\n")),
            "j.toml:11: estimator.a: has no [estimator.truth]; name each estimate's truth, e.g. "
            "second_moment = \"matrix_moment:T:4\" or a number");
  EXPECT_EQ(message_of(job_text("[[estimator]]\nname = \"a\"\nbuiltin = \"operator_norm\"\n"
                                "[estimator.truth]\nnorm = \"matrix_moment:Q:2\"\n")),
            "j.toml:15: estimator.a.truth.norm: names matrix 'Q', which the job does not declare");
  EXPECT_EQ(message_of(job_text("[[estimator]]\nname = \"a\"\nbuiltin = \"operator_norm\"\n"
                                "[estimator.truth]\nnorm = \"edge\"\n")),
            "j.toml:15: estimator.a.truth.norm: must be a number, \"none\", \"limit_moment:K\", "
            "\"limit_edge:lower\", \"limit_edge:upper\", \"limit_norm\", \"matrix_moment:NAME:K\" "
            "or \"matrix_ratio:NAME\" (got \"edge\")");
  EXPECT_EQ(message_of(job_text("[[estimator]]\nname = \"a\"\nbuiltin = \"operator_norm\"\n"
                                "command = [\"x\"]\n[estimator.truth]\nnorm = 1\n")),
            "j.toml:11: estimator.a: gives more than one of builtin, library and command; keep one");
  EXPECT_EQ(message_of(job_text("[[estimator]]\nname = \"a\"\nlibrary = \"nowhere/lib.so\"\n"
                                "[estimator.truth]\nnorm = 1\n")),
            "j.toml:13: estimator.a.library: cannot read 'nowhere/lib.so': No such file or "
            "directory; give the path of the plug-in's shared library (relative to the job file)");
  EXPECT_EQ(message_of(job_text("[[estimator]]\nname = \"a\"\nbuiltin = \"operator_norm\"\n"
                                "[estimator.truth]\nnorm = 1\n[[estimator]]\nname = \"a\"\n"
                                "builtin = \"operator_norm\"\n[estimator.truth]\nnorm = 1\n")),
            "j.toml:17: estimator.a.name: \"a\" names two estimators; give each a name of its own");
}

TEST(EstimatorOpen, RefusesBadLibrariesBeforeTheRun) {
  EXPECT_EQ(open_message(job_text(library_estimator("noentry"))),
            "j.toml:13: estimator.lib.library: '" + plugin("noentry") +
                "' does not export freegap_estimator_estimate; define it with C linkage as "
                "declared in include/freegap/estimator_abi.h");
  EXPECT_EQ(open_message(job_text(library_estimator("abi"))),
            "j.toml:13: estimator.lib.library: '" + plugin("abi") +
                "' was built for plug-in ABI version 2, this freegap loads version 1; rebuild it "
                "against this freegap's include/freegap/estimator_abi.h");
  std::string wrong_names = library_estimator("ok");
  wrong_names.replace(wrong_names.find("mean_square ="), 11, "mean_cube  ");
  EXPECT_EQ(open_message(job_text(wrong_names)),
            "j.toml:17: estimator.lib.truth: names mean_cube, top, but the plug-in returns "
            "mean_square, top; name the truth of each estimate it returns, and no other");
  EXPECT_EQ(open_message(job_text("[[estimator]]\nname = \"c\"\ncommand = [\"no-such-program-x\"]\n"
                                  "[estimator.truth]\nv = 1\n")),
            "j.toml:13: estimator.c.command: cannot find the program 'no-such-program-x' (or it "
            "is not executable); give its path, or a program on PATH");
  EXPECT_EQ(open_message(job_text("[[estimator]]\nname = \"b\"\nbuiltin = \"median\"\n"
                                  "[estimator.truth]\nv = 1\n")),
            "j.toml:13: estimator.b.builtin: no built-in estimator is called 'median'; built-ins: "
            "operator_norm, population_second_moment");
  EXPECT_EQ(open_message(job_text("[[estimator]]\nname = \"b\"\nbuiltin = \"population_second_moment\"\n"
                                  "[estimator.truth]\nsecond_moment = 1\nsecond_moment_unbiased = 1\n")),
            "j.toml:11: estimator.b: the built-in 'population_second_moment' needs the "
            "parameter ratio; give ratio = c, the N/M of the Wishart matrix in the expression");
}

TEST(EstimatorLibrary, ReturnsTheDeclaredEstimatesInSortedOrder) {
  estimate::EstimatorSet set(job::parse_job(job_text(library_estimator("ok")), "j.toml"));
  std::vector<double> values;
  std::vector<std::string> reasons;
  for (std::uint64_t t = 0; t < 3; ++t) {
    set.run(input(t), values, reasons);
    EXPECT_EQ(values, (std::vector<double>{kMeanSquare, kTop}));
    EXPECT_EQ(reasons, (std::vector<std::string>{""}));
  }
}

// Faulty plug-ins fail trials 1, 4, 7, ... (trial ≡ 1 mod 3) and behave on the others; the
// helper is restarted after a crash or a timeout, so the next trial is answered again.
void expect_faults(const std::string& behaviour, const std::string& reason, double timeout = 5) {
  estimate::EstimatorSet set(job::parse_job(job_text(library_estimator(behaviour, timeout)), "j.toml"));
  std::vector<double> values;
  std::vector<std::string> reasons;
  for (std::uint64_t t = 0; t < 5; ++t) {
    set.run(input(t), values, reasons);
    if (t % 3 == 1) {
      EXPECT_EQ(reasons, (std::vector<std::string>{reason})) << behaviour << " trial " << t;
      ASSERT_EQ(values.size(), 2u);
      EXPECT_TRUE(std::isnan(values[0]) && std::isnan(values[1]));
    } else {
      EXPECT_EQ(reasons, (std::vector<std::string>{""})) << behaviour << " trial " << t;
      EXPECT_EQ(values, (std::vector<double>{kMeanSquare, kTop}));
    }
  }
}

TEST(EstimatorLibrary, SegfaultIsContainedInTheHelper) {
  expect_faults("segfault", "plug-in crashed: signal 11 (SIGSEGV)");
}
TEST(EstimatorLibrary, HangPastTheTimeoutIsStopped) {
  expect_faults("sleep", "plug-in did not answer within the timeout of 0.5 s; its helper process "
                         "was stopped", 0.5);
}
TEST(EstimatorLibrary, NanIsAFailure) {
  expect_faults("nan", "plug-in returned NaN for 'mean_square'");
}
TEST(EstimatorLibrary, WrongCountIsAFailure) {
  expect_faults("count", "plug-in returned 1 value(s), declared 2");
}
TEST(EstimatorLibrary, ReportedFailureKeepsItsMessage) {
  // Trial 1 and 4 report failure with their own message.
  estimate::EstimatorSet set(job::parse_job(job_text(library_estimator("refuse")), "j.toml"));
  std::vector<double> values;
  std::vector<std::string> reasons;
  set.run(input(4), values, reasons);
  EXPECT_EQ(reasons, (std::vector<std::string>{"plug-in reported failure: spectrum too short for trial 4"}));
}

TEST(EstimatorCommand, BridgeAnswersAndFailuresAreRecorded) {
  const auto run = [](const std::string& mode, std::uint64_t trial, double timeout = 5) {
    estimate::EstimatorSet set(job::parse_job(job_text(command_estimator(mode, timeout)), "j.toml"));
    std::vector<double> values;
    std::vector<std::string> reasons;
    set.run(input(trial), values, reasons);
    return std::make_pair(values, reasons.at(0));
  };
  const auto ok = run("ok", 0);
  EXPECT_EQ(ok.first, (std::vector<double>{kMeanSquare, kTop}));
  EXPECT_EQ(ok.second, "");
  EXPECT_EQ(run("sleep", 0, 0.5).second, "");
  EXPECT_EQ(run("sleep", 1, 0.5).second,
            "command did not finish within the timeout of 0.5 s; it was killed");
  EXPECT_EQ(run("nan", 1).second, "command returned NaN for 'mean_square'");
  EXPECT_EQ(run("garbage", 1).second,
            "malformed output, line 1: cannot read 'is large' as a number (expected 'name value')");
  EXPECT_EQ(run("fail", 1).second,
            "command exited with status 3: estimate_command: cannot handle trial 1");
  EXPECT_EQ(run("missing", 1).second, "output lacks estimate 'mean_square'");
}

TEST(EstimatorCommand, InputFormatIsTheDocumentedOne) {
  estimate::TrialInput in = input(7);
  const std::vector<double> two = {-0.5, 0.1};
  in.spectrum = two;
  in.n = 2;
  EXPECT_EQ(estimate::command_input(in, {{"ratio", "0.5"}}),
            "freegap-estimate 1\nn 2\ntrial 7\nseed 4\nkind eigenvalues\nparameter ratio 0.5\n"
            "values 2\n-0.5\n0.10000000000000001\nend\n");
}

TEST(EstimatorCommand, OutputParser) {
  const std::vector<std::string> names = {"a", "b"};
  const auto ok = estimate::parse_command_output("# hi\n\nb 2.5\r\n  a   -1e-3 \n", names);
  EXPECT_FALSE(ok.failed);
  EXPECT_EQ(ok.values, (std::vector<double>{-1e-3, 2.5}));
  EXPECT_EQ(estimate::parse_command_output("a 1\nb 2\nc 3\n", names).reason,
            "output names unknown estimate 'c' (declared: a, b)");
  EXPECT_EQ(estimate::parse_command_output("a 1\na 2\n", names).reason, "output gives 'a' twice");
  EXPECT_EQ(estimate::parse_command_output("a 1\nb\n", names).reason,
            "malformed output, line 2: 'b' (expected 'name value')");
  EXPECT_EQ(estimate::parse_command_output("a 1\nb inf\n", names).reason,
            "command returned an infinite value for 'b'");
  EXPECT_EQ(estimate::parse_command_output("", names).reason, "output lacks estimate 'a'");
}

TEST(EstimatorBuiltin, PopulationSecondMomentFormula) {
  // m1 = 2, m2 = 5 for {1, 3}; c = N/M = 2/4: plain = 5 − 0.5·4 = 3; complex correction
  // 1 − 1/16, real (M − 1)(M + 2)/M² = 18/16 (derivation in builtin.cpp).
  const std::vector<double> x = {1.0, 3.0};
  const auto [plain, complex_unbiased] = estimate::population_second_moment(x, 4, false);
  EXPECT_DOUBLE_EQ(plain, 3.0);
  EXPECT_DOUBLE_EQ(complex_unbiased, 3.0 / (15.0 / 16.0));
  EXPECT_DOUBLE_EQ(estimate::population_second_moment(x, 4, true).second, 3.0 / (18.0 / 16.0));
}

TEST(EstimatorBuiltin, OperatorNormIsTheLargestModulus) {
  estimate::EstimatorSet set(job::parse_job(
      job_text("[[estimator]]\nname = \"n\"\nbuiltin = \"operator_norm\"\n[estimator.truth]\n"
               "norm = \"limit_norm\"\n"),
      "j.toml"));
  const std::vector<double> x = {-3.5, 1.0, 2.0};
  estimate::TrialInput in = input(0);
  in.spectrum = x;
  std::vector<double> values;
  std::vector<std::string> reasons;
  set.run(in, values, reasons);
  EXPECT_EQ(values, (std::vector<double>{3.5}));
  set.fail_all("the trial failed: x", values, reasons);
  EXPECT_TRUE(std::isnan(values.at(0)));
  EXPECT_EQ(reasons, (std::vector<std::string>{"the trial failed: x"}));
}

}  // namespace
