// Speed of the tridiagonal path (sample the Dumitriu–Edelman model, 400-bin histogram by Sturm
// counts, both extremes by bisection) against the dense path (sample GUE, LAPACK eigenvalues,
// observe) at the sizes both can reach, and the tridiagonal path alone up to N = 10^7.
//
//   OPENBLAS_NUM_THREADS=1 ./build-tri/tests/benchmarks/bench_tridiagonal
//
// One thread throughout (docs/performance.md §8). Peak RSS is reported as a
// counter (getrusage ru_maxrss, whole process so far: it only grows, so read it on the largest N).
// Results and how to read them: tests/benchmarks/RESULTS-tridiagonal.md.
#include <benchmark/benchmark.h>
#include <sys/resource.h>

#include <cstdint>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/linalg.hpp"
#include "freegap/observe.hpp"
#include "freegap/tridiagonal.hpp"

namespace {

namespace tri = freegap::tridiagonal;
namespace obs = freegap::observe;
namespace ens = freegap::ensembles;

constexpr std::uint64_t kSeed = 20261202;

double peak_rss_mib() {
  rusage usage{};
  getrusage(RUSAGE_SELF, &usage);
  return static_cast<double>(usage.ru_maxrss) / 1024.0;  // ru_maxrss is in KiB on Linux
}

tri::ModelSpec gue_model() {
  tri::ModelSpec spec;
  spec.family = tri::Family::hermite;
  spec.beta = 2.0;
  spec.name = "X";
  return spec;
}

obs::ObserveConfig config_400(int max_moment) {
  obs::ObserveConfig config;
  config.bin_edges = obs::uniform_edges(-2.5, 2.5, 400);
  config.max_moment = max_moment;
  return config;
}

// The unit of work: sample + 400-bin histogram + both extremes (tolerance 1e-10), no
// moments (max_moment = 0). Second argument: the moments' K, to show what they add.
void BM_TridiagonalTrial(benchmark::State& state) {
  const auto n = static_cast<Eigen::Index>(state.range(0));
  const auto config = config_400(static_cast<int>(state.range(1)));
  auto histogram = obs::empty_histogram(config);
  std::uint64_t trial = 0;
  for (auto _ : state) {
    auto row = tri::observe_tridiagonal_trial(gue_model(), n, kSeed, trial++, config, histogram);
    benchmark::DoNotOptimize(row);
  }
  state.counters["peak_rss_MiB"] = peak_rss_mib();
}
BENCHMARK(BM_TridiagonalTrial)
    ->ArgNames({"N", "K"})
    ->Args({2000, 0})
    ->Args({4000, 0})
    ->Args({10000, 0})
    ->Args({100000, 0})
    ->Args({1000000, 0})
    ->Args({1000000, 8})
    ->Unit(benchmark::kMillisecond)
    ->MinTime(1.0);
BENCHMARK(BM_TridiagonalTrial)
    ->ArgNames({"N", "K"})
    ->Args({10000000, 0})
    ->Args({10000000, 8})
    ->Unit(benchmark::kMillisecond)
    ->Iterations(3);

// The parts on one sampled matrix.
enum Part {
  kSample = 0,
  kHistogram = 1,
  kExtremes = 2,
  kLargest = 3,
  kMoments8 = 4,
  kMoments64 = 5
};

void BM_TridiagonalPart(benchmark::State& state) {
  const auto n = static_cast<Eigen::Index>(state.range(0));
  const auto part = static_cast<Part>(state.range(1));
  const auto matrix = tri::sample(gue_model(), n, kSeed, 0);
  const auto edges = obs::uniform_edges(-2.5, 2.5, 400);
  std::uint64_t trial = 0;
  for (auto _ : state) {
    switch (part) {
      case kSample:
        benchmark::DoNotOptimize(tri::sample(gue_model(), n, kSeed, ++trial));
        break;
      case kHistogram:
        benchmark::DoNotOptimize(tri::counts_below(matrix, edges));
        break;
      case kExtremes:
        benchmark::DoNotOptimize(tri::extremes(matrix, 1e-10));
        break;
      case kLargest:
        benchmark::DoNotOptimize(tri::largest(matrix, 1e-10));
        break;
      case kMoments8:
        benchmark::DoNotOptimize(tri::moments(matrix, 8));
        break;
      case kMoments64:
        benchmark::DoNotOptimize(tri::moments(matrix, 64));
        break;
    }
  }
}
BENCHMARK(BM_TridiagonalPart)
    ->ArgNames({"N", "part"})
    ->ArgsProduct({{1000000}, {kSample, kHistogram, kExtremes, kLargest, kMoments8, kMoments64}})
    ->Unit(benchmark::kMillisecond)
    ->MinTime(1.0);

// The dense path for the same observation: sample GUE (complex, dense), eigenvalues by LAPACK
// (linalg's automatic driver: zheevd_2stage from N = 400), 400-bin histogram, extremes, moments.
void BM_DenseTrial(benchmark::State& state) {
  const auto n = static_cast<Eigen::Index>(state.range(0));
  ens::MatrixSpec spec;
  spec.name = "X";
  spec.kind = ens::Kind::gue;
  const ens::Sampler sampler(spec);
  const auto config = config_400(0);
  auto histogram = obs::empty_histogram(config);
  std::uint64_t trial = 0;
  for (auto _ : state) {
    auto sample = sampler.draw(n, kSeed, trial);
    const Eigen::VectorXd lambda = freegap::linalg::eigenvalues(sample.complex);
    auto row = obs::observe_spectrum(trial++, {lambda.data(), static_cast<std::size_t>(lambda.size())},
                                  config, histogram);
    benchmark::DoNotOptimize(row);
  }
  state.counters["peak_rss_MiB"] = peak_rss_mib();
}
BENCHMARK(BM_DenseTrial)->Arg(2000)->Unit(benchmark::kMillisecond)->Iterations(3);
BENCHMARK(BM_DenseTrial)->Arg(4000)->Unit(benchmark::kMillisecond)->Iterations(1);

}  // namespace

BENCHMARK_MAIN();
