// Cost of the estimators riding along with a trial at N = 1000 (tests/benchmarks/
// RESULTS-estimators.md): one dense trial of a sample-covariance model, and one call of each
// estimator kind on a spectrum of that size — the built-in (in the rank), the plug-in library
// (through its forked helper: socket pair, 8 KB spectrum each way's header), the command bridge
// (a process per trial, text in and out) — plus the library called directly, in-process, as the
// floor the helper's transport is compared with. Then the same for a plug-in that reads the
// matrix (ABI version 2): a trial keeping its matrix (8 MB real, 16 MB complex at N = 1000) in the
// memory the helper maps, against one that does not; the call through the helper against the
// same call in-process.
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

// The complex counterpart for the matrix reader: a two-level signal in a Haar-rotated frame.
std::string complex_job_text(int n, const std::string& estimator) {
  return "seed = 1\nsizes = [" + std::to_string(n) +
         "]\ntrials = 1\nexpression = \"B + U B U^*\"\n[matrices.B]\nensemble = \"diagonal\"\n"
         "atoms = [[-1.0, 0.5], [1.0, 0.5]]\n[matrices.U]\nensemble = \"haar_unitary\"\n" +
         estimator;
}

std::string matrix_reader() {
  std::string text = "[[estimator]]\nname = \"probe\"\nlibrary = \"" + kDir +
                     "/libtest_plugin_matrix.so\"\n[estimator.truth]\n";
  for (const char* name : {"rows", "cols", "is_complex", "abi_seen", "checksum", "trace",
                           "frobenius_square", "entry_10_re", "entry_10_im", "entry_01_re",
                           "entry_01_im"}) {
    text += std::string(name) + " = \"none\"\n";
  }
  return text;
}

// range(1) = 0: the real T W T; 1: the complex B + U B U^*.
model::SizeRunner runner_for(int n, bool complex) {
  const auto j = job::parse_job(complex ? complex_job_text(n, "") : job_text(n, ""), "bench.toml");
  model::Model m;
  m.matrices = j.matrices;
  m.expression = j.expression;
  m.force_dense = true;
  return model::SizeRunner(m, n);
}

const std::string kLibrary = "[[estimator]]\nname = \"lib\"\nlibrary = \"" + kDir +
                             "/libtest_plugin_ok.so\"\n[estimator.truth]\ntop = 1\nmean_square = 1\n";
const std::string kCommand = "[[estimator]]\nname = \"cmd\"\ncommand = [\"" + kDir +
                             "/estimate_command\"]\n[estimator.truth]\ntop = 1\nmean_square = 1\n";
const std::string kBuiltin =
    "[[estimator]]\nname = \"m\"\nbuiltin = \"population_second_moment\"\n"
    "[estimator.parameters]\nratio = 0.5\nentries = \"real\"\n[estimator.truth]\n"
    "second_moment = 1\nsecond_moment_unbiased = 1\n";

model::TrialOutcome one_trial(int n) { return runner_for(n, false).run(1, 0); }

void BM_Trial(benchmark::State& state) {
  const auto runner = runner_for(static_cast<int>(state.range(0)), false);
  std::uint64_t t = 0;
  for (auto _ : state) benchmark::DoNotOptimize(runner.run(1, t++));
}
BENCHMARK(BM_Trial)->Arg(1000)->Unit(benchmark::kMillisecond)->UseRealTime();

// Times `set` on one trial's outcome, as the runner calls it (the first call, which starts a
// library's helper, outside the timed loop).
void time_set(benchmark::State& state, estimate::EstimatorSet& set,
              const model::TrialOutcome& outcome) {
  estimate::TrialInput in;
  in.n = outcome.spectrum.size();
  in.seed = 1;
  in.spectrum = {outcome.spectrum.data(), static_cast<std::size_t>(outcome.spectrum.size())};
  in.matrix = outcome.matrix;
  std::vector<double> values;
  std::vector<std::string> reasons;
  set.run(in, values, reasons);
  for (auto _ : state) {
    set.run(in, values, reasons);
    ++in.trial;
    if (!reasons[0].empty()) state.SkipWithError(reasons[0].c_str());
  }
}

void estimate_bench(benchmark::State& state, const std::string& estimator) {
  const int n = static_cast<int>(state.range(0));
  estimate::EstimatorSet set(job::parse_job(job_text(n, estimator), "bench.toml"));
  time_set(state, set, one_trial(n));
}
void BM_Builtin(benchmark::State& state) { estimate_bench(state, kBuiltin); }
void BM_Library(benchmark::State& state) { estimate_bench(state, kLibrary); }
void BM_Command(benchmark::State& state) { estimate_bench(state, kCommand); }
BENCHMARK(BM_Builtin)->Arg(1000)->Unit(benchmark::kMicrosecond)->UseRealTime();
BENCHMARK(BM_Library)->Arg(1000)->Unit(benchmark::kMicrosecond)->UseRealTime();
BENCHMARK(BM_Command)->Arg(1000)->Unit(benchmark::kMicrosecond)->UseRealTime();

