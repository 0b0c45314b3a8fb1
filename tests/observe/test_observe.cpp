// Tests of the observe part: bin rule, accurate moments, failed trials, exact merging, summaries.
#include <gtest/gtest.h>

#include <bit>
#include <cmath>
#include <cstdint>
#include <limits>
#include <random>
#include <string>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/observe.hpp"

namespace fo = freegap::observe;
using freegap::InputError;

namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kU = 0x1p-53;  // unit roundoff of double

// Exact integers for the reference moments: |Σ m_i^k| stays below 2^127 for the values used.
__extension__ typedef __int128 Int128;

// Expects `f` to throw InputError with exactly `message` (docs/building.md habit 10).
template <class F>
void expect_input_error(F&& f, const std::string& message) {
  try {
    f();
    ADD_FAILURE() << "no InputError; expected: " << message;
  } catch (const InputError& e) {
    EXPECT_EQ(std::string(e.what()), message);
  }
}

bool same_bits(double a, double b) {
  return std::bit_cast<std::uint64_t>(a) == std::bit_cast<std::uint64_t>(b);
}

bool same_bits(const std::vector<double>& a, const std::vector<double>& b) {
  if (a.size() != b.size()) return false;
  for (std::size_t i = 0; i < a.size(); ++i) {
    if (!same_bits(a[i], b[i])) return false;
  }
  return true;
}

void expect_same_rows(const fo::TrialRecord& a, const fo::TrialRecord& b) {
  EXPECT_EQ(a.trial, b.trial);
  EXPECT_EQ(a.failed, b.failed);
  EXPECT_EQ(a.reason, b.reason);
  EXPECT_TRUE(same_bits(a.moments, b.moments)) << "trial " << a.trial;
  EXPECT_TRUE(same_bits(a.min, b.min)) << "trial " << a.trial;
  EXPECT_TRUE(same_bits(a.max, b.max)) << "trial " << a.trial;
  EXPECT_TRUE(same_bits(a.norm, b.norm)) << "trial " << a.trial;
  EXPECT_TRUE(same_bits(a.spectrum, b.spectrum)) << "trial " << a.trial;
}

void expect_same_estimate(const fo::MeanWithError& a, const fo::MeanWithError& b) {
  EXPECT_TRUE(same_bits(a.mean, b.mean));
  EXPECT_TRUE(same_bits(a.standard_error, b.standard_error));
}

// Fisher–Yates with mt19937_64, whose output sequence the C++ standard fixes, so the permutation
// (and hence the summation order the tests rely on) is the same with every standard library.
template <class T>
void shuffle_fixed(std::vector<T>& v, std::uint64_t seed) {
  std::mt19937_64 gen(seed);
  for (std::size_t i = v.size(); i > 1; --i) {
    const std::size_t j = gen() % i;
    std::swap(v[i - 1], v[j]);
  }
}

// The exact moment (1/N) Σ (m_i 2^-s)^k, correctly rounded, for N a power of two: the integer sum
// is exact, its conversion to double is correctly rounded (GCC's __int128 → double), and the
// power-of-two scaling is exact while the result stays normal.
double exact_moment(const std::vector<int>& m, int shift, int k) {
  Int128 sum = 0;
  for (const int v : m) {
    Int128 p = 1;
    for (int j = 0; j < k; ++j) p *= v;
    sum += p;
  }
  const int log2_n = std::countr_zero(m.size());
  EXPECT_EQ(std::size_t{1} << log2_n, m.size()) << "N must be a power of two";
  return std::ldexp(static_cast<double>(sum), -shift * k - log2_n);
}

// (1/N) Σ x_i^k with x^k by std::pow and a plain running sum: what a throw-away script does.
double naive_moment(const std::vector<double>& x, int k) {
  double sum = 0.0;
  for (const double v : x) sum += std::pow(v, k);
  return sum / static_cast<double>(x.size());
}

fo::ObserveConfig config_for(double low, double high, int bins, int max_moment) {
  fo::ObserveConfig config;
  config.bin_edges = fo::uniform_edges(low, high, bins);
  config.max_moment = max_moment;
  return config;
}

// Spectra for the merge and failure tests: values of a normal law, N = 40.
std::vector<double> random_spectrum(std::uint64_t trial) {
  std::mt19937_64 gen(1000 + trial);
  std::normal_distribution<double> normal(0.0, 1.0);
  std::vector<double> x(40);
  for (double& v : x) v = normal(gen);
  return x;
}

