// Matrix files: .npy and Matrix Market parsed from bytes built here (exact values, every layout
// and element type, every refusal with its message), and read/read_shared on real files.
// HDF5 is tested with the store (tests/store/test_matrix_dataset.cpp): this binary links the
// matrix_file part alone, so an .h5 file here must meet the "no reader" refusal.
#include <gtest/gtest.h>
#include <sys/resource.h>
#include <unistd.h>

#include <algorithm>
#include <bit>
#include <complex>
#include <cstdint>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <limits>
#include <string>
#include <utility>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/matrix_file.hpp"
#include "refusal.hpp"

namespace {

namespace fs = std::filesystem;
namespace mf = freegap::matrix_file;
using freegap::InputError;

static_assert(std::endian::native == std::endian::little, "the byte helpers assume little-endian");

// ---------------------------------------------------------------------------------------------
// Building .npy bytes

// A .npy file: magic, version, header length, the dict padded with spaces to a multiple of 64
// bytes and ended with a newline (NEP 1), then `data`.
std::string npy_bytes(const std::string& dict, const std::string& data, int major = 1) {
  const std::size_t prefix = major == 1 ? 10 : 12;
  std::string header = dict;
  while ((prefix + header.size() + 1) % 64 != 0) header += ' ';
  header += '\n';
  std::string out("\x93NUMPY", 6);
  out += static_cast<char>(major);
  out += '\0';
  const std::size_t width = major == 1 ? 2 : 4;
  for (std::size_t k = 0; k < width; ++k) out += static_cast<char>((header.size() >> (8 * k)) & 0xff);
  return out + header + data;
}

std::string npy(const std::string& descr, bool fortran, const std::string& shape,
                const std::string& data, int major = 1) {
  return npy_bytes("{'descr': '" + descr + "', 'fortran_order': " +
                       (fortran ? "True" : "False") + ", 'shape': " + shape + ", }",
                   data, major);
}

// The bytes of values of type T, in this machine's (little-endian) order or reversed.
template <class T>
std::string raw(const std::vector<T>& values, bool big_endian = false) {
  std::string out;
  for (const T& v : values) {
    char b[sizeof(T)];
    std::memcpy(b, &v, sizeof(T));
    if (big_endian) std::reverse(b, b + sizeof(T));
    out.append(b, sizeof(T));
  }
  return out;
}

// Values whose bits a sloppy conversion would change.
const std::vector<double> kValues = {0.1, -2.5e-300, 3.141592653589793, 1.0 / 3.0, -0.0, 6.02e23};

bool same_bits(double a, double b) {
  return std::bit_cast<std::uint64_t>(a) == std::bit_cast<std::uint64_t>(b);
}

using freegap::testing::refusal;

std::string npy_refusal(const std::string& bytes) {
  return refusal([&] { mf::parse_npy(bytes, "a.npy"); });
}

std::string mm_refusal(const std::string& text) {
  return refusal([&] { mf::parse_matrix_market(text, "a.mtx"); });
}

bool has(const std::string& text, const std::string& part) {
  return text.find(part) != std::string::npos;
}

// ---------------------------------------------------------------------------------------------
// .npy: values

TEST(Npy, Float64COrderRoundTripsBitForBit) {
  const mf::Matrix m = mf::parse_npy(npy("<f8", false, "(2, 3)", raw(kValues)), "a.npy");
  ASSERT_FALSE(m.complex);
  ASSERT_EQ(m.rows, 2);
  ASSERT_EQ(m.cols, 3);
  ASSERT_EQ(m.real.rows(), 2);
  ASSERT_EQ(m.real.cols(), 3);
  EXPECT_EQ(m.values.size(), 0);
  for (int k = 0; k < 6; ++k) {
    EXPECT_TRUE(same_bits(m.real(k / 3, k % 3), kValues[k])) << k;  // row-major in the file
  }
  EXPECT_TRUE(std::signbit(m.real(1, 1)));  // -0.0 stays negative
}

TEST(Npy, Float64FortranOrderIsColumnMajor) {
  const mf::Matrix m = mf::parse_npy(npy("<f8", true, "(2, 3)", raw(kValues)), "a.npy");
  ASSERT_EQ(m.rows, 2);
  ASSERT_EQ(m.cols, 3);
  for (int k = 0; k < 6; ++k) EXPECT_TRUE(same_bits(m.real(k % 2, k / 2), kValues[k])) << k;
  EXPECT_TRUE(same_bits(m.real(1, 0), kValues[1]));  // the second number written
}

// Larger than the 32 × 32 tiles the C order is transposed in, square and not, real and complex.
TEST(Npy, COrderAcrossManyTiles) {
  for (const auto& [rows, cols] : {std::pair{70, 45}, std::pair{45, 70}, std::pair{67, 67}}) {
    std::vector<double> v(static_cast<std::size_t>(rows * cols) * 2);
    for (std::size_t k = 0; k < v.size(); ++k) v[k] = static_cast<double>(k) * 0.5 - 1.0 / 3.0;
    const std::string shape = "(" + std::to_string(rows) + ", " + std::to_string(cols) + ")";
    const std::vector<double> half(v.begin(), v.begin() + rows * cols);
    const mf::Matrix a = mf::parse_npy(npy("<f8", false, shape, raw(half)), "a.npy");
    const mf::Matrix z = mf::parse_npy(npy("<c16", false, shape, raw(v)), "a.npy");
    ASSERT_EQ(a.real.rows(), rows);
    ASSERT_EQ(z.values.cols(), cols);
    int wrong = 0;
    for (int i = 0; i < rows; ++i) {
      for (int j = 0; j < cols; ++j) {
        const std::size_t k = static_cast<std::size_t>(i * cols + j);
        wrong += a.real(i, j) != v[k];
        wrong += z.values(i, j) != std::complex<double>(v[2 * k], v[2 * k + 1]);
      }
    }
    EXPECT_EQ(wrong, 0) << rows << " × " << cols;
  }
}

TEST(Npy, Complex128) {
  const std::vector<double> parts = {1.5, -2.0, 0.1, 1e-310, -7.0, 3.25};  // (re, im) × 3
  const mf::Matrix m = mf::parse_npy(npy("<c16", false, "(1, 3)", raw(parts)), "a.npy");
  ASSERT_TRUE(m.complex);
  ASSERT_EQ(m.values.rows(), 1);
  ASSERT_EQ(m.values.cols(), 3);
  EXPECT_EQ(m.real.size(), 0);
  for (int k = 0; k < 3; ++k) {
    EXPECT_TRUE(same_bits(m.values(0, k).real(), parts[2 * k])) << k;
    EXPECT_TRUE(same_bits(m.values(0, k).imag(), parts[2 * k + 1])) << k;
  }
}

TEST(Npy, Complex64BigEndianSwapsEachPart) {
  const std::vector<float> parts = {1.5f, -0.25f, 3.0f, 1e-3f};
  const mf::Matrix m = mf::parse_npy(npy(">c8", true, "(2, 1)", raw(parts, true)), "a.npy");
  ASSERT_TRUE(m.complex);
  EXPECT_EQ(m.values(0, 0), std::complex<double>(1.5, -0.25));
  EXPECT_EQ(m.values(1, 0), std::complex<double>(3.0, static_cast<double>(1e-3f)));
}

TEST(Npy, Int32) {
  const std::vector<std::int32_t> v = {-2147483647 - 1, 7, 0, 2147483647};
  const mf::Matrix m = mf::parse_npy(npy("<i4", false, "(2, 2)", raw(v)), "a.npy");
  ASSERT_FALSE(m.complex);
  EXPECT_EQ(m.real(0, 0), -2147483648.0);
  EXPECT_EQ(m.real(0, 1), 7.0);
  EXPECT_EQ(m.real(1, 0), 0.0);
  EXPECT_EQ(m.real(1, 1), 2147483647.0);
}

TEST(Npy, BigEndianFloat64) {
  const mf::Matrix m = mf::parse_npy(npy(">f8", false, "(3, 2)", raw(kValues, true)), "a.npy");
  for (int k = 0; k < 6; ++k) EXPECT_TRUE(same_bits(m.real(k / 2, k % 2), kValues[k])) << k;
}

TEST(Npy, Version2And3HaveFourByteHeaderLengths) {
  for (const int major : {2, 3}) {
    const mf::Matrix m = mf::parse_npy(npy("<f8", false, "(3, 2)", raw(kValues), major), "a.npy");
    ASSERT_EQ(m.rows, 3) << major;
    for (int k = 0; k < 6; ++k) EXPECT_TRUE(same_bits(m.real(k / 2, k % 2), kValues[k])) << k;
  }
}

TEST(Npy, OtherElementTypes) {
  const auto one = [](const std::string& descr, const std::string& data) {
    return mf::parse_npy(npy(descr, false, "(1, 2)", data), "a.npy").real;
  };
  EXPECT_EQ(one("<f4", raw<float>({0.5f, -3.0f})), Eigen::RowVector2d(0.5, -3.0));
  EXPECT_EQ(one("<i8", raw<std::int64_t>({-5, 1LL << 40})), Eigen::RowVector2d(-5, 0x1p40));
  EXPECT_EQ(one(">i2", raw<std::int16_t>({-300, 12}, true)), Eigen::RowVector2d(-300, 12));
  EXPECT_EQ(one("|i1", raw<std::int8_t>({-128, 127})), Eigen::RowVector2d(-128, 127));
  EXPECT_EQ(one("<u8", raw<std::uint64_t>({0, 1ULL << 63})), Eigen::RowVector2d(0, 0x1p63));
  EXPECT_EQ(one("<u4", raw<std::uint32_t>({4294967295u, 1})), Eigen::RowVector2d(4294967295.0, 1));
  EXPECT_EQ(one("<u2", raw<std::uint16_t>({65535, 2})), Eigen::RowVector2d(65535, 2));
  EXPECT_EQ(one("|u1", std::string("\xff\x01", 2)), Eigen::RowVector2d(255, 1));
  EXPECT_EQ(one("|b1", std::string("\x01\x00", 2)), Eigen::RowVector2d(1, 0));
  EXPECT_EQ(one("=f8", raw<double>({2.0, 4.0})), Eigen::RowVector2d(2, 4));
}

TEST(Npy, HeaderInAnyKeyOrderAndSpacing) {
  const std::string data = raw(kValues);
  const mf::Matrix m = mf::parse_npy(
      npy_bytes("{ \"shape\" :(3,2) ,'fortran_order':True,  'descr':'<f8'}", data), "a.npy");
  ASSERT_EQ(m.rows, 3);
  ASSERT_EQ(m.cols, 2);
  EXPECT_TRUE(same_bits(m.real(1, 0), kValues[1]));  // Fortran order
  // Old numpy wrote Python 2 long integers in the shape.
  EXPECT_EQ(mf::parse_npy(npy_bytes("{'descr': '<f8', 'fortran_order': False, 'shape': (3L, 2L)}",
                                    data),
                          "a.npy")
                .rows,
            3);
}

// ---------------------------------------------------------------------------------------------
// .npy: refusals

TEST(Npy, RefusesBadMagic) {
  std::string bytes = npy("<f8", false, "(1, 1)", raw<double>({1.0}));
  bytes[1] = 'n';
  const std::string message = npy_refusal(bytes);
  EXPECT_TRUE(has(message, "matrix file 'a.npy': is not a NumPy .npy file")) << message;
  EXPECT_TRUE(has(npy_refusal(""), "is not a NumPy .npy file"));
}

TEST(Npy, RefusesUnknownVersion) {
  const std::string message = npy_refusal(npy("<f8", false, "(1, 1)", raw<double>({1.0}), 4));
  EXPECT_TRUE(has(message, "version 4.0")) << message;
}

TEST(Npy, RefusesTruncatedData) {
  const std::string bytes = npy("<f8", false, "(2, 3)", raw(kValues).substr(0, 40));
  const std::string message = npy_refusal(bytes);
  EXPECT_TRUE(has(message, "matrix file 'a.npy': truncated: expects 48 bytes of data, has 40"))
      << message;
}

TEST(Npy, RefusesTrailingData) {
  const std::string message = npy_refusal(npy("<f8", false, "(2, 3)", raw(kValues) + "xyz"));
  EXPECT_TRUE(has(message, "matrix file 'a.npy': has 3 bytes after the data")) << message;
}

TEST(Npy, RefusesOneAndThreeDimensions) {
  std::string message = npy_refusal(npy("<f8", false, "(6,)", raw(kValues)));
  EXPECT_TRUE(has(message, "matrix file 'a.npy': must be a 2-d array (got shape (6,))")) << message;
  message = npy_refusal(npy("<f8", false, "(1, 2, 3)", raw(kValues)));
  EXPECT_TRUE(has(message, "must be a 2-d array (got shape (1, 2, 3))")) << message;
  message = npy_refusal(npy("<f8", false, "()", raw<double>({1.0})));
  EXPECT_TRUE(has(message, "must be a 2-d array (got shape ())")) << message;
}

TEST(Npy, RefusesObjectsAndStructuredAndOtherTypes) {
  std::string message = npy_refusal(npy("|O", false, "(1, 1)", std::string(8, '\0')));
  EXPECT_TRUE(has(message, "matrix file 'a.npy': holds Python objects")) << message;
  message = npy_refusal(npy_bytes(
      "{'descr': [('a', '<f8'), ('b', '<i4')], 'fortran_order': False, 'shape': (1, 1), }",
      std::string(12, '\0')));
  EXPECT_TRUE(has(message, "structured array")) << message;
  message = npy_refusal(npy("<U5", false, "(1, 1)", std::string(20, '\0')));
  EXPECT_TRUE(has(message, "element type '<U5'")) << message;
  message = npy_refusal(npy("<f2", false, "(1, 1)", std::string(2, '\0')));
  EXPECT_TRUE(has(message, "element type '<f2'")) << message;
}

TEST(Npy, RefusesHeaderLengthPastTheEnd) {
  std::string bytes = npy("<f8", false, "(1, 1)", raw<double>({1.0}));
  bytes[8] = '\xff';
  bytes[9] = '\x7f';  // 32767 bytes of header
  const std::string message = npy_refusal(bytes);
  EXPECT_TRUE(has(message, "matrix file 'a.npy': truncated: the .npy header declares 32767 bytes"))
      << message;
  EXPECT_TRUE(has(npy_refusal(std::string("\x93NUMPY\x01\x00\x05", 9)), "truncated"));
}

TEST(Npy, RefusesMalformedHeaders) {
  const std::string d = raw<double>({1.0});
  std::string message =
      npy_refusal(npy_bytes("{'descr': '<f8', 'fortran_order': False, 'shape': (1, 1)", d));
  EXPECT_TRUE(has(message, "the .npy header is not a dict literal")) << message;
  message = npy_refusal(npy_bytes("{'descr': '<f8', 'shape': (1, 1)}", d));
  EXPECT_TRUE(has(message, "no 'fortran_order' key")) << message;
  message = npy_refusal(
      npy_bytes("{'descr': '<f8', 'fortran_order': False, 'shape': (1, 1), 'x': 1}", d));
  EXPECT_TRUE(has(message, "unknown key 'x'")) << message;
  message = npy_refusal(npy_bytes("{'descr': '<f8', 'fortran_order': 0, 'shape': (1, 1)}", d));
  EXPECT_TRUE(has(message, "'fortran_order' is not True or False")) << message;
  message = npy_refusal(npy("<f8", false, "(-1, 1)", d));
  EXPECT_TRUE(has(message, "shape (-1, 1) is not a tuple of whole numbers")) << message;
  message = npy_refusal(npy("<f8", false, "(0, 3)", ""));
  EXPECT_TRUE(has(message, "with no entries")) << message;
}

TEST(Npy, RefusesNonFiniteEntries) {
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const std::string message = npy_refusal(npy("<f8", false, "(2, 2)", raw<double>({1, 2, nan, 4})));
  EXPECT_TRUE(has(message, "entry [1, 0] is nan")) << message;
  const double inf = std::numeric_limits<double>::infinity();
  EXPECT_TRUE(has(npy_refusal(npy("<c16", false, "(1, 1)", raw<double>({1, -inf}))),
                  "entry [0, 0] is infinite"));
}

// A hostile header declares a huge array over a few bytes: refused before anything is allocated.
// The check runs in a child whose address space is capped 512 MB above what it already uses, so
// an allocation sized by the header (1.6 GB to 6.4 GB here) would fail there.
TEST(Npy, HugeShapeOverFewBytesIsRefusedWithoutAllocating) {
  const auto hostile = [](const std::string& descr, const std::string& shape) {
    rlimit now{};
    ::getrlimit(RLIMIT_AS, &now);
    std::ifstream status("/proc/self/status");
    std::string line;
    rlim_t used = 0;
    while (std::getline(status, line)) {
      if (line.rfind("VmSize:", 0) == 0) used = std::stoull(line.substr(7)) * 1024;
    }
    const rlimit capped{used + (rlim_t{512} << 20), now.rlim_max};
    if (used == 0 || ::setrlimit(RLIMIT_AS, &capped) != 0) std::_Exit(3);
    try {
      mf::parse_npy(npy(descr, false, shape, std::string(64, '\0')), "a.npy");
    } catch (const InputError& e) {
      std::_Exit(has(e.what(), "truncated: expects") ? 0 : 1);
    } catch (...) {
      std::_Exit(2);  // e.g. std::bad_alloc: something was sized by the header
    }
    std::_Exit(4);
  };
  GTEST_FLAG_SET(death_test_style, "threadsafe");
  EXPECT_EXIT(hostile("|u1", "(20000, 10000)"), ::testing::ExitedWithCode(0), "");
  EXPECT_EXIT(hostile("<c16", "(20000, 20000)"), ::testing::ExitedWithCode(0), "");
  // Products that overflow 64 bits.
  EXPECT_EXIT(hostile("<f8", "(4611686018427387904, 4)"), ::testing::ExitedWithCode(0), "");
  EXPECT_EXIT(hostile("<c16", "(18446744073709551615, 18446744073709551615)"),
              ::testing::ExitedWithCode(0), "");
  const std::string message =
      npy_refusal(npy("<f8", false, "(4611686018427387904, 4)", std::string(64, '\0')));
  EXPECT_TRUE(has(message, "truncated: expects more than 2^64 bytes of data, has 64")) << message;
}

TEST(Npy, ShapeBeyondTheEntryBoundIsRefused) {
  mf::Limits limits;
  limits.max_entries = 5;
  const std::string message = refusal(
      [&] { mf::parse_npy(npy("<f8", false, "(2, 3)", raw(kValues)), "a.npy", limits); });
  EXPECT_TRUE(has(message, "has 6 entries, more than the 5")) << message;
}

// ---------------------------------------------------------------------------------------------
// Matrix Market: values

mf::Matrix mm(const std::string& text) { return mf::parse_matrix_market(text, "a.mtx"); }

TEST(MatrixMarket, CoordinateRealGeneral) {
  const mf::Matrix m = mm(
      "%%MatrixMarket matrix coordinate real general\n"
      "% a comment\n"
      "%\n"
      "2 3 3\n"
      "1 1 0.1\n"
      "2 3 -1.0E+02\n"
      "1 2 1e-3\n");
  ASSERT_FALSE(m.complex);
  ASSERT_EQ(m.rows, 2);
  ASSERT_EQ(m.cols, 3);
  Eigen::MatrixXd expected(2, 3);
  expected << 0.1, 1e-3, 0, 0, 0, -100;
  EXPECT_EQ(m.real, expected);  // exact: 0.1 and 1e-3 read as the nearest doubles
}

TEST(MatrixMarket, BannerWordsAreCaseInsensitiveAndLinesMayEndInCrLf) {
  const mf::Matrix m = mm("%%MATRIXMARKET Matrix Coordinate REAL General\r\n1 1 1\r\n1 1 +2.5\r\n");
  EXPECT_EQ(m.real(0, 0), 2.5);
}

TEST(MatrixMarket, DuplicatesAreSummed) {
  const mf::Matrix m = mm(
      "%%MatrixMarket matrix coordinate real general\n2 2 3\n1 2 1.5\n2 1 4\n1 2 0.25\n");
  EXPECT_EQ(m.real(0, 1), 1.75);
  EXPECT_EQ(m.real(1, 0), 4.0);
  EXPECT_EQ(m.real(0, 0), 0.0);
}

TEST(MatrixMarket, SymmetricFillsTheMirror) {
  const mf::Matrix m = mm(
      "%%MatrixMarket matrix coordinate real symmetric\n3 3 4\n1 1 2\n2 1 -1\n3 2 0.5\n3 3 7\n");
  Eigen::MatrixXd expected(3, 3);
  expected << 2, -1, 0, -1, 0, 0.5, 0, 0.5, 7;
  EXPECT_EQ(m.real, expected);
}

TEST(MatrixMarket, HermitianComplexFillsTheConjugate) {
  const mf::Matrix m = mm(
      "%%MatrixMarket matrix coordinate complex hermitian\n2 2 3\n1 1 1.5 0\n2 1 0.5 -2\n"
      "2 2 -3 0\n");
  ASSERT_TRUE(m.complex);
  EXPECT_EQ(m.values(1, 0), std::complex<double>(0.5, -2));
  EXPECT_EQ(m.values(0, 1), std::complex<double>(0.5, 2));
  EXPECT_EQ(m.values(0, 0), std::complex<double>(1.5, 0));
  EXPECT_EQ(m.values(1, 1), std::complex<double>(-3, 0));
  EXPECT_EQ(m.real.size(), 0);
}

TEST(MatrixMarket, HermitianRealIsSymmetric) {
  const mf::Matrix m = mm("%%MatrixMarket matrix coordinate real hermitian\n2 2 1\n2 1 3\n");
  ASSERT_FALSE(m.complex);
  EXPECT_EQ(m.real(0, 1), 3.0);
  EXPECT_EQ(m.real(1, 0), 3.0);
}

TEST(MatrixMarket, SkewSymmetricNegatesTheMirror) {
  const mf::Matrix m =
      mm("%%MatrixMarket matrix coordinate real skew-symmetric\n3 3 2\n2 1 4\n3 1 -1.5\n");
  Eigen::MatrixXd expected(3, 3);
  expected << 0, -4, 1.5, 4, 0, 0, -1.5, 0, 0;
  EXPECT_EQ(m.real, expected);
}

TEST(MatrixMarket, PatternEntriesAreOne) {
  const mf::Matrix m = mm("%%MatrixMarket matrix coordinate pattern general\n2 2 2\n1 2\n2 2\n");
  Eigen::MatrixXd expected(2, 2);
  expected << 0, 1, 0, 1;
  EXPECT_EQ(m.real, expected);
  const mf::Matrix s = mm("%%MatrixMarket matrix coordinate pattern symmetric\n2 2 1\n2 1\n");
  EXPECT_EQ(s.real(0, 1), 1.0);
  EXPECT_EQ(s.real(1, 0), 1.0);
}

TEST(MatrixMarket, Integer) {
  const mf::Matrix m = mm("%%MatrixMarket matrix coordinate integer general\n1 2 2\n1 1 -7\n"
                          "1 2 9007199254740993\n");
  EXPECT_EQ(m.real(0, 0), -7.0);
  EXPECT_EQ(m.real(0, 1), 9007199254740992.0);  // 2^53 + 1 rounds to even
  EXPECT_TRUE(has(mm_refusal("%%MatrixMarket matrix coordinate integer general\n1 1 1\n1 1 1.5\n"),
                  "line 3: '1.5' is not an integer"));
}

TEST(MatrixMarket, ArrayRealGeneralIsColumnMajor) {
  const mf::Matrix m = mm(
      "%%MatrixMarket matrix array real general\n% comment\n2 3\n1\n2\n3\n4\n5\n-0.0\n");
  Eigen::MatrixXd expected(2, 3);
  expected << 1, 3, 5, 2, 4, 0;
  EXPECT_EQ(m.real, expected);
  EXPECT_TRUE(std::signbit(m.real(1, 2)));  // stored as given, not added to a zero
}

TEST(MatrixMarket, ArraySymmetricHoldsTheLowerTriangle) {
  const mf::Matrix m = mm("%%MatrixMarket matrix array real symmetric\n3 3\n1\n2\n3\n4\n5\n6\n");
  Eigen::MatrixXd expected(3, 3);
  expected << 1, 2, 3, 2, 4, 5, 3, 5, 6;
  EXPECT_EQ(m.real, expected);
  const mf::Matrix s = mm("%%MatrixMarket matrix array real skew-symmetric\n3 3\n1\n2\n3\n");
  Eigen::MatrixXd skew(3, 3);
  skew << 0, -1, -2, 1, 0, -3, 2, 3, 0;
  EXPECT_EQ(s.real, skew);
  const mf::Matrix h =
      mm("%%MatrixMarket matrix array complex hermitian\n2 2\n1 0\n2 3\n4 0\n");
  EXPECT_EQ(h.values(0, 1), std::complex<double>(2, -3));
  EXPECT_EQ(h.values(1, 0), std::complex<double>(2, 3));
}

// ---------------------------------------------------------------------------------------------
// Matrix Market: refusals, each with its line

TEST(MatrixMarket, RefusesAMissingBanner) {
  std::string message = mm_refusal("2 2 1\n1 1 1\n");
  EXPECT_TRUE(has(message, "matrix file 'a.mtx': has no Matrix Market banner on line 1")) << message;
  EXPECT_TRUE(has(mm_refusal(""), "has no Matrix Market banner"));
  message = mm_refusal("%%MatrixMarket vector coordinate real general\n");
  EXPECT_TRUE(has(message, "line 1: the banner describes a 'vector'")) << message;
  message = mm_refusal("%%MatrixMarket matrix array pattern general\n1 1\n");
  EXPECT_TRUE(has(message, "line 1: a pattern matrix must be stored as coordinate")) << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate real upper\n");
  EXPECT_TRUE(has(message, "line 1: unknown symmetry 'upper'")) << message;
}

TEST(MatrixMarket, RefusesAnIndexOutOfRange) {
  std::string message =
      mm_refusal("%%MatrixMarket matrix coordinate real general\n% c\n2 3 2\n1 1 1\n3 1 1\n");
  EXPECT_TRUE(has(message, "matrix file 'a.mtx': line 5: row index 3 is out of range 1..2"))
      << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate real general\n2 3 1\n1 0 1\n");
  EXPECT_TRUE(has(message, "line 3: column index 0 is out of range 1..3")) << message;
}

TEST(MatrixMarket, RefusesTruncatedFiles) {
  std::string message =
      mm_refusal("%%MatrixMarket matrix coordinate real general\n2 2 3\n1 1 1\n2 2 2\n");
  EXPECT_TRUE(has(message, "matrix file 'a.mtx': truncated: declares 3 entries, found 2 (the "
                           "file ends at line 4)"))
      << message;
  message = mm_refusal("%%MatrixMarket matrix array real general\n2 2\n1\n2\n3\n");
  EXPECT_TRUE(has(message, "truncated: declares 4 entries, found 3")) << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate real general\n% only comments\n");
  EXPECT_TRUE(has(message, "truncated: ends before its size line")) << message;
}

TEST(MatrixMarket, RefusesExtraEntries) {
  std::string message =
      mm_refusal("%%MatrixMarket matrix coordinate real general\n2 2 1\n1 1 1\n2 2 2\n");
  EXPECT_TRUE(has(message, "line 4: more entries than the 1 the size line declares")) << message;
  message = mm_refusal("%%MatrixMarket matrix array real symmetric\n2 2\n1\n2\n3\n4\n");
  EXPECT_TRUE(has(message, "line 6: more entries than the 3")) << message;
}

TEST(MatrixMarket, RefusesWordsThatAreNotNumbers) {
  std::string message =
      mm_refusal("%%MatrixMarket matrix coordinate real general\n2 2 1\n1 1 abc\n");
  EXPECT_TRUE(has(message, "line 3: 'abc' is not a number")) << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate real general\n2 2 1\n1 x 1\n");
  EXPECT_TRUE(has(message, "line 3: column index 'x' is not a whole number")) << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate real general\n2 2 1\n1 1 1.0D+02\n");
  EXPECT_TRUE(has(message, "line 3: '1.0D+02' is not a number")) << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate real general\n2 two 1\n");
  EXPECT_TRUE(has(message, "line 2: the column count 'two' is not a whole number")) << message;
}

TEST(MatrixMarket, RefusesWrongCountsOfNumbers) {
  std::string message =
      mm_refusal("%%MatrixMarket matrix coordinate real general\n2 2 1\n1 1 1 1\n");
  EXPECT_TRUE(has(message, "line 3: expects 3 numbers (ROW COLUMN VALUE), found 4")) << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate complex general\n2 2 1\n1 1 1\n");
  EXPECT_TRUE(has(message, "line 3: expects 4 numbers (ROW COLUMN REAL IMAGINARY), found 3"))
      << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate real general\n2 2\n");
  EXPECT_TRUE(has(message, "line 2: the size line must hold ROWS COLUMNS ENTRIES")) << message;
}

TEST(MatrixMarket, RefusesUpperTriangleEntriesOfSymmetricStorage) {
  std::string message =
      mm_refusal("%%MatrixMarket matrix coordinate real symmetric\n3 3 2\n2 1 1\n1 3 5\n");
  EXPECT_TRUE(has(message, "line 4: the entry (1, 3) lies above the diagonal; a symmetric file "
                           "stores only the lower triangle"))
      << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate real skew-symmetric\n2 2 1\n2 2 1\n");
  EXPECT_TRUE(has(message, "line 3: the diagonal entry (2, 2) in a skew-symmetric file")) << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate complex hermitian\n2 2 1\n1 1 1 0.5\n");
  EXPECT_TRUE(has(message, "line 3: the diagonal entry (1, 1) of a hermitian matrix must be real"))
      << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate real symmetric\n2 3 0\n");
  EXPECT_TRUE(has(message, "line 2: declares a 2 × 3 matrix, but a symmetric")) << message;
}

TEST(MatrixMarket, RefusesNonFiniteValues) {
  for (const char* word : {"inf", "-inf", "nan", "NaN", "Infinity"}) {
    const std::string message = mm_refusal(
        std::string("%%MatrixMarket matrix coordinate real general\n1 1 1\n1 1 ") + word + "\n");
    EXPECT_TRUE(has(message, std::string("line 3: the value '") + word + "' is not finite"))
        << message;
  }
  const std::string message =
      mm_refusal("%%MatrixMarket matrix array real general\n1 1\n1e400\n");
  EXPECT_TRUE(has(message, "line 3: the value '1e400' is out of the range of a double")) << message;
}

TEST(MatrixMarket, RefusesHugeDeclaredSizesBeforeAllocating) {
  std::string message =
      mm_refusal("%%MatrixMarket matrix coordinate real general\n100001 5 1\n1 1 1\n");
  EXPECT_TRUE(has(message, "line 2: declares a 100001 × 5 matrix; rows and columns may be at most "
                           "100000 each"))
      << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate real general\n100000 100000 1\n");
  EXPECT_TRUE(has(message, "more than the 400000000 entries")) << message;
  message = mm_refusal("%%MatrixMarket matrix coordinate real general\n0 5 0\n");
  EXPECT_TRUE(has(message, "at least one row and one column")) << message;
  mf::Limits small;
  small.max_dimension = 10;
  message = refusal([&] {
    mf::parse_matrix_market("%%MatrixMarket matrix array real general\n11 1\n", "a.mtx", small);
  });
  EXPECT_TRUE(has(message, "at most 10 each")) << message;
}

// ---------------------------------------------------------------------------------------------
// Files: the format, read and read_shared

class Files : public ::testing::Test {
 protected:
  void SetUp() override {
    dir_ = fs::path(::testing::TempDir()) / ("freegap-matrix-file-" + std::to_string(::getpid()));
    fs::remove_all(dir_);
    fs::create_directories(dir_);
  }
  void TearDown() override { fs::remove_all(dir_); }
  std::string write(const std::string& name, const std::string& bytes) const {
    const std::string path = (dir_ / name).string();
    std::ofstream(path, std::ios::binary) << bytes;
    return path;
  }
  fs::path dir_;
};

TEST(Format, ByExtension) {
  EXPECT_EQ(mf::format_of("a/b.h5"), mf::Format::hdf5);
  EXPECT_EQ(mf::format_of("x.HDF5"), mf::Format::hdf5);
  EXPECT_EQ(mf::format_of("x.npy"), mf::Format::npy);
  EXPECT_EQ(mf::format_of("x.Npy"), mf::Format::npy);
  EXPECT_EQ(mf::format_of("x.mtx"), mf::Format::matrix_market);
  EXPECT_EQ(mf::format_of("x.MM"), mf::Format::matrix_market);
  std::string message = refusal([] { mf::format_of("data/x.csv"); });
  EXPECT_TRUE(has(message, "matrix file 'data/x.csv': has the unknown extension '.csv'; name it "
                           ".h5 or .hdf5 (HDF5), .npy (NumPy) or .mtx or .mm (Matrix Market)"))
      << message;
  message = refusal([] { mf::format_of("a.dir/matrix"); });
  EXPECT_TRUE(has(message, "matrix file 'a.dir/matrix': has no extension")) << message;
  EXPECT_STREQ(mf::format_name(mf::Format::npy), "NumPy .npy");
}

TEST_F(Files, ReadsEachFormat) {
  const std::string a = write("a.npy", npy("<f8", false, "(2, 3)", raw(kValues)));
  EXPECT_TRUE(same_bits(mf::read(a).real(0, 1), kValues[1]));
  const std::string b =
      write("b.mtx", "%%MatrixMarket matrix coordinate real general\n2 2 1\n2 1 0.3\n");
  const mf::Matrix m = mf::read(b);
  EXPECT_EQ(m.real(1, 0), 0.3);
  EXPECT_EQ(m.rows, 2);
  const std::string message = refusal([&] { mf::read(b, "A"); });
  EXPECT_TRUE(has(message, "matrix file '" + b + "': dataset applies to HDF5 files only; remove it"))
      << message;
}

TEST_F(Files, RefusesMissingFilesAndDirectories) {
  const std::string missing = (dir_ / "missing.npy").string();
  std::string message = refusal([&] { mf::read(missing); });
  EXPECT_TRUE(has(message, "matrix file '" + missing + "': cannot open it (No such file or "
                           "directory)"))
      << message;
  const std::string directory = (dir_ / "folder.mtx").string();
  fs::create_directory(directory);
  message = refusal([&] { mf::read(directory); });
  EXPECT_TRUE(has(message, "matrix file '" + directory + "': is a directory")) << message;
  message = refusal([&] { mf::read_shared(directory); });
  EXPECT_TRUE(has(message, "is a directory")) << message;
}

TEST_F(Files, Hdf5NeedsTheInstalledReader) {
  const std::string path = write("x.h5", "not really");
  const std::string message = refusal([&] { mf::read(path, "A"); });
  EXPECT_EQ(message, "matrix file '" + path + "': reading HDF5 needs the freegap program (no HDF5 "
                     "reader is installed here)");
  // An installed reader gets the path and the dataset.
  mf::set_hdf5_reader([](const std::string& p, const std::string& d) {
    mf::Matrix m;
    m.rows = m.cols = 1;
    m.real = Eigen::MatrixXd::Constant(1, 1, static_cast<double>(p.size() + d.size()));
    return m;
  });
  EXPECT_EQ(mf::read(path, "AB").real(0, 0), static_cast<double>(path.size() + 2));
  mf::set_hdf5_reader(nullptr);
  EXPECT_TRUE(has(refusal([&] { mf::read(path); }), "no HDF5 reader is installed here"));
}

TEST_F(Files, ReadSharedKeepsTheLastMatricesUntilTheFileChanges) {
  const std::string header = "%%MatrixMarket matrix coordinate real general\n";
  const std::string a = write("a.mtx", header + "2 2 1\n1 1 5\n");
  const auto first = mf::read_shared(a);
  EXPECT_EQ(first->real(0, 0), 5.0);
  EXPECT_EQ(mf::read_shared(a).get(), first.get());  // the same matrix, not read again
  // Rewritten (another size): read again.
  write("a.mtx", header + "3 3 1\n1 1 6.5\n");
  const auto second = mf::read_shared(a);
  EXPECT_NE(second.get(), first.get());
  EXPECT_EQ(second->rows, 3);
  EXPECT_EQ(second->real(0, 0), 6.5);
  EXPECT_EQ(mf::read_shared(a).get(), second.get());
  // The same size, another modification time: read again.
  write("a.mtx", header + "3 3 1\n1 1 7.5\n");
  fs::last_write_time(a, fs::last_write_time(a) + std::chrono::seconds(5));
  const auto third = mf::read_shared(a);
  EXPECT_NE(third.get(), second.get());
  EXPECT_EQ(third->real(0, 0), 7.5);
  // Two matrices are kept: after a, b, a, c it holds c and a, and b is read again.
  const std::string b = write("b.mtx", header + "1 1 1\n1 1 1\n");
  const std::string c = write("c.mtx", header + "1 1 1\n1 1 2\n");
  const auto kept_b = mf::read_shared(b);
  EXPECT_EQ(mf::read_shared(a).get(), third.get());
  mf::read_shared(c);
  EXPECT_EQ(mf::read_shared(a).get(), third.get());
  EXPECT_NE(mf::read_shared(b).get(), kept_b.get());
}

}  // namespace
