// Cost of the run file's checksums (docs/run-file.md, "Checksums"): the SHA-256 of a unit's content,
// per byte, and the commit of one unit at N = 200 with everything it hashes and checks. The
// comparison with a run's time is in RESULTS-integrity.md.
#include <benchmark/benchmark.h>

#include <filesystem>
#include <string>

#include "freegap/job.hpp"
#include "freegap/observe.hpp"
#include "freegap/store.hpp"

namespace {

// SHA-256 of a buffer of state.range(0) bytes: what the digest of one unit costs per byte.
void BM_Sha256(benchmark::State& state) {
  const std::string bytes(static_cast<std::size_t>(state.range(0)), '\x5a');
  for (auto _ : state) benchmark::DoNotOptimize(freegap::job::sha256_hex(bytes));
  state.SetBytesProcessed(static_cast<std::int64_t>(state.iterations()) * state.range(0));
}
BENCHMARK(BM_Sha256)->Arg(4 << 10)->Arg(64 << 10)->Arg(1 << 20);

// Commits units of B = state.range(0) trials at N = 200, K = 8, 100 bins, every trial's spectrum
// kept (the most a unit can hash): data, digest, Fletcher-32 chunks, flush, marker, flush.
void BM_CommitUnitN200(benchmark::State& state) {
  const std::int64_t per_unit = state.range(0);
  const std::int64_t units = 512;
  const std::int64_t n = 200;
  freegap::store::RunHeader h;
  h.job_text = "# benchmark\n";
  h.job_canonical = "benchmark";
  h.job_hash = std::string(64, 'b');
  h.expression = "X";
  freegap::store::SizeLayout s;
  s.n = n;
  s.trials = units * per_unit;
  s.trials_per_unit = per_unit;
  s.observe.bin_edges = freegap::observe::uniform_edges(-2.5, 2.5, 100);
  s.observe.max_moment = 8;
  for (std::int64_t t = 0; t < s.trials; ++t) {
    s.observe.keep_spectrum_trials.push_back(static_cast<std::uint64_t>(t));
  }
  h.sizes.push_back(s);
  const std::string path =
      (std::filesystem::temp_directory_path() / "freegap-bench-integrity.h5").string();
  std::filesystem::remove(path);
  auto file = freegap::store::RunFile::create(path, h);
  file.begin_session(1, {"bench"});
  std::vector<double> spectrum(static_cast<std::size_t>(n));
  for (std::size_t i = 0; i < spectrum.size(); ++i) spectrum[i] = -2.0 + 0.02 * i;
  std::int64_t unit = 0;
  for (auto _ : state) {
    if (unit == units) {
      state.SkipWithError("out of units");
      break;
    }
    freegap::store::UnitResult r;
    r.size_index = 0;
    r.unit = unit;
    r.obs = freegap::observe::start_observations(s.observe);
    for (auto t = s.unit_begin(unit); t < s.unit_end(unit); ++t) {
      freegap::observe::record_trial(r.obs, static_cast<std::uint64_t>(t), spectrum);
    }
    file.write_unit(r, {0, "bench", 0.0});
    ++unit;
  }
  file.end_session("finished");
  std::filesystem::remove(path);
}
BENCHMARK(BM_CommitUnitN200)->Arg(1)->Arg(8)->Iterations(400)->Unit(benchmark::kMillisecond);

}  // namespace

BENCHMARK_MAIN();
