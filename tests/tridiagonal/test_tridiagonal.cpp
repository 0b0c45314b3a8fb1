// Tridiagonal models: deterministic checks of the Sturm counts, bisection, moments and the trial
// observation against LAPACK on the same matrix, plus the gamma/chi sampler against closed-form
// laws. Stochastic checks use fixed seeds and tolerances of a stated number of standard errors.
#include <gtest/gtest.h>
#include <lapacke.h>

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <functional>
#include <limits>
#include <numbers>
#include <string>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/errors.hpp"
#include "freegap/observe.hpp"
#include "freegap/rng.hpp"
#include "freegap/tridiagonal.hpp"
#include "stat_helpers.hpp"

namespace {

namespace tri = freegap::tridiagonal;
namespace obs = freegap::observe;
using freegap::InputError;
using freegap::testing::mean_se;

constexpr std::uint64_t kSeed = 20261202;

tri::ModelSpec hermite(double beta, const std::string& name = "X") {
  tri::ModelSpec s;
  s.family = tri::Family::hermite;
  s.beta = beta;
  s.name = name;
  return s;
}

tri::ModelSpec laguerre(double beta, double ratio, const std::string& name = "W") {
  tri::ModelSpec s;
  s.family = tri::Family::laguerre;
  s.beta = beta;
  s.ratio = ratio;
  s.name = name;
  return s;
}

// All eigenvalues of the same tridiagonal matrix by LAPACK dsterf (the reference).
std::vector<double> dsterf(const tri::Tridiagonal& t) {
  std::vector<double> d(t.diag.data(), t.diag.data() + t.diag.size());
  std::vector<double> e(t.off.data(), t.off.data() + t.off.size());
  e.push_back(0.0);
  const lapack_int info = LAPACKE_dsterf(static_cast<lapack_int>(d.size()), d.data(), e.data());
  EXPECT_EQ(info, 0);
  return d;
}

tri::Tridiagonal make(std::vector<double> d, std::vector<double> e) {
  tri::Tridiagonal t;
  t.diag = Eigen::Map<Eigen::VectorXd>(d.data(), static_cast<Eigen::Index>(d.size()));
  t.off = Eigen::Map<Eigen::VectorXd>(e.data(), static_cast<Eigen::Index>(e.size()));
  return t;
}

template <class F>
void expect_throw_msg(F&& f, const std::string& message) {
  try {
    f();
    ADD_FAILURE() << "expected InputError: " << message;
  } catch (const InputError& e) {
    EXPECT_EQ(std::string(e.what()), message);
  }
}

// ---- input checks -----------------------------------------------------------------------------

TEST(TridiagonalInput, RefusesBadParametersWithExactMessages) {
  expect_throw_msg([] { tri::sample(hermite(0.0), 10, kSeed, 0); },
                   "tridiagonal model 'X': beta must be a finite number > 0 (got 0)");
  expect_throw_msg([] { tri::sample(laguerre(1.0, -1.0), 10, kSeed, 0); },
                   "tridiagonal model 'W': ratio c = N/M must be a finite number > 0 (got -1)");
  expect_throw_msg([] { tri::sample(hermite(2.0), 0, kSeed, 0); },
                   "tridiagonal model 'X': size N must be at least 1 (got 0)");
  expect_throw_msg([] { tri::sample(laguerre(2.0, 100.0), 10, kSeed, 0); },
                   "tridiagonal model 'W': N/ratio = 0.1 rounds to 0 columns; use a smaller "
                   "ratio or a larger N");
  const auto t = make({1.0, 2.0}, {0.5});
  expect_throw_msg([&] { tri::moments(t, 65); },
                   "tridiagonal: max_moment must be in 0..64 (got 65)");
  const double nan = std::nan("");
  expect_throw_msg([&] { tri::counts_below(t, std::vector<double>{nan}); },
                   "tridiagonal: cannot count eigenvalues below NaN");
  obs::ObserveConfig config;
  config.bin_edges = obs::uniform_edges(-1, 1, 4);
  config.kind = obs::SpectrumKind::singular_values;
  auto h = obs::empty_histogram(config);
  expect_throw_msg([&] { tri::observe_tridiagonal_trial(hermite(2.0), 10, kSeed, 0, config, h); },
                   "tridiagonal: a tridiagonal model is self-adjoint; observe its eigenvalues "
                   "(kind = eigenvalues)");
}

// ---- reproducibility ----------------------------------------------------------------------------

// docs/design.md rule 1: a trial's matrix depends only on (seed, name, N, trial).
TEST(TridiagonalSample, IsAPureFunctionOfTheStreamKey) {
  for (const auto& spec : {hermite(2.0), hermite(0.7), laguerre(1.0, 0.5), laguerre(2.0, 3.0)}) {
    const auto a = tri::sample(spec, 300, kSeed, 4);
    const auto b = tri::sample(spec, 300, kSeed, 4);
    EXPECT_EQ(a.diag, b.diag);
    EXPECT_EQ(a.off, b.off);
    const auto c = tri::sample(spec, 300, kSeed, 5);
    EXPECT_NE(a.diag, c.diag);
    const tri::ModelSpec other{spec.family, spec.beta, spec.ratio, "Y"};
    EXPECT_NE(a.diag, tri::sample(other, 300, kSeed, 4).diag);
  }
}

// Laguerre with N > M: the last N − M rows are exact, decoupled zeros (the rank of XX^* is M).
TEST(TridiagonalSample, WishartWithMoreRowsThanColumnsHasExactZeros) {
  const auto t = tri::sample(laguerre(2.0, 4.0), 1000, kSeed, 0);  // M = 250
  for (Eigen::Index i = 250; i < 1000; ++i) EXPECT_EQ(t.diag[i], 0.0);
  for (Eigen::Index i = 249; i < 999; ++i) EXPECT_EQ(t.off[i], 0.0);
  for (Eigen::Index i = 0; i < 249; ++i) EXPECT_GT(t.off[i], 0.0);
  const auto c = tri::counts_below(t, std::vector<double>{0.0, 1e-300});
  EXPECT_EQ(c[0], 0);    // nothing below 0 (positive semidefinite), zeros are not below 0
  EXPECT_EQ(c[1], 750);  // exactly N − M zeros
}

// ---- gamma / chi variates -----------------------------------------------------------------------

// χ²_k has mean k and variance 2k for any real k > 0 (common practice). 20000 draws per k,
// tolerance 5 standard errors; k = 0.5 exercises the shape < 1 branch, k = 2·10^6 the large-shape
// regime of the models' off-diagonal at N = 10^6.
TEST(GammaVariate, ChiSquareMeanAndVariance) {
  for (const double k : {0.5, 1.0, 3.7, 40.0, 2e6}) {
    freegap::rng::Stream s({kSeed, "chi", 1, static_cast<std::uint64_t>(k * 10)});
    std::vector<double> x(20000), sq(20000);
    for (std::size_t i = 0; i < x.size(); ++i) {
      x[i] = tri::chi_square_variate(s, k);
      sq[i] = (x[i] - k) * (x[i] - k);
    }
    const auto m = mean_se(x);
    const auto v = mean_se(sq);
    EXPECT_NEAR(m.mean, k, 5 * m.se) << "k=" << k;
    EXPECT_NEAR(v.mean, 2 * k, 5 * v.se) << "k=" << k;
  }
}

// Kolmogorov–Smirnov against closed-form chi-square CDFs (common practice):
// χ²_1: erf(√(x/2)); χ²_2: 1 − e^{−x/2}; χ²_3: erf(√y) − 2√(y/π)e^{−y}, y = x/2 (regularised
// incomplete gamma at half-integer shape, from memory). 5000 draws, level 0.001.
TEST(GammaVariate, ChiSquareLawKolmogorovSmirnov) {
  const auto cdf1 = [](double x) { return std::erf(std::sqrt(x / 2)); };
  const auto cdf2 = [](double x) { return 1 - std::exp(-x / 2); };
  const auto cdf3 = [](double x) {
    const double y = x / 2;
    return std::erf(std::sqrt(y)) - 2 * std::sqrt(y / std::numbers::pi) * std::exp(-y);
  };
  const std::function<double(double)> cdfs[] = {cdf1, cdf2, cdf3};
  for (int k = 1; k <= 3; ++k) {
    freegap::rng::Stream s({kSeed, "ks", 1, static_cast<std::uint64_t>(k)});
    std::vector<double> x(5000);
    for (double& v : x) v = tri::chi_square_variate(s, k);
    EXPECT_LT(freegap::testing::ks_statistic(x, cdfs[k - 1]),
              freegap::testing::ks_critical_001(5000))
        << "k=" << k;
  }
}

// ---- Sturm counts: ties and zero pivots ---------------------------------------------------------

// Exact expectations. A diagonal matrix has eigenvalues = its entries; put them on the edges.
// The rule is #{λ < x} (an eigenvalue at x is not below x), and the histogram built from counts
// must equal observe::add_counts on the same values (e_i ≤ λ < e_{i+1}).
TEST(SturmCount, TiesAtPointsFollowTheHistogramRule) {
  const auto t = make({-1.0, 0.0, 0.0, 0.5, 1.0, 1.0, 2.0}, {0, 0, 0, 0, 0, 0});
  const std::vector<double> edges = {-1.0, -0.5, 0.0, 0.5, 1.0};
  const auto c = tri::counts_below(t, edges);
  EXPECT_EQ(c, (std::vector<std::int64_t>{0, 1, 1, 3, 4}));

  obs::ObserveConfig config;
  config.bin_edges = edges;
  config.max_moment = 4;
  auto from_counts = obs::empty_histogram(config);
  tri::observe_matrix(0, t, config, from_counts, 1e-12);
  auto from_values = obs::empty_histogram(config);
  const std::vector<double> values(t.diag.data(), t.diag.data() + t.diag.size());
  obs::add_counts(values, edges, from_values);
  EXPECT_EQ(from_counts, from_values);
}

// Zero pivots: [[0,1],[1,0]] has eigenvalues ±1 exactly; at x = ±1 the second pivot is exactly 0.
// The path graph on 3 vertices has eigenvalues 0, ±√2; at x = 0 the first pivot is 0 and the
// recurrence goes through an infinite pivot. The counts are exact (common practice: Sturm
// sequences with a zero pivot replaced by a tiny positive one).
TEST(SturmCount, ZeroPivotsGiveExactCounts) {
  const auto two = make({0.0, 0.0}, {1.0});
  EXPECT_EQ(tri::counts_below(two, std::vector<double>{-1.0, 0.0, 1.0, 1.5}),
            (std::vector<std::int64_t>{0, 1, 1, 2}));
  const auto path = make({0.0, 0.0, 0.0}, {1.0, 1.0});
  EXPECT_EQ(tri::counts_below(path, std::vector<double>{-2.0, 0.0, 1e-300, 2.0}),
            (std::vector<std::int64_t>{0, 1, 2, 3}));
  const auto one = make({3.0}, {});
  EXPECT_EQ(tri::counts_below(one, std::vector<double>{3.0, std::nextafter(3.0, 4.0)}),
            (std::vector<std::int64_t>{0, 1}));
  const double inf = std::numeric_limits<double>::infinity();
  EXPECT_EQ(tri::counts_below(path, std::vector<double>{-inf, inf}),
            (std::vector<std::int64_t>{0, 3}));
}

// Entries near the ends of the double range: off² would overflow (2^900) or underflow (2^-900), so
// the counts scale the matrix by an exact power of two first. Scaling T and x by 2^s leaves the
// count unchanged (exact expectation); the extremes scale too (to the bisection tolerance).
TEST(SturmCount, HugeAndTinyEntriesCountLikeUnscaled) {
  const auto t = tri::sample(hermite(2.0), 500, kSeed, 9);
  const auto edges = obs::uniform_edges(-2.5, 2.5, 50);
  const auto reference = tri::counts_below(t, edges);
  const auto x = tri::extremes(t, 1e-12);
  for (const int s : {900, -900}) {
    const auto scaled = tri::affine(t, std::ldexp(1.0, s), 0.0);
    std::vector<double> scaled_edges(edges.size());
    for (std::size_t i = 0; i < edges.size(); ++i) scaled_edges[i] = std::ldexp(edges[i], s);
    EXPECT_EQ(tri::counts_below(scaled, scaled_edges), reference) << "2^" << s;
    const auto xs = tri::extremes(scaled, std::ldexp(1e-12, s));
    EXPECT_NEAR(std::ldexp(xs.min, -s), x.min, 2e-12) << "2^" << s;
    EXPECT_NEAR(std::ldexp(xs.max, -s), x.max, 2e-12) << "2^" << s;
  }
}

// ---- Sturm histograms = LAPACK histograms, bin by bin -------------------------------------------

obs::Histogram sturm_histogram(const tri::Tridiagonal& t, const std::vector<double>& edges) {
  obs::ObserveConfig config;
  config.bin_edges = edges;
  config.max_moment = 2;
  auto h = obs::empty_histogram(config);
  tri::observe_matrix(0, t, config, h, 1e-9);
  return h;
}

obs::Histogram lapack_histogram(const tri::Tridiagonal& t, const std::vector<double>& edges) {
  obs::Histogram h;
  h.counts.assign(edges.size() - 1, 0);
  obs::add_counts(dsterf(t), edges, h);
  return h;
}

// Exact: the counts of eigenvalues below each edge are integers, and the measured agreement
// (docs/performance.md §5: identical at N = 10^3 … 10^5) is what the method claims.
// Sizes 10^3 … 2·10^4 here (dsterf is O(N²): 4 s at 2·10^4); N = 10^5 in the long test below.
TEST(SturmHistogram, EqualsLapackHistogramBinByBin) {
  const auto semicircle_edges = obs::uniform_edges(-2.5, 2.5, 400);
  for (const Eigen::Index n : {1000, 3000, 10000, 20000}) {
    const auto t = tri::sample(hermite(2.0), n, kSeed, 1);
    EXPECT_EQ(sturm_histogram(t, semicircle_edges), lapack_histogram(t, semicircle_edges))
        << "GUE N=" << n;
  }
  for (const Eigen::Index n : {1000, 10000}) {
    const auto t = tri::sample(hermite(1.0), n, kSeed, 2);
    EXPECT_EQ(sturm_histogram(t, semicircle_edges), lapack_histogram(t, semicircle_edges))
        << "GOE N=" << n;
  }
  // Edges with 0 exactly on one of them (−1 + 8·(50/400) = 0): the N − M zero eigenvalues of a
  // c > 1 Wishart sit exactly on an edge and must land in the bin above it.
  const auto mp_edges = obs::uniform_edges(-1.0, 7.0, 400);
  ASSERT_EQ(mp_edges[50], 0.0);
  for (const auto& [spec, n] : {std::pair{laguerre(1.0, 0.5), Eigen::Index{10000}},
                                std::pair{laguerre(2.0, 2.0), Eigen::Index{10000}},
                                std::pair{laguerre(2.0, 20.0), Eigen::Index{100000}}}) {
    const auto t = tri::sample(spec, n, kSeed, 3);
    const auto h = sturm_histogram(t, mp_edges);
    EXPECT_EQ(h, lapack_histogram(t, mp_edges)) << "Laguerre c=" << spec.ratio << " N=" << n;
    if (spec.ratio > 1) {
      EXPECT_GE(h.counts[50], n - freegap::ensembles::companion_size(n, spec.ratio));
    }
  }
}

// The same comparison at N = 10^5 for GUE (β = 2). dsterf needs about 110 s for this one matrix
// (docs/performance.md §5) — the suite's longest test, kept as the issue asks for N up to 10^5;
// GOE and Laguerre are compared above at N ≤ 2·10^4 and 10^5 (c = 20).
TEST(SturmHistogram, EqualsLapackHistogramAtHundredThousand) {
  const auto edges = obs::uniform_edges(-2.5, 2.5, 400);
  const auto t = tri::sample(hermite(2.0), 100000, kSeed, 7);
  EXPECT_EQ(sturm_histogram(t, edges), lapack_histogram(t, edges));
}

// ---- extremes -----------------------------------------------------------------------------------

// Bisection against dsterf on the same matrix: within tolerance/2 plus the rounding of both
// methods (a few ulps of ‖T‖; allowance 1e-13 here, ‖T‖ ≈ 2–6).
TEST(Extremes, AgreeWithLapackWithinTheStatedTolerance) {
  for (const auto& spec :
       {hermite(2.0), hermite(1.0), hermite(4.5), laguerre(1.0, 0.25), laguerre(2.0, 3.0)}) {
    const auto t = tri::sample(spec, 2000, kSeed, 11);
    const auto lambda = dsterf(t);
    for (const double tol : {1e-4, 1e-9, 1e-13}) {
      const auto x = tri::extremes(t, tol);
      EXPECT_NEAR(x.min, lambda.front(), tol / 2 + 1e-13) << spec.name << " tol=" << tol;
      EXPECT_NEAR(x.max, lambda.back(), tol / 2 + 1e-13) << spec.name << " tol=" << tol;
      EXPECT_EQ(tri::smallest(t, tol), x.min);
      EXPECT_EQ(tri::largest(t, tol), x.max);
      EXPECT_EQ(tri::operator_norm(t, tol), std::max(-x.min, x.max));
    }
  }
  EXPECT_EQ(tri::extremes(make({3.0}, {}), 1e-12).min, 3.0);
}

// ---- moments ------------------------------------------------------------------------------------

// Independent reference for Tr T^k: for every row i, propagate v = T^j e_i on a window (plain
// loops, no blocking, no scaling, no trace identities) and read (T^k)_ii.
double trace_power_by_rows(const tri::Tridiagonal& t, int k) {
  const Eigen::Index n = t.size();
  double trace = 0.0;
  for (Eigen::Index i = 0; i < n; ++i) {
    const Eigen::Index lo = std::max<Eigen::Index>(0, i - k), hi = std::min(n, i + k + 1);
    std::vector<double> v(static_cast<std::size_t>(hi - lo), 0.0), w(v.size());
    v[static_cast<std::size_t>(i - lo)] = 1.0;
    for (int step = 0; step < k; ++step) {
      for (Eigen::Index r = lo; r < hi; ++r) {
        double s = t.diag[r] * v[static_cast<std::size_t>(r - lo)];
        if (r > lo) s += t.off[r - 1] * v[static_cast<std::size_t>(r - 1 - lo)];
        if (r + 1 < hi) s += t.off[r] * v[static_cast<std::size_t>(r + 1 - lo)];
        w[static_cast<std::size_t>(r - lo)] = s;
      }
      std::swap(v, w);
    }
    trace += v[static_cast<std::size_t>(i - lo)];
  }
  return trace;
}

// Exact: integer entries in {−2..2} make every Tr T^k an integer below 2^53, so both sides are
// exact and the moments must equal fl(Tr T^k / N) bit for bit. N = 4099 crosses the internal row
// blocks (2048) with a remainder; k up to 13 covers odd and even orders.
TEST(Moments, ExactForIntegerMatricesAcrossBlocks) {
  freegap::rng::Stream s({kSeed, "int", 4099, 0});
  const Eigen::Index n = 4099;
  tri::Tridiagonal t;
  t.diag.resize(n);
  t.off.resize(n - 1);
  for (Eigen::Index i = 0; i < n; ++i) t.diag[i] = static_cast<double>(s.next_u32() % 5) - 2.0;
  for (Eigen::Index i = 0; i + 1 < n; ++i) t.off[i] = static_cast<double>(s.next_u32() % 5) - 2.0;
  const auto m = tri::moments(t, 13);
  ASSERT_EQ(m.size(), 14u);
  EXPECT_EQ(m[0], 1.0);
  for (int k = 1; k <= 13; ++k) {
    EXPECT_EQ(m[static_cast<std::size_t>(k)], trace_power_by_rows(t, k) / static_cast<double>(n))
        << "k=" << k;
  }
  // Small sizes, including N = 1 and N smaller than K.
  for (const Eigen::Index small : {1, 2, 3, 7}) {
    tri::Tridiagonal u;
    u.diag = t.diag.head(small);
    u.off = t.off.head(small - 1);
    const auto mu = tri::moments(u, 12);
    for (int k = 1; k <= 12; ++k) {
      EXPECT_EQ(mu[static_cast<std::size_t>(k)],
                trace_power_by_rows(u, k) / static_cast<double>(small))
          << "N=" << small << " k=" << k;
    }
  }
}

// Against observe::spectral_moments of the dsterf eigenvalues of the same matrix: agreement to
// 1e-11 relative to (1/N) Σ|λ|^k (both are accurate to a few ulps of that scale; dsterf's
// eigenvalue errors, O(u‖T‖) each, set the floor). K = 30, with a scale of 1e3 on a Laguerre
// matrix to exercise the power-of-two scaling.
TEST(Moments, AgreeWithMomentsOfLapackEigenvalues) {
  for (const auto& [spec, scale] : {std::pair{hermite(2.0), 1.0}, std::pair{hermite(1.0), -1.0},
                                    std::pair{laguerre(2.0, 0.5), 1e3}}) {
    const auto t = tri::affine(tri::sample(spec, 3000, kSeed, 5), scale, 0.25);
    const auto lambda = dsterf(t);
    const auto expected = obs::spectral_moments(lambda, 30);
    const auto got = tri::moments(t, 30);
    std::vector<double> abs_lambda(lambda.size());
    for (std::size_t i = 0; i < lambda.size(); ++i) abs_lambda[i] = std::fabs(lambda[i]);
    const auto abs_moments = obs::spectral_moments(abs_lambda, 30);
    for (int k = 0; k <= 30; ++k) {
      const auto kk = static_cast<std::size_t>(k);
      EXPECT_NEAR(got[kk], expected[kk], 1e-11 * abs_moments[kk]) << spec.name << " k=" << k;
    }
  }
}

// ---- one trial, end to end ----------------------------------------------------------------------

// observe_tridiagonal_trial on P = a·T + b must give what the dense path's observe::observe_spectrum gives on the
// eigenvalues of the same P: the same histogram exactly, moments to 1e-11 of their scale, extremes
// to the bisection tolerance, and the kept spectrum (dsterf). Negative a reverses the spectrum.
TEST(ObserveTrial, MatchesTheDenseObservationOfTheSameMatrix) {
  obs::ObserveConfig config;
  config.bin_edges = obs::uniform_edges(-5.0, 5.0, 200);
  config.max_moment = 10;
  config.keep_spectrum_trials = {3};
  for (const auto& [a, b] : {std::pair{1.0, 0.0}, std::pair{-2.0, 1.0}, std::pair{0.5, -0.25}}) {
    for (const std::uint64_t trial : {2u, 3u}) {
      const auto spec = hermite(2.0);
      tri::TrialOptions options;
      options.scale = a;
      options.shift = b;
      options.extreme_tolerance = 1e-12;
      auto h_tri = obs::empty_histogram(config);
      const auto row = tri::observe_tridiagonal_trial(spec, 1500, kSeed, trial, config, h_tri, options);

      const auto p = tri::affine(tri::sample(spec, 1500, kSeed, trial), a, b);
      const auto lambda = dsterf(p);
      auto h_dense = obs::empty_histogram(config);
      const auto expected = obs::observe_spectrum(trial, lambda, config, h_dense);

      ASSERT_FALSE(row.failed) << row.reason;
      EXPECT_EQ(h_tri, h_dense) << "a=" << a << " trial=" << trial;
      EXPECT_NEAR(row.min, expected.min, 1e-12);
      EXPECT_NEAR(row.max, expected.max, 1e-12);
      EXPECT_NEAR(row.norm, expected.norm, 1e-12);
      ASSERT_EQ(row.moments.size(), expected.moments.size());
      for (std::size_t k = 0; k < row.moments.size(); ++k) {
        EXPECT_NEAR(row.moments[k], expected.moments[k],
                    1e-11 * std::pow(std::fabs(a) * 2 + std::fabs(b), static_cast<double>(k)))
            << "k=" << k;
      }
      EXPECT_EQ(row.spectrum, expected.spectrum);
    }
  }
}

// A matrix with a non-finite entry is a failed trial with a reason, and nothing is counted
// (docs/design.md rule 2); a moment that overflows double fails with the dense path's reason.
TEST(ObserveTrial, RecordsFailuresWithoutCounting) {
  obs::ObserveConfig config;
  config.bin_edges = obs::uniform_edges(-1.0, 1.0, 4);
  config.max_moment = 64;
  auto h = obs::empty_histogram(config);
  const auto nan_row = tri::observe_matrix(0, make({0.0, std::nan("")}, {1.0}), config, h, 1e-9);
  EXPECT_TRUE(nan_row.failed);
  EXPECT_EQ(nan_row.reason, "tridiagonal matrix contains NaN or Inf");
  const auto big_row = tri::observe_matrix(1, make({1e200, 0.0}, {1.0}), config, h, 1e-9);
  EXPECT_TRUE(big_row.failed);
  EXPECT_EQ(big_row.reason,
            "moment 2 overflows double; rescale the expression or lower max_moment");
  EXPECT_EQ(h.total(), 0);
}

}  // namespace
