// Speed of the foundation parts: every sampler; the Haar polar factor (Newton + eigendecomposition,
// and by the SVD) against corrected QR, paired on the same matrices; and the eigenvalue step
// against a direct LAPACKE call on the same matrix.
//
// Run with one BLAS thread (the production layout is one rank per core with one thread each,
// docs/performance.md §8, ranks rather than threads):
//   OPENBLAS_NUM_THREADS=1 ./build-bench/tests/benchmarks/bench_foundation
//
// Sampler benchmarks are reported as the median over repetitions (Google Benchmark's `median`
// aggregate). The eigenvalue benchmarks alternate freegap's call and the direct LAPACKE call on
// copies of one matrix, iteration by iteration (first call swapped every iteration, so neither
// side always runs on a warm cache), time both by hand, and report as counters the median time
// of each side and the median of the per-pair ratios freegap/direct: on a shared, noisy machine
// a paired ratio moves far less than either time (docs/performance.md §0: ±5–10 % vs ±15–25 %).
#include <benchmark/benchmark.h>
#include <lapacke.h>

#include <algorithm>
#include <chrono>
#include <complex>
#include <cstdint>
#include <cstdlib>
#include <string>
#include <type_traits>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/linalg.hpp"

namespace {

namespace ens = freegap::ensembles;
namespace la = freegap::linalg;

constexpr std::uint64_t kSeed = 20261202;
constexpr la::Index kSizes[] = {500, 1000, 2000};

double median(std::vector<double> v) {
  if (v.empty()) return 0.0;
  std::sort(v.begin(), v.end());
  const std::size_t h = v.size() / 2;
  return v.size() % 2 ? v[h] : 0.5 * (v[h - 1] + v[h]);
}

double seconds_since(std::chrono::steady_clock::time_point start) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
}

// ---- samplers -------------------------------------------------------------------------------

struct SamplerCase {
  const char* label;
  ens::MatrixSpec spec;
};

ens::MatrixSpec make_spec(ens::Kind kind, double ratio = 1.0,
                          ens::HaarMethod haar = ens::HaarMethod::qr) {
  ens::MatrixSpec spec;
  spec.name = "A";
  spec.kind = kind;
  spec.ratio = ratio;
  spec.haar = haar;
  // Two atoms ±1 with weight 1/2: the B of the B + U B U^* trial in docs/performance.md §4.
  spec.diagonal.kind = ens::DiagonalLawKind::atoms;
  spec.diagonal.atoms = {{-1.0, 0.5}, {1.0, 0.5}};
  return spec;
}

std::vector<SamplerCase> sampler_cases() {
  using K = ens::Kind;
  using H = ens::HaarMethod;
  return {
      {"gue", make_spec(K::gue)},
      {"goe", make_spec(K::goe)},
      {"wigner_rademacher", make_spec(K::wigner_rademacher)},
      {"wishart_complex_c1", make_spec(K::wishart_complex, 1.0)},
      {"wishart_complex_c0.5", make_spec(K::wishart_complex, 0.5)},
      {"wishart_real_c1", make_spec(K::wishart_real, 1.0)},
      {"ginibre_complex", make_spec(K::ginibre_complex)},
      {"haar_unitary_qr", make_spec(K::haar_unitary, 1.0, H::qr)},
      {"haar_unitary_polar", make_spec(K::haar_unitary, 1.0, H::polar)},
      {"haar_orthogonal_qr", make_spec(K::haar_orthogonal, 1.0, H::qr)},
      {"haar_orthogonal_polar", make_spec(K::haar_orthogonal, 1.0, H::polar)},
      {"diagonal_atoms", make_spec(K::diagonal)},
  };
}

void run_sampler(benchmark::State& state, const ens::MatrixSpec& spec) {
  const ens::Sampler sampler(spec);
  const auto n = static_cast<la::Index>(state.range(0));
  // Fixed seed, a fresh trial every iteration: each iteration samples a new matrix, as a run does.
  std::uint64_t trial = 0;
  for (auto _ : state) {
    ens::Sample s = sampler.draw(n, kSeed, trial++);
    benchmark::DoNotOptimize(s.real.data());
    benchmark::DoNotOptimize(s.complex.data());
    benchmark::DoNotOptimize(s.diagonal.data());
    benchmark::ClobberMemory();
  }
}

// ---- Haar factorisations, paired ---------------------------------------------------------------