// ---------------------------------------------------------------------------------------------
// Configuration

TEST(ObserveConfig, UniformEdgesAreExactWhereRepresentable) {
  const std::vector<double> edges = fo::uniform_edges(-1.0, 1.0, 4);
  EXPECT_EQ(edges, (std::vector<double>{-1.0, -0.5, 0.0, 0.5, 1.0}));
  const std::vector<double> tenths = fo::uniform_edges(0.0, 1.0, 10);
  ASSERT_EQ(tenths.size(), 11u);
  // i/10 is correctly rounded, so edge i is the double nearest to the decimal i/10.
  EXPECT_EQ(tenths[3], 0.3);
  EXPECT_EQ(tenths[7], 0.7);
  EXPECT_EQ(tenths[10], 1.0);
}

TEST(ObserveConfig, RefusesBadInputWithClearMessages) {
  expect_input_error([] { fo::uniform_edges(0.0, 1.0, 0); },
                     "observe: bins must be in 1..10000000 (got 0)");
  expect_input_error([] { fo::uniform_edges(1.0, 1.0, 4); },
                     "observe: histogram range needs low < high (got low = 1, high = 1)");
  expect_input_error([] { fo::uniform_edges(kNaN, 1.0, 4); },
                     "observe: histogram range must be finite (got low = nan, high = 1)");
  expect_input_error([] { fo::uniform_edges(-1e308, 1e308, 4); },
                     "observe: histogram range is too wide for double (high - low overflows)");

  fo::ObserveConfig config;
  config.bin_edges = {0.0, 1.0, 1.0};
  expect_input_error(
      [&] { config.validate(); },
      "observe: bin edges must be strictly increasing (edge 2 = 1 after edge 1 = 1)");
  config.bin_edges = {0.0};
  expect_input_error([&] { config.validate(); },
                     "observe: bin_edges needs at least 2 edges (got 1)");
  config.bin_edges = {0.0, kInf};
  expect_input_error([&] { config.validate(); }, "observe: bin edge 1 is not finite (inf)");
  config.bin_edges = {0.0, 1.0};
  config.max_moment = 65;
  expect_input_error([&] { config.validate(); }, "observe: max_moment must be in 0..64 (got 65)");
  config.max_moment = -1;
  expect_input_error([&] { config.validate(); }, "observe: max_moment must be in 0..64 (got -1)");
  config.max_moment = 64;
  config.keep_spectrum_trials = {1, 5, 5};
  expect_input_error([&] { config.validate(); },
                     "observe: keep_spectrum_trials must be strictly increasing (got 5 after 5)");
  config.keep_spectrum_trials = {1, 5};
  EXPECT_NO_THROW(config.validate());
  EXPECT_TRUE(config.keeps_spectrum(5));
  EXPECT_FALSE(config.keeps_spectrum(4));
}

// ---------------------------------------------------------------------------------------------
// Histogram

TEST(ObserveHistogram, ValuesOnEdgesBelowAndAbove) {
  const std::vector<double> edges = {-1.0, -0.5, 0.0, 0.5, 1.0};
  fo::Histogram h;
  h.counts.assign(4, 0);
  const std::vector<double> values = {
      -1.0,  // on the bottom edge: bin 0
      -0.5,  // on an interior edge: the upper bin, 1
      0.0,
      -0.0,                        // both zeros are on edge 2: bin 2
      0.5,                         // bin 3
      1.0,                         // on the top edge: above
      std::nextafter(-1.0, -2.0),  // just below the range: below
      std::nextafter(1.0, 0.0),    // just inside the top: bin 3
      std::nextafter(0.0, -1.0),   // just below edge 2: bin 1
      2.0,
      1e300,  // above
      -3.0,   // below
      -0.75,
      0.25,
      0.25,  // bins 0, 2, 2
  };
  fo::add_counts(values, edges, h);
  EXPECT_EQ(h.counts, (std::vector<std::int64_t>{2, 2, 4, 2}));
  EXPECT_EQ(h.below, 2);
  EXPECT_EQ(h.above, 3);
  EXPECT_EQ(h.total(), static_cast<std::int64_t>(values.size()));
}

