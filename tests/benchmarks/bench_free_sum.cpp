// Speed of one full trial of B + U B U^* through the library's own path, stage by stage.
//
//   B = diagonal with atoms {+1, 1/2}, {−1, 1/2}   (N/2 entries +1, then N/2 entries −1)
//   U = haar_unitary, corrected QR
//   trial = model::SizeRunner::run (sampling, evaluation, eigenvalues: TrialOutcome::seconds)
//           + observe::record_trial (400-bin histogram on [−2.5, 2.5], moments, extremes)
//
// This is the C++ side of the comparison with tests/benchmarks/numpy_free_sum_trial.py; the
// driver tests/benchmarks/compare_free_sum.sh runs both, alternating, and prints the table.
// A plain main (no Google Benchmark loop): the trial count is fixed (3 at N ≥ 2000 by default),
// every trial has its own index (fresh random numbers), and one warm-up trial per N is untimed.
// Nothing here asserts a time.
//
//   OPENBLAS_NUM_THREADS=1 ./build/tests/benchmarks/bench_free_sum [--json] [--trials 7]
//       [--trials-large 3] [--warmup 1] [--split-sample] [--explain] [N ...]
//
// Columns (seconds per trial, median over the timed trials; "total" is the median of the
// per-trial totals):
//   sample     SizeRunner::draw: Ginibre generation + zgeqrf/zungqr + phase fix (+ B's diagonal);
//              U is drawn as the N × N/2 isometry of the columns the plan reads
//              (expr::Evaluation::haar_columns; tests/benchmarks/bench_haar_columns.cpp compares
//              it with the whole N × N draw)
//   evaluate   Plan::evaluate: B + U B U^* (one zherk on the N/2 "+1" columns, per the plan)
//   eigen      compute_spectrum: zheevd_2stage (N ≥ 400) on the lower triangle
//   observe    observe::record_trial (histogram + moments + extremes)
//   other      run() wall time not in the three stages (the finite check, allocations)
//   total      wall time of run() + record_trial
//   rest       (JSON "rest_share") median over trials of (total − sample − eigen)/total: the share of
//              the trial outside the Haar sample and the eigenvalue step, taken trial by trial
// With --split-sample, the sampling stage is also split, on a separate matrix drawn with the
// same calls the sampler makes (rng::Stream::fill_complex_normal, then linalg::haar_isometry for
// the plan's r columns of U, linalg::haar_from_qr for a whole U), of the shape the sampler draws:
//   gen        Philox + Marsaglia polar for the N·r complex normals
//   qr         haar_isometry (Cholesky QR for 2r ≤ N, else zgeqrf + zungqr + phase fix)
#include <algorithm>
#include <chrono>
#include <cmath>
#include <complex>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <string>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/expr.hpp"
#include "freegap/linalg.hpp"
#include "freegap/model.hpp"
#include "freegap/observe.hpp"
#include "freegap/rng.hpp"

namespace {

namespace ens = freegap::ensembles;
namespace model = freegap::model;
namespace observe = freegap::observe;
namespace la = freegap::linalg;
namespace rng = freegap::rng;
using Clock = std::chrono::steady_clock;

constexpr std::uint64_t kSeed = 20261202;

double median(std::vector<double> v) {
  if (v.empty()) return 0.0;
  std::sort(v.begin(), v.end());
  const std::size_t h = v.size() / 2;
  return v.size() % 2 ? v[h] : 0.5 * (v[h - 1] + v[h]);
}

double seconds_since(Clock::time_point start) {
  return std::chrono::duration<double>(Clock::now() - start).count();
}

model::Model free_sum_model() {
  model::Model m;
  ens::MatrixSpec b;
  b.name = "B";
  b.kind = ens::Kind::diagonal;
  b.diagonal.kind = ens::DiagonalLawKind::atoms;
  b.diagonal.atoms = {{1.0, 0.5}, {-1.0, 0.5}};
  ens::MatrixSpec u;
  u.name = "U";
  u.kind = ens::Kind::haar_unitary;
  u.haar = ens::HaarMethod::qr;
  m.matrices = {b, u};
  m.expression = "B + U B U^*";
  return m;
}

struct Row {
  long n = 0;
  int trials = 0;
  double sample = 0, evaluate = 0, eigen = 0, observe = 0, other = 0, total = 0;
  double rest_share = 0;  // median over trials of (total − sample − eigen)/total
  double gen = -1, qr = -1;  // --split-sample only
  int failed = 0;
};

Row measure(long n, int trials, int warmup, bool split_sample, bool explain) {
  const model::SizeRunner runner(free_sum_model(), n);
  if (explain) std::fprintf(stderr, "N = %ld\n%s\n", n, runner.evaluation().explain().c_str());
  observe::ObserveConfig config;
  config.bin_edges = observe::uniform_edges(-2.5, 2.5, 400);
  config.kind = runner.spectrum_kind();
  observe::Observations obs = observe::start_observations(config);

  std::vector<double> sample, evaluate, eigen, obs_s, other, total, rest_share;
  Row row;
  row.n = n;
  row.trials = trials;
  for (int t = 0; t < warmup + trials; ++t) {
    const auto trial = static_cast<std::uint64_t>(t);
    const auto start = Clock::now();
    const model::TrialOutcome out = runner.run(kSeed, trial);
    const double run_wall = seconds_since(start);
    const auto obs_start = Clock::now();
    model::record(obs, out);  // observe::record_trial for a successful trial
    const double obs_wall = seconds_since(obs_start);
    const double all = seconds_since(start);
    if (t < warmup) continue;
    if (out.failed) ++row.failed;
    sample.push_back(out.seconds.sample);
    evaluate.push_back(out.seconds.evaluate);
    eigen.push_back(out.seconds.spectrum);
    obs_s.push_back(obs_wall);
    other.push_back(run_wall - out.seconds.sample - out.seconds.evaluate - out.seconds.spectrum);
    total.push_back(all);
    rest_share.push_back((all - out.seconds.sample - out.seconds.spectrum) / all);
  }
  row.sample = median(sample);
  row.evaluate = median(evaluate);
  row.eigen = median(eigen);
  row.observe = median(obs_s);
  row.other = median(other);
  row.total = median(total);
  row.rest_share = median(rest_share);

  if (split_sample) {
    std::vector<double> gen, qr;
    const auto r = runner.evaluation().haar_columns()[1];
    for (int t = 0; t < trials; ++t) {
      Eigen::MatrixXcd z(n, r >= 0 ? r : n);
      auto start = Clock::now();
      rng::Stream stream({kSeed, "U", static_cast<std::uint64_t>(n), 1000000u + t});
      stream.fill_complex_normal({z.data(), static_cast<std::size_t>(z.size())});
      gen.push_back(seconds_since(start));
      start = Clock::now();
      if (r >= 0) {
        la::haar_isometry(z);
      } else {
        la::haar_from_qr(z);
      }
      qr.push_back(seconds_since(start));
    }
    row.gen = median(gen);
    row.qr = median(qr);
  }
  return row;
}

}  // namespace