// One Ginibre matrix per iteration (untimed), then on copies of it, in an order that rotates every
// iteration: corrected QR (haar_from_qr), polar_factor (Newton + eigendecomposition) and
// polar_factor_svd. Counters: the median time of each and the medians of the per-iteration ratios
// polar/QR, SVD polar/QR and polar/SVD polar (paired: the machine is shared and noisy).
template <class Matrix>
void run_haar_paired(benchmark::State& state) {
  const auto n = static_cast<la::Index>(state.range(0));
  constexpr bool is_complex = std::is_same_v<Matrix, la::CMatrix>;
  const ens::Sampler ginibre(make_spec(is_complex ? ens::Kind::ginibre_complex
                                                  : ens::Kind::ginibre_real));
  std::vector<double> t[3], polar_qr, svd_qr, polar_svd;
  std::uint64_t trial = 0;
  for (auto _ : state) {
    const ens::Sample s = ginibre.draw(n, kSeed, trial);
    const Matrix z = [&] {
      if constexpr (is_complex) return s.complex; else return s.real;
    }();
    double took[3] = {0, 0, 0};
    for (int k = 0; k < 3; ++k) {
      const int which = static_cast<int>((k + trial) % 3);
      Matrix work = z;
      const auto start = std::chrono::steady_clock::now();
      if (which == 0) {
        la::haar_from_qr(work);
      } else {
        work = which == 1 ? la::polar_factor(std::move(work))
                          : la::polar_factor_svd(std::move(work));
      }
      took[which] = seconds_since(start);
      benchmark::DoNotOptimize(work.data());
    }
    for (int k = 0; k < 3; ++k) t[k].push_back(took[k]);
    polar_qr.push_back(took[1] / took[0]);
    svd_qr.push_back(took[2] / took[0]);
    polar_svd.push_back(took[1] / took[2]);
    state.SetIterationTime(took[0] + took[1] + took[2]);
    ++trial;
  }
  state.counters["qr_s"] = median(t[0]);
  state.counters["polar_s"] = median(t[1]);
  state.counters["svd_s"] = median(t[2]);
  state.counters["polar/qr"] = median(polar_qr);
  state.counters["svd/qr"] = median(svd_qr);
  state.counters["polar/svd"] = median(polar_svd);
}

// ---- eigenvalue step, paired with a direct LAPACKE call ------------------------------------

lapack_int direct_call(la::CMatrix& a, la::Vector& w, la::EigenDriver driver) {
  const auto n = static_cast<lapack_int>(a.rows());
  auto* p = reinterpret_cast<lapack_complex_double*>(a.data());
  return driver == la::EigenDriver::two_stage
             ? LAPACKE_zheevd_2stage(LAPACK_COL_MAJOR, 'N', 'L', n, p, n, w.data())
             : LAPACKE_zheevd(LAPACK_COL_MAJOR, 'N', 'L', n, p, n, w.data());
}

lapack_int direct_call(la::RMatrix& a, la::Vector& w, la::EigenDriver driver) {
  const auto n = static_cast<lapack_int>(a.rows());
  return driver == la::EigenDriver::two_stage
             ? LAPACKE_dsyevd_2stage(LAPACK_COL_MAJOR, 'N', 'L', n, a.data(), n, w.data())
             : LAPACKE_dsyevd(LAPACK_COL_MAJOR, 'N', 'L', n, a.data(), n, w.data());
}

// Matrix = GUE (complex) or GOE (real) sampled once; every iteration copies it twice (untimed)
// and times one freegap call and one direct call on the copies.
template <class Matrix>
void run_eigen_paired(benchmark::State& state, ens::Kind kind, la::EigenDriver driver) {
  const auto n = static_cast<la::Index>(state.range(0));
  const ens::Sampler sampler(make_spec(kind));
  const ens::Sample sample = sampler.draw(n, kSeed, 0);
  const Matrix original = [&] {
    if constexpr (std::is_same_v<Matrix, la::CMatrix>) {
      return sample.complex;
    } else {
      return sample.real;
    }
  }();
  Matrix work_freegap(n, n), work_direct(n, n);
  la::Vector w_direct(n), w_freegap;
  std::vector<double> t_freegap, t_direct, ratios;
  bool identical = true;
  std::int64_t iteration = 0;
  for (auto _ : state) {
    double tf = 0, td = 0;
    // Each call gets its copy (untimed) right before it, so both start with the matrix equally
    // warm in cache: at N = 2000 a real matrix (32 MB) is about the size of L3, and copying both
    // first would favour whichever was copied last.
    auto time_freegap = [&] {
      work_freegap = original;
      const auto start = std::chrono::steady_clock::now();
      w_freegap = la::eigenvalues(work_freegap, driver);
      tf = seconds_since(start);
    };
    auto time_direct = [&] {
      work_direct = original;
      const auto start = std::chrono::steady_clock::now();
      const lapack_int info = direct_call(work_direct, w_direct, driver);
      td = seconds_since(start);
      if (info != 0) state.SkipWithError("direct LAPACKE call failed");
    };
    if (iteration++ % 2 == 0) {
      time_freegap();
      time_direct();
    } else {
      time_direct();
      time_freegap();
    }
    benchmark::DoNotOptimize(w_freegap.data());
    benchmark::DoNotOptimize(w_direct.data());
    identical = identical && w_freegap == w_direct;
    state.SetIterationTime(tf);
    t_freegap.push_back(tf);
    t_direct.push_back(td);
    ratios.push_back(tf / td);
  }
  state.counters["freegap_s"] = median(t_freegap);
  state.counters["direct_s"] = median(t_direct);
  state.counters["ratio"] = median(ratios);
  // Same routine on the same bytes: the eigenvalues must agree bit for bit (1 = yes).
  state.counters["identical"] = identical ? 1.0 : 0.0;
  state.SetLabel(la::driver_name(driver, std::is_same_v<Matrix, la::CMatrix>));
}