// Edges that are not multiples of the bin width in binary (0.1, 0.3, ...): the arithmetic guess
// (x − e_0)·b/(e_b − e_0) can be off by one next to an edge; the stored edges decide.
TEST(ObserveHistogram, RoundedUniformEdgesFollowTheRuleExactly) {
  const std::vector<double> edges = fo::uniform_edges(0.0, 1.0, 10);
  fo::Histogram h;
  h.counts.assign(10, 0);
  std::vector<double> values;
  std::vector<std::int64_t> expected(10, 0);
  std::int64_t expected_above = 0;
  std::int64_t expected_below = 0;
  for (std::size_t i = 0; i <= 10; ++i) {
    values.push_back(edges[i]);  // on edge i: bin i (above for the top edge)
    if (i < 10) {
      ++expected[i];
    } else {
      ++expected_above;
    }
    values.push_back(std::nextafter(edges[i], -1.0));  // just below edge i: bin i − 1
    if (i > 0) {
      ++expected[i - 1];
    } else {
      ++expected_below;
    }
  }
  fo::add_counts(values, edges, h);
  EXPECT_EQ(h.counts, expected);
  EXPECT_EQ(h.below, expected_below);
  EXPECT_EQ(h.above, expected_above);
}

// Against the definition by linear scan, for uniform and non-uniform edges and many values.
TEST(ObserveHistogram, MatchesLinearScanOnRandomValues) {
  const std::vector<std::vector<double>> edge_sets = {
      fo::uniform_edges(-2.1, 2.3, 37), {0.0, 1.0, 10.0, 100.0}, fo::uniform_edges(0.0, 1.0, 1)};
  std::mt19937_64 gen(7);
  std::uniform_real_distribution<double> uniform(-3.0, 120.0);
  for (const auto& edges : edge_sets) {
    std::vector<double> values(20000);
    for (double& v : values) v = uniform(gen);
    // Put every edge and its neighbours in too.
    for (const double e : edges) {
      values.push_back(e);
      values.push_back(std::nextafter(e, -kInf));
      values.push_back(std::nextafter(e, kInf));
    }
    fo::Histogram h;
    h.counts.assign(edges.size() - 1, 0);
    fo::add_counts(values, edges, h);
    std::vector<std::int64_t> expected(edges.size() - 1, 0);
    std::int64_t below = 0, above = 0;
    for (const double x : values) {
      if (x < edges.front()) {
        ++below;
      } else if (x >= edges.back()) {
        ++above;
      } else {
        for (std::size_t i = 0; i + 1 < edges.size(); ++i) {
          if (edges[i] <= x && x < edges[i + 1]) ++expected[i];
        }
      }
    }
    EXPECT_EQ(h.counts, expected);
    EXPECT_EQ(h.below, below);
    EXPECT_EQ(h.above, above);
    EXPECT_EQ(h.total(), static_cast<std::int64_t>(values.size()));
  }
}

TEST(ObserveHistogram, RefusesNaNAndCountsNothing) {
  const std::vector<double> edges = {0.0, 1.0};
  fo::Histogram h;
  h.counts.assign(1, 0);
  const std::vector<double> values = {0.5, kNaN};
  expect_input_error([&] { fo::add_counts(values, edges, h); },
                     "observe: cannot count NaN in a histogram");
  EXPECT_EQ(h.total(), 0);
  fo::Histogram wrong;
  wrong.counts.assign(3, 0);
  expect_input_error([&] { fo::add_counts(values, edges, wrong); },
                     "observe: histogram has 3 bins, expected 1; make it with empty_histogram for "
                     "the same configuration");
}

// ---------------------------------------------------------------------------------------------
// Moments

TEST(ObserveMoments, PlusMinusOneGivesZeroOneAlternating) {
  // Spectrum of diag(1, −1, ..., 1, −1), half each: m_k = 0 for odd k, 1 for even k, exactly.
  std::vector<double> x = {1, -1, -1, 1, 1, -1, 1, -1, -1, 1};
  shuffle_fixed(x, 3);
  const std::vector<double> m = fo::spectral_moments(x, 64);
  ASSERT_EQ(m.size(), 65u);
  for (int k = 0; k <= 64; ++k) EXPECT_EQ(m[k], k % 2 == 0 ? 1.0 : 0.0) << "k = " << k;
}

