// Whole trials (sample → expression → spectrum → observations) against published limit moments
// and exact finite-N values; failure handling; command-line declarations.
// Check values: docs/check-values.md (cited as "ref §x.y"), which gives each one's source.
#include <gtest/gtest.h>

#include <cmath>
#include <limits>
#include <string>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/model.hpp"
#include "freegap/observe.hpp"
#include "refusal.hpp"

namespace {

using namespace freegap;
using model::parse_declaration;

constexpr std::uint64_t kSeed = 31415;

observe::Summary run_model(const model::Model& m, Eigen::Index n, int trials, int kmax) {
  model::SizeRunner runner(m, n);
  observe::ObserveConfig config;
  config.bin_edges = observe::uniform_edges(-4, 4, 80);
  config.max_moment = kmax;
  config.kind = runner.spectrum_kind();
  auto obs = observe::start_observations(config);
  for (int t = 0; t < trials; ++t) model::record(obs, runner.run(kSeed, t));
  return observe::summarize(obs);
}

model::Model make(std::vector<std::string> declarations, std::string expression) {
  model::Model m;
  for (const auto& d : declarations) m.matrices.push_back(parse_declaration(d));
  m.expression = std::move(expression);
  return m;
}

// B + U B U^* with B = diag(±1) half and half, U Haar unitary: the limit is Bernoulli ⊞ Bernoulli =
// arcsine law on [−2, 2], even moments C(2k, k) = 2, 6, 20 (Nica & Speicher 2006, free convolution
// of Bernoulli laws, from memory; ref §1.3). Haar-unitary corrections are O(1/N^2)
// (Collins 2003, from memory; ref §2.5, §3.3), below 1e-3 at N = 200, far under the
// tolerance: 5 standard errors of 60 trials. Odd moments vanish by symmetry.
TEST(ModelLimits, FreeSumOfTwoBernoulliIsArcsine) {
  const auto s = run_model(make({"B=diagonal:atoms=1@0.5,-1@0.5", "U=haar_unitary"}, "B + U B U^*"),
                           200, 60, 6);
  EXPECT_EQ(s.failed, 0);
  const double limit[] = {1, 0, 2, 0, 6, 0, 20};
  for (int k = 1; k <= 6; ++k) {
    EXPECT_NEAR(s.moments[k].mean, limit[k], 5 * s.moments[k].standard_error + 1e-3) << "k=" << k;
  }
  EXPECT_LE(s.largest, 2.0 + 1e-9);  // ‖B + UBU^*‖ ≤ ‖B‖ + ‖UBU^*‖ = 2 exactly
}

// X1 X2 + X2 X1 with independent GUE: E tr P^2 = 2 + 2/N^2 exactly (Wick count: E tr X1^2 X2^2 = 1,
// E tr X1 X2 X1 X2 = 1/N^2; derived here). 20000 trials at N = 4, 5 standard errors.
TEST(ModelLimits, AnticommutatorExactSecondMoment) {
  const auto s = run_model(make({"X1=gue", "X2=gue"}, "X1 X2 + X2 X1"), 4, 20000, 2);
  EXPECT_NEAR(s.moments[2].mean, 2.0 + 2.0 / 16, 5 * s.moments[2].standard_error);
}

// Limit moments of the anticommutator of free semicirculars: 2, 10, 66 (ref §1.8, computed
// there by Schwinger–Dyson word counting; law studied by Nica & Speicher 1998, "Commutators of free
// random variables"). GUE corrections are O(1/N^2) (genus expansion, Harer & Zagier 1986), under
// 0.02 for m_6 at N = 200 (bounded here by the N = 4 → 200 behaviour of m_2: 2/N^2); tolerance
// 5 standard errors of 60 trials plus 0.02.
TEST(ModelLimits, AnticommutatorLimitMoments) {
  const auto s = run_model(make({"X1=gue", "X2=gue"}, "X1 X2 + X2 X1"), 200, 60, 6);
  const double limit[] = {1, 0, 2, 0, 10, 0, 66};
  for (int k = 2; k <= 6; k += 2) {
    EXPECT_NEAR(s.moments[k].mean, limit[k], 5 * s.moments[k].standard_error + 0.02) << "k=" << k;
  }
}

// A B A with A GUE and B = diag(±1): limit moments 1, 3, 12 for k = 2, 4, 6 (ternary numbers
// C(3k,k)/(2k+1); ref §1.6, derived there from the free multiplicative formula of
// Nica & Speicher 2006). 60 trials at N = 200; tolerance 5 standard errors plus 0.02 for the
// O(1/N^2) correction.
TEST(ModelLimits, GueSandwichOfBernoulli) {
  const auto s =
      run_model(make({"A=gue", "B=diagonal:atoms=1@0.5,-1@0.5"}, "A B A"), 200, 60, 6);
  const double limit[] = {1, 0, 1, 0, 3, 0, 12};
  for (int k = 2; k <= 6; k += 2) {
    EXPECT_NEAR(s.moments[k].mean, limit[k], 5 * s.moments[k].standard_error + 0.02) << "k=" << k;
  }
}

// Complex Wishart through a rectangular Ginibre: G G^* with G = Z/√M is X X^*/M exactly, so
// E tr(G G^*)^2 = 1 + c for every N (ref §2.3). 20000 trials, N = 4, c = 1/2, 5 SE.
TEST(ModelLimits, RectangularGinibreGramIsWishart) {
  const auto s = run_model(make({"G=ginibre_complex:ratio=0.5"}, "G G^*"), 4, 20000, 2);
  EXPECT_NEAR(s.moments[1].mean, 1.0, 5 * s.moments[1].standard_error);
  EXPECT_NEAR(s.moments[2].mean, 1.5, 5 * s.moments[2].standard_error);
}

// A non-self-adjoint expression gets singular values; ‖A B‖ ≤ ‖A‖‖B‖ (elementary).
TEST(ModelTrials, NonSelfAdjointGetsSingularValues) {
  model::SizeRunner runner(make({"A=gue", "B=diagonal:atoms=2@0.5,-1@0.5"}, "A B"), 50);
  EXPECT_EQ(runner.spectrum_kind(), observe::SpectrumKind::singular_values);
  const auto out = runner.run(kSeed, 0);
  ASSERT_FALSE(out.failed);
  EXPECT_EQ(out.spectrum.size(), 50);
  EXPECT_GE(out.spectrum.minCoeff(), 0.0);
}

TEST(ModelTrials, NanInEvaluationFailsOnlyThatTrial) {
  model::SizeRunner runner(make({"X1=gue", "X2=gue"}, "X1 X2 + X2 X1"), 30);
  observe::ObserveConfig config;
  config.bin_edges = observe::uniform_edges(-4, 4, 16);
  config.max_moment = 4;
  auto with_bad = observe::start_observations(config), without = observe::start_observations(config);
  for (std::uint64_t t = 0; t < 5; ++t) {
    auto samples = runner.draw(kSeed, t);
    if (t == 2) samples[0].complex(3, 4) = std::numeric_limits<double>::quiet_NaN();
    const auto outcome = runner.spectrum_of(t, samples);
    model::record(with_bad, outcome);
    if (t != 2) model::record(without, outcome);
  }
  const auto a = observe::summarize(with_bad), b = observe::summarize(without);
  EXPECT_EQ(a.failed, 1);
  ASSERT_EQ(a.failure_reasons.size(), 1u);
  EXPECT_EQ(a.failure_reasons[0].first, "non-finite entry in the evaluated matrix");
  EXPECT_EQ(with_bad.histogram, without.histogram);
  for (int k = 0; k <= 4; ++k) EXPECT_EQ(a.moments[k].mean, b.moments[k].mean);
}

// Same key, same numbers: a trial is a pure function of (seed, names, N, trial).
TEST(ModelTrials, TrialsAreReproducible) {
  const auto m = make({"B=diagonal:atoms=1@0.5,-1@0.5", "U=haar_unitary"}, "B + U B U^*");
  model::SizeRunner a(m, 40), b(m, 40);
  EXPECT_EQ(a.run(kSeed, 3).spectrum, b.run(kSeed, 3).spectrum);
  EXPECT_NE(a.run(kSeed, 3).spectrum, a.run(kSeed, 4).spectrum);
}

std::string declaration_error(const std::string& text) {
  try {
    parse_declaration(text);
  } catch (const InputError& e) {
    return e.what();
  }
  return "(accepted)";
}

TEST(Declarations, ParsesEveryForm) {
  const auto w = parse_declaration("W=wishart_complex:ratio=0.25");
  EXPECT_EQ(w.kind, declarations::Kind::wishart_complex);
  EXPECT_EQ(w.ratio, 0.25);
  EXPECT_EQ(parse_declaration("U=haar_unitary:method=polar").haar, declarations::HaarMethod::polar);
  const auto b = parse_declaration("B=diagonal:atoms=1@0.25,-1@0.75");
  ASSERT_EQ(b.diagonal.atoms.size(), 2u);
  EXPECT_EQ(b.diagonal.atoms[1].value, -1.0);
  EXPECT_EQ(b.diagonal.atoms[1].weight, 0.75);
  const auto d = parse_declaration("D=diagonal:law=uniform:low=-1:high=2");
  EXPECT_EQ(d.diagonal.kind, declarations::DiagonalLawKind::uniform);
  EXPECT_EQ(d.diagonal.high, 2.0);
}

TEST(Declarations, BadDeclarationsHaveExactMessages) {
  EXPECT_EQ(declaration_error("gue"), "matrix declaration 'gue': expected NAME=ENSEMBLE, e.g. X1=gue");
  EXPECT_EQ(declaration_error("1X=gue"),
            "matrix declaration '1X=gue': a name is a letter followed by letters, digits or '_'");
  EXPECT_EQ(declaration_error("X=wigner"),
            "unknown ensemble 'wigner' (known: gue, goe, wigner_rademacher, wishart_complex, "
            "wishart_real, ginibre_complex, ginibre_real, haar_unitary, haar_orthogonal, diagonal, beta_hermite, beta_laguerre, toeplitz, file, jacobi)");
  EXPECT_EQ(declaration_error("W=wishart_real:ratio=half"),
            "matrix declaration 'W=wishart_real:ratio=half': ratio must be a number (got 'half')");
  EXPECT_EQ(declaration_error("X=gue:ratio=2"),
            "matrix declaration 'X=gue:ratio=2': key 'ratio' does not apply to gue");
  EXPECT_EQ(declaration_error("U=haar_unitary:method=svd"),
            "matrix declaration 'U=haar_unitary:method=svd': method must be qr or polar (got 'svd')");
  EXPECT_EQ(declaration_error("B=diagonal"),
            "matrix declaration 'B=diagonal': a diagonal needs atoms=value@weight,... or law=...");
  EXPECT_EQ(declaration_error("B=diagonal:atoms=1:0.5"),
            "matrix declaration 'B=diagonal:atoms=1:0.5': atoms are value@weight pairs separated by "
            "',' (got '1')");
}

}  // namespace

