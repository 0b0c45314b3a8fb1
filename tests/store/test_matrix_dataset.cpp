// HDF5 datasets as matrices (store::read_matrix_dataset): files written here with the HDF5 C API
// (rows first, as HDF5 and h5py store them), read back exactly; the root's only dataset; every
// refusal an InputError naming the file, with HDF5's error printing off and restored after.
#include <gtest/gtest.h>
#include <hdf5.h>
#include <unistd.h>

#include <complex>
#include <filesystem>
#include <fstream>
#include <functional>
#include <limits>
#include <string>
#include <tuple>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/matrix_file.hpp"
#include "freegap/store.hpp"
#include "refusal.hpp"

namespace {

namespace fs = std::filesystem;
namespace mf = freegap::matrix_file;
using freegap::InputError;
using freegap::store::read_matrix_dataset;

class MatrixDataset : public ::testing::Test {
 protected:
  void SetUp() override {
    dir_ = fs::path(::testing::TempDir()) / ("freegap-matrix-dataset-" + std::to_string(::getpid()));
    fs::remove_all(dir_);
    fs::create_directories(dir_);
  }
  void TearDown() override { fs::remove_all(dir_); }

  // A new HDF5 file at dir_/name, filled by `fill(file)`.
  std::string h5(const std::string& name, const std::function<void(hid_t)>& fill) const {
    const std::string path = (dir_ / name).string();
    const hid_t file = H5Fcreate(path.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
    EXPECT_GE(file, 0);
    fill(file);
    EXPECT_GE(H5Fclose(file), 0);
    return path;
  }
  fs::path dir_;
};

// A dataset `name` of `file_type` with `dims`, written from `data` of `memory_type`.
void dataset(hid_t where, const char* name, hid_t file_type, hid_t memory_type,
             const std::vector<hsize_t>& dims, const void* data) {
  const hid_t space = H5Screate_simple(static_cast<int>(dims.size()), dims.data(), nullptr);
  const hid_t d = H5Dcreate2(where, name, file_type, space, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
  ASSERT_GE(d, 0) << name;
  ASSERT_GE(H5Dwrite(d, memory_type, H5S_ALL, H5S_ALL, H5P_DEFAULT, data), 0) << name;
  H5Dclose(d);
  H5Sclose(space);
}

// h5py's complex128: a compound of two little-endian doubles "r" and "i".
hid_t complex_type(bool imaginary_first = false) {
  const hid_t t = H5Tcreate(H5T_COMPOUND, 16);
  H5Tinsert(t, imaginary_first ? "i" : "r", 0, H5T_IEEE_F64LE);
  H5Tinsert(t, imaginary_first ? "r" : "i", 8, H5T_IEEE_F64LE);
  return t;
}

std::vector<double> numbers(std::size_t count) {
  std::vector<double> out;
  for (std::size_t k = 0; k < count; ++k) out.push_back(0.1 * static_cast<double>(k) - 1.0 / 3.0);
  return out;
}

using freegap::testing::refusal;

bool has(const std::string& text, const std::string& part) {
  return text.find(part) != std::string::npos;
}

TEST_F(MatrixDataset, RealRowsFirst) {
  const auto v = numbers(15);
  const std::string path = h5("real.h5", [&](hid_t f) {
    dataset(f, "A", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {3, 5}, v.data());
  });
  const mf::Matrix m = read_matrix_dataset(path, "A");
  ASSERT_FALSE(m.complex);
  ASSERT_EQ(m.rows, 3);
  ASSERT_EQ(m.cols, 5);
  ASSERT_EQ(m.real.rows(), 3);
  ASSERT_EQ(m.real.cols(), 5);
  EXPECT_EQ(m.values.size(), 0);
  EXPECT_EQ(m.real(0, 1), v[1]);  // the second number written
  for (int k = 0; k < 15; ++k) EXPECT_EQ(m.real(k / 5, k % 5), v[k]) << k;
}

TEST_F(MatrixDataset, SquareAndBigEndian) {
  const auto v = numbers(16);
  const std::string path = h5("square.h5", [&](hid_t f) {
    dataset(f, "B", H5T_IEEE_F64BE, H5T_NATIVE_DOUBLE, {4, 4}, v.data());
  });
  const mf::Matrix m = read_matrix_dataset(path, "/B");
  for (int k = 0; k < 16; ++k) EXPECT_EQ(m.real(k / 4, k % 4), v[k]) << k;
}

// Larger than the 32 × 32 tiles the rows are transposed in, square and not.
TEST_F(MatrixDataset, AcrossManyTiles) {
  const auto v = numbers(70 * 70);
  const std::string path = h5("tiles.h5", [&](hid_t f) {
    dataset(f, "S", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {70, 70}, v.data());
    dataset(f, "T", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {33, 70}, v.data());
    dataset(f, "U", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {70, 33}, v.data());
  });
  for (const auto& [name, rows, cols] :
       {std::tuple{"S", 70, 70}, std::tuple{"T", 33, 70}, std::tuple{"U", 70, 33}}) {
    const mf::Matrix m = read_matrix_dataset(path, name);
    ASSERT_EQ(m.real.rows(), rows);
    ASSERT_EQ(m.real.cols(), cols);
    int wrong = 0;
    for (int i = 0; i < rows; ++i) {
      for (int j = 0; j < cols; ++j) wrong += m.real(i, j) != v[static_cast<std::size_t>(i * cols + j)];
    }
    EXPECT_EQ(wrong, 0) << name;
  }
}

TEST_F(MatrixDataset, ComplexCompound) {
  const std::vector<std::complex<double>> v = {{1.5, -2}, {0.1, 1e-310}, {-7, 3.25},
                                               {0, 1},    {2, 0},        {1.0 / 3, -0.2}};
  const hid_t memory = H5Tcreate(H5T_COMPOUND, 16);
  H5Tinsert(memory, "r", 0, H5T_NATIVE_DOUBLE);
  H5Tinsert(memory, "i", 8, H5T_NATIVE_DOUBLE);
  const std::string path = h5("complex.h5", [&](hid_t f) {
    const hid_t t = complex_type();
    dataset(f, "Z", t, memory, {2, 3}, v.data());
    H5Tclose(t);
    const hid_t swapped = complex_type(/*imaginary_first=*/true);  // members matched by name
    dataset(f, "W", swapped, memory, {2, 3}, v.data());
    H5Tclose(swapped);
  });
  H5Tclose(memory);
  for (const char* name : {"Z", "W"}) {
    const mf::Matrix m = read_matrix_dataset(path, name);
    ASSERT_TRUE(m.complex) << name;
    ASSERT_EQ(m.values.rows(), 2);
    ASSERT_EQ(m.values.cols(), 3);
    EXPECT_EQ(m.real.size(), 0);
    for (int k = 0; k < 6; ++k) EXPECT_EQ(m.values(k / 3, k % 3), v[k]) << name << " " << k;
  }
}

TEST_F(MatrixDataset, Float32AndInt32) {
  const std::vector<float> f = {0.1f, -2.5f, 3e-5f, 7.0f};
  const std::vector<int> n = {-2147483647 - 1, 0, 5, 2147483647};
  const std::string path = h5("narrow.h5", [&](hid_t file) {
    dataset(file, "F", H5T_IEEE_F32LE, H5T_NATIVE_FLOAT, {1, 4}, f.data());
    dataset(file, "N", H5T_STD_I32LE, H5T_NATIVE_INT, {4, 1}, n.data());
  });
  const mf::Matrix a = read_matrix_dataset(path, "F");
  for (int k = 0; k < 4; ++k) EXPECT_EQ(a.real(0, k), static_cast<double>(f[k])) << k;
  const mf::Matrix b = read_matrix_dataset(path, "N");
  for (int k = 0; k < 4; ++k) EXPECT_EQ(b.real(k, 0), static_cast<double>(n[k])) << k;
}

TEST_F(MatrixDataset, TheRootsOnlyDataset) {
  const auto v = numbers(6);
  const std::string one = h5("one.h5", [&](hid_t f) {
    dataset(f, "only", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {2, 3}, v.data());
    const hid_t g = H5Gcreate2(f, "grp", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    dataset(g, "A", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {3, 2}, v.data());  // not at the root
    H5Gclose(g);
  });
  const mf::Matrix m = read_matrix_dataset(one, "");
  EXPECT_EQ(m.rows, 2);
  EXPECT_EQ(m.real(1, 0), v[3]);
  const mf::Matrix in_group = read_matrix_dataset(one, "/grp/A");
  EXPECT_EQ(in_group.rows, 3);
  EXPECT_EQ(in_group.real(1, 0), v[2]);
  EXPECT_EQ(read_matrix_dataset(one, "grp/A").real(2, 1), v[5]);

  const std::string two = h5("two.h5", [&](hid_t f) {
    dataset(f, "Alpha", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {2, 3}, v.data());
    dataset(f, "Beta", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {3, 2}, v.data());
  });
  std::string message = refusal([&] { read_matrix_dataset(two, ""); });
  EXPECT_TRUE(has(message, "matrix file '" + two + "': holds 2 datasets at its root (Alpha, Beta); "
                           "name one with dataset = \"Alpha\""))
      << message;
  EXPECT_EQ(read_matrix_dataset(two, "Beta").rows, 3);

  const std::string none = h5("none.h5", [&](hid_t f) {
    H5Gclose(H5Gcreate2(f, "grp", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT));
  });
  message = refusal([&] { read_matrix_dataset(none, ""); });
  EXPECT_EQ(message, "matrix file '" + none + "': holds no dataset at its root; name one with "
                     "dataset = \"...\"");
  message = refusal([&] { read_matrix_dataset(none, "grp"); });
  EXPECT_TRUE(has(message, "'grp' is not a dataset")) << message;
  message = refusal([&] { read_matrix_dataset(two, "Gamma"); });
  EXPECT_TRUE(has(message, "has no dataset 'Gamma'")) << message;
  EXPECT_TRUE(has(message, "datasets at its root: Alpha, Beta")) << message;
}

TEST_F(MatrixDataset, RefusesOtherRanksAndTypes) {
  const auto v = numbers(8);
  const std::string path = h5("odd.h5", [&](hid_t f) {
    dataset(f, "vector", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {4}, v.data());
    dataset(f, "cube", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {2, 2, 2}, v.data());
    dataset(f, "empty", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {0, 3}, v.data());
    const hid_t text = H5Tcopy(H5T_C_S1);
    H5Tset_size(text, H5T_VARIABLE);
    const char* words[] = {"a", "b", "c", "d"};
    dataset(f, "text", text, text, {2, 2}, words);
    H5Tclose(text);
    const hid_t record = H5Tcreate(H5T_COMPOUND, 16);
    H5Tinsert(record, "x", 0, H5T_NATIVE_DOUBLE);
    H5Tinsert(record, "y", 8, H5T_NATIVE_DOUBLE);
    dataset(f, "record", record, record, {2, 2}, v.data());
    H5Tclose(record);
  });
  std::string message = refusal([&] { read_matrix_dataset(path, "vector"); });
  EXPECT_TRUE(has(message, "matrix file '" + path + "': dataset 'vector' must be a 2-d array (got "
                           "shape (4,))"))
      << message;
  message = refusal([&] { read_matrix_dataset(path, "cube"); });
  EXPECT_TRUE(has(message, "must be a 2-d array (got shape (2, 2, 2))")) << message;
  message = refusal([&] { read_matrix_dataset(path, "empty"); });
  EXPECT_TRUE(has(message, "with no entries")) << message;
  message = refusal([&] { read_matrix_dataset(path, "text"); });
  EXPECT_TRUE(has(message, "dataset 'text' holds strings; a matrix must hold floats")) << message;
  message = refusal([&] { read_matrix_dataset(path, "record"); });
  EXPECT_TRUE(has(message, "holds records with the fields x, y")) << message;
}

TEST_F(MatrixDataset, RefusesNonFiniteEntries) {
  const std::vector<double> v = {1, 2, 3, std::numeric_limits<double>::quiet_NaN(), 5, 6};
  const std::string path = h5("nan.h5", [&](hid_t f) {
    dataset(f, "A", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {2, 3}, v.data());
  });
  const std::string message = refusal([&] { read_matrix_dataset(path, "A"); });
  EXPECT_TRUE(has(message, "dataset 'A': entry [1, 0] is nan")) << message;
}

// A failed read neither prints HDF5's error stack nor changes how the caller set it up.
int printed = 0;
herr_t count_prints(hid_t, void*) {
  ++printed;
  return 0;
}

TEST_F(MatrixDataset, RefusesFilesThatAreNotHdf5) {
  const std::string text = (dir_ / "text.h5").string();
  std::ofstream(text) << "just some text, long enough to look like something\n";
  H5E_auto2_t before = nullptr;
  void* before_data = nullptr;
  H5Eget_auto2(H5E_DEFAULT, &before, &before_data);
  H5Eset_auto2(H5E_DEFAULT, count_prints, nullptr);
  printed = 0;
  std::string message = refusal([&] { read_matrix_dataset(text, ""); });
  EXPECT_TRUE(has(message, "matrix file '" + text + "': is not a readable HDF5 file (")) << message;
  EXPECT_EQ(printed, 0);
  H5E_auto2_t after = nullptr;
  H5Eget_auto2(H5E_DEFAULT, &after, nullptr);
  EXPECT_EQ(after, &count_prints);
  H5Eset_auto2(H5E_DEFAULT, before, before_data);

  const std::string missing = (dir_ / "missing.h5").string();
  message = refusal([&] { read_matrix_dataset(missing, "A"); });
  EXPECT_TRUE(has(message, "matrix file '" + missing + "': cannot open it (No such file or "
                           "directory)"))
      << message;
  message = refusal([&] { read_matrix_dataset(dir_.string(), "A"); });
  EXPECT_TRUE(has(message, "is a directory")) << message;
}

TEST_F(MatrixDataset, RefusesATruncatedFile) {
  const auto v = numbers(200 * 100);
  const std::string path = h5("whole.h5", [&](hid_t f) {
    dataset(f, "A", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {200, 100}, v.data());
  });
  EXPECT_EQ(read_matrix_dataset(path, "A").real(199, 99), v.back());
  fs::resize_file(path, fs::file_size(path) / 2);
  const std::string message = refusal([&] { read_matrix_dataset(path, "A"); });
  EXPECT_TRUE(has(message, "matrix file '" + path + "': ")) << message;
  EXPECT_TRUE(has(message, "is not a readable HDF5 file")) << message;
}

TEST_F(MatrixDataset, ThroughMatrixFileRead) {
  const auto v = numbers(15);
  const std::string path = h5("x.h5", [&](hid_t f) {
    dataset(f, "A", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, {5, 3}, v.data());
  });
  mf::set_hdf5_reader(&read_matrix_dataset);
  const mf::Matrix direct = read_matrix_dataset(path, "A");
  const mf::Matrix through = mf::read(path, "A");
  EXPECT_EQ(through.rows, 5);
  EXPECT_EQ(through.cols, 3);
  EXPECT_EQ(through.real, direct.real);
  EXPECT_EQ(mf::read(path).real, direct.real);  // "": the only dataset
  EXPECT_EQ(mf::read_shared(path, "A")->real, direct.real);
  mf::set_hdf5_reader(nullptr);
}

}  // namespace