TEST(ObserveMoments, SmallIntegerDiagonalIsExact) {
  // diag(1, 2, 3, 4): m_k = (1 + 2^k + 3^k + 4^k)/4, all exact in double for k ≤ 4.
  const std::vector<double> x = {3.0, 1.0, 4.0, 2.0};
  EXPECT_EQ(fo::spectral_moments(x, 4), (std::vector<double>{1.0, 2.5, 7.5, 25.0, 88.5}));
  EXPECT_EQ(fo::spectral_moments(x, 0), (std::vector<double>{1.0}));
  const std::vector<double> zeros = {0.0, -0.0, 0.0};
  EXPECT_EQ(fo::spectral_moments(zeros, 3), (std::vector<double>{1.0, 0.0, 0.0, 0.0}));
}

// 511 × (+1.5), 511 × (−1.5) and 2 × 1.0, N = 1024, in a fixed shuffled order. Odd moments are
// exactly 2/1024 = 2^-9 while the terms are as large as 1.5^39 ≈ 7.4e6: the plain sum loses about
// ten digits to cancellation; the compensated one keeps them.
TEST(ObserveMoments, CancellationInOddMomentsVersusExactValues) {
  std::vector<int> m;  // x = m/2
  for (int i = 0; i < 511; ++i) {
    m.push_back(3);
    m.push_back(-3);
  }
  m.push_back(2);
  m.push_back(2);
  shuffle_fixed(m, 2024);
  std::vector<double> x;
  for (const int v : m) x.push_back(v / 2.0);

  const int k_max = 40;
  const std::vector<double> ours = fo::spectral_moments(x, k_max);
  for (int k = 1; k <= k_max; ++k) {
    const double exact = exact_moment(m, 1, k);
    if (k % 2 == 1) {
      EXPECT_EQ(exact, 0x1p-9);
    }
    // Neumaier's bound 2u|S| plus the final division: a few units in the last place of S itself,
    // since Σ|x_i|^k·n·u² is far below u|S| here.
    EXPECT_LE(std::fabs(ours[k] - exact), 4 * kU * std::fabs(exact)) << "k = " << k;
  }
  // The test bites: the plain sum is off by far more than that at k = 39.
  const double naive_error = std::fabs(naive_moment(x, 39) - 0x1p-9) / 0x1p-9;
  EXPECT_GT(naive_error, 1e-12);
}

// Mixed signs and magnitudes at high order: x = m/8 with m uniform in −7..7, N = 1024, k ≤ 40;
// the exact sums of m^40 need 123 bits, so the reference is exact integer arithmetic.
TEST(ObserveMoments, HighOrderMatchesExactRationalValues) {
  std::mt19937_64 gen(99);
  std::vector<int> m(1024);
  for (int& v : m) v = static_cast<int>(gen() % 15) - 7;
  std::vector<double> x;
  for (const int v : m) x.push_back(v / 8.0);

  const int k_max = 40;
  const std::vector<double> ours = fo::spectral_moments(x, k_max);
  std::vector<int> abs_m;
  for (const int v : m) abs_m.push_back(std::abs(v));
  for (int k = 1; k <= k_max; ++k) {
    const double exact = exact_moment(m, 3, k);
    const double absolute = exact_moment(abs_m, 3, k);  // (1/N) Σ |x_i|^k
    // The documented accuracy: 2u|S| (Neumaier) + the division, plus O(n u² + k² u²) times
    // (1/N) Σ|x_i|^k from the tail of the sum and the compensated powers.
    const double bound = 4 * kU * std::fabs(exact) + 2048.0 * kU * kU * absolute;
    EXPECT_LE(std::fabs(ours[k] - exact), bound) << "k = " << k;
  }
  // k = 40: all terms positive, so the result is within about one rounding of the exact value,
  // where repeated multiplication carries up to 39 roundings per term.
  const double exact_40 = exact_moment(m, 3, 40);
  EXPECT_LE(std::fabs(ours[40] - exact_40), 2 * kU * exact_40);
  // The test bites: std::pow and a plain sum are off by tens of units in the last place here
  // (76 u when written), beyond the bound above.
  EXPECT_GT(std::fabs(naive_moment(x, 40) - exact_40), 4 * kU * exact_40);
}

// Scaling by a power of two is exact, so the moments of 2^j·x are 2^(jk) times those of x, bit for
// bit, even where x^k alone would underflow (j = −200: 2^(−200·5) is still a normal double).
TEST(ObserveMoments, PowerOfTwoScalingIsExact) {
  const std::vector<double> x = {0.3, -0.71, 0.125, 0.9, -0.05, 0.61};
  const std::vector<double> base = fo::spectral_moments(x, 5);
  for (const int j : {-200, 200}) {
    std::vector<double> scaled;
    for (const double v : x) scaled.push_back(std::ldexp(v, j));
    const std::vector<double> m = fo::spectral_moments(scaled, 5);
    for (int k = 0; k <= 5; ++k) {
      EXPECT_TRUE(same_bits(m[k], std::ldexp(base[k], j * k))) << "j = " << j << ", k = " << k;
    }
  }
}

