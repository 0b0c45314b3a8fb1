// Test helper: reads a matrix file as freegap does (matrix_file::read, with the store's HDF5
// reader installed, as the program installs it) and prints it, so that a script can compare it
// with what numpy, h5py or scipy read (tests/matrix_file/check_matrix_file_formats.py).
//
// Usage: read_matrix_file PATH [DATASET]
// Prints "ROWS COLS COMPLEX" (COMPLEX 0 or 1), then every entry row by row, one per line, with
// %.17g (which reads back as the same double): "VALUE", or "REAL IMAGINARY" for a complex
// matrix. Exit 0; 2 with the message on stderr when the file is refused (InputError); 1 on any
// other error.
#include <cstdio>
#include <exception>
#include <string>

#include "freegap/errors.hpp"
#include "freegap/matrix_file.hpp"
#include "freegap/store.hpp"

int main(int argc, char** argv) {
  if (argc < 2 || argc > 3) {
    std::fprintf(stderr, "usage: read_matrix_file PATH [DATASET]\n");
    return 1;
  }
  namespace mf = freegap::matrix_file;
  mf::set_hdf5_reader(&freegap::store::read_matrix_dataset);
  try {
    const mf::Matrix m = mf::read(argv[1], argc == 3 ? argv[2] : "");
    std::printf("%lld %lld %d\n", static_cast<long long>(m.rows), static_cast<long long>(m.cols),
                m.complex ? 1 : 0);
    for (Eigen::Index i = 0; i < m.rows; ++i) {
      for (Eigen::Index j = 0; j < m.cols; ++j) {
        if (m.complex) {
          std::printf("%.17g %.17g\n", m.values(i, j).real(), m.values(i, j).imag());
        } else {
          std::printf("%.17g\n", m.real(i, j));
        }
      }
    }
    return 0;
  } catch (const freegap::InputError& e) {
    std::fprintf(stderr, "%s\n", e.what());
    return freegap::kExitBadInput;
  } catch (const std::exception& e) {
    std::fprintf(stderr, "error: %s\n", e.what());
    return freegap::kExitFailure;
  }
}
