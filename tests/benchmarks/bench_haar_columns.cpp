// One dense trial of B + U B U^* with U drawn whole (Model::full_haar) against U drawn as the
// r columns the plan reads (expr::Evaluation::haar_columns), side by side in one process.
//
//   B = diagonal, atoms +1 and −1 with weights 1/2, 1/2 (r = N/2) or 0.9, 0.1 (r = N/10)
//   U = haar_unitary, corrected QR
//   trial = model::SizeRunner::run (sampling, evaluation, eigenvalues), force_dense
//
// Trials alternate full / reduced with the same trial index (the order flips every trial), so
// each pair ran under the same machine load; the ratio shown is the median over pairs of
// reduced total / full total. One untimed warm-up pair per case. Nothing here asserts a time.
//
//   OPENBLAS_NUM_THREADS=1 ./build/tests/benchmarks/bench_haar_columns [--trials K] [N ...]
//       (default: 3 timed pairs, N = 1000 2000)
#include <algorithm>
#include <chrono>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <string>
#include <vector>

#include "freegap/linalg.hpp"
#include "freegap/model.hpp"

namespace {

namespace model = freegap::model;
using Clock = std::chrono::steady_clock;

constexpr std::uint64_t kSeed = 20261204;

double median(std::vector<double> v) {
  if (v.empty()) return 0.0;
  std::sort(v.begin(), v.end());
  const std::size_t h = v.size() / 2;
  return v.size() % 2 ? v[h] : 0.5 * (v[h - 1] + v[h]);
}

model::Model free_sum(double plus_weight, bool full_haar) {
  model::Model m;
  m.matrices = {model::parse_declaration("B=diagonal:atoms=1@" + std::to_string(plus_weight) +
                                         ",-1@" + std::to_string(1.0 - plus_weight)),
                model::parse_declaration("U=haar_unitary:method=qr")};
  m.expression = "B + U B U^*";
  m.force_dense = true;
  m.full_haar = full_haar;
  return m;
}

struct Stages {
  std::vector<double> sample, evaluate, eigen, total;
};

void time_trial(const model::SizeRunner& runner, std::uint64_t trial, Stages& s) {
  const auto start = Clock::now();
  const auto out = runner.run(kSeed, trial);
  const double total = std::chrono::duration<double>(Clock::now() - start).count();
  if (out.failed) std::fprintf(stderr, "trial %llu failed: %s\n",
                               static_cast<unsigned long long>(trial), out.reason.c_str());
  s.sample.push_back(out.seconds.sample);
  s.evaluate.push_back(out.seconds.evaluate);
  s.eigen.push_back(out.seconds.spectrum);
  s.total.push_back(total);
}

void measure(long n, double plus_weight, int trials) {
  const model::SizeRunner full(free_sum(plus_weight, true), n);
  const model::SizeRunner reduced(free_sum(plus_weight, false), n);
  const long r = static_cast<long>(reduced.evaluation().haar_columns()[1]);
  Stages f, c;
  std::vector<double> ratio;
  for (int t = 0; t <= trials; ++t) {  // t = 0: warm-up pair
    Stages wf, wc;
    Stages& sf = t == 0 ? wf : f;
    Stages& sc = t == 0 ? wc : c;
    if (t % 2) {
      time_trial(full, static_cast<std::uint64_t>(t), sf);
      time_trial(reduced, static_cast<std::uint64_t>(t), sc);
    } else {
      time_trial(reduced, static_cast<std::uint64_t>(t), sc);
      time_trial(full, static_cast<std::uint64_t>(t), sf);
    }
    if (t > 0) ratio.push_back(sc.total.back() / sf.total.back());
  }
  for (const auto& [name, s] : {std::pair{"full", &f}, std::pair{"columns", &c}}) {
    std::printf("%6ld %5.2f %6ld %-8s %6d %8.3f %8.3f %8.3f %8.3f", n, plus_weight,
                name[0] == 'f' ? n : r, name, trials, median(s->sample), median(s->evaluate),
                median(s->eigen), median(s->total));
    if (name[0] == 'c') std::printf("   %.3f", median(ratio));
    std::printf("\n");
  }
  std::fflush(stdout);
}

}  // namespace

int main(int argc, char** argv) {
  int trials = 3;
  std::vector<long> sizes;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    if (a == "--trials" && i + 1 < argc) {
      trials = std::atoi(argv[++i]);
    } else if (a == "--help" || a == "-h") {
      std::printf("usage: bench_haar_columns [--trials K] [N ...]   (default N: 1000 2000)\n");
      return 0;
    } else if (!a.empty() && a[0] != '-') {
      sizes.push_back(std::atol(a.c_str()));
    } else {
      std::fprintf(stderr, "unknown option %s\n", a.c_str());
      return 2;
    }
  }
  if (sizes.empty()) sizes = {1000, 2000};
  if (trials < 1) return 2;
  const char* threads = std::getenv("OPENBLAS_NUM_THREADS");
  std::printf("BLAS: %s; OPENBLAS_NUM_THREADS=%s\n", freegap::linalg::blas_description().c_str(),
              threads ? threads : "(unset)");
  std::printf("%6s %5s %6s %-8s %6s %8s %8s %8s %8s   %s\n", "N", "w(+1)", "U cols", "U drawn",
              "pairs", "sample", "evaluate", "eigen", "total", "ratio columns/full (paired)");
  for (const long n : sizes) {
    for (const double w : {0.5, 0.9}) measure(n, w, trials);
  }
  return 0;
}
