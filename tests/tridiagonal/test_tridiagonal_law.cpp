// Tridiagonal models against the dense samplers (same law) and against exact finite-N moments.
// Fixed seeds; tolerances are a stated multiple of the standard error of a stated sample size.
#include <gtest/gtest.h>

#include <cmath>
#include <string>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/linalg.hpp"
#include "freegap/tridiagonal.hpp"
#include "stat_helpers.hpp"

namespace {

namespace tri = freegap::tridiagonal;
namespace ens = freegap::ensembles;
namespace linalg = freegap::linalg;
using freegap::testing::mean_se;
using freegap::testing::MeanSe;

constexpr std::uint64_t kSeed = 20261203;

tri::ModelSpec model(tri::Family family, double beta, double ratio = 1.0) {
  tri::ModelSpec s;
  s.family = family;
  s.beta = beta;
  s.ratio = ratio;
  s.name = "X";
  return s;
}

ens::MatrixSpec dense(ens::Kind kind, double ratio = 1.0) {
  ens::MatrixSpec s;
  s.name = "X";
  s.kind = kind;
  s.ratio = ratio;
  return s;
}

Eigen::VectorXd dense_spectrum(ens::Sample s) {
  if (s.storage == ens::Sample::Storage::complex_dense) return linalg::eigenvalues(s.complex);
  return linalg::eigenvalues(s.real);
}

// ---- same law as the dense samplers: two-sample Kolmogorov–Smirnov ------------------------------

struct LawCase {
  const char* label;
  tri::ModelSpec model;
  ens::MatrixSpec dense;
  double bulk_point;  ///< statistic 2: #{λ < bulk_point}
};

// Two-sample KS (common practice) on the largest eigenvalue and on a bulk eigenvalue count, at
// N = 100 with 1500 trials on each side, level 0.001 (critical value 1.949·√(2/1500) = 0.071;
// stat_helpers.hpp). Power: a normalisation off by the factor √(1 + 1/N) (the GOE diagonal-
// variance convention) moves λ_max by ≈ 0.01 ≈ 0.25 of its standard deviation at N = 100, a KS
// distance of ≈ 0.1, so the test would catch it. The count statistic is integer-valued; the KS
// test with ties is conservative, which only lowers the false-alarm rate.
// Models: Dumitriu & Edelman (2002), docs/check-values.md §4f; dense
// conventions §0.
TEST(TridiagonalLaw, MatchesDenseSamplersKolmogorovSmirnov) {
  const LawCase cases[] = {
      {"GUE (beta 2)", model(tri::Family::hermite, 2.0), dense(ens::Kind::gue), 0.5},
      {"GOE (beta 1)", model(tri::Family::hermite, 1.0), dense(ens::Kind::goe), 0.5},
      {"complex Wishart c=1/2", model(tri::Family::laguerre, 2.0, 0.5),
       dense(ens::Kind::wishart_complex, 0.5), 1.0},
      {"real Wishart c=1/2", model(tri::Family::laguerre, 1.0, 0.5),
       dense(ens::Kind::wishart_real, 0.5), 1.0},
      {"complex Wishart c=2", model(tri::Family::laguerre, 2.0, 2.0),
       dense(ens::Kind::wishart_complex, 2.0), 1.0},
  };
  constexpr int kTrials = 1500;
  constexpr Eigen::Index n = 100;
  const double critical = freegap::testing::ks_two_sample_critical_001(kTrials, kTrials);
  for (const auto& c : cases) {
    const ens::Sampler sampler(c.dense);
    std::vector<double> dense_max, dense_count, tri_max, tri_count;
    for (int t = 0; t < kTrials; ++t) {
      const Eigen::VectorXd lambda = dense_spectrum(sampler.draw(n, kSeed, t));
      dense_max.push_back(lambda.maxCoeff());
      dense_count.push_back(static_cast<double>((lambda.array() < c.bulk_point).count()));
      // A different trial range, so the two sides share no stream keys at all.
      const auto m = tri::sample(c.model, n, kSeed, kTrials + t);
      tri_max.push_back(tri::largest(m, 1e-12));
      tri_count.push_back(
          static_cast<double>(tri::counts_below(m, std::vector<double>{c.bulk_point})[0]));
    }
    EXPECT_LT(freegap::testing::ks_two_sample(dense_max, tri_max), critical)
        << c.label << ": largest eigenvalue";
    EXPECT_LT(freegap::testing::ks_two_sample(dense_count, tri_count), critical)
        << c.label << ": #{lambda < " << c.bulk_point << "}";
  }
}

// ---- exact finite-N moments ---------------------------------------------------------------------

std::vector<MeanSe> moments(const tri::ModelSpec& spec, Eigen::Index n, int trials, int kmax) {
  std::vector<std::vector<double>> per_k(static_cast<std::size_t>(kmax) + 1,
                                         std::vector<double>(static_cast<std::size_t>(trials)));
  for (int t = 0; t < trials; ++t) {
    const auto m = tri::moments(tri::sample(spec, n, kSeed, t), kmax);
    for (int k = 0; k <= kmax; ++k) {
      per_k[static_cast<std::size_t>(k)][static_cast<std::size_t>(t)] =
          m[static_cast<std::size_t>(k)];
    }
  }
  std::vector<MeanSe> out;
  for (const auto& v : per_k) out.push_back(mean_se(v));
  return out;
}

void expect_moments(const std::vector<MeanSe>& m, const std::vector<double>& exact,
                    const std::string& label) {
  for (std::size_t k = 1; k < exact.size(); ++k) {
    if (m[k].se == 0.0) {
      EXPECT_DOUBLE_EQ(m[k].mean, exact[k]) << label << " k=" << k;
    } else {
      EXPECT_NEAR(m[k].mean, exact[k], 5 * m[k].se) << label << " k=" << k;
    }
  }
}

// Source: Harer & Zagier (1986), "The Euler characteristic of the moduli space of curves" (exact
// form from memory); normalised values tabulated in docs/check-values.md
// §2.1 (N = 5: 1, 51/25, 27/5, 10521/625; N = 2: 1, 9/4, 15/2, 525/16). Odd moments vanish.
// 20000 trials, tolerance 5 standard errors.
TEST(TridiagonalMoments, HermiteBeta2MatchesHarerZagier) {
  const auto m5 = moments(model(tri::Family::hermite, 2.0), 5, 20000, 8);
  expect_moments(m5, {1, 0, 1.0, 0, 51.0 / 25, 0, 27.0 / 5, 0, 10521.0 / 625}, "GUE N=5");
  const auto m2 = moments(model(tri::Family::hermite, 2.0), 2, 20000, 8);
  expect_moments(m2, {1, 0, 1.0, 0, 9.0 / 4, 0, 15.0 / 2, 0, 525.0 / 16}, "GUE N=2");
}

// Source: exact GOE moments (diagonal variance 2), Wick enumeration tabulated in
// docs/check-values.md §2.2 (E Tr H^4 = 2N^3 + 5N^2 + 5N, Goulden & Jackson 1997, from
// memory; recursion of Ledoux 2009). N = 5: 6/5, 16/5, 1476/125, 33684/625; N = 10: 11/10, 51/20,
// 7761/1000. 20000 trials, 5 standard errors.
TEST(TridiagonalMoments, HermiteBeta1MatchesGoeTable) {
  const auto m5 = moments(model(tri::Family::hermite, 1.0), 5, 20000, 8);
  expect_moments(m5, {1, 0, 6.0 / 5, 0, 16.0 / 5, 0, 1476.0 / 125, 0, 33684.0 / 625}, "GOE N=5");
  const auto m10 = moments(model(tri::Family::hermite, 1.0), 10, 20000, 6);
  expect_moments(m10, {1, 0, 11.0 / 10, 0, 51.0 / 20, 0, 7761.0 / 1000}, "GOE N=10");
}

// Any β: E Tr H_β² = βN(N−1)/2 + N for Dumitriu & Edelman's H_β (docs/check-values.md §4f, checked
// there for β = 4), so E tr X² = 1 + (2/β − 1)/N after the √(2/β)/√N normalisation. β = 4 and
// β = 0.5 (non-integer χ degrees, gamma shapes below 1). 20000 trials at N = 5, 5 SE.
TEST(TridiagonalMoments, GeneralBetaSecondMoment) {
  for (const double beta : {4.0, 0.5, 2.7}) {
    const auto m = moments(model(tri::Family::hermite, beta), 5, 20000, 2);
    expect_moments(m, {1, 0, 1.0 + (2.0 / beta - 1.0) / 5.0}, "beta=" + std::to_string(beta));
  }
}

// E Tr (XX^*)^k for X N×M (docs/check-values.md §2.3; complex case Hanlon, Stanley &
// Stembridge 1992, from memory), normalised to (1/N) E Tr (XX^*/M)^k.
double wishart_moment(bool complex, double N, double M, int k) {
  double p = 0.0;
  if (complex) {
    const double polys[] = {0, 1, N + M, N * N + 3 * N * M + M * M + 1,
                            (N + M) * (N * N + 5 * N * M + M * M + 5)};
    p = polys[k];
  } else {
    const double polys[] = {0, 1, N + M + 1, N * N + 3 * N * M + M * M + 3 * N + 3 * M + 4,
                            N * N * N + 6 * N * N * M + 6 * N * M * M + M * M * M + 6 * N * N +
                                17 * N * M + 6 * M * M + 21 * N + 21 * M + 20};
    p = polys[k];
  }
  return N * M * p / (N * std::pow(M, k));
}

// Wishart tables, §2.3: c = 1/2 at N = 5 (M = 10: complex 1, 3/2, 69/25, 57/10; real 1, 8/5,
// 81/25, 189/25) and c = 2 at N = 10 (M = 5, the model with N − M exact zeros). 20000 trials, 5 SE.
TEST(TridiagonalMoments, LaguerreMatchesWishartTables) {
  EXPECT_DOUBLE_EQ(wishart_moment(true, 5, 10, 3), 69.0 / 25);  // the polynomials, against §2.3
  EXPECT_DOUBLE_EQ(wishart_moment(false, 5, 10, 4), 189.0 / 25);
  for (const bool complex : {true, false}) {
    for (const auto& [n, ratio] :
         {std::pair{Eigen::Index{5}, 0.5}, std::pair{Eigen::Index{10}, 2.0}}) {
      const double N = static_cast<double>(n), M = N / ratio;
      const auto m = moments(model(tri::Family::laguerre, complex ? 2.0 : 1.0, ratio), n, 20000, 4);
      std::vector<double> exact(5);
      for (int k = 1; k <= 4; ++k)
        exact[static_cast<std::size_t>(k)] = wishart_moment(complex, N, M, k);
      expect_moments(m, exact,
                     std::string(complex ? "complex" : "real") + " N=" + std::to_string(n) +
                         " c=" + std::to_string(ratio));
    }
  }
}

// General β-Laguerre: E tr W = 1 and E tr W² = 1 + c + (2/β − 1)/M, derived here from the model
// (E χ²_k = k, E χ⁴_k = k² + 2k, summed over the bidiagonal entries); it reduces to the §2.3 values
// 1 + c + 1/M (real) and 1 + c (complex). β = 4 and 0.5, c = 1/2 and 3, N = 6. 20000 trials, 5 SE.
TEST(TridiagonalMoments, GeneralBetaLaguerreFirstTwoMoments) {
  for (const double beta : {4.0, 0.5}) {
    for (const double ratio : {0.5, 3.0}) {
      const Eigen::Index n = 6;
      const double M = static_cast<double>(ens::companion_size(n, ratio));
      const double c = 6.0 / M;
      const auto m = moments(model(tri::Family::laguerre, beta, ratio), n, 20000, 2);
      expect_moments(m, {1, 1.0, 1.0 + c + (2.0 / beta - 1.0) / M},
                     "beta=" + std::to_string(beta) + " c=" + std::to_string(ratio));
    }
  }
}

}  // namespace