int main(int argc, char** argv) {
  bool json = false, split_sample = false, explain = false;
  int trials = 7, trials_large = 3, warmup = 1;
  std::vector<long> sizes;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    auto next_int = [&](const char* what) {
      if (i + 1 >= argc) {
        std::fprintf(stderr, "%s needs a value\n", what);
        std::exit(2);
      }
      return std::atoi(argv[++i]);
    };
    if (a == "--json") json = true;
    else if (a == "--split-sample") split_sample = true;
    else if (a == "--explain") explain = true;
    else if (a == "--trials") trials = next_int("--trials");
    else if (a == "--trials-large") trials_large = next_int("--trials-large");
    else if (a == "--warmup") warmup = next_int("--warmup");
    else if (a == "--help" || a == "-h") {
      std::printf(
          "usage: bench_free_sum [--json] [--trials K] [--trials-large K] [--warmup K]\n"
          "                      [--split-sample] [--explain] [N ...]   (default N: 500 1000 2000)\n");
      return 0;
    } else if (!a.empty() && a[0] != '-') sizes.push_back(std::atol(a.c_str()));
    else {
      std::fprintf(stderr, "unknown option %s\n", a.c_str());
      return 2;
    }
  }
  if (sizes.empty()) sizes = {500, 1000, 2000};
  if (trials < 1 || trials_large < 1 || warmup < 0) {
    std::fprintf(stderr, "trial counts must be >= 1 (warm-up >= 0)\n");
    return 2;
  }

  std::vector<Row> rows;
  for (long n : sizes) rows.push_back(measure(n, n >= 2000 ? trials_large : trials, warmup,
                                              split_sample, explain));

  const char* threads = std::getenv("OPENBLAS_NUM_THREADS");
  if (json) {
    std::printf("{\"program\": \"bench_free_sum\", \"blas\": \"%s\", \"openblas_num_threads\": %s%s%s, "
                "\"results\": [",
                la::blas_description().c_str(), threads ? "\"" : "", threads ? threads : "null",
                threads ? "\"" : "");
    for (std::size_t i = 0; i < rows.size(); ++i) {
      const Row& r = rows[i];
      std::printf("%s{\"n\": %ld, \"trials\": %d, \"failed\": %d, \"median_seconds\": {"
                  "\"sample\": %.6g, \"evaluate\": %.6g, \"eigenvalues\": %.6g, "
                  "\"observe\": %.6g, \"other\": %.6g, \"total\": %.6g, \"rest_share\": %.6g",
                  i ? ", " : "", r.n, r.trials, r.failed, r.sample, r.evaluate, r.eigen, r.observe,
                  r.other, r.total, r.rest_share);
      if (r.gen >= 0) std::printf(", \"generate\": %.6g, \"qr_phase\": %.6g", r.gen, r.qr);
      std::printf("}}");
    }
    std::printf("]}\n");
    return 0;
  }
  std::printf("BLAS: %s; OPENBLAS_NUM_THREADS=%s\n", la::blas_description().c_str(),
              threads ? threads : "(unset)");
  std::printf("%6s %6s %9s %9s %9s %9s %9s %9s", "N", "trials", "sample", "evaluate", "eigen",
              "observe", "other", "total");
  if (split_sample) std::printf(" %9s %9s", "gen", "qr");
  std::printf("\n");
  for (const Row& r : rows) {
    std::printf("%6ld %6d %9.4f %9.4f %9.4f %9.5f %9.5f %9.4f", r.n, r.trials, r.sample, r.evaluate,
                r.eigen, r.observe, r.other, r.total);
    if (split_sample) std::printf(" %9.4f %9.4f", r.gen, r.qr);
    std::printf("%s\n", r.failed ? "  (failed trials!)" : "");
  }
  return 0;
}