TEST(ObserveMoments, RefusesBadInput) {
  const std::vector<double> empty;
  expect_input_error([&] { fo::spectral_moments(empty, 2); },
                     "observe: cannot take moments of an empty spectrum");
  const std::vector<double> x = {1.0, kNaN};
  expect_input_error([&] { fo::spectral_moments(x, 2); },
                     "observe: cannot take moments of a non-finite value (nan)");
  const std::vector<double> y = {1.0};
  expect_input_error([&] { fo::spectral_moments(y, 65); },
                     "observe: max_moment must be in 0..64 (got 65)");
}

TEST(ObserveMoments, CompensatedSumKeepsSmallTerms) {
  // 1 + 1e100 + 1 − 1e100 = 2 exactly; the plain sum gives 0 (Neumaier 1974's motivating case).
  const std::vector<double> v = {1.0, 1e100, 1.0, -1e100};
  EXPECT_EQ(fo::compensated_sum(v), 2.0);
}

// ---------------------------------------------------------------------------------------------
// Trials: extremes, norm, failures

TEST(ObserveTrial, ExtremesAndNormOfEigenvalues) {
  fo::ObserveConfig config = config_for(-4.0, 4.0, 8, 2);
  fo::Histogram h = fo::empty_histogram(config);
  const std::vector<double> x = {0.5, -3.0, 2.0};
  const fo::TrialRecord row = fo::observe_spectrum(7, x, config, h);
  EXPECT_EQ(row.trial, 7u);
  EXPECT_FALSE(row.failed);
  EXPECT_EQ(row.reason, "");
  EXPECT_EQ(row.min, -3.0);
  EXPECT_EQ(row.max, 2.0);
  EXPECT_EQ(row.norm, 3.0);
  EXPECT_EQ(row.moments, (std::vector<double>{1.0, -0.5 / 3.0, 13.25 / 3.0}));
  EXPECT_TRUE(row.spectrum.empty());  // not selected
  EXPECT_EQ(h.counts, (std::vector<std::int64_t>{0, 1, 0, 0, 1, 0, 1, 0}));
}

TEST(ObserveTrial, ExtremesOnlyObservesTwoValuesWithoutAHistogram) {
  // What the Krylov path hands in: the two extremes of a trial, no bins, m_0 only.
  fo::ObserveConfig config;
  config.extremes_only = true;
  config.max_moment = 0;
  auto obs = fo::start_observations(config);
  EXPECT_TRUE(obs.histogram.counts.empty());
  const std::vector<double> extremes = {-3.5, 2.25};
  fo::record_trial(obs, 4, extremes);
  ASSERT_EQ(obs.trials.size(), 1u);
  EXPECT_EQ(obs.trials[0].min, -3.5);
  EXPECT_EQ(obs.trials[0].max, 2.25);
  EXPECT_EQ(obs.trials[0].norm, 3.5);
  EXPECT_EQ(obs.trials[0].moments, std::vector<double>{1.0});
  EXPECT_EQ(obs.histogram.total(), 0);
  EXPECT_TRUE(std::isnan(obs.trials[0].certificate.iterations));  // set by the caller only
  // Anything that needs the whole spectrum is refused with the reason.
  fo::ObserveConfig bins = config;
  bins.bin_edges = {0.0, 1.0};
  expect_input_error([&] { bins.validate(); },
                     "observe: extremes_only observes no histogram; give no bin_edges");
  fo::ObserveConfig moments = config;
  moments.max_moment = 2;
  expect_input_error([&] { moments.validate(); },
                     "observe: extremes_only observes no moments; max_moment must be 0 (got 2)");
  fo::ObserveConfig kept = config;
  kept.keep_spectrum_trials = {0};
  expect_input_error([&] { kept.validate(); },
                     "observe: extremes_only keeps no spectra; give no keep_spectrum_trials");
  // Without extremes_only, no bins is still an error.
  expect_input_error([] { fo::ObserveConfig none; none.validate(); },
                     "observe: bin_edges needs at least 2 edges (got 0)");
}

