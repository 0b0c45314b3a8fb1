// A driver for a fuzz target without libFuzzer: it feeds LLVMFuzzerTestOneInput (linked from the
// target's own source, e.g. fuzz_run_file.cpp) with
//   1. every file of a regression directory, as it is, then
//   2. RUNS mutants of the seed files made by a fixed-seed generator (std::mt19937_64), so that a
//      campaign is the same campaign on every machine.
// It is built in the plain and the sanitized build (gcc, where libFuzzer is not available); in the
// sanitized one a finding ends the process through the sanitizer with its exit code. An input
// that takes over 10 s (FREEGAP_FUZZ_HANG_SECONDS, times FREEGAP_TEST_TIME_SCALE) is a hang and
// fails the campaign; the end line gives the slowest input's time.
// Before each input the bytes are written to WORK_DIR/current-input, so that the input of a
// crash is left there: copy it into the regression directory together with the fix.
//
//   mutation_driver WORK_DIR REGRESSION_DIR RUNS SEED SEED_FILE...
//
// The mutations are those that damage a binary file the way transfers, disks and hostile users
// do, plus the ones aimed at a structured format's length and address fields (common practice in
// format fuzzing): random bytes at 1-3 places, single bit flips, truncation, an 8-byte field set
// to an extreme value (0, all ones, small and large integers), a block copied from one place to
// another (a plausible header where it does not belong), and a block removed.
#include <algorithm>
#include <chrono>
#include <cstddef>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <iterator>
#include <random>
#include <string>
#include <vector>

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size);

namespace {

using Bytes = std::vector<std::uint8_t>;

Bytes read_all(const std::filesystem::path& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) {
    std::cerr << "mutation_driver: cannot read " << path << "\n";
    std::exit(2);
  }
  return Bytes(std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>());
}

void write_all(const std::filesystem::path& path, const Bytes& bytes) {
  std::ofstream out(path, std::ios::binary | std::ios::trunc);
  out.write(reinterpret_cast<const char*>(bytes.data()), static_cast<std::streamsize>(bytes.size()));
  if (!out) {
    std::cerr << "mutation_driver: cannot write " << path << "\n";
    std::exit(2);
  }
}

// The slowest input so far, and the limit above which an input counts as a hang.
struct Timing {
  double limit_seconds = 10.0;
  double slowest_seconds = 0.0;
  long slowest_index = -1;
  long over_one_second = 0;
};

void run_one(const std::filesystem::path& current, const Bytes& input, long index,
             Timing& timing) {
  write_all(current, input);
  const auto start = std::chrono::steady_clock::now();
  LLVMFuzzerTestOneInput(input.data(), input.size());
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  if (seconds > 1.0) ++timing.over_one_second;
  if (seconds > timing.slowest_seconds) {
    timing.slowest_seconds = seconds;
    timing.slowest_index = index;
  }
  if (seconds > timing.limit_seconds) {
    std::cerr << "mutation_driver: input " << index << " took " << seconds << " s, over the "
              << timing.limit_seconds << " s that counts as a hang; it is left in " << current
              << "\n";
    std::exit(1);
  }
}

