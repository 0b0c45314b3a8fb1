// LAPACKE / CBLAS wrappers (OpenBLAS). Column-major throughout, as Eigen stores matrices.
#include "freegap/linalg.hpp"
#include "lapack_complex.hpp"

#include <cblas.h>
#include <lapacke.h>
#include <sys/mman.h>

#include <algorithm>
#include <cstdint>
#include <string>

#include "freegap/errors.hpp"

extern "C" char* openblas_get_config(void);
extern "C" void openblas_set_num_threads(int);

namespace freegap::linalg {

namespace {

void check_info(lapack_int info, const char* routine) {
  if (info != 0) {
    throw NumericalError(std::string("LAPACK ") + routine + " failed (info = " +
                         std::to_string(info) + ")");
  }
}

void require_tall(Index rows, Index cols, const char* what) {
  if (cols > rows) {
    throw InputError(std::string(what) + ": matrix is " + std::to_string(rows) + "x" +
                     std::to_string(cols) + ", expected no more columns than rows");
  }
}

void require_square(Index rows, Index cols, const char* what) {
  if (rows != cols) {
    throw InputError(std::string(what) + ": matrix is " + std::to_string(rows) + "x" +
                     std::to_string(cols) + ", expected a square matrix");
  }
}

using detail::lp;

CBLAS_TRANSPOSE to_cblas(Op op) {
  switch (op) {
    case Op::none:
      return CblasNoTrans;
    case Op::transpose:
      return CblasTrans;
    case Op::adjoint:
      return CblasConjTrans;
  }
  return CblasNoTrans;
}

template <class M>
Index op_rows(const M& a, Op op) {
  return op == Op::none ? a.rows() : a.cols();
}
template <class M>
Index op_cols(const M& a, Op op) {
  return op == Op::none ? a.cols() : a.rows();
}

}  // namespace

EigenDriver choose_eigen_driver(Index n, bool is_complex) {
  if (is_complex && n >= 400) return EigenDriver::two_stage;
  return EigenDriver::classic;
}

const char* driver_name(EigenDriver driver, bool is_complex) {
  if (driver == EigenDriver::two_stage) return is_complex ? "zheevd_2stage" : "dsyevd_2stage";
  return is_complex ? "zheevd" : "dsyevd";
}

Vector eigenvalues(CMatrix& a, EigenDriver driver) {
  require_square(a.rows(), a.cols(), "eigenvalues");
  const Index n = a.rows();
  Vector w(n);
  if (n == 0) return w;
  if (driver == EigenDriver::automatic) driver = choose_eigen_driver(n, true);
  const lapack_int ln = static_cast<lapack_int>(n);
  if (driver == EigenDriver::two_stage) {
    check_info(LAPACKE_zheevd_2stage(LAPACK_COL_MAJOR, 'N', 'L', ln, lp(a.data()), ln, w.data()),
               "zheevd_2stage");
  } else {
    check_info(LAPACKE_zheevd(LAPACK_COL_MAJOR, 'N', 'L', ln, lp(a.data()), ln, w.data()),
               "zheevd");
  }
  return w;
}

Vector eigenvalues(RMatrix& a, EigenDriver driver) {
  require_square(a.rows(), a.cols(), "eigenvalues");
  const Index n = a.rows();
  Vector w(n);
  if (n == 0) return w;
  if (driver == EigenDriver::automatic) driver = choose_eigen_driver(n, false);
  const lapack_int ln = static_cast<lapack_int>(n);
  if (driver == EigenDriver::two_stage) {
    check_info(LAPACKE_dsyevd_2stage(LAPACK_COL_MAJOR, 'N', 'L', ln, a.data(), ln, w.data()),
               "dsyevd_2stage");
  } else {
    check_info(LAPACKE_dsyevd(LAPACK_COL_MAJOR, 'N', 'L', ln, a.data(), ln, w.data()), "dsyevd");
  }
  return w;
}

int tridiagonal_eigenvalues(std::span<double> diag, std::span<double> off) {
  if (diag.empty()) return 0;
  if (off.size() + 1 < diag.size()) {
    throw InputError("tridiagonal_eigenvalues: the off-diagonal needs n − 1 = " +
                     std::to_string(diag.size() - 1) + " entries (got " + std::to_string(off.size()) + ")");
  }
  double none = 0.0;  // LAPACK wants a valid pointer for n = 1
  return static_cast<int>(LAPACKE_dsterf(static_cast<lapack_int>(diag.size()), diag.data(),
                                         off.empty() ? &none : off.data()));
}

Eigen::VectorXcd eigenvalues_general(CMatrix& a) {
  require_square(a.rows(), a.cols(), "eigenvalues_general");
  const Index n = a.rows();
  Eigen::VectorXcd w(n);
  if (n == 0) return w;
  const lapack_int ln = static_cast<lapack_int>(n);
  check_info(LAPACKE_zgeev(LAPACK_COL_MAJOR, 'N', 'N', ln, lp(a.data()), ln, lp(w.data()), nullptr,
                           1, nullptr, 1),
             "zgeev");
  return w;
}

Vector singular_values(CMatrix& a) {
  const Index k = std::min(a.rows(), a.cols());
  Vector s(k);
  if (k == 0) return s;
  const lapack_int m = static_cast<lapack_int>(a.rows()), n = static_cast<lapack_int>(a.cols());
  check_info(LAPACKE_zgesdd(LAPACK_COL_MAJOR, 'N', m, n, lp(a.data()), m, s.data(), nullptr, 1,
                            nullptr, 1),
             "zgesdd");
  return s;
}

Vector singular_values(RMatrix& a) {
  const Index k = std::min(a.rows(), a.cols());
  Vector s(k);
  if (k == 0) return s;
  const lapack_int m = static_cast<lapack_int>(a.rows()), n = static_cast<lapack_int>(a.cols());
  check_info(
      LAPACKE_dgesdd(LAPACK_COL_MAJOR, 'N', m, n, a.data(), m, s.data(), nullptr, 1, nullptr, 1),
      "dgesdd");
  return s;
}

void haar_from_qr(CMatrix& z) {
  require_tall(z.rows(), z.cols(), "haar_from_qr");
  const Index n = z.rows(), r = z.cols();
  if (r == 0) return;
  const lapack_int ln = static_cast<lapack_int>(n), lr = static_cast<lapack_int>(r);
  Eigen::VectorXcd tau(r);
  check_info(LAPACKE_zgeqrf(LAPACK_COL_MAJOR, ln, lr, lp(z.data()), ln, lp(tau.data())), "zgeqrf");
  // Phases r_jj/|r_jj| of R's diagonal, read before zungqr overwrites it (Mezzadri 2007).
  Eigen::VectorXcd phase(r);
  for (Index j = 0; j < r; ++j) {
    const std::complex<double> d = z(j, j);
    const double mod = std::abs(d);
    phase(j) = mod > 0.0 ? d / mod : std::complex<double>(1.0, 0.0);
  }
  check_info(LAPACKE_zungqr(LAPACK_COL_MAJOR, ln, lr, lr, lp(z.data()), ln, lp(tau.data())),
             "zungqr");
  z = z * phase.asDiagonal();  // column scaling, O(N r)
}

void haar_from_qr(RMatrix& z) {
  require_tall(z.rows(), z.cols(), "haar_from_qr");
  const Index n = z.rows(), r = z.cols();
  if (r == 0) return;
  const lapack_int ln = static_cast<lapack_int>(n), lr = static_cast<lapack_int>(r);
  Vector tau(r);
  check_info(LAPACKE_dgeqrf(LAPACK_COL_MAJOR, ln, lr, z.data(), ln, tau.data()), "dgeqrf");
  Vector sign(r);
  for (Index j = 0; j < r; ++j) sign(j) = z(j, j) < 0.0 ? -1.0 : 1.0;
  check_info(LAPACKE_dorgqr(LAPACK_COL_MAJOR, ln, lr, lr, z.data(), ln, tau.data()), "dorgqr");
  z = z * sign.asDiagonal();
}

IsometryMethod haar_isometry(CMatrix& z) {
  require_tall(z.rows(), z.cols(), "haar_isometry");
  const Index n = z.rows(), r = z.cols();
  if (r == 0) return IsometryMethod::cholesky;
  if (2 * r <= n) {
    const lapack_int ln = static_cast<lapack_int>(n), lr = static_cast<lapack_int>(r);
    CMatrix g(r, r);  // Z^*Z, then R in its upper triangle; Z itself is untouched until trsm
    cblas_zherk(CblasColMajor, CblasUpper, CblasConjTrans, lr, ln, 1.0, z.data(), ln, 0.0,
                g.data(), lr);
    double rcond = 0.0;
    if (LAPACKE_zpotrf(LAPACK_COL_MAJOR, 'U', lr, lp(g.data()), lr) == 0 &&
        LAPACKE_ztrcon(LAPACK_COL_MAJOR, '1', 'U', 'N', lr, lp(g.data()), lr, &rcond) == 0 &&
        rcond * isometry_condition_limit(r) >= 1.0) {
      const std::complex<double> one(1.0, 0.0);
      cblas_ztrsm(CblasColMajor, CblasRight, CblasUpper, CblasNoTrans, CblasNonUnit, ln, lr, &one,
                  g.data(), lr, z.data(), ln);
      return IsometryMethod::cholesky;
    }
  }
  haar_from_qr(z);
  return IsometryMethod::householder;
}

IsometryMethod haar_isometry(RMatrix& z) {
  require_tall(z.rows(), z.cols(), "haar_isometry");
  const Index n = z.rows(), r = z.cols();
  if (r == 0) return IsometryMethod::cholesky;
  if (2 * r <= n) {
    const lapack_int ln = static_cast<lapack_int>(n), lr = static_cast<lapack_int>(r);
    RMatrix g(r, r);
    cblas_dsyrk(CblasColMajor, CblasUpper, CblasTrans, lr, ln, 1.0, z.data(), ln, 0.0, g.data(),
                lr);
    double rcond = 0.0;
    if (LAPACKE_dpotrf(LAPACK_COL_MAJOR, 'U', lr, g.data(), lr) == 0 &&
        LAPACKE_dtrcon(LAPACK_COL_MAJOR, '1', 'U', 'N', lr, g.data(), lr, &rcond) == 0 &&
        rcond * isometry_condition_limit(r) >= 1.0) {
      cblas_dtrsm(CblasColMajor, CblasRight, CblasUpper, CblasNoTrans, CblasNonUnit, ln, lr, 1.0,
                  g.data(), lr, z.data(), ln);
      return IsometryMethod::cholesky;
    }
  }
  haar_from_qr(z);
  return IsometryMethod::householder;
}

CMatrix polar_factor_svd(CMatrix z) {
  require_square(z.rows(), z.cols(), "polar_factor_svd");
  const Index n = z.rows();
  CMatrix w(n, n), vt(n, n);
  Vector s(n);
  if (n == 0) return w;
  const lapack_int ln = static_cast<lapack_int>(n);
  check_info(LAPACKE_zgesdd(LAPACK_COL_MAJOR, 'A', ln, ln, lp(z.data()), ln, s.data(),
                            lp(w.data()), ln, lp(vt.data()), ln),
             "zgesdd");
  CMatrix u;
  gemm(w, Op::none, vt, Op::none, u);  // U = W V^* (vt already holds V^*)
  return u;
}

RMatrix polar_factor_svd(RMatrix z) {
  require_square(z.rows(), z.cols(), "polar_factor_svd");
  const Index n = z.rows();
  RMatrix w(n, n), vt(n, n);
  Vector s(n);
  if (n == 0) return w;
  const lapack_int ln = static_cast<lapack_int>(n);
  check_info(LAPACKE_dgesdd(LAPACK_COL_MAJOR, 'A', ln, ln, z.data(), ln, s.data(), w.data(), ln,
                            vt.data(), ln),
             "dgesdd");
  RMatrix u;
  gemm(w, Op::none, vt, Op::none, u);
  return u;
}

void gemm(const CMatrix& a, Op op_a, const CMatrix& b, Op op_b, CMatrix& c,
          std::complex<double> alpha, std::complex<double> beta) {
  const Index m = op_rows(a, op_a), k = op_cols(a, op_a), n = op_cols(b, op_b);
  if (op_rows(b, op_b) != k) throw InputError("gemm: inner dimensions differ");
  if (beta == std::complex<double>(0.0)) {
    resize_fresh(c, m, n);
  } else if (c.rows() != m || c.cols() != n) {
    throw InputError("gemm: output has the wrong shape");
  }
  if (m == 0 || n == 0) return;
  if (k == 0) {
    c *= beta;
    return;
  }
  cblas_zgemm(CblasColMajor, to_cblas(op_a), to_cblas(op_b), static_cast<blasint>(m),
              static_cast<blasint>(n), static_cast<blasint>(k), &alpha, a.data(),
              static_cast<blasint>(a.rows()), b.data(), static_cast<blasint>(b.rows()), &beta,
              c.data(), static_cast<blasint>(m));
}

void gemm(const RMatrix& a, Op op_a, const RMatrix& b, Op op_b, RMatrix& c, double alpha,
          double beta) {
  if (op_a == Op::adjoint) op_a = Op::transpose;
  if (op_b == Op::adjoint) op_b = Op::transpose;
  const Index m = op_rows(a, op_a), k = op_cols(a, op_a), n = op_cols(b, op_b);
  if (op_rows(b, op_b) != k) throw InputError("gemm: inner dimensions differ");
  if (beta == 0.0) {
    resize_fresh(c, m, n);
  } else if (c.rows() != m || c.cols() != n) {
    throw InputError("gemm: output has the wrong shape");
  }
  if (m == 0 || n == 0) return;
  if (k == 0) {
    c *= beta;
    return;
  }
  cblas_dgemm(CblasColMajor, to_cblas(op_a), to_cblas(op_b), static_cast<blasint>(m),
              static_cast<blasint>(n), static_cast<blasint>(k), alpha, a.data(),
              static_cast<blasint>(a.rows()), b.data(), static_cast<blasint>(b.rows()), beta,
              c.data(), static_cast<blasint>(m));
}

void gemv(const CMatrix& a, Op op, bool hermitian, const std::complex<double>* x,
          std::complex<double>* y) {
  const std::complex<double> one = 1.0, zero = 0.0;
  const auto rows = static_cast<blasint>(a.rows()), cols = static_cast<blasint>(a.cols());
  if (hermitian) {
    if (rows != cols) throw InputError("gemv: a Hermitian matrix must be square");
    cblas_zhemv(CblasColMajor, CblasLower, rows, &one, a.data(), rows, x, 1, &zero, y, 1);
    return;
  }
  cblas_zgemv(CblasColMajor, to_cblas(op), rows, cols, &one, a.data(), rows, x, 1, &zero, y, 1);
}

void gemv(const RMatrix& a, Op op, bool symmetric, const double* x, double* y) {
  const auto rows = static_cast<blasint>(a.rows()), cols = static_cast<blasint>(a.cols());
  if (symmetric) {
    if (rows != cols) throw InputError("gemv: a symmetric matrix must be square");
    cblas_dsymv(CblasColMajor, CblasLower, rows, 1.0, a.data(), rows, x, 1, 0.0, y, 1);
    return;
  }
  cblas_dgemv(CblasColMajor, to_cblas(op == Op::adjoint ? Op::transpose : op), rows, cols, 1.0,
              a.data(), rows, x, 1, 0.0, y, 1);
}

void gemv(const RMatrix& a, Op op, const std::complex<double>* x, std::complex<double>* y) {
  const auto rows = static_cast<blasint>(a.rows()), cols = static_cast<blasint>(a.cols());
  const bool transposed = op != Op::none;
  const blasint out = transposed ? cols : rows, inner = transposed ? rows : cols;
  cblas_dgemm(CblasColMajor, CblasNoTrans, transposed ? CblasNoTrans : CblasTrans, 2, out, inner,
              1.0, reinterpret_cast<const double*>(x), 2, a.data(), rows, 0.0,
              reinterpret_cast<double*>(y), 2);
}

void herk(const CMatrix& a, Op op, CMatrix& c, double alpha, double beta) {
  if (op == Op::transpose) throw InputError("herk: use Op::none or Op::adjoint");
  const Index n = op == Op::none ? a.rows() : a.cols();
  const Index k = op == Op::none ? a.cols() : a.rows();
  if (beta == 0.0) {
    resize_fresh(c, n, n);
    // zherk with beta = 0 does not read c, but the strict upper triangle would stay
    // uninitialised; zero it so the matrix is always fully defined.
    c.setZero();
  } else if (c.rows() != n || c.cols() != n) {
    throw InputError("herk: output has the wrong shape");
  }
  if (n == 0) return;
  cblas_zherk(CblasColMajor, CblasLower, op == Op::none ? CblasNoTrans : CblasConjTrans,
              static_cast<blasint>(n), static_cast<blasint>(k), alpha, a.data(),
              static_cast<blasint>(a.rows()), beta, c.data(), static_cast<blasint>(n));
}

void syrk(const RMatrix& a, Op op, RMatrix& c, double alpha, double beta) {
  const bool trans = op != Op::none;
  const Index n = trans ? a.cols() : a.rows();
  const Index k = trans ? a.rows() : a.cols();
  if (beta == 0.0) {
    resize_fresh(c, n, n);
    c.setZero();
  } else if (c.rows() != n || c.cols() != n) {
    throw InputError("syrk: output has the wrong shape");
  }
  if (n == 0) return;
  cblas_dsyrk(CblasColMajor, CblasLower, trans ? CblasTrans : CblasNoTrans,
              static_cast<blasint>(n), static_cast<blasint>(k), alpha, a.data(),
              static_cast<blasint>(a.rows()), beta, c.data(), static_cast<blasint>(n));
}

void advise_huge_pages(void* data, std::size_t bytes) {
  if (data == nullptr || bytes < kHugePageMinBytes) return;
  constexpr std::uintptr_t kPage = 4096;
  const auto begin = (reinterpret_cast<std::uintptr_t>(data) + kPage - 1) & ~(kPage - 1);
  const auto end = (reinterpret_cast<std::uintptr_t>(data) + bytes) & ~(kPage - 1);
  if (end <= begin) return;
#ifdef MADV_HUGEPAGE
  // The result is ignored on purpose: EINVAL where the kernel lacks transparent huge pages.
  (void)::madvise(reinterpret_cast<void*>(begin), end - begin, MADV_HUGEPAGE);
#endif
}

void mirror_lower(Eigen::Ref<CMatrix> c) {
  const Index n = c.rows();
  for (Index j = 0; j + 1 < n; ++j) c.row(j).tail(n - j - 1) = c.col(j).tail(n - j - 1).adjoint();
}

void mirror_lower(Eigen::Ref<RMatrix> c) {
  const Index n = c.rows();
  for (Index j = 0; j + 1 < n; ++j) {
    c.row(j).tail(n - j - 1) = c.col(j).tail(n - j - 1).transpose();
  }
}

void set_blas_threads(int threads) { openblas_set_num_threads(std::max(1, threads)); }

std::string blas_description() {
  const char* config = openblas_get_config();
  return config ? std::string(config) : std::string("unknown BLAS");
}

// The thin SVD Z = W Σ V^* (W N×r) gives Z (Z^*Z)^(-1/2) = W V^*. Kept apart from polar_factor
// (square, full SVD) so that the two can change independently.
CMatrix polar_isometry(CMatrix z) {
  require_tall(z.rows(), z.cols(), "polar_isometry");
  const Index n = z.rows(), r = z.cols();
  CMatrix w(n, r), vt(r, r);
  Vector s(r);
  if (r == 0) return w;
  const lapack_int ln = static_cast<lapack_int>(n), lr = static_cast<lapack_int>(r);
  check_info(LAPACKE_zgesdd(LAPACK_COL_MAJOR, 'S', ln, lr, lp(z.data()), ln, s.data(),
                            lp(w.data()), ln, lp(vt.data()), lr),
             "zgesdd");
  CMatrix u;
  gemm(w, Op::none, vt, Op::none, u);
  return u;
}

RMatrix polar_isometry(RMatrix z) {
  require_tall(z.rows(), z.cols(), "polar_isometry");
  const Index n = z.rows(), r = z.cols();
  RMatrix w(n, r), vt(r, r);
  Vector s(r);
  if (r == 0) return w;
  const lapack_int ln = static_cast<lapack_int>(n), lr = static_cast<lapack_int>(r);
  check_info(LAPACKE_dgesdd(LAPACK_COL_MAJOR, 'S', ln, lr, z.data(), ln, s.data(), w.data(), ln,
                            vt.data(), lr),
             "dgesdd");
  RMatrix u;
  gemm(w, Op::none, vt, Op::none, u);
  return u;
}

}  // namespace freegap::linalg