TEST(ObserveTrial, ExtremesAndNormOfSingularValues) {
  fo::ObserveConfig config = config_for(0.0, 5.0, 5, 2);
  config.kind = fo::SpectrumKind::singular_values;
  config.keep_spectrum_trials = {2};
  fo::Histogram h = fo::empty_histogram(config);
  const std::vector<double> s = {4.0, 1.5, 0.0};  // descending, as an SVD returns them
  const fo::TrialRecord row = fo::observe_spectrum(2, s, config, h);
  EXPECT_FALSE(row.failed);
  EXPECT_EQ(row.min, 0.0);
  EXPECT_EQ(row.max, 4.0);
  EXPECT_EQ(row.norm, 4.0);
  // m_2 = (16 + 2.25 + 0)/3 = (1/N) Tr P^*P.
  EXPECT_EQ(row.moments, (std::vector<double>{1.0, 5.5 / 3.0, 18.25 / 3.0}));
  EXPECT_EQ(row.spectrum, s);  // selected: kept as handed in
  EXPECT_EQ(h.counts, (std::vector<std::int64_t>{1, 1, 0, 0, 1}));

  const std::vector<double> negative = {2.0, -1e-3};
  const fo::TrialRecord bad = fo::observe_spectrum(3, negative, config, h);
  EXPECT_TRUE(bad.failed);
  EXPECT_EQ(bad.reason, "negative singular value");
  EXPECT_EQ(h.total(), 3);  // unchanged
}

TEST(ObserveTrial, MomentOverflowFailsTheTrial) {
  // 1e10^31 = 1e310 exceeds the largest double (≈1.8e308); 1e10^30 does not.
  const std::vector<double> x = {1e10, -1e10};
  const std::vector<double> m = fo::spectral_moments(x, 32);
  EXPECT_TRUE(std::isfinite(m[30]));
  EXPECT_EQ(m[31], 0.0);  // odd: cancels exactly
  EXPECT_EQ(m[32], kInf);
  const std::vector<double> y = {1e10, 1.0};
  fo::ObserveConfig config = config_for(0.0, 1.0, 1, 64);
  fo::Histogram h = fo::empty_histogram(config);
  const fo::TrialRecord row = fo::observe_spectrum(0, y, config, h);
  EXPECT_TRUE(row.failed);
  EXPECT_EQ(row.reason, "moment 31 overflows double; rescale the expression or lower max_moment");
  EXPECT_EQ(h.total(), 0);
}

TEST(ObserveTrial, RefusesEmptySpectrumAndEmptyReason) {
  fo::ObserveConfig config = config_for(0.0, 1.0, 2, 2);
  fo::Histogram h = fo::empty_histogram(config);
  const std::vector<double> empty;
  expect_input_error([&] { fo::observe_spectrum(4, empty, config, h); },
                     "observe: trial 4 has an empty spectrum");
  expect_input_error([] { fo::failed_trial(9, ""); },
                     "observe: trial 9 failed without a reason; give a short reason");
}

// NaN and ±Inf mark the trial failed with its reason; the histogram and the statistics equal
// those of the same run without those trials.
TEST(ObserveTrial, NonFiniteSpectraAndSolverFailuresAreRecordedApart) {
  fo::ObserveConfig config = config_for(-3.0, 3.0, 24, 6);
  config.keep_spectrum_trials = {3};
  fo::Observations with = fo::start_observations(config);
  fo::Observations without = fo::start_observations(config);
  for (std::uint64_t t = 0; t < 12; ++t) {
    std::vector<double> x = random_spectrum(t);
    if (t == 3) x[17] = kNaN;
    if (t == 6) x[0] = kInf;
    if (t == 8) x[39] = -kInf;
    if (t == 10) {
      fo::record_failure(with, t, "eigenvalue solver did not converge");
      continue;
    }
    fo::record_trial(with, t, x);
    if (t != 3 && t != 6 && t != 8) fo::record_trial(without, t, x);
  }
  EXPECT_EQ(with.histogram, without.histogram);
  EXPECT_EQ(with.histogram.total(), 8 * 40);
  ASSERT_EQ(with.trials.size(), 12u);
  EXPECT_EQ(with.trials[3].reason, "spectrum contains NaN");
  EXPECT_EQ(with.trials[6].reason, "spectrum contains +Inf");
  EXPECT_EQ(with.trials[8].reason, "spectrum contains -Inf");
  EXPECT_EQ(with.trials[10].reason, "eigenvalue solver did not converge");
  for (const std::uint64_t t : {3, 6, 8, 10}) {
    EXPECT_TRUE(with.trials[t].failed);
    EXPECT_TRUE(with.trials[t].moments.empty());
    EXPECT_TRUE(std::isnan(with.trials[t].norm));
  }
  EXPECT_EQ(with.trials[3].spectrum.size(), 40u);  // selected: kept, NaN and all, for diagnosis

  const fo::Summary a = fo::summarize(with);
  const fo::Summary b = fo::summarize(without);
  EXPECT_EQ(a.trials, 12);
  EXPECT_EQ(a.failed, 4);
  EXPECT_EQ(b.failed, 0);
  using Reason = std::pair<std::string, std::int64_t>;
  EXPECT_EQ(a.failure_reasons, (std::vector<Reason>{{"eigenvalue solver did not converge", 1},
                                                    {"spectrum contains +Inf", 1},
                                                    {"spectrum contains -Inf", 1},
                                                    {"spectrum contains NaN", 1}}));
  ASSERT_EQ(a.moments.size(), 7u);
  for (std::size_t k = 0; k < a.moments.size(); ++k)
    expect_same_estimate(a.moments[k], b.moments[k]);
  expect_same_estimate(a.norm, b.norm);
  EXPECT_TRUE(same_bits(a.smallest, b.smallest));
  EXPECT_TRUE(same_bits(a.largest, b.largest));
  EXPECT_TRUE(std::isfinite(a.moments[6].mean));
}