namespace {

model::Model lone(const std::string& declaration, std::int64_t bins) {
  model::Model m;
  m.matrices = {parse_declaration(declaration)};
  m.expression = "X";
  m.bins = bins;
  return m;
}

}  // namespace

TEST(PathChoice, CheaperPathByPredictedCost) {
  // Measured on the development machine (docs/performance.md §5b): a lone GUE at N = 40 with
  // 40,000 bins took 0.86 ms per trial by Sturm counts and 0.14 ms dense; with 100 bins
  // 0.018 ms against 0.15 ms; at N = 2000 the dense trial is thousands of times slower.
  const model::SizeRunner many_bins(lone("X=gue", 40000), 40);
  EXPECT_EQ(many_bins.path(), model::Path::dense);
  EXPECT_EQ(many_bins.path_choice(), "the cheaper of the two that apply, by predicted cost per trial");
  EXPECT_NE(many_bins.explain().find("predicted CPU per trial: tridiagonal "), std::string::npos)
      << many_bins.explain();
  const model::SizeRunner few_bins(lone("X=gue", 100), 40);
  EXPECT_EQ(few_bins.path(), model::Path::tridiagonal);
  EXPECT_EQ(model::SizeRunner(lone("X=goe", 40000), 2000).path(), model::Path::tridiagonal);
  // The prediction orders the measured pairs the same way at N = 10 … 400 (the table of §5b).
  auto m = lone("X=gue", 100);
  const double tri40 = model::predicted_trial_seconds(model::Path::tridiagonal, 40, m, true, 0);
  const double dense40 = model::predicted_trial_seconds(model::Path::dense, 40, m, true, 0);
  EXPECT_LT(tri40, dense40);
  m.bins = 40000;
  EXPECT_GT(model::predicted_trial_seconds(model::Path::tridiagonal, 100, m, true, 0),
            model::predicted_trial_seconds(model::Path::dense, 100, m, true, 0));
  EXPECT_LT(model::predicted_trial_seconds(model::Path::tridiagonal, 400, m, true, 0),
            model::predicted_trial_seconds(model::Path::dense, 400, m, true, 0));
  // Kept spectra cost the tridiagonal path dsterf's O(N²) for each kept trial.
  m.kept_share = 1.0;
  EXPECT_GT(model::predicted_trial_seconds(model::Path::tridiagonal, 400, m, true, 0),
            model::predicted_trial_seconds(model::Path::tridiagonal, 400, lone("X=gue", 40000),
                                           true, 0));
}

