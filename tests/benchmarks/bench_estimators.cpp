// Cost of the estimators riding along with a trial at N = 1000 (tests/benchmarks/
// RESULTS-estimators.md): one dense trial of a sample-covariance model, and one call of each
// estimator kind on a spectrum of that size — the built-in (in the rank), the plug-in library
// (through its forked helper: socket pair, 8 KB spectrum each way's header), the command bridge
// (a process per trial, text in and out) — plus the library called directly, in-process, as the
// floor the helper's transport is compared with.
#include <benchmark/benchmark.h>
#include <dlfcn.h>

#include <string>
#include <vector>

#include "freegap/estimate.hpp"
#include "freegap/estimator_abi.h"
#include "freegap/job.hpp"
#include "freegap/model.hpp"

namespace {

using namespace freegap;

const std::string kDir = std::string(FREEGAP_BINARY_DIR) + "/tests/estimate";

std::string job_text(int n, const std::string& estimator) {
  return "seed = 1\nsizes = [" + std::to_string(n) +
         "]\ntrials = 1\nexpression = \"T W T\"\n[matrices.T]\nensemble = \"diagonal\"\n"
         "atoms = [[1.0, 0.5], [2.0, 0.5]]\n[matrices.W]\nensemble = \"wishart_real\"\n"
         "ratio = 0.5\n" + estimator;
}

const std::string kLibrary = "[[estimator]]\nname = \"lib\"\nlibrary = \"" + kDir +
                             "/libtest_plugin_ok.so\"\n[estimator.truth]\ntop = 1\nmean_square = 1\n";
const std::string kCommand = "[[estimator]]\nname = \"cmd\"\ncommand = [\"" + kDir +
                             "/estimate_command\"]\n[estimator.truth]\ntop = 1\nmean_square = 1\n";
const std::string kBuiltin =
    "[[estimator]]\nname = \"m\"\nbuiltin = \"population_second_moment\"\n"
    "[estimator.parameters]\nratio = 0.5\nentries = \"real\"\n[estimator.truth]\n"
    "second_moment = 1\nsecond_moment_unbiased = 1\n";

model::TrialOutcome one_trial(int n) {
  const auto j = job::parse_job(job_text(n, ""), "bench.toml");
  model::Model m;
  m.matrices = j.matrices;
  m.expression = j.expression;
  return model::SizeRunner(m, n).run(1, 0);
}

void BM_Trial(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  const auto j = job::parse_job(job_text(n, ""), "bench.toml");
  model::Model m;
  m.matrices = j.matrices;
  m.expression = j.expression;
  m.force_dense = true;
  const model::SizeRunner runner(m, n);
  std::uint64_t t = 0;
  for (auto _ : state) benchmark::DoNotOptimize(runner.run(1, t++));
}
BENCHMARK(BM_Trial)->Arg(1000)->Unit(benchmark::kMillisecond)->UseRealTime();

void estimate_bench(benchmark::State& state, const std::string& estimator) {
  const int n = static_cast<int>(state.range(0));
  const auto outcome = one_trial(n);
  estimate::EstimatorSet set(job::parse_job(job_text(n, estimator), "bench.toml"));
  estimate::TrialInput in;
  in.n = n;
  in.seed = 1;
  in.spectrum = {outcome.spectrum.data(), static_cast<std::size_t>(outcome.spectrum.size())};
  std::vector<double> values;
  std::vector<std::string> reasons;
  set.run(in, values, reasons);  // starts a library's helper outside the timed loop
  for (auto _ : state) {
    set.run(in, values, reasons);
    ++in.trial;
    if (!reasons[0].empty()) state.SkipWithError(reasons[0].c_str());
  }
}
void BM_Builtin(benchmark::State& state) { estimate_bench(state, kBuiltin); }
void BM_Library(benchmark::State& state) { estimate_bench(state, kLibrary); }
void BM_Command(benchmark::State& state) { estimate_bench(state, kCommand); }
BENCHMARK(BM_Builtin)->Arg(1000)->Unit(benchmark::kMicrosecond)->UseRealTime();
BENCHMARK(BM_Library)->Arg(1000)->Unit(benchmark::kMicrosecond)->UseRealTime();
BENCHMARK(BM_Command)->Arg(1000)->Unit(benchmark::kMicrosecond)->UseRealTime();

// The same library function called in the rank itself: what the helper's transport adds to.
void BM_LibraryInProcess(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  const auto outcome = one_trial(n);
  void* h = dlopen((kDir + "/libtest_plugin_ok.so").c_str(), RTLD_NOW | RTLD_LOCAL);
  auto fn = reinterpret_cast<freegap_estimator_estimate_fn>(
      dlsym(h, FREEGAP_ESTIMATOR_ESTIMATE_SYMBOL));
  freegap_trial t{};
  t.abi_version = FREEGAP_ESTIMATOR_ABI_VERSION;
  t.n = n;
  t.spectrum = outcome.spectrum.data();
  t.spectrum_length = outcome.spectrum.size();
  double out[2];
  char message[64];
  for (auto _ : state) {
    benchmark::DoNotOptimize(fn(&t, out, 2, message, 64));
    ++t.trial;
  }
}
BENCHMARK(BM_LibraryInProcess)->Arg(1000)->Unit(benchmark::kMicrosecond)->UseRealTime();

}  // namespace

BENCHMARK_MAIN();
