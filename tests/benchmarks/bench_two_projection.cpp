// Speed of the two_projection path (the β-Jacobi corner of a Haar unitary in its tridiagonal
// form, 400-bin histogram by Sturm counts, both extremes by bisection) for B + U B U^* with
// B = ±1 of equal weights, against the dense path (Haar QR, U B U^*, LAPACK eigenvalues,
// observe) of the same expression at the sizes the dense path can reach.
//
//   OPENBLAS_NUM_THREADS=1 ./build/tests/benchmarks/bench_two_projection
//
// One thread throughout (docs/performance.md §8). Peak RSS is reported as a counter (getrusage
// ru_maxrss, whole process so far). Results: tests/benchmarks/RESULTS-two-projection.md.
#include <benchmark/benchmark.h>
#include <sys/resource.h>

#include <cstdint>

#include "freegap/model.hpp"
#include "freegap/observe.hpp"
#include "freegap/tridiagonal.hpp"

namespace {

namespace obs = freegap::observe;
namespace model = freegap::model;

constexpr std::uint64_t kSeed = 20261204;

double peak_rss_mib() {
  rusage usage{};
  getrusage(RUSAGE_SELF, &usage);
  return static_cast<double>(usage.ru_maxrss) / 1024.0;  // KiB on Linux
}

model::Model free_sum(bool force_dense) {
  model::Model m;
  m.matrices.push_back(model::parse_declaration("B=diagonal:atoms=1@0.5,-1@0.5"));
  m.matrices.push_back(model::parse_declaration("U=haar_unitary"));
  m.expression = "B + U B U^*";
  m.force_dense = force_dense;
  return m;
}

obs::ObserveConfig config_400(int max_moment) {
  obs::ObserveConfig config;
  config.bin_edges = obs::uniform_edges(-2.5, 2.5, 400);
  config.max_moment = max_moment;
  return config;
}

// One trial through SizeRunner::observe_trial, as the runner does it: args N, K (moments), and
// whether the dense path is forced.
void BM_FreeSumTrial(benchmark::State& state) {
  const auto n = static_cast<Eigen::Index>(state.range(0));
  const bool dense = state.range(2) != 0;
  const model::SizeRunner runner(free_sum(dense), n);
  if (runner.path() != (dense ? model::Path::dense : model::Path::two_projection)) {
    state.SkipWithError("unexpected path");
    return;
  }
  const auto config = config_400(static_cast<int>(state.range(1)));
  std::uint64_t trial = 0;
  for (auto _ : state) {
    auto o = obs::start_observations(config);
    runner.observe_trial(o, kSeed, trial++);
    benchmark::DoNotOptimize(o);
  }
  state.counters["peak_rss_MiB"] = peak_rss_mib();
}
BENCHMARK(BM_FreeSumTrial)
    ->ArgNames({"N", "K", "dense"})
    ->Args({1000, 0, 0})
    ->Args({2000, 0, 0})
    ->Args({100000, 0, 0})
    ->Args({1000000, 0, 0})
    ->Args({1000000, 8, 0})
    ->Unit(benchmark::kMillisecond)
    ->MinTime(1.0);
BENCHMARK(BM_FreeSumTrial)
    ->ArgNames({"N", "K", "dense"})
    ->Args({1000, 0, 1})
    ->Args({2000, 0, 1})
    ->Unit(benchmark::kMillisecond)
    ->Iterations(3);

// The sampling alone (the corner and the tridiagonal matrix) at N = 10^6.
void BM_TwoProjectionSample(benchmark::State& state) {
  const auto n = static_cast<Eigen::Index>(state.range(0));
  freegap::tridiagonal::TwoProjectionSpec spec;
  spec.rank = n / 2;
  spec.s = 2.0;
  spec.t = 2.0;
  spec.shift = -2.0;
  spec.name = "U";
  std::uint64_t trial = 0;
  for (auto _ : state) {
    benchmark::DoNotOptimize(freegap::tridiagonal::sample(spec, n, kSeed, trial++));
  }
}
BENCHMARK(BM_TwoProjectionSample)->Arg(1000000)->Unit(benchmark::kMillisecond)->MinTime(1.0);

}  // namespace

BENCHMARK_MAIN();
