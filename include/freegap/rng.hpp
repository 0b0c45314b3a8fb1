// Counter-based random streams keyed by (job seed, matrix name, N, trial) — Random123 Philox4x32-10.
//
// A trial's numbers are a pure function of its key, never of the rank, thread or order that
// produced them (docs/design.md rule 1). Philox4x32-10: Salmon, Moraes, Dror & Shaw (2011),
// "Parallel random numbers: as easy as 1, 2, 3", SC'11.
//
// Layout of a stream:
//   Philox key     = mix64(seed, FNV-1a-64(matrix name))            (two 32-bit words)
//   Philox counter = (block index low, block index high, trial, N)   (four 32-bit words)
// so two keys that differ in any field select different keys or counters, hence independent
// streams; within a stream, successive blocks of four 32-bit words are read in order.
#pragma once

#include <array>
#include <complex>
#include <cstdint>
#include <span>
#include <string>
#include <string_view>

namespace freegap::rng {

/// Everything that identifies one matrix's random numbers in one trial.
struct StreamKey {
  std::uint64_t seed = 0;
  std::string matrix;       ///< the matrix's declared name
  std::uint64_t size = 0;   ///< N (must be < 2^32)
  std::uint64_t trial = 0;  ///< trial index within this size (must be < 2^32)
};

/// Raw Philox4x32-10 block: exposed for the known-answer test against the published vectors.
std::array<std::uint32_t, 4> philox4x32_10(const std::array<std::uint32_t, 4>& counter,
                                           const std::array<std::uint32_t, 2>& key);

/// 64-bit FNV-1a hash of a name (common practice; Fowler–Noll–Vo).
std::uint64_t fnv1a64(std::string_view text);

/// A sequential stream of random numbers for one key. Cheap to construct; not thread-shared.
class Stream {
 public:
  explicit Stream(const StreamKey& key);

  /// Next 32 random bits.
  std::uint32_t next_u32();
  /// Uniform on the open interval (0, 1) with 52 random bits: ((x1>>6)·2^26 + (x2>>6) + 0.5)·2^-52,
  /// exact in double and never 0 or 1.
  double uniform();
  /// Standard normal N(0,1) by the Marsaglia polar method (pairs; deterministic given the stream).
  double normal();
  /// Complex normal with E|z|^2 = 1: real and imaginary parts N(0, 1/2).
  std::complex<double> complex_normal();
  /// ±1 with probability 1/2 each.
  double rademacher();

  void fill_normal(std::span<double> out);
  void fill_complex_normal(std::span<std::complex<double>> out);
  void fill_uniform(std::span<double> out);

  /// How many 32-bit words this stream has handed out so far (for tests and diagnostics).
  std::uint64_t words_used() const { return words_used_; }

 private:
  void refill();

  std::array<std::uint32_t, 2> key_{};
  std::uint64_t block_ = 0;
  std::uint32_t trial_ = 0;
  std::uint32_t size_ = 0;
  std::array<std::uint32_t, 4> buffer_{};
  int next_word_ = 4;
  std::uint64_t words_used_ = 0;
  bool have_spare_normal_ = false;
  double spare_normal_ = 0.0;
};

}  // namespace freegap::rng
