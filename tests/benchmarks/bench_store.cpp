// Cost of committing one work unit to the run file (data, flush, commit marker, flush): the
// number behind the rank-0-as-only-writer estimate in docs/scaling.md.
#include <benchmark/benchmark.h>

#include <filesystem>
#include <string>

#include "freegap/observe.hpp"
#include "freegap/store.hpp"
#include "freegap/version.hpp"

namespace {

// One size with many units of B trials, K = 8 moments and 200 bins (a typical study); each
// iteration writes and commits the next unit.
void BM_CommitUnit(benchmark::State& state) {
  const std::int64_t per_unit = state.range(0);
  const std::int64_t units = 4096;
  freegap::store::RunHeader h;
  h.job_text = "# benchmark\n";
  h.job_canonical = "benchmark";
  h.job_hash = std::string(64, 'a');
  h.expression = "X";
  freegap::store::SizeLayout s;
  s.n = 1000;
  s.trials = units * per_unit;
  s.trials_per_unit = per_unit;
  s.observe.bin_edges = freegap::observe::uniform_edges(-2.5, 2.5, 200);
  s.observe.max_moment = 8;
  h.sizes.push_back(s);
  const std::string path =
      (std::filesystem::temp_directory_path() / "freegap_bench_store.h5").string();
  std::filesystem::remove(path);
  auto file = freegap::store::RunFile::create(path, h);
  file.begin_session(1, {"localhost"});
  std::vector<double> spectrum(1000);
  for (std::size_t i = 0; i < spectrum.size(); ++i) spectrum[i] = -2.0 + 4.0 * double(i) / 1000;
  std::int64_t unit = 0;
  for (auto _ : state) {
    state.PauseTiming();
    if (unit == units) state.SkipWithError("ran out of units");
    freegap::store::UnitResult r;
    r.size_index = 0;
    r.unit = unit;
    r.obs = freegap::observe::start_observations(s.observe);
    for (std::int64_t t = unit * per_unit; t < (unit + 1) * per_unit; ++t) {
      freegap::observe::record_trial(r.obs, static_cast<std::uint64_t>(t), spectrum);
    }
    state.ResumeTiming();
    file.write_unit(r, {0, "localhost", 1.0});
    ++unit;
  }
  file.end_session("interrupted");
  std::filesystem::remove(path);
}
BENCHMARK(BM_CommitUnit)->Arg(1)->Arg(8)->Arg(64)->Iterations(2000)->Unit(benchmark::kMillisecond);

}  // namespace

BENCHMARK_MAIN();
