// Speed of free convolution densities: μ ⊞ ν and μ ⊠ ν on a 1,000-point grid, for empirical laws
// with up to 1,000 atoms (the target: under 1 s each). Nothing here asserts a time.
//
//   ./build/tests/benchmarks/bench_free_convolution
//
// Each iteration builds the convolution (support edges included) and evaluates the density on
// 1,000 points across the support with continuation along the grid.
#include <benchmark/benchmark.h>

#include <cmath>
#include <vector>

#include "freegap/analysis/free_convolution.hpp"
#include "freegap/analysis/laws.hpp"

namespace fa = freegap::analysis;

namespace {

// A deterministic spectrum with n atoms: quantiles of the semicircle (or of MP(1/2) when positive).
fa::LawPtr spectrum(int n, bool positive) {
  const auto base = positive ? fa::marchenko_pastur(0.5) : fa::semicircle();
  std::vector<double> values;
  values.reserve(n);
  for (int i = 0; i < n; ++i) values.push_back(base->quantile((i + 0.5) / n));
  return fa::empirical(values);
}

std::vector<double> grid(const fa::Support& s, int points) {
  std::vector<double> xs;
  for (int i = 0; i < points; ++i) xs.push_back(s.lo + (s.hi - s.lo) * (i + 0.5) / points);
  return xs;
}

void BM_FreeAdditiveDensity(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  const auto mu = spectrum(n, false);
  const auto nu = fa::atoms({{-1.0, 0.5}, {1.0, 0.5}});
  for (auto _ : state) {
    const auto law = fa::free_additive(mu, nu);
    const std::vector<double> f = law->densities(grid(law->support(), 1000));
    benchmark::DoNotOptimize(f.data());
  }
}
BENCHMARK(BM_FreeAdditiveDensity)->Arg(2)->Arg(100)->Arg(1000)->Unit(benchmark::kMillisecond);

void BM_FreeAdditiveDensityBothEmpirical(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  const auto mu = spectrum(n, false);
  const auto nu = spectrum(n, true);
  for (auto _ : state) {
    const auto law = fa::free_additive(mu, nu);
    const std::vector<double> f = law->densities(grid(law->support(), 1000));
    benchmark::DoNotOptimize(f.data());
  }
}
BENCHMARK(BM_FreeAdditiveDensityBothEmpirical)->Arg(100)->Arg(1000)->Unit(benchmark::kMillisecond);

void BM_FreeMultiplicativeDensity(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  const auto mu = fa::marchenko_pastur(1.0);
  const auto nu = spectrum(n, true);
  for (auto _ : state) {
    const auto law = fa::free_multiplicative(mu, nu);
    const std::vector<double> f = law->densities(grid(law->support(), 1000));
    benchmark::DoNotOptimize(f.data());
  }
}
BENCHMARK(BM_FreeMultiplicativeDensity)->Arg(2)->Arg(100)->Arg(1000)->Unit(benchmark::kMillisecond);

void BM_FreeMultiplicativeCdf(benchmark::State& state) {
  const auto mu = fa::marchenko_pastur(1.0);
  const auto nu = spectrum(static_cast<int>(state.range(0)), true);
  for (auto _ : state) {
    const auto law = fa::free_multiplicative(mu, nu);
    benchmark::DoNotOptimize(law->cdf(1.0));
  }
}
BENCHMARK(BM_FreeMultiplicativeCdf)->Arg(1000)->Unit(benchmark::kMillisecond);

}  // namespace

BENCHMARK_MAIN();