TEST(PathChoice, JobCanForceAnyPathThatApplies) {
  auto m = lone("X=gue", 40000);
  m.path = model::PathRequest::tridiagonal;
  const model::SizeRunner forced(m, 40);
  EXPECT_EQ(forced.path(), model::Path::tridiagonal);
  EXPECT_EQ(forced.path_choice(), "forced by the job");
  m = lone("X=gue", 100);
  m.path = model::PathRequest::dense;
  EXPECT_EQ(model::SizeRunner(m, 400).path(), model::Path::dense);
  m.path = model::PathRequest::two_projection;
  EXPECT_EQ(freegap::testing::refusal([&] { model::SizeRunner(m, 40); }),
            "path = \"two_projection\" does not apply to this model: the two_projection path "
            "computes a·B + b·U B U^* (+ c) of a two-valued diagonal B and a Haar U, with "
            "eigenvalues observed; remove path or set it to \"auto\" or \"dense\"");
  model::Model two;
  two.matrices = {parse_declaration("B=diagonal:atoms=1@0.5,-1@0.5"),
                  parse_declaration("U=haar_unitary")};
  two.expression = "B + U B U^*";
  two.bins = 400;
  EXPECT_EQ(model::SizeRunner(two, 200).path(), model::Path::two_projection);
  two.path = model::PathRequest::tridiagonal;
  EXPECT_THROW(model::SizeRunner(two, 200), InputError);
  two.path = model::PathRequest::dense;
  EXPECT_EQ(model::SizeRunner(two, 200).path(), model::Path::dense);
  // A β-ensemble has no dense sampler: never dense, and forcing it is refused.
  auto beta = lone("X=beta_hermite:beta=4", 40000);
  EXPECT_EQ(model::SizeRunner(beta, 10).path(), model::Path::tridiagonal);
  beta.path = model::PathRequest::dense;
  EXPECT_THROW(model::SizeRunner(beta, 10), InputError);
}