// A plug-in's estimate function called in the rank itself, on one trial's spectrum (and
// matrix): the floor that the call through the helper is compared with.
void call_in_process(benchmark::State& state, const std::string& library,
                     const Eigen::VectorXd& spectrum, const expr::MatrixView& matrix, int count) {
  void* h = dlopen((kDir + "/" + library).c_str(), RTLD_NOW | RTLD_LOCAL);
  auto fn = reinterpret_cast<freegap_estimator_estimate_fn>(
      dlsym(h, FREEGAP_ESTIMATOR_ESTIMATE_SYMBOL));
  freegap_trial t{};
  t.abi_version = FREEGAP_ESTIMATOR_ABI_VERSION;
  t.n = spectrum.size();
  t.spectrum = spectrum.data();
  t.spectrum_length = spectrum.size();
  t.matrix = matrix.data;
  t.matrix_rows = matrix.rows;
  t.matrix_cols = matrix.cols;
  t.matrix_is_complex = matrix.is_complex ? 1 : 0;
  std::vector<double> out(static_cast<std::size_t>(count));
  char message[64];
  for (auto _ : state) {
    benchmark::DoNotOptimize(fn(&t, out.data(), count, message, 64));
    ++t.trial;
  }
}

// The same library function called in the rank itself: what the helper's transport adds to.
void BM_LibraryInProcess(benchmark::State& state) {
  call_in_process(state, "libtest_plugin_ok.so", one_trial(static_cast<int>(state.range(0))).spectrum,
                  {}, 2);
}
BENCHMARK(BM_LibraryInProcess)->Arg(1000)->Unit(benchmark::kMicrosecond)->UseRealTime();

// A trial that keeps its matrix for a reader (a whole copy, the upper triangle mirrored) against
// one that does not.
void BM_TrialMatrix(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  const bool complex = state.range(1) != 0;
  const auto runner = runner_for(n, complex);
  estimate::EstimatorSet set(job::parse_job(
      complex ? complex_job_text(n, matrix_reader()) : job_text(n, matrix_reader()), "bench.toml"));
  model::MatrixBuffer keep;
  if (state.range(2) != 0) keep = [&set](std::size_t k) { return set.matrix_buffer(k); };
  std::uint64_t t = 0;
  for (auto _ : state) benchmark::DoNotOptimize(runner.run(1, t++, keep));
}
BENCHMARK(BM_TrialMatrix)
    ->Args({1000, 0, 0})->Args({1000, 0, 1})->Args({1000, 1, 0})->Args({1000, 1, 1})
    ->ArgNames({"n", "complex", "keep"})->Unit(benchmark::kMillisecond)->UseRealTime();

// Keeping the matrix alone — the copy a trial makes for a reader (and, for a self-adjoint
// matrix, the mirror of its lower triangle) into the shared memory — which BM_TrialMatrix's
// difference shows only within the trial's own run-to-run spread.
void BM_KeepCopy(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  const bool complex = state.range(1) != 0;
  const auto runner = runner_for(n, complex);
  const auto value = runner.evaluation().evaluate(runner.draw(1, 0));
  estimate::EstimatorSet set(job::parse_job(
      complex ? complex_job_text(n, matrix_reader()) : job_text(n, matrix_reader()), "bench.toml"));
  const model::MatrixBuffer room = [&set](std::size_t k) { return set.matrix_buffer(k); };
  for (auto _ : state) benchmark::DoNotOptimize(model::keep_copy(value, true, room));
}
BENCHMARK(BM_KeepCopy)->Args({1000, 0})->Args({1000, 1})->ArgNames({"n", "complex"})
    ->Unit(benchmark::kMicrosecond)->UseRealTime();

// The matrix reader through its helper: request and spectrum over the socket pair, the matrix
// read where the runner keeps it, in the memory the helper maps.
void BM_LibraryMatrix(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  const bool complex = state.range(1) != 0;
  estimate::EstimatorSet set(job::parse_job(
      complex ? complex_job_text(n, matrix_reader()) : job_text(n, matrix_reader()), "bench.toml"));
  time_set(state, set,
           runner_for(n, complex).run(1, 0, [&set](std::size_t k) { return set.matrix_buffer(k); }));
}
BENCHMARK(BM_LibraryMatrix)->Args({1000, 0})->Args({1000, 1})->ArgNames({"n", "complex"})
    ->Unit(benchmark::kMicrosecond)->UseRealTime();

// The same plug-in function called in the rank: its own O(N²) work, the floor.
void BM_LibraryMatrixInProcess(benchmark::State& state) {
  std::vector<double> room;
  const auto outcome = runner_for(static_cast<int>(state.range(0)), state.range(1) != 0)
                           .run(1, 0, [&room](std::size_t k) {
                             room.resize(k);
                             return room.data();
                           });
  call_in_process(state, "libtest_plugin_matrix.so", outcome.spectrum, outcome.matrix, 11);
}
BENCHMARK(BM_LibraryMatrixInProcess)->Args({1000, 0})->Args({1000, 1})
    ->ArgNames({"n", "complex"})->Unit(benchmark::kMicrosecond)->UseRealTime();

}  // namespace

BENCHMARK_MAIN();
