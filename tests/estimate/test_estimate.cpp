// Estimators: the [[estimator]] job tables, the plug-in ABI through the forked helper, the command
// bridge and its text format, the built-ins, and every documented failure (docs/plugins.md).
#include <fcntl.h>
#include <gtest/gtest.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>
#include <thread>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/estimate.hpp"
#include "freegap/estimator_abi.h"
#include "freegap/job.hpp"
#include "freegap/linalg.hpp"
#include "freegap/model.hpp"
#include "freegap/plan.hpp"

namespace {

using freegap::InputError;
namespace estimate = freegap::estimate;
namespace expr = freegap::expr;
namespace model = freegap::model;
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

// The version-2 plug-in that reads the matrix (tests/estimate/matrix_plugin.c).
std::string matrix_estimator(const std::string& behaviour = "matrix") {
  std::string text = "[[estimator]]\nname = \"probe\"\nlibrary = \"" + plugin(behaviour) +
                     "\"\n[estimator.truth]\n";
  for (const char* name : {"rows", "cols", "is_complex", "abi_seen", "checksum", "trace",
                           "frobenius_square", "entry_10_re", "entry_10_im", "entry_01_re",
                           "entry_01_im"}) {
    text += std::string(name) + " = \"none\"\n";
  }
  return text;
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
                "' was built for plug-in ABI version 3, this freegap loads versions 1 to 2; "
                "rebuild it against this freegap's include/freegap/estimator_abi.h");
  EXPECT_EQ(open_message(job_text(matrix_estimator("wants"))),
            "j.toml:13: estimator.probe.library: '" + plugin("wants") +
                "' asks for input this freegap does not know (wants = 5; known: "
                "FREEGAP_WANTS_MATRIX = 1); clear the unknown bits");
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

// A library named by a bare file name is the file beside the job file (here the job is in the
// working directory), not a name for dlopen to look up on the system's library path.
TEST(EstimatorOpen, BareLibraryNameIsTheFileBesideTheJob) {
  const auto here = std::filesystem::current_path();
  std::filesystem::current_path(kDir);
  std::string text = library_estimator("ok");
  text.replace(text.find(plugin("ok")), plugin("ok").size(), "libtest_plugin_ok.so");
  std::vector<double> values;
  std::vector<std::string> reasons;
  std::string message;
  try {
    estimate::EstimatorSet set(job::parse_job(job_text(text), "j.toml"));
    set.run(input(0), values, reasons);
  } catch (const InputError& e) {
    message = e.what();
  }
  std::filesystem::current_path(here);
  EXPECT_EQ(message, "");
  EXPECT_EQ(values, (std::vector<double>{kMeanSquare, kTop}));
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

// What matrix_plugin.c computes from the doubles of the matrix, computed here in the rank.
double matrix_checksum(const freegap::expr::MatrixView& m) {
  std::uint64_t h = 14695981039346656037ull;
  for (std::size_t i = 0; i < m.doubles(); ++i) {
    std::uint64_t bits;
    std::memcpy(&bits, &m.data[i], sizeof bits);
    h ^= bits;
    h *= 1099511628211ull;
  }
  return static_cast<double>(h >> 12);
}

// The matrix an estimator reads reaches the plug-in's helper whole and bit for bit, laid out as
// the header documents, for a real symmetric, a complex Hermitian and a rectangular
// complex matrix; the kept copy is exactly what the spectrum was computed from.
TEST(EstimatorLibrary, MatrixArrivesBitForBit) {
  struct Case {
    std::string what, matrices, expression;
    bool self_adjoint, is_complex;
    int rows, cols;
  };
  // Scenarios of our own: receiver gains (T W T), a two-level signal seen in a rotated frame
  // (B + U B U^*), a channel matrix (G, whose singular values are the spectrum).
  const std::vector<Case> cases = {
      {"T W T", "[matrices.T]\nensemble = \"diagonal\"\natoms = [[1.0, 0.5], [2.0, 0.5]]\n"
                "[matrices.W]\nensemble = \"wishart_real\"\nratio = 0.5\n",
       "T W T", true, false, 12, 12},
      {"B + U B U^*", "[matrices.B]\nensemble = \"diagonal\"\natoms = [[-1.0, 0.5], [1.0, 0.5]]\n"
                      "[matrices.U]\nensemble = \"haar_unitary\"\n",
       "B + U B U^*", true, true, 12, 12},
      {"G", "[matrices.G]\nensemble = \"ginibre_complex\"\n", "G", false, true, 12, 12},
  };
  for (const auto& c : cases) {
    const auto j = job::parse_job("seed = 9\nsizes = [12]\ntrials = 3\nexpression = \"" +
                                      c.expression + "\"\n" + c.matrices + matrix_estimator(),
                                  "j.toml");
    estimate::EstimatorSet set(j);
    ASSERT_TRUE(set.wants_matrix());
    model::Model m;
    m.matrices = j.matrices;
    m.expression = j.expression;
    m.force_dense = true;
    const model::SizeRunner runner(m, 12);
    for (std::uint64_t t = 0; t < 3; ++t) {
      // Trials 0 and 2 keep the matrix where the runner does, in the set's shared memory (the
      // helper maps it: no copy); trial 1 in memory of its own (the estimator copies it there).
      std::vector<double> own;
      const model::MatrixBuffer keep =
          t == 1 ? model::MatrixBuffer([&own](std::size_t k) { own.resize(k); return own.data(); })
                 : model::MatrixBuffer([&set](std::size_t k) { return set.matrix_buffer(k); });
      const auto kept = runner.run(9, t, keep);
      ASSERT_FALSE(kept.failed) << kept.reason;
      ASSERT_NE(kept.matrix.data, nullptr);
      // Keeping the matrix changes nothing of the trial.
      const auto plain = runner.run(9, t);
      EXPECT_EQ(plain.matrix.data, nullptr);
      EXPECT_EQ(plain.spectrum, kept.spectrum) << c.what;
      const auto& view = kept.matrix;
      ASSERT_EQ(view.is_complex, c.is_complex) << c.what;
      ASSERT_EQ(view.rows, c.rows);
      ASSERT_EQ(view.cols, c.cols);
      expr::Evaluated x;
      x.is_complex = view.is_complex;
      if (x.is_complex) {
        x.complex = Eigen::Map<const Eigen::MatrixXcd>(
            reinterpret_cast<const std::complex<double>*>(view.data), view.rows, view.cols);
      } else {
        x.real = Eigen::Map<const Eigen::MatrixXd>(view.data, view.rows, view.cols);
      }
      if (c.self_adjoint) {
        // The copy's upper triangle is the exact mirror of the lower one (Hermitian, real
        // diagonal), and the lower one is what LAPACK diagonalised: same eigenvalues, bit for bit.
        if (x.is_complex) {
          EXPECT_TRUE(x.complex == x.complex.adjoint()) << c.what;
        } else {
          EXPECT_TRUE(x.real == x.real.transpose()) << c.what;
        }
        expr::Evaluated again = x;
        EXPECT_EQ(expr::compute_spectrum(expr::Spectrum::eigenvalues, again), kept.spectrum)
            << c.what;
      }
      estimate::TrialInput in;
      in.n = 12;
      in.trial = t;
      in.seed = 9;
      in.kind = runner.spectrum_kind();
      in.spectrum = std::span<const double>(kept.spectrum.data(),
                                            static_cast<std::size_t>(kept.spectrum.size()));
      in.matrix = view;
      const double expected_checksum = matrix_checksum(view);
      std::vector<double> values;
      std::vector<std::string> reasons;
      set.run(in, values, reasons);
      ASSERT_EQ(reasons, (std::vector<std::string>{""})) << c.what;
      // Sorted names: abi_seen, checksum, cols, entry_01_im, entry_01_re, entry_10_im,
      // entry_10_re, frobenius_square, is_complex, rows, trace.
      ASSERT_EQ(values.size(), 11u);
      EXPECT_EQ(values[0], FREEGAP_ESTIMATOR_ABI_VERSION);
      EXPECT_EQ(values[1], expected_checksum) << c.what << " trial " << t;
      EXPECT_EQ(values[2], c.cols);
      EXPECT_EQ(values[9], c.rows);
      EXPECT_EQ(values[8], c.is_complex ? 1.0 : 0.0);
      const std::complex<double> e01 = x.is_complex ? x.complex(0, 1) : x.real(0, 1);
      const std::complex<double> e10 = x.is_complex ? x.complex(1, 0) : x.real(1, 0);
      EXPECT_EQ(values[3], e01.imag());
      EXPECT_EQ(values[4], e01.real());
      EXPECT_EQ(values[5], e10.imag());
      EXPECT_EQ(values[6], e10.real());
      // Σ|entry|² = Σ λ² or Σ σ², and the trace Σ λ: the spectrum and the matrix agree to
      // rounding (relative 1e-12 of Σ λ², generous for N = 12 in double precision).
      const double sum_sq = kept.spectrum.squaredNorm();
      EXPECT_NEAR(values[7], sum_sq, 1e-12 * sum_sq) << c.what;
      if (c.self_adjoint) {
        EXPECT_NEAR(values[10], kept.spectrum.sum(), 1e-12 * sum_sq) << c.what;
      }
    }
  }
}

// The kept copy is in the memory estimate freegap run refuses by and freegap plan reports: one
// N × N real matrix, 8 N² bytes, for T W T.
TEST(EstimatorLibrary, PlanCountsTheKeptMatrix) {
  const auto dir = std::filesystem::temp_directory_path() /
                   ("freegap-test-estimate-plan-" + std::to_string(::getpid()));
  std::filesystem::create_directories(dir);
  freegap::plan::Options options;
  options.calibration_path = (dir / "calibration.toml").string();
  std::ostringstream log;
  const auto without = freegap::plan::forecast(
      job::parse_job(job_text(library_estimator("ok")), "j.toml"), options, log);
  const auto with = freegap::plan::forecast(
      job::parse_job(job_text(library_estimator("ok") + matrix_estimator()), "j.toml"), options,
      log);
  std::filesystem::remove_all(dir);
  ASSERT_EQ(with.sizes.size(), 1u);
  EXPECT_EQ(with.sizes[0].peak_bytes - without.sizes[0].peak_bytes, 8u * 20 * 20);
}

// A plug-in cannot change the matrix that another estimator of the rank reads next: the helper
// holds no writable mapping of the shared memory and only a read-only descriptor of it.
TEST(EstimatorLibrary, APluginCannotWriteTheSharedMatrix) {
  std::string scribbler = matrix_estimator("scribble");
  scribbler.replace(scribbler.find("\"probe\""), 7, "\"scribbler\"");
  const auto j = job::parse_job(job_text(scribbler + matrix_estimator()), "j.toml");
  estimate::EstimatorSet set(j);
  model::Model m;
  m.matrices = j.matrices;
  m.expression = j.expression;
  const model::SizeRunner runner(m, 20);
  for (std::uint64_t t = 0; t < 2; ++t) {
    const auto kept = runner.run(4, t, [&set](std::size_t k) { return set.matrix_buffer(k); });
    const double expected_checksum = matrix_checksum(kept.matrix);
    estimate::TrialInput in;
    in.n = 20;
    in.trial = t;
    in.spectrum = std::span<const double>(kept.spectrum.data(),
                                          static_cast<std::size_t>(kept.spectrum.size()));
    in.matrix = kept.matrix;
    std::vector<double> values;
    std::vector<std::string> reasons;
    set.run(in, values, reasons);
    EXPECT_EQ(reasons, (std::vector<std::string>{
                           "plug-in reported failure: cannot make the matrix writable "
                           "(Permission denied)",
                           ""}));
    ASSERT_EQ(values.size(), 22u);
    EXPECT_EQ(values[11 + 1], expected_checksum) << "trial " << t;  // the reader's checksum
    EXPECT_EQ(matrix_checksum(kept.matrix), expected_checksum);
  }
}

TEST(EstimatorLibrary, VersionOnePluginLoadsAndAMatrixReaderNeedsAMatrix) {
  // plugin.c declares version 1 (its info ends before `wants`): loaded, spectrum only.
  estimate::EstimatorSet old_one(job::parse_job(job_text(library_estimator("ok")), "j.toml"));
  EXPECT_FALSE(old_one.wants_matrix());
  // A matrix reader handed a trial without a matrix records why instead of calling the plug-in.
  estimate::EstimatorSet reader(job::parse_job(job_text(matrix_estimator()), "j.toml"));
  std::vector<double> values;
  std::vector<std::string> reasons;
  reader.run(input(0), values, reasons);
  EXPECT_EQ(reasons, (std::vector<std::string>{
                         "the plug-in asks for the matrix, and this trial has none to give"}));
  EXPECT_TRUE(std::isnan(values.at(0)));
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
  // 2 s: room for starting the command on a loaded machine or under the sanitizers (the helper
  // program is then instrumented too), still far below the 30 s the sleeping trial takes.
  EXPECT_EQ(run("sleep", 0, 2).second, "");
  EXPECT_EQ(run("sleep", 1, 2).second,
            "command did not finish within the timeout of 2 s; it was killed");
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

// ---- the plug-in runs only in its helper process (the program freegap-plugin-host) ----------

// Whether this process has a test plug-in library mapped: it never should, since a plug-in is
// loaded, described and run only in its helper.
bool plugin_loaded_here() {
  std::ifstream maps("/proc/self/maps");
  std::string line;
  while (std::getline(maps, line)) {
    if (line.find("libtest_plugin_") != std::string::npos) return true;
  }
  return false;
}

TEST(EstimatorHost, ThisProcessNeverLoadsAPlugin) {
  estimate::EstimatorSet set(job::parse_job(job_text(library_estimator("ok")), "j.toml"));
  std::vector<double> values;
  std::vector<std::string> reasons;
  set.run(input(0), values, reasons);
  EXPECT_EQ(values, (std::vector<double>{kMeanSquare, kTop}));
  EXPECT_FALSE(plugin_loaded_here());
}

// A describe that crashes, hangs past the estimator's timeout or exits is a refusal of the job
// (the message names the estimator's line), never a crash or an exit of this process.
TEST(EstimatorHost, DescribeThatCrashesHangsOrExitsIsRefused) {
  EXPECT_EQ(open_message(job_text(library_estimator("describe_segfault"))),
            "j.toml:13: estimator.lib.library: '" + plugin("describe_segfault") +
                "': freegap_estimator_describe crashed: signal 11 (SIGSEGV); fix the plug-in: "
                "loading it and freegap_estimator_describe must only return static data");
  EXPECT_EQ(open_message(job_text(library_estimator("describe_hang", 0.5))),
            "j.toml:13: estimator.lib.library: '" + plugin("describe_hang") +
                "': freegap_estimator_describe did not finish within the estimator's timeout of "
                "0.5 s; fix the plug-in: loading it and freegap_estimator_describe must only "
                "return static data");
  EXPECT_EQ(open_message(job_text(library_estimator("describe_exit"))),
            "j.toml:13: estimator.lib.library: '" + plugin("describe_exit") +
                "': freegap_estimator_describe called exit(3); fix the plug-in: loading it and "
                "freegap_estimator_describe must only return static data");
  EXPECT_FALSE(plugin_loaded_here());
}

// exit() in the plug-in ends its helper only, and is recorded as what it is.
TEST(EstimatorHost, ExitIsRecordedAsAnExit) { expect_faults("exit", "plug-in called exit(0)"); }

// Reads a whole file ("" if there is none).
std::string slurp(const std::filesystem::path& path) {
  std::ifstream in(path, std::ios::binary);
  std::ostringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

// Runs `trials` trials of the chatty plug-in with this process's standard output and error sent
// to files, so that the test sees whether anything of the plug-in reached them.
struct ChattyRun {
  std::string log, own_output;
};
ChattyRun chatty_run(const std::filesystem::path& dir, std::size_t limit, std::uint64_t trials) {
  const auto own = dir / "own-output.txt";
  const auto log = dir / "run.h5.estimators.log";
  std::fflush(stdout);
  std::fflush(stderr);
  const int saved_out = ::dup(1), saved_err = ::dup(2);
  const int sink = ::open(own.c_str(), O_WRONLY | O_CREAT | O_TRUNC, 0644);
  ::dup2(sink, 1);
  ::dup2(sink, 2);
  ::close(sink);
  {
    estimate::EstimatorSet set(job::parse_job(job_text(library_estimator("chatty")), "j.toml"));
    set.log_plugin_output_to(estimate::plugin_log_path((dir / "run.h5").string()), limit);
    std::vector<double> values;
    std::vector<std::string> reasons;
    for (std::uint64_t t = 0; t < trials; ++t) set.run(input(t), values, reasons);
  }
  std::fflush(stdout);
  std::fflush(stderr);
  ::dup2(saved_out, 1);
  ::dup2(saved_err, 2);
  ::close(saved_out);
  ::close(saved_err);
  return {slurp(log), slurp(own)};
}

// What the plug-in prints goes to <run file>.estimators.log, a line at a time with the
// estimator's name, the helper's process id and the stream, and never to this process's output.
TEST(EstimatorHost, PluginOutputGoesToTheLogOnly) {
  const auto dir = std::filesystem::temp_directory_path() /
                   ("freegap-test-estimate-log-" + std::to_string(::getpid()));
  std::filesystem::remove_all(dir);
  std::filesystem::create_directories(dir);
  const ChattyRun r = chatty_run(dir, estimate::kPluginLogLimit, 3);
  EXPECT_EQ(r.own_output.find("chatty"), std::string::npos) << r.own_output.substr(0, 400);
  // Printed while loading, before the log had a place: held and written first.
  EXPECT_EQ(r.log.find("lib["), 0u);
  EXPECT_NE(r.log.find("] out: chatty plug-in loaded\n"), std::string::npos);
  for (int t = 0; t < 3; ++t) {
    const std::string trial = "chatty trial " + std::to_string(t);
    EXPECT_NE(r.log.find("] out: " + trial + " line 099 ...."), std::string::npos) << t;
    EXPECT_NE(r.log.find("] err: " + trial + " to standard error\n"), std::string::npos) << t;
  }
  // 1 + 3 × (100 + 1) lines, each prefixed.
  EXPECT_EQ(std::count(r.log.begin(), r.log.end(), '\n'), 1 + 3 * 101);
  std::size_t prefixed = 0;
  for (std::size_t at = 0; (at = r.log.find("lib[", at)) != std::string::npos; ++at) ++prefixed;
  EXPECT_EQ(prefixed, 1u + 3 * 101);
  // A second set appends.
  const ChattyRun again = chatty_run(dir, estimate::kPluginLogLimit, 1);
  EXPECT_EQ(again.log.substr(0, r.log.size()), r.log);
  EXPECT_EQ(std::count(again.log.begin(), again.log.end(), '\n'), (1 + 3 * 101) + (1 + 101));
  std::filesystem::remove_all(dir);
}

// The log stops growing at its limit, and says so.
TEST(EstimatorHost, LogIsBoundedWithANote) {
  const auto dir = std::filesystem::temp_directory_path() /
                   ("freegap-test-estimate-limit-" + std::to_string(::getpid()));
  std::filesystem::remove_all(dir);
  std::filesystem::create_directories(dir);
  const std::size_t limit = 20000;  // about two trials' output of the chatty plug-in
  const ChattyRun r = chatty_run(dir, limit, 5);
  const std::string note =
      "freegap: this log reached its limit of 20000 bytes; further plug-in "
      "output of process " +
      std::to_string(::getpid()) + " is dropped\n";
  ASSERT_GE(r.log.size(), note.size());
  EXPECT_EQ(r.log.substr(r.log.size() - note.size()), note);
  EXPECT_LE(r.log.size(), limit + note.size());
  EXPECT_EQ(r.log.find("chatty trial 4"), std::string::npos);
  EXPECT_EQ(r.own_output.find("chatty"), std::string::npos);
  std::filesystem::remove_all(dir);
}

// A stop request ends the wait for a hanging plug-in at once: the estimate fails as stopped
// (the runner then drops the unit), not after the 60 s timeout; the next trial gets a new helper.
TEST(EstimatorHost, StopRequestEndsAWaitForAHangingPlugin) {
  const auto sentinel = std::filesystem::temp_directory_path() /
                        ("freegap-test-estimate-hang-" + std::to_string(::getpid()));
  ::setenv("FREEGAP_TEST_PLUGIN_HANG", sentinel.c_str(), 1);
  estimate::EstimatorSet set(job::parse_job(job_text(library_estimator("hang", 60)), "j.toml"));
  std::atomic<bool> stop{false};
  set.set_stop_check([&stop] { return stop.load(); });
  std::thread signaller([&stop] {
    std::this_thread::sleep_for(std::chrono::milliseconds(300));
    stop = true;
  });
  std::vector<double> values;
  std::vector<std::string> reasons;
  set.run(input(1), values, reasons);  // trial 1 hangs
  signaller.join();
  ::unsetenv("FREEGAP_TEST_PLUGIN_HANG");
  EXPECT_EQ(reasons, (std::vector<std::string>{"stopped: the run was asked to stop"}));
  EXPECT_EQ(slurp(sentinel), "hanging on trial 1\n");  // it did hang
  std::filesystem::remove(sentinel);
  stop = false;
  set.run(input(1), values, reasons);  // a new helper, without the variable: it answers
  EXPECT_EQ(reasons, (std::vector<std::string>{""}));
  EXPECT_EQ(values, (std::vector<double>{kMeanSquare, kTop}));
}

}  // namespace
