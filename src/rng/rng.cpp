// Philox4x32-10 streams (Salmon, Moraes, Dror & Shaw 2011) through Random123's header.
#include "freegap/rng.hpp"

#include <Random123/philox.h>

#include <cmath>
#include <limits>
#include <string>

#include "freegap/errors.hpp"

namespace freegap::rng {

namespace {

// splitmix64 finaliser (Steele, Lea & Flood 2014): a bijective mixer, so distinct inputs stay
// distinct; used to spread (seed, name hash) over the 64-bit Philox key.
std::uint64_t mix64(std::uint64_t x) {
  x += 0x9E3779B97F4A7C15ULL;
  x = (x ^ (x >> 30)) * 0xBF58476D1CE4E5B9ULL;
  x = (x ^ (x >> 27)) * 0x94D049BB133111EBULL;
  return x ^ (x >> 31);
}

std::uint32_t checked_u32(std::uint64_t value, const char* what) {
  if (value > std::numeric_limits<std::uint32_t>::max()) {
    throw InputError(std::string("random stream: ") + what + " " + std::to_string(value) +
                     " is too large (at most 4294967295)");
  }
  return static_cast<std::uint32_t>(value);
}

}  // namespace

std::array<std::uint32_t, 4> philox4x32_10(const std::array<std::uint32_t, 4>& counter,
                                           const std::array<std::uint32_t, 2>& key) {
  r123::Philox4x32 generator;
  r123::Philox4x32::ctr_type c = {{counter[0], counter[1], counter[2], counter[3]}};
  r123::Philox4x32::key_type k = {{key[0], key[1]}};
  const auto r = generator(c, k);
  return {r[0], r[1], r[2], r[3]};
}

std::uint64_t fnv1a64(std::string_view text) {
  std::uint64_t h = 0xCBF29CE484222325ULL;
  for (unsigned char ch : text) {
    h ^= ch;
    h *= 0x100000001B3ULL;
  }
  return h;
}

Stream::Stream(const StreamKey& key)
    : trial_(checked_u32(key.trial, "trial index")), size_(checked_u32(key.size, "size N")) {
  // The name hash goes through the bijective mixer after being combined with the seed by a second
  // mix, so (seed, name) pairs map to keys without structure a Philox key schedule could echo.
  const std::uint64_t k = mix64(mix64(key.seed) ^ fnv1a64(key.matrix));
  key_ = {static_cast<std::uint32_t>(k), static_cast<std::uint32_t>(k >> 32)};
}

void Stream::refill() {
  buffer_ = philox4x32_10({static_cast<std::uint32_t>(block_),
                           static_cast<std::uint32_t>(block_ >> 32), trial_, size_},
                          key_);
  ++block_;
  next_word_ = 0;
}

std::uint32_t Stream::next_u32() {
  if (next_word_ == 4) refill();
  ++words_used_;
  return buffer_[next_word_++];
}

double Stream::uniform() {
  // 52 random bits k from two words, then (k + 1/2)·2^-52: every value is exact and strictly
  // inside (0, 1). (With 53 bits, (2^53 − 1 + 1/2)·2^-53 rounds to exactly 1.)
  const std::uint64_t hi = next_u32() >> 6;  // 26 bits
  const std::uint64_t lo = next_u32() >> 6;  // 26 bits
  return (static_cast<double>((hi << 26) | lo) + 0.5) * 0x1.0p-52;
}

double Stream::normal() {
  if (have_spare_normal_) {
    have_spare_normal_ = false;
    return spare_normal_;
  }
  // Marsaglia & Bray (1964) polar method: cheaper than Box–Muller's sin/cos
  // (docs/performance.md §4: 7.7 vs 15.1 ns per sample). Rejection uses a data-dependent number of
  // words, but deterministically, so the stream stays a pure function of its key.
  for (;;) {
    const double u = 2.0 * uniform() - 1.0;
    const double v = 2.0 * uniform() - 1.0;
    const double s = u * u + v * v;
    if (s >= 1.0 || s == 0.0) continue;
    const double f = std::sqrt(-2.0 * std::log(s) / s);
    spare_normal_ = v * f;
    have_spare_normal_ = true;
    return u * f;
  }
}

std::complex<double> Stream::complex_normal() {
  constexpr double half_sqrt = 0.70710678118654752440;  // 1/√2: E|z|^2 = 1
  const double re = normal();
  const double im = normal();
  return {re * half_sqrt, im * half_sqrt};
}

double Stream::rademacher() { return (next_u32() & 1U) ? 1.0 : -1.0; }

void Stream::fill_normal(std::span<double> out) {
  for (double& x : out) x = normal();
}

void Stream::fill_complex_normal(std::span<std::complex<double>> out) {
  for (auto& z : out) z = complex_normal();
}

void Stream::fill_uniform(std::span<double> out) {
  for (double& x : out) x = uniform();
}

}  // namespace freegap::rng
