// The operator norm of X1 X2 + X2 X1 (X1, X2 independent GUE) by the Krylov path against the
// full spectrum on the dense path, side by side in one process, on the same sampled matrices.
//
//   dense  = model::SizeRunner::run with path = dense: sampling, X1·X2 (zgemm) + its adjoint,
//            every eigenvalue (zheevd_2stage); the norm is max |λ|
//   krylov = observe_trial with path = krylov and observe.extremes_only: sampling, Lanczos on
//            products with X1 and X2 (4 zhemv per step), the extremes and their certificate
//
// Both paths draw X1 and X2 from the same streams, so each pair of trials sees the same matrices;
// the relative difference of the two norms is printed beside the times. Trials alternate the two
// paths (the order flips every pair) so both see the same machine load; one untimed warm-up pair
// per size; medians. Nothing here asserts a time.
//
//   OPENBLAS_NUM_THREADS=1 ./build/tests/benchmarks/bench_krylov [--trials K] [N ...]
//       (default: 2 timed pairs, N = 1000 2000 4000)
#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <string>
#include <vector>

#include "freegap/linalg.hpp"
#include "freegap/model.hpp"
#include "freegap/observe.hpp"

namespace {

namespace model = freegap::model;
namespace observe = freegap::observe;
using Clock = std::chrono::steady_clock;

constexpr std::uint64_t kSeed = 20261205;

double median(std::vector<double> v) {
  if (v.empty()) return 0.0;
  std::sort(v.begin(), v.end());
  const std::size_t h = v.size() / 2;
  return v.size() % 2 ? v[h] : 0.5 * (v[h - 1] + v[h]);
}

model::Model anticommutator(model::PathRequest path) {
  model::Model m;
  m.matrices = {model::parse_declaration("X1=gue"), model::parse_declaration("X2=gue")};
  m.expression = "X1 X2 + X2 X1";
  m.extremes_only = true;
  m.bins = 0;
  m.max_moment = 0;
  m.path = path;
  return m;
}

double seconds_since(Clock::time_point t) {
  return std::chrono::duration<double>(Clock::now() - t).count();
}

struct Pair {
  double dense = 0, krylov = 0, relative = 0, steps = 0;
};

Pair one_pair(const model::SizeRunner& dense, const model::SizeRunner& krylov, std::uint64_t t) {
  Pair p;
  double dense_norm = 0, krylov_norm = 0;
  const auto run_dense = [&] {
    const auto start = Clock::now();
    const auto out = dense.run(kSeed, t);
    p.dense = seconds_since(start);
    if (out.failed) std::fprintf(stderr, "dense trial failed: %s\n", out.reason.c_str());
    dense_norm = std::max(std::abs(out.spectrum.minCoeff()), std::abs(out.spectrum.maxCoeff()));
  };
  const auto run_krylov = [&] {
    observe::ObserveConfig c;
    c.extremes_only = true;
    c.max_moment = 0;
    auto obs = observe::start_observations(c);
    const auto start = Clock::now();
    krylov.observe_trial(obs, kSeed, t);
    p.krylov = seconds_since(start);
    const auto& row = obs.trials.front();
    if (row.failed) std::fprintf(stderr, "krylov trial failed: %s\n", row.reason.c_str());
    krylov_norm = row.norm;
    p.steps = row.certificate.iterations;
  };
  if (t % 2) {
    run_dense();
    run_krylov();
  } else {
    run_krylov();
    run_dense();
  }
  p.relative = std::abs(krylov_norm - dense_norm) / dense_norm;
  return p;
}

void measure(long n, int trials) {
  const model::SizeRunner dense(anticommutator(model::PathRequest::dense), n);
  const model::SizeRunner krylov(anticommutator(model::PathRequest::krylov), n);
  std::vector<double> d, k, ratio, steps;
  double worst = 0;
  for (int t = 0; t <= trials; ++t) {  // t = 0: warm-up pair
    const Pair p = one_pair(dense, krylov, static_cast<std::uint64_t>(t));
    worst = std::max(worst, p.relative);
    if (t == 0) continue;
    d.push_back(p.dense);
    k.push_back(p.krylov);
    ratio.push_back(p.dense / p.krylov);
    steps.push_back(p.steps);
  }
  std::printf("| %5ld | %8.3f | %8.3f | %6.1f | %5.0f | %.1e |\n", n, median(d), median(k),
              median(ratio), median(steps), worst);
}

}  // namespace

int main(int argc, char** argv) {
  int trials = 2;
  std::vector<long> sizes;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    if (a == "--trials" && i + 1 < argc) {
      trials = std::max(1, std::atoi(argv[++i]));
    } else {
      sizes.push_back(std::atol(argv[i]));
    }
  }
  if (sizes.empty()) sizes = {1000, 2000, 4000};
  std::printf("# X1 X2 + X2 X1 (GUE): operator norm, full spectrum vs Krylov; %s\n",
              freegap::linalg::blas_description().c_str());
  std::printf("# medians of %d timed pairs (same matrices per pair), one warm-up pair\n", trials);
  std::printf("| N | dense s | krylov s | dense/krylov | steps | max rel. norm diff |\n");
  std::printf("|---|---|---|---|---|---|\n");
  for (const long n : sizes) measure(n, trials);
  return 0;
}
