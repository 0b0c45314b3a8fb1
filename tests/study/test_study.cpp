// The compiled study (study.hpp): one job turned into the expression, the runners with their
// path and its reason, the work units and the limit that every command uses.
#include <gtest/gtest.h>

#include <cmath>
#include <string>

#include "freegap/errors.hpp"
#include "freegap/job.hpp"
#include "freegap/model.hpp"
#include "freegap/study.hpp"

namespace freegap::study {
namespace {

// A lone GUE ladder with an uneven last unit: 10 trials in units of 4 (4, 4, 2).
constexpr const char* kLoneGue = R"(seed = 3
sizes = [50, 100]
trials = [10, 8]
expression = "X"

[matrices.X]
ensemble = "gue"

[run]
trials_per_unit = 4
)";

job::Job parsed(const std::string& text) { return job::parse_job(text, "<study test>"); }

TEST(Study, LoneGueTakesTheTridiagonalPathAndSaysWhy) {
  const Study s(parsed(kLoneGue));
  ASSERT_EQ(s.runners().size(), 2u);
  EXPECT_EQ(s.runners()[0].path(), model::Path::tridiagonal);
  EXPECT_EQ(s.runners()[1].size(), 100);
  EXPECT_EQ(s.path_reason(0).rfind("tridiagonal: ", 0), 0u) << s.path_reason(0);
  EXPECT_EQ(s.expression().text(), "X");
}

// observe.extremes_tolerance and extremes_max_steps reach the krylov path's runner (its
// explanation states both).
TEST(Study, ExtremesAccuracyKeysReachTheKrylovPath) {
  const std::string job = R"(seed = 3
sizes = [60]
trials = 2
expression = "X1 X2 + X2 X1"

[matrices.X1]
ensemble = "gue"

[matrices.X2]
ensemble = "gue"

[observe]
extremes_only = true
extremes_tolerance = 1e-9
extremes_max_steps = 40

[run]
path = "krylov"
)";
  const Study s(parsed(job));
  ASSERT_EQ(s.runners()[0].path(), model::Path::krylov);
  const std::string text = s.runners()[0].explain();
  EXPECT_NE(text.find("relative error estimate of 1e-09"), std::string::npos) << text;
  EXPECT_NE(text.find("within 40 steps"), std::string::npos) << text;
}

TEST(Study, WorkUnitsAreBlocksOfTrialsPerUnitWithAShorterLast) {
  const Study s(parsed(kLoneGue));
  EXPECT_EQ(s.unit_count(0), 3);
  EXPECT_EQ(s.trials_in_unit(0, 0), 4);
  EXPECT_EQ(s.trials_in_unit(0, 2), 2);
  EXPECT_EQ(s.trials_in_unit(0, 3), 0);
  EXPECT_EQ(s.unit_count(1), 2);
  EXPECT_EQ(s.trials_in_unit(1, 1), 4);
}

TEST(Study, ForcedDensePathNamesWhatForcedIt) {
  const Study forced(parsed(std::string(kLoneGue) + "force_dense = true\n"));
  EXPECT_EQ(forced.runners()[0].path(), model::Path::dense);
  EXPECT_NE(forced.path_reason(0).find("forced by force_dense"), std::string::npos)
      << forced.path_reason(0);
  const Study with_estimator(parsed(std::string(kLoneGue) +
                                    "\n[[estimator]]\nname = \"edge\"\nbuiltin = \"operator_norm\"\n"
                                    "[estimator.truth]\nnorm = \"limit_norm\"\n"));
  EXPECT_EQ(with_estimator.runners()[0].path(), model::Path::dense);
  EXPECT_NE(with_estimator.path_reason(0).find("estimators read every trial's spectrum"),
            std::string::npos)
      << with_estimator.path_reason(0);
}

// A Haar matrix drawn by the columns its conjugations read is named in the path's reason (which
// `plan` and `run --explain` print), with r at each size: B = ±1 in halves, r = N/2.
TEST(Study, DenseReasonNamesHaarMatricesDrawnByColumns) {
  const Study s(parsed("seed = 3\nsizes = [50, 100]\ntrials = [4, 4]\n"
                       "expression = \"B + U B U^*\"\n[matrices.B]\nensemble = \"diagonal\"\n"
                       "atoms = [[1.0, 0.5], [-1.0, 0.5]]\n[matrices.U]\n"
                       "ensemble = \"haar_unitary\"\n[run]\nforce_dense = true\n"));
  ASSERT_EQ(s.runners()[1].path(), model::Path::dense);
  const std::string why = s.path_reason(1);
  EXPECT_NE(why.find("forced by force_dense"), std::string::npos) << why;
  EXPECT_NE(why.find("; U is drawn as an N × r isometry, r = 50 of its 100 columns"),
            std::string::npos)
      << why;
}

TEST(Study, OtherExpressionsAreDenseBecauseNoTridiagonalModelApplies) {
  std::string text = kLoneGue;
  text.replace(text.find("\"X\""), 3, "\"X X\"");
  const Study s(parsed(text));
  EXPECT_EQ(s.runners()[0].path(), model::Path::dense);
  EXPECT_EQ(s.path_reason(0).rfind("dense: the tridiagonal path applies only", 0), 0u);
}

TEST(Study, RefusalsNameTheJobsPlace) {
  std::string text = kLoneGue;
  text.replace(text.find("\"X\""), 3, "\"X + Y\"");
  try {
    const Study s(parsed(text));
    FAIL() << "an undeclared matrix was accepted";
  } catch (const InputError& e) {
    EXPECT_EQ(std::string(e.what()).rfind("<study test>:4: expression: ", 0), 0u) << e.what();
  }
}

// The limit comes from the study: a GUE's is the semicircle on [−2, 2] with m_2 = 1, m_4 = 2
// (Wigner 1955; the Catalan numbers), for a job and for an expression alone alike.
TEST(Study, LimitIsTheSameForAJobAndForTheExpressionAlone) {
  const Study job_study(parsed(kLoneGue));
  job::Job declared = parsed(kLoneGue);
  const Study alone = Study::of_expression(declared.matrices, "X");
  for (const Study* s : {&job_study, &alone}) {
    const analysis::DerivedLimit d = s->limit(4);
    ASSERT_TRUE(d.law) << d.reason;
    EXPECT_NEAR(d.law->support().lo, -2.0, 1e-12);
    EXPECT_NEAR(d.law->support().hi, 2.0, 1e-12);
    ASSERT_EQ(d.exact_moments.size(), 5u);
    EXPECT_DOUBLE_EQ(d.exact_moments[2], 1.0);
    EXPECT_DOUBLE_EQ(d.exact_moments[4], 2.0);
  }
  EXPECT_TRUE(alone.runners().empty());
}

TEST(Study, StoredJobIsCompiledAsTheRunCompiledIt) {
  const job::Job original = parsed(kLoneGue);
  const Study stored = Study::of_stored_job(original.text, original.canonical());
  EXPECT_EQ(stored.job().canonical(), original.canonical());
  EXPECT_EQ(stored.runners()[0].path(), model::Path::tridiagonal);
  EXPECT_THROW(Study::of_stored_job("seed = ", ""), InputError);
}

}  // namespace
}  // namespace freegap::study
