// Numbers and times as text (text.hpp).
#include <gtest/gtest.h>

#include <cstdlib>
#include <regex>
#include <string>

#include "freegap/text.hpp"

namespace freegap::text {
namespace {

// Every double round-trips through exact() and shortest() (IEEE 754 binary64 needs 17
// significant digits: common practice); readable() keeps 12.
TEST(Text, ExactAndShortestReadBackAsTheSameDouble) {
  for (const double x : {0.1, 1.0 / 3.0, -2.5e-300, 6.02214076e23, 1.0, 0.0}) {
    EXPECT_EQ(std::strtod(exact(x).c_str(), nullptr), x) << exact(x);
    EXPECT_EQ(std::strtod(shortest(x).c_str(), nullptr), x) << shortest(x);
  }
  EXPECT_EQ(exact(0.1), "0.10000000000000001");
  EXPECT_EQ(shortest(0.1), "0.1");
  EXPECT_EQ(exact(3.0), "3");
}

TEST(Text, ReadableKeepsTwelveSignificantDigits) {
  EXPECT_EQ(readable(1.0 / 3.0), "0.333333333333");
  EXPECT_EQ(readable(2.0), "2");
  EXPECT_EQ(readable(1.7320508075688772), "1.73205080757");
}

TEST(Text, UtcNowIsIso8601) {
  EXPECT_TRUE(std::regex_match(utc_now(), std::regex(R"(\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ)")))
      << utc_now();
}

}  // namespace
}  // namespace freegap::text
