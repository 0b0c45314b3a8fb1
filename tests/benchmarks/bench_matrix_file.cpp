// Reading a matrix file (matrix_file::read, the store's HDF5 reader installed as the program
// installs it): a 4000 × 4000 complex128 HDF5 dataset as h5py writes it (a compound of two
// doubles "r" and "i"; the target is under 1 s), a 4000 × 4000 float64 one, a 4000 × 4000
// float64 .npy in C order, and a 1000 × 1000 Matrix Market array for scale. The files are
// written once into a temporary directory (removed at exit); each read is timed 3 times and the
// median reported beside each time. Results: RESULTS-matrix-file.md.
#include <benchmark/benchmark.h>
#include <hdf5.h>
#include <unistd.h>

#include <complex>
#include <cstdint>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

#include "freegap/matrix_file.hpp"
#include "freegap/store.hpp"

namespace {

namespace fs = std::filesystem;
namespace mf = freegap::matrix_file;

constexpr hsize_t kN = 4000;
constexpr hsize_t kSmallN = 1000;

// Deterministic values with all their digits (a linear congruential generator).
std::vector<double> values(std::size_t count, std::uint64_t seed) {
  std::vector<double> out(count);
  for (double& v : out) {
    seed = seed * 6364136223846793005ULL + 1442695040888963407ULL;
    v = static_cast<double>(seed >> 11) * 0x1p-53 - 0.5;
  }
  return out;
}

void write_h5(const std::string& path, bool complex) {
  const hid_t file = H5Fcreate(path.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
  const hsize_t dims[2] = {kN, kN};
  const hid_t space = H5Screate_simple(2, dims, nullptr);
  hid_t type = H5Tcopy(H5T_IEEE_F64LE);
  hid_t memory = H5Tcopy(H5T_NATIVE_DOUBLE);
  if (complex) {
    H5Tclose(type);
    H5Tclose(memory);
    type = H5Tcreate(H5T_COMPOUND, 16);
    H5Tinsert(type, "r", 0, H5T_IEEE_F64LE);
    H5Tinsert(type, "i", 8, H5T_IEEE_F64LE);
    memory = H5Tcreate(H5T_COMPOUND, 16);
    H5Tinsert(memory, "r", 0, H5T_NATIVE_DOUBLE);
    H5Tinsert(memory, "i", 8, H5T_NATIVE_DOUBLE);
  }
  const auto data = values(kN * kN * (complex ? 2 : 1), complex ? 2 : 1);
  const hid_t d = H5Dcreate2(file, "A", type, space, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
  H5Dwrite(d, memory, H5S_ALL, H5S_ALL, H5P_DEFAULT, data.data());
  H5Dclose(d);
  H5Tclose(memory);
  H5Tclose(type);
  H5Sclose(space);
  H5Fclose(file);
}

// A version 1.0 .npy of float64 in C order (NEP 1): the header padded to 64 bytes.
void write_npy(const std::string& path) {
  std::string header = "{'descr': '<f8', 'fortran_order': False, 'shape': (" +
                       std::to_string(kN) + ", " + std::to_string(kN) + "), }";
  while ((10 + header.size() + 1) % 64 != 0) header += ' ';
  header += '\n';
  std::ofstream out(path, std::ios::binary);
  out.write("\x93NUMPY\x01\x00", 8);
  const char length[2] = {static_cast<char>(header.size() & 0xff),
                          static_cast<char>(header.size() >> 8)};
  out.write(length, 2);
  out << header;
  const auto data = values(kN * kN, 3);
  out.write(reinterpret_cast<const char*>(data.data()),
            static_cast<std::streamsize>(data.size() * sizeof(double)));
}

void write_mtx(const std::string& path) {
  std::FILE* f = std::fopen(path.c_str(), "w");
  std::fprintf(f, "%%%%MatrixMarket matrix array real general\n%llu %llu\n",
               static_cast<unsigned long long>(kSmallN), static_cast<unsigned long long>(kSmallN));
  for (const double v : values(kSmallN * kSmallN, 4)) std::fprintf(f, "%.17g\n", v);
  std::fclose(f);
}

// The files, written on first use and removed at exit.
struct Files {
  fs::path dir;
  Files() {
    dir = fs::temp_directory_path() / ("freegap-bench-matrix-file-" + std::to_string(::getpid()));
    fs::create_directories(dir);
    write_h5(path("complex.h5"), true);
    write_h5(path("real.h5"), false);
    write_npy(path("real.npy"));
    write_mtx(path("real.mtx"));
    mf::set_hdf5_reader(&freegap::store::read_matrix_dataset);
  }
  ~Files() { fs::remove_all(dir); }
  std::string path(const char* name) const { return (dir / name).string(); }
};

const Files& files() {
  static const Files instance;
  return instance;
}

void read_file(benchmark::State& state, const char* name) {
  const std::string path = files().path(name);
  state.SetLabel(std::to_string(fs::file_size(path) >> 20) + " MiB");
  for (auto _ : state) {
    const mf::Matrix m = mf::read(path);
    benchmark::DoNotOptimize(m.complex ? m.values.data()->real() : *m.real.data());
  }
}

void BM_ReadHdf5Complex4000(benchmark::State& state) { read_file(state, "complex.h5"); }
void BM_ReadHdf5Real4000(benchmark::State& state) { read_file(state, "real.h5"); }
void BM_ReadNpyReal4000(benchmark::State& state) { read_file(state, "real.npy"); }
void BM_ReadMatrixMarketArray1000(benchmark::State& state) { read_file(state, "real.mtx"); }

// Each repetition is listed, then the mean, median, standard deviation and coefficient of
// variation: the first read of a run may pay for the kernel assembling huge pages.
#define FREEGAP_MEDIAN_OF_3 \
  Iterations(1)->Repetitions(3)->UseRealTime()->Unit(benchmark::kMillisecond)
BENCHMARK(BM_ReadHdf5Complex4000)->FREEGAP_MEDIAN_OF_3;
BENCHMARK(BM_ReadHdf5Real4000)->FREEGAP_MEDIAN_OF_3;
BENCHMARK(BM_ReadNpyReal4000)->FREEGAP_MEDIAN_OF_3;
BENCHMARK(BM_ReadMatrixMarketArray1000)->FREEGAP_MEDIAN_OF_3;

}  // namespace

BENCHMARK_MAIN();
