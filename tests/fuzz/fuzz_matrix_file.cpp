// Fuzz target: bytes → a matrix, as matrix_file::read parses a .npy or Matrix Market file. The
// first byte chooses the parser (even: .npy, odd: Matrix Market), the rest is the file. Any
// exception other than an InputError is a failure, and so is an InputError whose message does
// not start with "matrix file 'NAME': " or a matrix that breaks the Matrix promises (its sizes,
// one of real/values filled, every entry finite).
//
// The size bounds are lowered (as fuzz_common.hpp lowers the expansion's): a size line of a few
// bytes may declare the largest matrix the bounds allow, which the parser then allocates, and
// the real bounds (4e8 entries) exceed the run's 4 GiB memory limit. The checks are the same.
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <string>
#include <string_view>

#include "freegap/errors.hpp"
#include "freegap/matrix_file.hpp"
#include "fuzz_common.hpp"

namespace {

template <class M>
bool finite(const M& m) {
  return m.allFinite();
}

void check_matrix(const freegap::matrix_file::Matrix& m, const freegap::matrix_file::Limits& l) {
  using freegap::fuzz::broken;
  if (m.rows < 1 || m.cols < 1 || m.rows * m.cols > l.max_entries) broken("a matrix's size");
  if (m.complex) {
    if (m.values.rows() != m.rows || m.values.cols() != m.cols || m.real.size() != 0) {
      broken("a complex matrix's storage");
    }
    if (!finite(m.values)) broken("a non-finite complex entry");
  } else {
    if (m.real.rows() != m.rows || m.real.cols() != m.cols || m.values.size() != 0) {
      broken("a real matrix's storage");
    }
    if (!finite(m.real)) broken("a non-finite entry");
  }
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  if (size == 0) return 0;
  const bool npy = data[0] % 2 == 0;
  const std::string_view bytes(reinterpret_cast<const char*>(data) + 1, size - 1);
  const std::string name = npy ? "fuzz.npy" : "fuzz.mtx";
  freegap::matrix_file::Limits limits;
  limits.max_dimension = 2000;
  limits.max_entries = 1 << 20;  // 16 MiB as complex numbers
  try {
    const auto m = npy ? freegap::matrix_file::parse_npy(bytes, name, limits)
                       : freegap::matrix_file::parse_matrix_market(bytes, name, limits);
    check_matrix(m, limits);
  } catch (const freegap::InputError& e) {
    const std::string message = e.what();
    if (message.rfind("matrix file '" + name + "': ", 0) != 0) {
      freegap::fuzz::broken("a refusal without the file's name in front: " + message);
    }
  }
  return 0;
}