// ---------------------------------------------------------------------------------------------
// Merging and summaries

// 100 trials split into random blocks, each block observed on its own (trials within a block in
// shuffled order), blocks merged in shuffled order: bit-identical to one pass in trial order.
TEST(ObserveMerge, AnySplitAndOrderIsBitIdentical) {
  fo::ObserveConfig config = config_for(-2.5, 2.5, 50, 12);
  config.keep_spectrum_trials = {0, 17, 99};
  auto spectrum = [](std::uint64_t t) {
    std::vector<double> x = random_spectrum(t);
    if (t == 41) x[5] = kNaN;
    return x;
  };
  auto observe = [&](fo::Observations& obs, std::uint64_t t) {
    if (t == 77) {
      fo::record_failure(obs, t, "eigenvalue solver did not converge");
    } else {
      fo::record_trial(obs, t, spectrum(t));
    }
  };

  fo::Observations one_pass = fo::start_observations(config);
  for (std::uint64_t t = 0; t < 100; ++t) observe(one_pass, t);

  for (std::uint64_t seed = 1; seed <= 5; ++seed) {
    std::vector<std::uint64_t> order(100);
    for (std::uint64_t t = 0; t < 100; ++t) order[t] = t;
    shuffle_fixed(order, seed);
    // Cut the shuffled trials into blocks of 1..15 at random.
    std::mt19937_64 gen(seed);
    std::vector<fo::Observations> blocks;
    for (std::size_t i = 0; i < order.size();) {
      const std::size_t len = std::min<std::size_t>(1 + gen() % 15, order.size() - i);
      fo::Observations block = fo::start_observations(config);
      for (std::size_t j = i; j < i + len; ++j) observe(block, order[j]);
      blocks.push_back(std::move(block));
      i += len;
    }
    ASSERT_GT(blocks.size(), 6u);
    shuffle_fixed(blocks, seed + 100);
    fo::Observations merged = fo::start_observations(config);
    for (const auto& block : blocks) fo::merge_into(merged, block);

    EXPECT_EQ(merged.histogram, one_pass.histogram);
    ASSERT_EQ(merged.trials.size(), one_pass.trials.size());
    for (std::size_t i = 0; i < merged.trials.size(); ++i) {
      expect_same_rows(merged.trials[i], one_pass.trials[i]);
    }
    const fo::Summary a = fo::summarize(merged);
    const fo::Summary b = fo::summarize(one_pass);
    ASSERT_EQ(a.moments.size(), b.moments.size());
    for (std::size_t k = 0; k < a.moments.size(); ++k) {
      expect_same_estimate(a.moments[k], b.moments[k]);
    }
    expect_same_estimate(a.min, b.min);
    expect_same_estimate(a.max, b.max);
    expect_same_estimate(a.norm, b.norm);
    EXPECT_EQ(a.failed, 2);
  }
  EXPECT_EQ(one_pass.trials[17].spectrum, random_spectrum(17));
  EXPECT_TRUE(one_pass.trials[18].spectrum.empty());
  EXPECT_EQ(one_pass.histogram.total(), 98 * 40);
}

