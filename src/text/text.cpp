// Numbers and times as text (text.hpp).
#include "freegap/text.hpp"

#include <array>
#include <charconv>
#include <cstdio>
#include <ctime>

namespace freegap::text {

std::string exact(double x) {
  char buf[40];
  const auto result = std::to_chars(buf, buf + sizeof buf, x, std::chars_format::general, 17);
  return std::string(buf, result.ptr);
}

std::string shortest(double x) {
  char buf[40];
  const auto result = std::to_chars(buf, buf + sizeof buf, x);
  return std::string(buf, result.ptr);
}

std::string readable(double x) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.12g", x);
  return buf;
}

std::string compact(double x) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%g", x);
  return buf;
}

std::string utc_now() {
  const std::time_t now = std::time(nullptr);
  std::tm parts{};
  gmtime_r(&now, &parts);
  std::array<char, 32> out{};
  std::strftime(out.data(), out.size(), "%Y-%m-%dT%H:%M:%SZ", &parts);
  return out.data();
}

}  // namespace freegap::text
