// Haar matrices drawn by the columns the plan reads (expr::Evaluation::haar_columns,
// ensembles::Sampler::draw_columns): which uses qualify, that the reduced sample is the full
// one's first columns (QR), that coordinates map consistently across conjugations, and that the
// trials have the exact finite-N moments of the Weingarten calculus. Fixed seeds; stochastic
// tolerances are 4 standard errors of stated trial counts.
#include <gtest/gtest.h>

#include <Eigen/Core>
#include <cmath>
#include <string>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/errors.hpp"
#include "freegap/expr.hpp"
#include "freegap/model.hpp"
#include "freegap/observe.hpp"
#include "stat_helpers.hpp"

namespace {

using namespace freegap;
using model::parse_declaration;
using freegap::testing::mean_se;

constexpr std::uint64_t kSeed = 1618;

model::Model make(const std::vector<std::string>& declarations, const std::string& expression,
                  bool force_dense = false, bool full_haar = false) {
  model::Model m;
  for (const auto& d : declarations) m.matrices.push_back(parse_declaration(d));
  m.expression = expression;
  m.force_dense = force_dense;
  m.full_haar = full_haar;
  return m;
}

// ---- the sampler ---------------------------------------------------------------------------------

// With the QR method the r drawn columns come from the stream positions of the full draw's first
// r columns, and Householder QR treats columns left to right: the same matrix up to rounding.
TEST(HaarColumns, QrColumnsAreTheFullDrawsFirstColumns) {
  for (const std::string kind : {"haar_unitary", "haar_orthogonal"}) {
    const ensembles::Sampler s(parse_declaration("U=" + kind));
    for (const Eigen::Index r : {0, 1, 17, 50}) {
      const auto part = s.draw_columns(50, r, kSeed, 3);
      const auto whole = s.draw(50, kSeed, 3);
      ASSERT_EQ(part.rows(), 50);
      ASSERT_EQ(part.cols(), r);
      if (r == 0) continue;
      const double diff =
          kind == "haar_unitary"
              ? (part.complex - whole.complex.leftCols(r)).cwiseAbs().maxCoeff()
              : (part.real - whole.real.leftCols(r)).cwiseAbs().maxCoeff();
      EXPECT_LT(diff, 1e-12) << kind << " r = " << r;
    }
  }
}

// The polar method's isometry Z (Z^*Z)^(-1/2) has orthonormal columns (its law is checked by the
// moments below).
TEST(HaarColumns, PolarColumnsAreAnIsometry) {
  const ensembles::Sampler u(parse_declaration("U=haar_unitary:method=polar"));
  const auto q = u.draw_columns(40, 13, kSeed, 0).complex;
  EXPECT_LT((q.adjoint() * q - Eigen::MatrixXcd::Identity(13, 13)).cwiseAbs().maxCoeff(), 1e-13);
  const ensembles::Sampler o(parse_declaration("U=haar_orthogonal:method=polar"));
  const auto p = o.draw_columns(40, 13, kSeed, 0).real;
  EXPECT_LT((p.transpose() * p - Eigen::MatrixXd::Identity(13, 13)).cwiseAbs().maxCoeff(), 1e-13);
  const ensembles::Sampler g(parse_declaration("G=gue"));
  EXPECT_THROW(g.draw_columns(40, 13, kSeed, 0), InputError);
  EXPECT_THROW(u.draw_columns(40, 41, kSeed, 0), InputError);
}

// ---- which uses qualify ----------------------------------------------------------------------------

// r for U (declared second) in the plan of `expression` at N = 40, B = ±1 (halves), E = 0 on
// 30 coordinates then 1 on 10, S = a semicircle-quantile diagonal.
Eigen::Index columns_of_u(const std::string& expression, const std::string& u = "U=haar_unitary") {
  const auto m = make({"B=diagonal:atoms=1@0.5,-1@0.5", u, "E=diagonal:atoms=0@0.75,1@0.25",
                       "S=diagonal:law=semicircle", "X=gue"},
                      expression, true);
  const model::SizeRunner runner(m, 40);
  const auto columns = runner.evaluation().haar_columns();
  const auto drawn = runner.draw(kSeed, 0);
  EXPECT_EQ(drawn[1].cols(), columns[1] < 0 ? 40 : columns[1]) << expression;
  const bool says = runner.explain().find("sampling: U drawn as an N × r isometry, r = " +
                                          std::to_string(columns[1]) + " of its 40 columns") !=
                    std::string::npos;
  EXPECT_EQ(says, columns[1] >= 0) << runner.explain();
  return columns[1];
}

TEST(HaarColumns, OnlyConjugationsOfAtomDiagonalsQualify) {
  // B = ±1: the shift is −1 (a tie goes to the smaller value), the +1 coordinates 0..19 are read.
  EXPECT_EQ(columns_of_u("B + U B U^*"), 20);
  EXPECT_EQ(columns_of_u("B + U B U^*", "U=haar_orthogonal:method=polar"), 20);
  EXPECT_EQ(columns_of_u("B + U^* B U"), 20);
  EXPECT_EQ(columns_of_u("(U B U^*)^2 + B"), 20);
  // E's read coordinates are 30..39: the union with B's has 30.
  EXPECT_EQ(columns_of_u("U B U^* + U E U^*"), 30);
  // Used elsewhere, or in both orientations, or with a diagonal of distinct values: whole.
  EXPECT_EQ(columns_of_u("U B U^* + U^* B U"), -1);
  EXPECT_EQ(columns_of_u("U B U^* + U + U^*"), -1);
  EXPECT_EQ(columns_of_u("U B U^* X + X U B U^*"), -1);
  EXPECT_EQ(columns_of_u("U X U^*"), -1);
  EXPECT_EQ(columns_of_u("U S U^* + B"), -1);
  EXPECT_EQ(columns_of_u("U B"), -1);
  // The comparison switch.
  const model::SizeRunner full(make({"B=diagonal:atoms=1@0.5,-1@0.5", "U=haar_unitary"},
                                    "B + U B U^*", true, true),
                               40);
  EXPECT_EQ(full.evaluation().haar_columns(), (std::vector<Eigen::Index>{-1, -1}));
  EXPECT_EQ(full.draw(kSeed, 0)[1].cols(), 40);
}

// ---- the same values where the two samplers share them ----------------------------------------------

// B = ±1 in halves: the read coordinates are 0..N/2−1, so the reduced sample's columns are the
// full sample's columns at those very coordinates and the trials agree to rounding.
TEST(HaarColumns, ReducedTrialEqualsFullTrialOnSharedColumns) {
  for (const std::string u : {"U=haar_unitary", "U=haar_orthogonal"}) {
    const std::vector<std::string> decl = {"B=diagonal:atoms=1@0.5,-1@0.5", u};
    const model::SizeRunner reduced(make(decl, "B + U B U^*", true), 40);
    const model::SizeRunner full(make(decl, "B + U B U^*", true, true), 40);
    ASSERT_EQ(reduced.evaluation().haar_columns()[1], 20);
    for (std::uint64_t t = 0; t < 3; ++t) {
      const auto a = reduced.run(kSeed, t), b = full.run(kSeed, t);
      ASSERT_FALSE(a.failed || b.failed);
      EXPECT_LT((a.spectrum - b.spectrum).cwiseAbs().maxCoeff(), 1e-12) << u << " trial " << t;
    }
  }
}

// Two conjugations of one U with different read coordinates (B: 0..19, E: 30..39) see one
// consistent set of columns: evaluated from the columns of a whole sample M at the union
// (0..19, 30..39), the plan gives what it gives from M itself; for U^* D U the columns are those
// of M^*.
TEST(HaarColumns, CoordinatesMapConsistentlyAcrossConjugations) {
  const auto m = make({"B=diagonal:atoms=1@0.5,-1@0.5", "U=haar_unitary",
                       "E=diagonal:atoms=0@0.75,1@0.25"},
                      "U B U^* + 2 U E U^*", true);
  const model::SizeRunner runner(m, 40);
  ASSERT_EQ(runner.evaluation().haar_columns()[1], 30);
  std::vector<Eigen::Index> at;
  for (Eigen::Index i = 0; i < 20; ++i) at.push_back(i);
  for (Eigen::Index i = 30; i < 40; ++i) at.push_back(i);
  const ensembles::Sampler whole(parse_declaration("U=haar_unitary"));
  for (const std::string text : {"U B U^* + 2 U E U^*", "U^* B U + 2 U^* E U"}) {
    const expr::Expression e(text, m.matrices);
    const expr::Evaluation plan(e, 40, {.full_result = true});
    ASSERT_EQ(plan.haar_columns()[1], 30) << text;
    auto samples = runner.draw(kSeed, 1);
    samples[1] = whole.draw(40, kSeed, 1);
    const auto from_whole = plan.evaluate(samples).complex;
    const Eigen::MatrixXcd y = text[1] == '^' ? Eigen::MatrixXcd(samples[1].complex.adjoint())
                                              : samples[1].complex;
    samples[1].complex = y(Eigen::all, at);
    const auto from_columns = plan.evaluate(samples).complex;
    EXPECT_LT((from_whole - from_columns).cwiseAbs().maxCoeff(), 1e-12) << text;
  }
}

// ---- the law: exact finite-N moments ----------------------------------------------------------------

struct MomentCase {
  std::string u;      // the Haar declaration
  std::string b;      // B's declaration
  std::string expression;
  int n;
  bool force_dense;   // B two-valued: keep the dense path (two_projection would take it)
  double exact[4];    // m_1..m_4 from tests/model/weingarten_moments.py
};

// m_k = E (1/N) Tr (B + U B U^*)^k, exact: tests/model/weingarten_moments.py (Weingarten calculus:
// Collins 2003 and Collins & Śniady 2006 for U(N); Collins & Śniady 2006 for O(N)), the rationals
// 131/30, 208/35, 254032/2475 (unitary) and 653/144, 31/5, 69718/675 (orthogonal) for m_4.
// The per-trial moments are the runner's (observe::spectral_moments of the eigenvalues). 40 000
// trials per case; every mean within 4 standard errors, m_1 (not random) to 1e-9 (rounding in
// the eigenvalues and the sum over trials).
TEST(HaarColumns, MomentsAreTheWeingartenValues) {
  const std::string b3 = "B=diagonal:atoms=1@0.5,0@0.25,-1@0.25";
  const std::string b2 = "B=diagonal:atoms=1@0.5,-1@0.5";
  const std::string b10 = "B=diagonal:atoms=1@0.5,-1@0.3,3@0.2";
  const std::vector<MomentCase> cases = {
      {"U=haar_unitary", b3, "B + U B U^*", 4, false, {0.5, 1.625, 1.625, 131.0 / 30}},
      {"U=haar_unitary:method=polar", b2, "B + U B U^*", 6, true, {0, 2, 0, 208.0 / 35}},
      {"U=haar_unitary", b10, "B + U^* B U", 10, false, {1.6, 6.48, 23.68, 254032.0 / 2475}},
      {"U=haar_orthogonal", b3, "B + U^* B U", 4, false, {0.5, 1.625, 1.625, 653.0 / 144}},
      {"U=haar_orthogonal:method=polar", b2, "B + U B U^*", 6, true, {0, 2, 0, 31.0 / 5}},
      {"U=haar_orthogonal", b10, "B + U B U^*", 10, false, {1.6, 6.48, 23.68, 69718.0 / 675}},
  };
  constexpr int kTrials = 40000;
  for (const auto& c : cases) {
    const model::SizeRunner runner(make({c.b, c.u}, c.expression, c.force_dense), c.n);
    ASSERT_EQ(runner.path(), model::Path::dense);
    ASSERT_GE(runner.evaluation().haar_columns()[1], 1) << c.u;
    ASSERT_LT(runner.evaluation().haar_columns()[1], c.n) << c.u;
    std::vector<std::vector<double>> m(5);
    for (int t = 0; t < kTrials; ++t) {
      const auto outcome = runner.run(kSeed, static_cast<std::uint64_t>(t));
      ASSERT_FALSE(outcome.failed) << outcome.reason;
      const auto mk = observe::spectral_moments(
          {outcome.spectrum.data(), static_cast<std::size_t>(outcome.spectrum.size())}, 4);
      for (int k = 1; k <= 4; ++k) m[k].push_back(mk[k]);
    }
    const std::string what = c.u + ", " + c.b + ", " + c.expression + ", N = " +
                             std::to_string(c.n);
    EXPECT_NEAR(mean_se(m[1]).mean, c.exact[0], 1e-9) << what;
    for (int k = 2; k <= 4; ++k) {
      const auto s = mean_se(m[k]);
      EXPECT_NEAR(s.mean, c.exact[k - 1], 4.0 * s.se) << what << ", m_" << k;
    }
  }
}

}  // namespace
