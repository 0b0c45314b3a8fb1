// Random streams: Philox known answers, stream layout, and the draws' laws.
#include <gtest/gtest.h>

#include <cmath>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/rng.hpp"
#include "stat_helpers.hpp"

namespace {

using freegap::rng::philox4x32_10;
using freegap::rng::Stream;
using freegap::rng::StreamKey;
using freegap::testing::mean_se;

// Source: Random123 known-answer vectors for Philox4x32-10 (Salmon, Moraes, Dror & Shaw 2011,
// "Parallel random numbers: as easy as 1, 2, 3", SC'11), as tabulated in
// docs/check-values.md §4g.
TEST(Philox, KnownAnswerVectors) {
  using A4 = std::array<std::uint32_t, 4>;
  EXPECT_EQ(philox4x32_10({0, 0, 0, 0}, {0, 0}),
            (A4{0x6627e8d5, 0xe169c58d, 0xbc57ac4c, 0x9b00dbd8}));
  EXPECT_EQ(philox4x32_10({0xffffffff, 0xffffffff, 0xffffffff, 0xffffffff},
                          {0xffffffff, 0xffffffff}),
            (A4{0x408f276d, 0x41c83b0e, 0xa20bc7c6, 0x6d5451fd}));
  EXPECT_EQ(philox4x32_10({0x243f6a88, 0x85a308d3, 0x13198a2e, 0x03707344},
                          {0xa4093822, 0x299f31d0}),
            (A4{0xd16cfe09, 0x94fdcceb, 0x5001e420, 0x24126ea1}));
}

TEST(Stream, SameKeySameNumbers) {
  Stream a({42, "U", 1000, 7}), b({42, "U", 1000, 7});
  for (int i = 0; i < 1000; ++i) ASSERT_EQ(a.next_u32(), b.next_u32());
  for (int i = 0; i < 1000; ++i) ASSERT_EQ(a.normal(), b.normal());
}

TEST(Stream, EveryKeyFieldSelectsAnotherStream) {
  const StreamKey base{42, "U", 1000, 7};
  std::vector<StreamKey> others = {{43, "U", 1000, 7}, {42, "V", 1000, 7},
                                   {42, "U", 1001, 7}, {42, "U", 1000, 8}};
  for (const auto& key : others) {
    Stream a(base), b(key);
    int equal = 0;
    for (int i = 0; i < 1000; ++i) equal += a.next_u32() == b.next_u32();
    // Independent uniform words agree with probability 2^-32 each (common practice).
    EXPECT_LE(equal, 1) << key.matrix << " " << key.seed << " " << key.size << " " << key.trial;
  }
}

TEST(Stream, RefusesFieldsBeyondThirtyTwoBits) {
  try {
    Stream s({1, "X", 1ULL << 32, 0});
    FAIL() << "expected an InputError";
  } catch (const freegap::InputError& e) {
    EXPECT_STREQ(e.what(), "random stream: size N 4294967296 is too large (at most 4294967295)");
  }
}

// Moments of the draws. n = 200000; tolerances 5 standard errors of the sample mean.
// Exact values: uniform mean 1/2, var 1/12; normal E x^2 = 1, E x^4 = 3; complex normal
// E|z|^2 = 1 (real and imaginary parts N(0, 1/2)); Rademacher mean 0 (elementary).
TEST(Stream, DrawsHaveTheirLaws) {
  Stream s({2026, "draws", 1, 0});
  const int n = 200000;
  std::vector<double> u(n), x2(n), x4(n), z2(n), zre_im(n), r(n);
  for (int i = 0; i < n; ++i) {
    u[i] = s.uniform();
    ASSERT_GT(u[i], 0.0);
    ASSERT_LT(u[i], 1.0);
    const double x = s.normal();
    x2[i] = x * x;
    x4[i] = x2[i] * x2[i];
    const auto z = s.complex_normal();
    z2[i] = std::norm(z);
    zre_im[i] = z.real() * z.imag();
    r[i] = s.rademacher();
    ASSERT_TRUE(r[i] == 1.0 || r[i] == -1.0);
  }
  auto check = [](const std::vector<double>& v, double exact, const char* what) {
    const auto m = mean_se(v);
    EXPECT_NEAR(m.mean, exact, 5 * m.se) << what;
  };
  check(u, 0.5, "uniform mean");
  check(x2, 1.0, "normal second moment");
  check(x4, 3.0, "normal fourth moment");
  check(z2, 1.0, "complex normal E|z|^2");
  check(zre_im, 0.0, "complex normal E Re z Im z");
  check(r, 0.0, "rademacher mean");
}

}  // namespace