TEST(ObserveMerge, RefusesDuplicatesAndOtherConfigurationsLeavingTargetUnchanged) {
  const fo::ObserveConfig config = config_for(-1.0, 1.0, 4, 2);
  fo::Observations a = fo::start_observations(config);
  fo::Observations b = fo::start_observations(config);
  const std::vector<double> x = {0.25, -0.5};
  fo::record_trial(a, 1, x);
  fo::record_trial(a, 5, x);
  fo::record_trial(b, 3, x);
  fo::record_trial(b, 5, x);
  expect_input_error([&] { fo::merge_into(a, b); },
                     "observe: trial 5 is recorded twice; each trial is observed once");
  EXPECT_EQ(a.trials.size(), 2u);
  EXPECT_EQ(a.histogram.total(), 4);
  expect_input_error([&] { fo::record_trial(a, 1, x); },
                     "observe: trial 1 is recorded twice; each trial is observed once");
  expect_input_error([&] { fo::record_failure(a, 5, "solver failed"); },
                     "observe: trial 5 is recorded twice; each trial is observed once");
  EXPECT_EQ(a.histogram.total(), 4);

  fo::Observations c = fo::start_observations(config_for(-1.0, 1.0, 4, 3));
  expect_input_error([&] { fo::merge_into(a, c); },
                     "observe: cannot merge observations made with different configurations "
                     "(bins, max_moment, spectrum kind or kept trials differ)");
  EXPECT_EQ(a.trials.size(), 2u);

  // Out-of-order recording still keeps rows sorted.
  fo::record_trial(a, 3, x);
  ASSERT_EQ(a.trials.size(), 3u);
  EXPECT_EQ(a.trials[0].trial, 1u);
  EXPECT_EQ(a.trials[1].trial, 3u);
  EXPECT_EQ(a.trials[2].trial, 5u);
}

TEST(ObserveSummary, MeansAndStandardErrorsByHand) {
  fo::Observations obs = fo::start_observations(config_for(0.0, 4.0, 4, 2));
  // N = 1 spectra {1}, {2}, {3}: m_1 = 1, 2, 3 and m_2 = 1, 4, 9.
  for (std::uint64_t t = 0; t < 3; ++t) {
    const std::vector<double> x = {static_cast<double>(t + 1)};
    fo::record_trial(obs, t, x);
  }
  fo::record_failure(obs, 3, "solver failed");
  const fo::Summary s = fo::summarize(obs);
  EXPECT_EQ(s.trials, 4);
  EXPECT_EQ(s.failed, 1);
  EXPECT_EQ(s.moments[0].mean, 1.0);
  EXPECT_EQ(s.moments[0].standard_error, 0.0);
  // m_1: mean 2, sample variance 1, standard error √(1/3).
  EXPECT_EQ(s.moments[1].mean, 2.0);
  EXPECT_DOUBLE_EQ(s.moments[1].standard_error, std::sqrt(1.0 / 3.0));
  // m_2: mean 14/3, sample variance ((11/3)² + (2/3)² + (13/3)²)/2 = 147/9, SE = √(147/27).
  EXPECT_DOUBLE_EQ(s.moments[2].mean, 14.0 / 3.0);
  EXPECT_DOUBLE_EQ(s.moments[2].standard_error, std::sqrt(147.0 / 27.0));
  EXPECT_EQ(s.smallest, 1.0);
  EXPECT_EQ(s.largest, 3.0);
  EXPECT_EQ(s.norm.mean, 2.0);

  // Nothing succeeded: NaN means, never a silent zero.
  fo::Observations none = fo::start_observations(config_for(0.0, 4.0, 4, 2));
  fo::record_failure(none, 0, "solver failed");
  const fo::Summary e = fo::summarize(none);
  EXPECT_TRUE(std::isnan(e.moments[1].mean));
  EXPECT_TRUE(std::isnan(e.smallest));
  // One success: a mean, but no standard error.
  fo::Observations single = fo::start_observations(config_for(0.0, 4.0, 4, 2));
  const std::vector<double> x = {2.0};
  fo::record_trial(single, 0, x);
  EXPECT_EQ(fo::summarize(single).moments[1].mean, 2.0);
  EXPECT_TRUE(std::isnan(fo::summarize(single).moments[1].standard_error));
}

}  // namespace
