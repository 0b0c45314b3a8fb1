// One dense trial of X + F, F a real symmetric matrix read from a .npy file, against the same
// model with a diagonal in its place (X + D) plus one N × N product: a full deterministic matrix
// should cost no more per trial than the diagonal model and one product (the sample is a copy of
// the file's matrix, read once per size; the trial forms X + F as X + D does).
//
//   X = gue; F = ensemble "file" (a random symmetric matrix of order N, written here to a temp
//   .npy file: benchmark data only); D = diagonal, uniform law on [−1, 1]
//   trial = model::SizeRunner::run (sampling, evaluation, eigenvalues), dense
//   product = one complex N × N product (zgemm), the cost of forming X + Q D Q^* with a fixed Q
//
// Trials alternate file / diagonal with the same trial index (the order flips every trial); the
// ratio is the median over pairs of file / (diagonal + product). Nothing here asserts a time.
//
//   OPENBLAS_NUM_THREADS=1 ./build/tests/benchmarks/bench_file_matrix_trial [--trials K] [N ...]
//       (default: 5 timed pairs, N = 500 1000 2000)
#include <algorithm>
#include <chrono>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <random>
#include <string>
#include <vector>

#include "freegap/linalg.hpp"
#include "freegap/model.hpp"

namespace {

namespace model = freegap::model;
using Clock = std::chrono::steady_clock;

constexpr std::uint64_t kSeed = 20261205;

double median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  const std::size_t h = v.size() / 2;
  return v.size() % 2 ? v[h] : 0.5 * (v[h - 1] + v[h]);
}

// A symmetric N × N float64 matrix as a version 1.0 .npy file (NEP 1): the header padded so the
// data starts at a multiple of 64 bytes.
std::string write_npy(long n) {
  Eigen::MatrixXd a(n, n);
  std::mt19937_64 gen(7);
  std::normal_distribution<double> normal;
  for (long j = 0; j < n; ++j) {
    for (long i = 0; i < n; ++i) a(i, j) = normal(gen);
  }
  const Eigen::MatrixXd s = 0.5 * (a + a.transpose()) / std::sqrt(static_cast<double>(n));
  std::string header = "{'descr': '<f8', 'fortran_order': True, 'shape': (" + std::to_string(n) +
                       ", " + std::to_string(n) + "), }";
  while ((10 + header.size() + 1) % 64 != 0) header += ' ';
  header += '\n';
  const std::string path = (std::filesystem::temp_directory_path() /
                            ("freegap_bench_file_" + std::to_string(n) + ".npy")).string();
  std::ofstream out(path, std::ios::binary);
  out.write("\x93NUMPY\x01\x00", 8);
  const auto len = static_cast<std::uint16_t>(header.size());
  out.put(static_cast<char>(len & 0xff)).put(static_cast<char>(len >> 8));
  out << header;
  out.write(reinterpret_cast<const char*>(s.data()), static_cast<std::streamsize>(8 * n * n));
  return path;
}

model::Model with_file(const std::string& path, long n) {
  model::Model m;
  freegap::declarations::MatrixSpec f;
  f.name = "F";
  f.kind = freegap::declarations::Kind::file_matrix;
  f.file.path = path;
  f.file.reference_size = n;
  f.file.file_size = n;
  m.matrices = {model::parse_declaration("X=gue"), f};
  m.expression = "X + F";
  m.force_dense = true;
  return m;
}

model::Model with_diagonal() {
  model::Model m;
  m.matrices = {model::parse_declaration("X=gue"),
                model::parse_declaration("F=diagonal:law=uniform:low=-1:high=1")};
  m.expression = "X + F";
  m.force_dense = true;
  return m;
}

double seconds_of(const model::SizeRunner& runner, std::uint64_t trial) {
  const auto start = Clock::now();
  const auto out = runner.run(kSeed, trial);
  if (out.failed) std::fprintf(stderr, "trial failed: %s\n", out.reason.c_str());
  return std::chrono::duration<double>(Clock::now() - start).count();
}

double product_seconds(long n) {
  const Eigen::MatrixXcd a = Eigen::MatrixXcd::Random(n, n), b = Eigen::MatrixXcd::Random(n, n);
  Eigen::MatrixXcd c(n, n);
  std::vector<double> t;
  for (int i = 0; i < 3; ++i) {
    const auto start = Clock::now();
    freegap::linalg::gemm(a, freegap::linalg::Op::none, b, freegap::linalg::Op::none, c);
    t.push_back(std::chrono::duration<double>(Clock::now() - start).count());
  }
  return median(t);
}

void measure(long n, int trials) {
  const std::string path = write_npy(n);
  const model::SizeRunner file(with_file(path, n), n);
  const model::SizeRunner diagonal(with_diagonal(), n);
  const double product = product_seconds(n);
  std::vector<double> f, d, ratio;
  for (int t = 0; t <= trials; ++t) {  // t = 0: warm-up pair (the file is read then)
    const auto k = static_cast<std::uint64_t>(t);
    double tf = 0.0, td = 0.0;
    if (t % 2) {
      tf = seconds_of(file, k);
      td = seconds_of(diagonal, k);
    } else {
      td = seconds_of(diagonal, k);
      tf = seconds_of(file, k);
    }
    if (t == 0) continue;
    f.push_back(tf);
    d.push_back(td);
    ratio.push_back(tf / (td + product));
  }
  std::printf("%6ld %6d %10.4f %10.4f %10.4f   %.3f\n", n, trials, median(f), median(d), product,
              median(ratio));
  std::fflush(stdout);
  std::filesystem::remove(path);
}

}  // namespace

int main(int argc, char** argv) {
  int trials = 5;
  std::vector<long> sizes;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    if (a == "--trials" && i + 1 < argc) {
      trials = std::atoi(argv[++i]);
    } else if (a == "--help" || a == "-h") {
      std::printf("usage: bench_file_matrix_trial [--trials K] [N ...]   (default N: 500 1000 2000)\n");
      return 0;
    } else if (!a.empty() && a[0] != '-') {
      sizes.push_back(std::atol(a.c_str()));
    } else {
      std::fprintf(stderr, "unknown option %s\n", a.c_str());
      return 2;
    }
  }
  if (sizes.empty()) sizes = {500, 1000, 2000};
  if (trials < 1) return 2;
  const char* threads = std::getenv("OPENBLAS_NUM_THREADS");
  std::printf("BLAS: %s; OPENBLAS_NUM_THREADS=%s\n", freegap::linalg::blas_description().c_str(),
              threads ? threads : "(unset)");
  std::printf("%6s %6s %10s %10s %10s   %s\n", "N", "pairs", "X + F (s)", "X + D (s)",
              "zgemm (s)", "ratio file / (diagonal + product), paired");
  for (const long n : sizes) measure(n, trials);
  return 0;
}