Bytes mutate(const Bytes& seed, std::mt19937_64& rng) {
  Bytes out = seed;
  if (out.empty()) return out;
  auto position = [&](std::size_t n) {
    return std::uniform_int_distribution<std::size_t>(0, n - 1)(rng);
  };
  const int kind = static_cast<int>(rng() % 6);
  switch (kind) {
    case 0: {  // random bytes (1-16) at 1-3 places
      const int places = 1 + static_cast<int>(rng() % 3);
      for (int p = 0; p < places; ++p) {
        const std::size_t at = position(out.size());
        const std::size_t n = std::min<std::size_t>(1 + rng() % 16, out.size() - at);
        for (std::size_t i = 0; i < n; ++i) out[at + i] = static_cast<std::uint8_t>(rng());
      }
      break;
    }
    case 1: {  // 1-8 single bit flips
      const int flips = 1 + static_cast<int>(rng() % 8);
      for (int f = 0; f < flips; ++f) out[position(out.size())] ^= std::uint8_t(1u << (rng() % 8));
      break;
    }
    case 2:  // truncation
      out.resize(position(out.size()));
      break;
    case 3: {  // an 8-byte little-endian field set to an extreme value
      static const std::uint64_t extremes[] = {0,          1,          0xFFFFFFFFFFFFFFFFull,
                                               0x7FFFFFFFFFFFFFFFull, 0xFFFFFFFFull,
                                               0x80000000ull, 0x10000ull, 4096};
      const std::uint64_t value = extremes[rng() % std::size(extremes)];
      const std::size_t at = position(out.size());
      for (std::size_t i = 0; i < 8 && at + i < out.size(); ++i) {
        out[at + i] = static_cast<std::uint8_t>(value >> (8 * i));
      }
      break;
    }
    case 4: {  // a block (8-256 bytes) copied over another place
      const std::size_t n = std::min<std::size_t>(8 + rng() % 249, out.size());
      const std::size_t from = position(out.size() - n + 1);
      const std::size_t to = position(out.size() - n + 1);
      std::copy_n(seed.begin() + static_cast<std::ptrdiff_t>(from), n,
                  out.begin() + static_cast<std::ptrdiff_t>(to));
      break;
    }
    default: {  // a block (1-256 bytes) removed: everything after it shifts
      const std::size_t at = position(out.size());
      const std::size_t n = std::min<std::size_t>(1 + rng() % 256, out.size() - at);
      out.erase(out.begin() + static_cast<std::ptrdiff_t>(at),
                out.begin() + static_cast<std::ptrdiff_t>(at + n));
      break;
    }
  }
  return out;
}

}  // namespace

int main(int argc, char** argv) {
  if (argc < 6) {
    std::cerr << "usage: mutation_driver WORK_DIR REGRESSION_DIR RUNS SEED SEED_FILE...\n";
    return 2;
  }
  const std::filesystem::path work = argv[1];
  const std::filesystem::path regressions = argv[2];
  const long runs = std::strtol(argv[3], nullptr, 10);
  const std::uint64_t seed = std::strtoull(argv[4], nullptr, 10);
  std::filesystem::create_directories(work);
  const std::filesystem::path current = work / "current-input";

  std::vector<std::filesystem::path> regression_files;
  if (std::filesystem::is_directory(regressions)) {
    for (const auto& entry : std::filesystem::directory_iterator(regressions)) {
      if (entry.is_regular_file()) regression_files.push_back(entry.path());
    }
  }
  std::sort(regression_files.begin(), regression_files.end());
  // A hang is an input over 10 s, or FREEGAP_FUZZ_HANG_SECONDS, times FREEGAP_TEST_TIME_SCALE
  // (set for sanitized runs).
  Timing timing;
  if (const char* limit = std::getenv("FREEGAP_FUZZ_HANG_SECONDS"); limit && *limit) {
    const double seconds = std::strtod(limit, nullptr);
    if (seconds > 0) timing.limit_seconds = seconds;
  }
  if (const char* scale = std::getenv("FREEGAP_TEST_TIME_SCALE"); scale && *scale) {
    const double factor = std::strtod(scale, nullptr);
    if (factor > 0) timing.limit_seconds *= factor;
  }
  long index = 0;
  for (const auto& path : regression_files) run_one(current, read_all(path), index++, timing);
  std::cout << "mutation_driver: " << regression_files.size() << " regression inputs passed\n";

  std::vector<Bytes> seeds;
  for (int i = 5; i < argc; ++i) seeds.push_back(read_all(argv[i]));
  std::mt19937_64 rng(seed);
  for (long r = 0; r < runs; ++r) {
    const Bytes& base = seeds[static_cast<std::size_t>(rng() % seeds.size())];
    // Now and then a second mutation on top of the first, as libFuzzer stacks them.
    Bytes input = mutate(base, rng);
    if (rng() % 4 == 0) input = mutate(input, rng);
    run_one(current, input, index++, timing);
  }
  std::filesystem::remove(current);
  std::cout << "mutation_driver: " << runs << " mutated inputs (seed " << seed << ") passed; "
            << timing.over_one_second << " took over 1 s, the slowest (input "
            << timing.slowest_index << ") " << timing.slowest_seconds << " s\n";
  return 0;
}
