// Private to linalg: std::complex<double> storage as LAPACKE's complex type (the same layout,
// two doubles, real part first; C++ [complex.numbers] and LAPACKE's lapack_complex_double).
#pragma once

#include <lapacke.h>

#include <complex>

namespace freegap::linalg::detail {

inline lapack_complex_double* lp(std::complex<double>* p) {
  return reinterpret_cast<lapack_complex_double*>(p);
}

}  // namespace freegap::linalg::detail
