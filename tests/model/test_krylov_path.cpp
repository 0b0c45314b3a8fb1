// The Krylov path (model::Path::krylov): products of an expression with vectors equal the formed
// matrix's, the extremes it finds equal LAPACK's on the same sampled matrices, a trial that does
// not converge becomes a failure row with its reason, and the path is chosen, forced and refused
// as documented.
//
// Tolerance of the extremes (as in tests/linalg/test_lanczos.cpp): the stopping rule accepts an
// error estimate up to 10·tol·scale (tol = 1e-12 by default); LAPACK's eigenvalues are within
// about N·eps·‖P‖ (backward stable; common practice). So |θ − λ| ≤ 10·tol·scale + N·eps·scale.
#include <gtest/gtest.h>

#include <cmath>
#include <complex>
#include <cstdio>
#include <limits>
#include <string>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/expr.hpp"
#include "freegap/model.hpp"
#include "freegap/observe.hpp"
#include "freegap/rng.hpp"

namespace {

using namespace freegap;
using model::parse_declaration;
using Complex = std::complex<double>;

constexpr std::uint64_t kSeed = 20261205;
constexpr double kEps = std::numeric_limits<double>::epsilon();

model::Model make(const std::vector<std::string>& declarations, const std::string& expression) {
  model::Model m;
  for (const auto& d : declarations) m.matrices.push_back(parse_declaration(d));
  m.expression = expression;
  m.extremes_only = true;
  m.bins = 0;
  m.max_moment = 0;
  return m;
}

observe::ObserveConfig extremes_config(const model::SizeRunner& runner) {
  observe::ObserveConfig c;
  c.extremes_only = true;
  c.max_moment = 0;
  c.kind = runner.spectrum_kind();
  return c;
}

// P·v from the formed matrix (full result, whole Haar samples) against VectorProduct::apply.
void expect_product_matches(const std::vector<std::string>& declarations,
                            const std::string& expression, Eigen::Index n) {
  model::Model m = make(declarations, expression);
  m.full_haar = true;
  const model::SizeRunner runner(m, n);
  const auto samples = runner.draw(kSeed, 3);
  const expr::Evaluation full(runner.expression(), n,
                              expr::EvaluationOptions{.full_result = true, .full_haar = true});
  expr::Evaluated p = full.evaluate(samples);
  const expr::VectorProduct product(runner.expression(), n);
  rng::Stream s({1, "v", static_cast<std::uint64_t>(n), 0});
  Eigen::VectorXcd v(n), y(n);
  s.fill_complex_normal({v.data(), static_cast<std::size_t>(n)});
  product.apply(samples, v.data(), y.data());
  const Eigen::VectorXcd want = p.is_complex ? Eigen::VectorXcd(p.complex * v)
                                             : Eigen::VectorXcd(p.real.cast<Complex>() * v);
  EXPECT_LE((y - want).norm(), 1e-12 * (1.0 + want.norm())) << expression;
  // The Gram product P^*(P v) (singular values on the krylov path).
  Eigen::VectorXcd g(n);
  product.apply_gram(samples, v.data(), g.data());
  const Eigen::VectorXcd want_g = p.is_complex ? Eigen::VectorXcd(p.complex.adjoint() * want)
                                               : Eigen::VectorXcd(p.real.transpose().cast<Complex>() * want);
  EXPECT_LE((g - want_g).norm(), 1e-12 * (1.0 + want_g.norm())) << expression;
  if (product.is_real()) {
    Eigen::VectorXd vr = v.real(), yr(n);
    product.apply(samples, vr.data(), yr.data());
    EXPECT_LE((yr - p.real * vr).norm(), 1e-12 * (1.0 + yr.norm())) << expression;
  }
}

TEST(VectorProduct, EqualsTheFormedMatrixTimesTheVector) {
  const std::vector<std::string> d = {"X1=gue", "X2=gue", "B=diagonal:atoms=1@0.5,-1@0.5",
                                      "U=haar_unitary", "O=haar_orthogonal", "W=wishart_real:ratio=0.5",
                                      "Y=goe", "G=ginibre_complex:ratio=0.5",
                                      "D=diagonal:law=uniform:low=0:high=2"};
  for (const char* e : {"X1 X2 + X2 X1", "B + U B U^*", "U^* D U - 2 B", "1/2 (X1 - 2) X1^3",
                        "Y^2 + W", "W + X1", "G G^*", "(X1 U)^* (X1 U)", "O B O^* + Y",
                        "U + U^* + X2^2", "X2 - 3",
                        // The imaginary unit: complex products even from real factors (Y, O).
                        "i (X1 X2 - X2 X1)", "i (U - U^*) + Y", "2i (O - O^*) + i (Y B - B Y)",
                        "(1 + 2 i) X1 X2 + (1 - 2 i) X2 X1", "X1 + i"}) {
    expect_product_matches(d, e, 37);
  }
}

TEST(VectorProduct, CountsTheBytesOfEachFactorRead) {
  const expr::Expression e("X1 X2 + X2 X1",
                           {parse_declaration("X1=gue"), parse_declaration("X2=gue")});
  // Four products with Hermitian N×N complex samples, each reading one triangle: 4 · 8 N².
  EXPECT_DOUBLE_EQ(expr::VectorProduct(e, 100).bytes_read(), 4 * 8.0 * 100 * 100);
}

// 100 trials each of three models: a complex product of GUE, a Haar-rotated two-valued diagonal,
// and a real model (GOE squared plus a real Wishart matrix) in real arithmetic.
TEST(KrylovPath, ExtremesEqualLapackOnTheSameMatricesForHundredTrials) {
  const struct {
    std::vector<std::string> d;
    const char* e;
  } models[] = {{{"X1=gue", "X2=gue"}, "X1 X2 + X2 X1"},
                {{"B=diagonal:atoms=1@0.3,-1@0.7", "U=haar_unitary"}, "B + U B U^*"},
                {{"Y=goe", "W=wishart_real:ratio=0.5"}, "Y^2 + W"}};
  const Eigen::Index n = 120;
  for (const auto& mdl : models) {
    model::Model m = make(mdl.d, mdl.e);
    m.path = model::PathRequest::krylov;
    const model::SizeRunner runner(m, n);
    ASSERT_EQ(runner.path(), model::Path::krylov);
    auto obs = observe::start_observations(extremes_config(runner));
    for (std::uint64_t t = 0; t < 100; ++t) {
      runner.observe_trial(obs, kSeed, t);
      const auto& row = obs.trials.back();
      ASSERT_FALSE(row.failed) << mdl.e << " trial " << t << ": " << row.reason;
      const model::TrialOutcome lapack = runner.run(kSeed, t);  // the same samples, formed
      ASSERT_FALSE(lapack.failed);
      const double lo = lapack.spectrum.minCoeff(), hi = lapack.spectrum.maxCoeff();
      const double scale = std::max(std::abs(lo), std::abs(hi));
      const double allowed = 10 * m.krylov_tolerance * scale + n * kEps * scale;
      EXPECT_LE(std::abs(row.min - lo), allowed) << mdl.e << " trial " << t;
      EXPECT_LE(std::abs(row.max - hi), allowed) << mdl.e << " trial " << t;
      EXPECT_EQ(row.norm, std::max(std::abs(row.min), std::abs(row.max)));
      EXPECT_GE(row.certificate.iterations, 1.0);
      EXPECT_LE(std::abs(row.max - hi), row.certificate.residual_max + n * kEps * scale);
      EXPECT_LE(row.certificate.estimate_min, 10 * m.krylov_tolerance * scale);
    }
  }
}

// observe.extremes_tolerance reaches the path: a looser tolerance stops earlier, and its extremes
// stay within its own bound of LAPACK's (the same rule as above with tol = 1e-8).
TEST(KrylovPath, LooserToleranceStopsEarlierWithinItsBound) {
  model::Model tight = make({"X1=gue", "X2=gue"}, "X1 X2 + X2 X1");
  tight.path = model::PathRequest::krylov;
  model::Model loose = tight;
  loose.krylov_tolerance = 1e-8;
  const Eigen::Index n = 150;
  const model::SizeRunner a(tight, n), b(loose, n);
  auto oa = observe::start_observations(extremes_config(a));
  auto ob = observe::start_observations(extremes_config(b));
  double steps_tight = 0, steps_loose = 0;
  for (std::uint64_t t = 0; t < 20; ++t) {
    a.observe_trial(oa, kSeed, t);
    b.observe_trial(ob, kSeed, t);
    const auto& ra = oa.trials.back();
    const auto& rb = ob.trials.back();
    ASSERT_FALSE(ra.failed || rb.failed) << "trial " << t;
    steps_tight += ra.certificate.iterations;
    steps_loose += rb.certificate.iterations;
    EXPECT_LE(rb.certificate.iterations, ra.certificate.iterations) << "trial " << t;
    const model::TrialOutcome lapack = b.run(kSeed, t);
    const double lo = lapack.spectrum.minCoeff(), hi = lapack.spectrum.maxCoeff();
    const double scale = std::max(std::abs(lo), std::abs(hi));
    const double allowed = 10 * 1e-8 * scale + n * kEps * scale;
    EXPECT_LE(std::abs(rb.min - lo), allowed) << "trial " << t;
    EXPECT_LE(std::abs(rb.max - hi), allowed) << "trial " << t;
  }
  EXPECT_LT(steps_loose, steps_tight);
  std::printf("mean steps at N = %ld: %.1f (1e-12), %.1f (1e-8)\n", static_cast<long>(n),
              steps_tight / 20, steps_loose / 20);
}

TEST(KrylovPath, TrialsAreReproducibleBitForBit) {
  model::Model m = make({"X1=gue", "X2=gue"}, "X1 X2 + X2 X1");
  m.path = model::PathRequest::krylov;
  const model::SizeRunner a(m, 80), b(m, 80);
  auto oa = observe::start_observations(extremes_config(a));
  auto ob = observe::start_observations(extremes_config(b));
  for (std::uint64_t t : {0u, 1u, 2u}) a.observe_trial(oa, kSeed, t);
  for (std::uint64_t t : {2u, 0u, 1u}) b.observe_trial(ob, kSeed, t);
  for (std::size_t i = 0; i < 3; ++i) {
    EXPECT_EQ(oa.trials[i].min, ob.trials[i].min);
    EXPECT_EQ(oa.trials[i].max, ob.trials[i].max);
    EXPECT_EQ(oa.trials[i].certificate.residual_max, ob.trials[i].certificate.residual_max);
  }
}

TEST(KrylovPath, TrialThatDoesNotConvergeIsAFailureWithItsReason) {
  model::Model m = make({"X1=gue", "X2=gue"}, "X1 X2 + X2 X1");
  m.path = model::PathRequest::krylov;
  m.krylov_max_steps = 6;
  const model::SizeRunner runner(m, 100);
  auto obs = observe::start_observations(extremes_config(runner));
  runner.observe_trial(obs, kSeed, 0);
  ASSERT_EQ(obs.trials.size(), 1u);
  const auto& row = obs.trials.front();
  EXPECT_TRUE(row.failed);
  EXPECT_EQ(row.reason.rfind("Lanczos did not converge in 6 steps (error estimates ", 0), 0u)
      << row.reason;
  EXPECT_EQ(row.certificate.iterations, 6.0);
  EXPECT_EQ(observe::summarize(obs).failed, 1);
}

TEST(KrylovPath, ChosenByPredictedCostAndOnlyForExtremesOfSelfAdjointExpressions) {
  const model::Model m = make({"X1=gue", "X2=gue"}, "X1 X2 + X2 X1");
  // Predicted (docs/performance.md §5c): at N = 100 the dense trial is cheaper (2.5 ms against
  // 3.2 ms); at N = 3000 about 108 Lanczos steps of 4 half-matrix products (4.2 s) beat forming
  // and diagonalising the matrix (11.9 s).
  EXPECT_EQ(model::SizeRunner(m, 100).path(), model::Path::dense);
  const model::SizeRunner big(m, 3000);
  EXPECT_EQ(big.path(), model::Path::krylov);
  EXPECT_NE(big.explain().find("path: krylov (Lanczos"), std::string::npos) << big.explain();
  EXPECT_NE(big.explain().find("predicted CPU per trial: dense "), std::string::npos);

  model::Model all = m;
  all.extremes_only = false;
  EXPECT_EQ(model::SizeRunner(all, 3000).path(), model::Path::dense);
  all.path = model::PathRequest::krylov;
  try {
    model::SizeRunner refused(all, 100);
    ADD_FAILURE() << "krylov forced without extremes_only was accepted";
  } catch (const InputError& e) {
    EXPECT_EQ(std::string(e.what()),
              "path = \"krylov\" does not apply to this model: the krylov path finds only the "
              "smallest and largest eigenvalue (or singular value), so it needs "
              "observe.extremes_only = true and dense samples of every matrix; remove path or "
              "set it to \"auto\" or \"dense\"");
  }
  // Singular values: only when forced (the smallest can need many steps), never chosen.
  model::Model singular = make({"X1=gue", "X2=gue"}, "X1 X2");
  EXPECT_EQ(model::SizeRunner(singular, 3000).path(), model::Path::dense);
  singular.path = model::PathRequest::krylov;
  EXPECT_EQ(model::SizeRunner(singular, 100).path(), model::Path::krylov);
}

// Singular values by Lanczos on P^*P (forced): σ_max and σ_min equal LAPACK's on the same
// samples. An error e in λ = σ² moves σ by at most e/σ, so the eigenvalue rule above becomes
// |σ − s| ≤ (10·tol + N·eps)·σ_max²/σ for each extreme σ.
TEST(KrylovPath, SingularValuesEqualLapackWhenForced) {
  const struct {
    std::vector<std::string> d;
    const char* e;
  } models[] = {{{"X1=gue", "X2=gue"}, "X1 X2 + 5"},
                {{"Y1=goe", "Y2=goe"}, "Y1 Y2 + 5"},
                {{"G=ginibre_complex", "X=gue"}, "G X + 3"}};
  const Eigen::Index n = 100;
  for (const auto& mdl : models) {
    model::Model m = make(mdl.d, mdl.e);
    m.path = model::PathRequest::krylov;
    const model::SizeRunner runner(m, n);
    ASSERT_EQ(runner.path(), model::Path::krylov);
    ASSERT_EQ(runner.spectrum_kind(), observe::SpectrumKind::singular_values) << mdl.e;
    EXPECT_NE(runner.explain().find("singular value (Lanczos on P^*P"), std::string::npos);
    auto obs = observe::start_observations(extremes_config(runner));
    for (std::uint64_t t = 0; t < 30; ++t) {
      runner.observe_trial(obs, kSeed, t);
      const auto& row = obs.trials.back();
      ASSERT_FALSE(row.failed) << mdl.e << " trial " << t << ": " << row.reason;
      const model::TrialOutcome lapack = runner.run(kSeed, t);
      ASSERT_FALSE(lapack.failed);
      const double lo = lapack.spectrum.minCoeff(), hi = lapack.spectrum.maxCoeff();
      const double rule = (10 * m.krylov_tolerance + n * kEps) * hi * hi;
      EXPECT_LE(std::abs(row.max - hi), rule / hi) << mdl.e << " trial " << t;
      EXPECT_LE(std::abs(row.min - lo), rule / lo) << mdl.e << " trial " << t;
      EXPECT_EQ(row.norm, row.max);
      EXPECT_LE(std::abs(row.max - hi), row.certificate.residual_max + n * kEps * hi);
      EXPECT_LE(std::abs(row.min - lo), row.certificate.residual_min + n * kEps * hi * hi / lo);
    }
  }
}

}  // namespace