void register_all() {
  for (const SamplerCase& c : sampler_cases()) {
    for (const la::Index n : kSizes) {
      auto* b = benchmark::RegisterBenchmark(
          (std::string("sample/") + c.label).c_str(),
          [spec = c.spec](benchmark::State& s) { run_sampler(s, spec); });
      b->Arg(n)->Unit(benchmark::kMillisecond)->UseRealTime()->ReportAggregatesOnly(true);
      // Few iterations at large N so the whole binary runs in minutes (N = 2000 polar is ~12 s).
      if (n >= 2000) {
        b->Iterations(1)->Repetitions(3);
      } else if (n >= 1000) {
        b->Iterations(1)->Repetitions(5);
      } else {
        b->MinTime(0.2)->Repetitions(5);
      }
    }
  }
  for (const la::Index n : kSizes) {
    for (const bool is_complex : {true, false}) {
      const std::string name = is_complex ? "haar_paired/unitary" : "haar_paired/orthogonal";
      auto* b = benchmark::RegisterBenchmark(name.c_str(), is_complex
                                                               ? run_haar_paired<la::CMatrix>
                                                               : run_haar_paired<la::RMatrix>);
      b->Arg(n)->Unit(benchmark::kMillisecond)->UseManualTime();
      b->Iterations(n >= 2000 ? 3 : (n >= 1000 ? 5 : 9));
    }
  }
  struct EigenCase {
    const char* label;
    bool is_complex;
    la::EigenDriver driver;
  };
  const EigenCase eigen_cases[] = {
      {"eigenvalues/gue_complex/classic", true, la::EigenDriver::classic},
      {"eigenvalues/gue_complex/two_stage", true, la::EigenDriver::two_stage},
      {"eigenvalues/goe_real/classic", false, la::EigenDriver::classic},
      {"eigenvalues/goe_real/two_stage", false, la::EigenDriver::two_stage},
  };
  for (const EigenCase& c : eigen_cases) {
    for (const la::Index n : kSizes) {
      // The driver freegap picks by default at this size, so the table can show it.
      const la::EigenDriver chosen = la::choose_eigen_driver(n, c.is_complex);
      const std::string name = std::string(c.label) + (chosen == c.driver ? "/default" : "");
      auto* b =
          c.is_complex
              ? benchmark::RegisterBenchmark(name.c_str(),
                                             [d = c.driver](benchmark::State& s) {
                                               run_eigen_paired<la::CMatrix>(s, ens::Kind::gue, d);
                                             })
              : benchmark::RegisterBenchmark(name.c_str(), [d = c.driver](benchmark::State& s) {
                  run_eigen_paired<la::RMatrix>(s, ens::Kind::goe, d);
                });
      b->Arg(n)->Unit(benchmark::kMillisecond)->UseManualTime();
      b->Iterations(n >= 2000 ? 5 : (n >= 1000 ? 9 : 21));
    }
  }
}

}  // namespace

int main(int argc, char** argv) {
  benchmark::AddCustomContext("blas", la::blas_description());
  const char* threads = std::getenv("OPENBLAS_NUM_THREADS");
  benchmark::AddCustomContext("OPENBLAS_NUM_THREADS", threads ? threads : "(unset)");
  const char* core = std::getenv("OPENBLAS_CORETYPE");
  benchmark::AddCustomContext("OPENBLAS_CORETYPE", core ? core : "(unset)");
  register_all();
  benchmark::Initialize(&argc, argv);
  if (benchmark::ReportUnrecognizedArguments(argc, argv)) return 1;
  benchmark::RunSpecifiedBenchmarks();
  benchmark::Shutdown();
  return 0;
}
