// LU factorisation with partial pivoting of small complex matrices by LAPACK (zgetrf, zgetrs),
// for the limit solver's Newton steps and resolvents. The LAPACKE _work entry points skip
// LAPACKE's scan of the input for NaN (6 % of `freegap limit`'s time with the plain ones); a NaN
// input gives NaN output, which the solver checks for.
#include <lapacke.h>

#include <limits>
#include <type_traits>
#include <vector>

#include "freegap/linalg.hpp"
#include "lapack_complex.hpp"

namespace freegap::linalg {

static_assert(std::is_same_v<lapack_int, int>, "ComplexLU keeps pivots as int");

namespace {

using detail::lp;

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

}  // namespace

bool ComplexLU::compute(const CMatrix& a) {
  const auto n = static_cast<lapack_int>(a.rows());
  lu_ = a;
  pivots_.resize(static_cast<std::size_t>(n));
  // info > 0: an exactly zero pivot; the factors are complete but U is singular.
  const lapack_int info =
      n == 0 ? 0 : LAPACKE_zgetrf_work(LAPACK_COL_MAJOR, n, n, lp(lu_.data()), n, pivots_.data());
  singular_ = info != 0;
  return !singular_;
}

CMatrix ComplexLU::solve(const CMatrix& b) const {
  CMatrix x = b;
  const auto n = static_cast<lapack_int>(lu_.rows());
  if (singular_) {
    x.setConstant(std::complex<double>(kNaN, kNaN));
    return x;
  }
  // One column at a time: OpenBLAS runs a zgetrs of several columns on all its threads however
  // small the matrix (measured: the limit of 2 W1 W2 + 2 W2 W1 + W1, whose Woodbury solves have
  // two columns, took 7.7 s instead of 3.7 s with OPENBLAS_NUM_THREADS unset on 2 cores).
  for (Index c = 0; n > 0 && c < x.cols(); ++c) {
    LAPACKE_zgetrs_work(LAPACK_COL_MAJOR, 'N', n, 1,
                        lp(const_cast<std::complex<double>*>(lu_.data())), n, pivots_.data(),
                        lp(x.col(c).data()), n);
  }
  return x;
}

Eigen::VectorXcd ComplexLU::solve(const Eigen::VectorXcd& b) const {
  Eigen::VectorXcd x = b;  // solved in place: no matrix copy on the Newton steps' path
  const auto n = static_cast<lapack_int>(lu_.rows());
  if (singular_) {
    x.setConstant(std::complex<double>(kNaN, kNaN));
  } else if (n > 0) {
    LAPACKE_zgetrs_work(LAPACK_COL_MAJOR, 'N', n, 1,
                        lp(const_cast<std::complex<double>*>(lu_.data())), n, pivots_.data(),
                        lp(x.data()), n);
  }
  return x;
}

CMatrix ComplexLU::inverse() const {
  CMatrix x = lu_;
  const auto n = static_cast<lapack_int>(lu_.rows());
  if (singular_) {
    x.setConstant(std::complex<double>(kNaN, kNaN));
    return x;
  }
  if (n > 0) {
    // zgetri, not zgetrs on the identity: OpenBLAS runs a many-column zgetrs on all its threads
    // even at n = 5 (measured 3x slower in total with 2 threads, most of it in the kernel).
    std::vector<std::complex<double>> work(static_cast<std::size_t>(64 * n));
    LAPACKE_zgetri_work(LAPACK_COL_MAJOR, n, lp(x.data()), n, pivots_.data(), lp(work.data()),
                        64 * n);
  }
  return x;
}

CMatrix inverse(const CMatrix& a) { return ComplexLU(a).inverse(); }

}  // namespace freegap::linalg
