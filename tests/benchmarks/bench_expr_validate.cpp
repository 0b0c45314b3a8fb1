// How long an expression takes to validate (parse, bounds, shapes, the self-adjointness
// expansion) and to plan, for long sums: the bounds of include/freegap/expr.hpp must not make
// long but cheap expressions slow. Numbers: RESULTS-inputs.md.
#include <benchmark/benchmark.h>

#include <string>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/expr.hpp"

namespace {

namespace en = freegap::ensembles;

std::vector<en::MatrixSpec> declared() {
  std::vector<en::MatrixSpec> out;
  for (const char* name : {"X1", "X2", "X3"}) {
    en::MatrixSpec s;
    s.name = name;
    s.kind = en::Kind::gue;
    out.push_back(s);
  }
  return out;
}

// `terms` terms, each a product of 1–4 factors with a coefficient, most of them distinct words
// ("0.5 X1 X3 X2 + 0.25 X2^2 X1 - ..."), written as a user would write a long polynomial.
std::string long_sum(int terms) {
  const char* names[] = {"X1", "X2", "X3"};
  std::string text;
  unsigned state = 12345;
  for (int t = 0; t < terms; ++t) {
    state = state * 1103515245u + 12345u;
    text += t == 0 ? "" : (state & 256) ? " + " : " - ";
    text += std::to_string(1 + (state >> 8) % 9) + "/8";
    const int factors = 1 + static_cast<int>((state >> 16) % 4);
    for (int f = 0; f < factors; ++f) {
      state = state * 1103515245u + 12345u;
      text += std::string(" ") + names[(state >> 16) % 3];
      if ((state >> 20) % 4 == 0) text += "^2";
    }
  }
  return text;
}

void BM_ValidateLongSum(benchmark::State& state) {
  const auto specs = declared();
  const std::string text = long_sum(static_cast<int>(state.range(0)));
  for (auto _ : state) {
    const freegap::expr::Expression e(text, specs);
    benchmark::DoNotOptimize(e.self_adjoint());
  }
  state.counters["chars"] = static_cast<double>(text.size());
}
BENCHMARK(BM_ValidateLongSum)->Arg(1000)->Arg(10000)->Unit(benchmark::kMillisecond);

void BM_ValidateAndPlanLongSum(benchmark::State& state) {
  const auto specs = declared();
  const std::string text = long_sum(static_cast<int>(state.range(0)));
  for (auto _ : state) {
    const freegap::expr::Expression e(text, specs);
    const freegap::expr::Evaluation plan(e, 100);
    benchmark::DoNotOptimize(plan.flops());
  }
}
BENCHMARK(BM_ValidateAndPlanLongSum)->Arg(10000)->Unit(benchmark::kMillisecond);

// Refusals are immediate whatever the length: the bounds are checked before any expansion.
void BM_RefuseDeepNesting(benchmark::State& state) {
  const auto specs = declared();
  const std::string text = std::string(100000, '(') + "X1" + std::string(100000, ')');
  for (auto _ : state) {
    try {
      const freegap::expr::Expression e(text, specs);
    } catch (const freegap::expr::ExprError& e) {
      benchmark::DoNotOptimize(e.column());
    }
  }
}
BENCHMARK(BM_RefuseDeepNesting)->Unit(benchmark::kMillisecond);

}  // namespace

BENCHMARK_MAIN();