TEST(SamplerChanges, NameTheMatricesDrawnOtherwiseThanInFormat13) {
  // The run file's /metadata sampler_changes (format 1.4): a Haar matrix drawn by the columns
  // its conjugations read is named; drawn whole, as before 1.4, it is not; the O(N) paths sample
  // no matrices.
  model::Model m;
  m.matrices = {parse_declaration("B=diagonal:atoms=1@0.5,-1@0.3,0@0.2"),
                parse_declaration("U=haar_unitary")};
  m.expression = "B + U B U^*";
  EXPECT_EQ(model::SizeRunner(m, 10).sampler_changes(),
            "U: only the columns its conjugations read, by Cholesky QR (2r ≤ N) or a thin QR");
  m.full_haar = true;
  EXPECT_EQ(model::SizeRunner(m, 10).sampler_changes(), "");
  EXPECT_EQ(model::SizeRunner(lone("X=gue", 100), 400).sampler_changes(), "");
  // The polar factor of a whole Ginibre matrix is computed otherwise since 1.4 (linalg).
  m.matrices[1] = parse_declaration("U=haar_unitary:method=polar");
  EXPECT_EQ(model::SizeRunner(m, 10).sampler_changes(),
            "U: polar factor by a scaled Newton step and an eigendecomposition (polar:newton-eig)");
}
