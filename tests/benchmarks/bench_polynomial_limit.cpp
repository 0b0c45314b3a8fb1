// Speed of the polynomial limit: the density on 400 points of a degree-4 polynomial in 3 free
// variables (the target: under 10 s on one core). Nothing here asserts a time.
//
//   OPENBLAS_NUM_THREADS=1 ./build/tests/benchmarks/bench_polynomial_limit
//
// BM_PolynomialLimitBuild times the law's construction (linearization and both support edges);
// BM_PolynomialLimitDensity400 the 400-point density across the support (continued along the
// grid), with counters: pencil size and mean / max solver iterations (averaged + Newton) per point.
#include <benchmark/benchmark.h>

#include <string>
#include <vector>

#include "freegap/analysis/limits/polynomial_limit.hpp"
#include "freegap/model.hpp"

namespace fa = freegap::analysis;

namespace {

struct Model {
  const char* expression;
  std::vector<std::string> declarations;
};

// Degree 4 in 3 variables: three semicirculars (HRS + analytic Newton), and two semicirculars
// with a deterministic ±1 diagonal (subordination + finite-difference Newton).
const Model kModels[] = {
    {"X1 X2 X3 X2 + X2 X3 X2 X1 + X1^4 + X3 X1 X3 + X2", {"X1=gue", "X2=gue", "X3=gue"}},
    {"X1 X2 B X2 + X2 B X2 X1 + X1^4 + B X1 B + X2",
     {"X1=gue", "X2=gue", "B=diagonal:atoms=-1@0.5,1@0.5"}},
};

std::shared_ptr<const fa::PolynomialLaw> build(const Model& m) {
  std::vector<freegap::declarations::MatrixSpec> specs;
  for (const auto& d : m.declarations) specs.push_back(freegap::model::parse_declaration(d));
  fa::PolynomialLimitOptions options;
  options.exact_moment_order = 0;  // the exact engine is timed elsewhere
  return fa::polynomial_limit(freegap::expr::Expression(m.expression, specs), options);
}

void BM_PolynomialLimitBuild(benchmark::State& state) {
  const Model& m = kModels[state.range(0)];
  int size = 0;
  for (auto _ : state) {
    const auto law = build(m);
    size = law->pencil_size();
    benchmark::DoNotOptimize(law.get());
  }
  state.counters["pencil"] = size;
  state.SetLabel(m.expression);
}
BENCHMARK(BM_PolynomialLimitBuild)->Arg(0)->Arg(1)->Unit(benchmark::kMillisecond)->Iterations(3);

void BM_PolynomialLimitDensity400(benchmark::State& state) {
  const Model& m = kModels[state.range(0)];
  const auto law = build(m);
  const auto s = law->support();
  std::vector<double> xs;
  for (int i = 0; i < 400; ++i) xs.push_back(s.lo + (s.hi - s.lo) * (i + 0.5) / 400);
  double mean = 0.0, worst = 0.0, converged = 0.0;
  for (auto _ : state) {
    const auto reports = law->evaluate(xs);
    mean = worst = converged = 0.0;
    for (const auto& r : reports) {
      const double steps = r.averaged_steps + r.newton_steps;
      mean += steps / 400.0;
      worst = std::max(worst, steps);
      converged += r.converged ? 1.0 : 0.0;
    }
    benchmark::DoNotOptimize(reports.data());
  }
  state.counters["pencil"] = law->pencil_size();
  state.counters["iter_mean"] = mean;
  state.counters["iter_max"] = worst;
  state.counters["converged"] = converged;
  state.SetLabel(m.expression);
}
BENCHMARK(BM_PolynomialLimitDensity400)
    ->Arg(0)
    ->Arg(1)
    ->Unit(benchmark::kMillisecond)
    ->Iterations(3);

}  // namespace

BENCHMARK_MAIN();
