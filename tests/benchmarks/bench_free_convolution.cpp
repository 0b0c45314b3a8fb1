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

#include "freegap/analysis/limits/free_convolution.hpp"
#include "freegap/analysis/limits/laws.hpp"

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

// The cost of one density value at a singular point against an ordinary one (issue: limit engine,
// "points where the density is infinite cost no more than ordinary points"). Arg 0: A B A with B
// = ±1 (free compound Poisson, density ~ |x|^(−1/3) at 0), at x = 1e-12; arg 1: the same law at
// x = 1; arg 2: S W S (MP(1) ⊠ ½δ₁ + ½δ₄, density ~ x^(−1/2) at 0) at x = 1e-12; arg 3: at x = 1.
// Each iteration is one uncached density value (no warm start from a neighbour).
void BM_DensityAtSingularPoint(benchmark::State& state) {
  const int which = static_cast<int>(state.range(0));
  const fa::LawPtr law =
      which < 2 ? fa::free_compound_poisson({{-1.0, 0.5}, {1.0, 0.5}})
                : fa::LawPtr(fa::free_multiplicative(fa::marchenko_pastur(1.0),
                                                     fa::atoms({{1.0, 0.5}, {4.0, 0.5}})));
  const double x = which % 2 == 0 ? 1e-12 : 1.0;
  for (auto _ : state) benchmark::DoNotOptimize(law->density(x));
}
BENCHMARK(BM_DensityAtSingularPoint)->DenseRange(0, 3)->Unit(benchmark::kMicrosecond);

// The CDF table of the same two laws (built once per law; the mass near 0 included).
void BM_CdfTableWithSingularPoint(benchmark::State& state) {
  const int which = static_cast<int>(state.range(0));
  for (auto _ : state) {
    const fa::LawPtr law =
        which == 0 ? fa::free_compound_poisson({{-1.0, 0.5}, {1.0, 0.5}})
                   : fa::LawPtr(fa::free_multiplicative(fa::marchenko_pastur(1.0),
                                                        fa::atoms({{1.0, 0.5}, {4.0, 0.5}})));
    benchmark::DoNotOptimize(law->cdf(0.0));
  }
}
BENCHMARK(BM_CdfTableWithSingularPoint)->DenseRange(0, 1)->Unit(benchmark::kMillisecond);

}  // namespace

BENCHMARK_MAIN();
