// The extreme eigenvalues of a Hermitian operator by Lanczos with full reorthogonalisation
// (linalg.hpp, lanczos_extremes). Every vector operation is a BLAS call; the tridiagonal
// eigenproblems go to LAPACK's dstevr.
#include <cblas.h>
#include <lapacke.h>

#include <algorithm>
#include <cmath>
#include <complex>
#include <limits>
#include <string>
#include <vector>

#include "freegap/linalg.hpp"

namespace freegap::linalg {

namespace {

using Complex = std::complex<double>;
constexpr double kEps = std::numeric_limits<double>::epsilon();
// BLAS by scalar type: h = Q^* w (m columns), w ← w − Q h, ‖w‖, w ← w / a, y = Q s.
void project(Index n, Index m, const double* q, const double* w, double* h) {
  cblas_dgemv(CblasColMajor, CblasTrans, static_cast<int>(n), static_cast<int>(m), 1.0, q,
              static_cast<int>(n), w, 1, 0.0, h, 1);
}
void project(Index n, Index m, const Complex* q, const Complex* w, Complex* h) {
  const Complex one = 1.0, zero = 0.0;
  cblas_zgemv(CblasColMajor, CblasConjTrans, static_cast<int>(n), static_cast<int>(m), &one, q,
              static_cast<int>(n), w, 1, &zero, h, 1);
}
void combine(Index n, Index m, const double* q, const double* h, double alpha, double beta,
             double* w) {
  cblas_dgemv(CblasColMajor, CblasNoTrans, static_cast<int>(n), static_cast<int>(m), alpha, q,
              static_cast<int>(n), h, 1, beta, w, 1);
}
void combine(Index n, Index m, const Complex* q, const Complex* h, double alpha, double beta,
             Complex* w) {
  const Complex a = alpha, b = beta;
  cblas_zgemv(CblasColMajor, CblasNoTrans, static_cast<int>(n), static_cast<int>(m), &a, q,
              static_cast<int>(n), h, 1, &b, w, 1);
}
double norm2(Index n, const double* x) { return cblas_dnrm2(static_cast<int>(n), x, 1); }
double norm2(Index n, const Complex* x) { return cblas_dznrm2(static_cast<int>(n), x, 1); }
void scale(Index n, double a, double* x) { cblas_dscal(static_cast<int>(n), a, x, 1); }
void scale(Index n, double a, Complex* x) { cblas_zdscal(static_cast<int>(n), a, x, 1); }
void axpy(Index n, double a, const double* x, double* y) {
  cblas_daxpy(static_cast<int>(n), a, x, 1, y, 1);
}
void axpy(Index n, double a, const Complex* x, Complex* y) {
  const Complex c = a;
  cblas_zaxpy(static_cast<int>(n), &c, x, 1, y, 1);
}
double real_part(double x) { return x; }
double real_part(Complex x) { return x.real(); }

// Two extreme eigenpairs of the k×k tridiagonal T (diagonal a, off-diagonal b): the smallest
// two (lowest = true) or the largest two, ascending, with their eigenvectors' last components.
struct EdgePairs {
  double theta[2] = {0.0, 0.0};
  std::vector<double> vectors;  // k × 2, column-major
  int count = 0;
};

EdgePairs edge_pairs(const std::vector<double>& a, const std::vector<double>& b, Index k,
                     bool lowest) {
  EdgePairs out;
  std::vector<double> d(a.begin(), a.begin() + k), e(b.begin(), b.begin() + k);  // e[k−1] unused
  const auto kk = static_cast<lapack_int>(k);
  const lapack_int il = lowest ? 1 : std::max<lapack_int>(1, kk - 1);
  const lapack_int iu = lowest ? std::min<lapack_int>(2, kk) : kk;
  out.vectors.assign(static_cast<std::size_t>(k) * 2, 0.0);
  std::vector<lapack_int> support(4);
  lapack_int found = 0;
  const lapack_int info =
      LAPACKE_dstevr(LAPACK_COL_MAJOR, 'V', 'I', kk, d.data(), e.data(), 0.0, 0.0, il, iu, 0.0,
                     &found, out.theta, out.vectors.data(), kk, support.data());
  out.count = info == 0 ? static_cast<int>(found) : 0;
  return out;
}

// What one convergence check found for one end of the spectrum.
struct EdgeState {
  double theta = 0.0;
  double estimate = std::numeric_limits<double>::infinity();  // min(r, r²/δ)
  double gap = 0.0;
  std::vector<double> s;  // the Ritz vector in the Lanczos basis (length k)
};

EdgeState edge_state(const std::vector<double>& a, const std::vector<double>& b, Index k,
                     double beta, bool lowest) {
  EdgeState st;
  const EdgePairs p = edge_pairs(a, b, k, lowest);
  if (p.count < 1) return st;
  const int pick = lowest ? 0 : p.count - 1;
  st.theta = p.theta[pick];
  st.s.assign(p.vectors.begin() + static_cast<std::ptrdiff_t>(pick * k),
              p.vectors.begin() + static_cast<std::ptrdiff_t>((pick + 1) * k));
  const double r = std::fabs(beta * st.s.back());
  st.gap = p.count == 2 ? p.theta[1] - p.theta[0] : 0.0;
  st.estimate = st.gap > 0 ? std::min(r, r * r / st.gap) : r;
  return st;
}

// Forms the unit Ritz vector y = Q s, applies the operator and recomputes θ, r and r²/δ.
template <typename T, typename Apply>
void recompute(Index n, const std::vector<T>& q, const EdgeState& st, const Apply& apply,
               double& theta, double& residual, double& estimate) {
  const auto k = static_cast<Index>(st.s.size());
  std::vector<T> s(st.s.begin(), st.s.end()), y(static_cast<std::size_t>(n)),
      ay(static_cast<std::size_t>(n));
  combine(n, k, q.data(), s.data(), 1.0, 0.0, y.data());
  scale(n, 1.0 / norm2(n, y.data()), y.data());
  apply(y.data(), ay.data());
  T rq{};
  project(n, 1, y.data(), ay.data(), &rq);
  theta = real_part(rq);
  axpy(n, -theta, y.data(), ay.data());
  residual = norm2(n, ay.data());
  estimate = st.gap > 0 ? std::min(residual, residual * residual / st.gap) : residual;
}

// One Lanczos step on column j of q (n × (j+2) used): w = A q_j, α_j, full reorthogonalisation
// (classical Gram–Schmidt twice), β_j; q_{j+1} = w/β_j unless β_j is 0.
template <typename T, typename Apply>
void lanczos_step(Index n, Index j, std::vector<T>& q, const Apply& apply,
                  std::vector<double>& a, std::vector<double>& b, std::vector<T>& h) {
  const auto col = [&](Index c) { return q.data() + static_cast<std::size_t>(c * n); };
  T* w = col(j + 1);
  apply(col(j), w);
  h.assign(static_cast<std::size_t>(j + 1), T{});
  project(n, j + 1, q.data(), w, h.data());
  a[static_cast<std::size_t>(j)] = real_part(h[static_cast<std::size_t>(j)]);
  combine(n, j + 1, q.data(), h.data(), -1.0, 1.0, w);
  project(n, j + 1, q.data(), w, h.data());
  combine(n, j + 1, q.data(), h.data(), -1.0, 1.0, w);
  const double beta = norm2(n, w);
  b[static_cast<std::size_t>(j)] = beta;
  if (beta > 0) scale(n, 1.0 / beta, w);
}

template <typename T, typename Apply>
LanczosResult run_lanczos(Index n, const Apply& apply, std::vector<T> start,
                          const LanczosSettings& settings) {
  LanczosResult out;
  if (n < 1 || static_cast<Index>(start.size()) != n) {
    out.reason = "Lanczos: the start vector does not have length N";
    return out;
  }
  const double start_norm = norm2(n, start.data());
  if (!(start_norm > 0) || !std::isfinite(start_norm)) {
    out.reason = "Lanczos: the start vector is zero or not finite";
    return out;
  }
  const Index limit = std::min<Index>(n, std::max(1, settings.max_iterations));
  // The basis: room for every column reserved (never moved), touched column by column as the
  // steps reach it, on huge pages where the kernel allows (advise_huge_pages).
  std::vector<T> q;
  q.reserve(static_cast<std::size_t>(n * (limit + 1)));
  advise_huge_pages(q.data(), q.capacity() * sizeof(T));
  q.assign(start.begin(), start.end());
  scale(n, 1.0 / start_norm, q.data());
  std::vector<double> a(static_cast<std::size_t>(limit)), b(static_cast<std::size_t>(limit));
  std::vector<T> h;
  EdgeState low, high;
  Index k = 0;
  bool stopped = false;
  for (Index j = 0; j < limit && !stopped; ++j) {
    q.resize(static_cast<std::size_t>((j + 2) * n));  // within the reserved room
    lanczos_step(n, j, q, apply, a, b, h);
    k = j + 1;
    if (!std::isfinite(a[static_cast<std::size_t>(j)]) || !std::isfinite(b[static_cast<std::size_t>(j)])) {
      out.reason = "Lanczos: a product with the expression was not finite at step " +
                   std::to_string(k);
      out.iterations = static_cast<int>(k);
      return out;
    }
    low = edge_state(a, b, k, b[static_cast<std::size_t>(j)], true);
    high = edge_state(a, b, k, b[static_cast<std::size_t>(j)], false);
    const double size = std::max({std::fabs(low.theta), std::fabs(high.theta), 1e-300});
    const bool invariant = b[static_cast<std::size_t>(j)] <= 64 * kEps * size;
    stopped = invariant || (k >= 2 && low.estimate <= settings.tolerance * size &&
                            high.estimate <= settings.tolerance * size);
  }
  out.iterations = static_cast<int>(k);
  if (!stopped) {
    out.estimate_min = low.estimate;
    out.estimate_max = high.estimate;
    out.reason = "Lanczos did not converge in " + std::to_string(k) +
                 " steps (error estimates " + std::to_string(low.estimate) + " and " +
                 std::to_string(high.estimate) + ")";
    return out;
  }
  recompute(n, q, low, apply, out.min, out.residual_min, out.estimate_min);
  recompute(n, q, high, apply, out.max, out.residual_max, out.estimate_max);
  const double size = std::max({std::fabs(out.min), std::fabs(out.max), 1e-300});
  const double allowed = std::max(10 * settings.tolerance * size, 64 * kEps * size);
  if (!(out.estimate_min <= allowed && out.estimate_max <= allowed)) {
    out.reason = "Lanczos: the recomputed residuals do not confirm convergence (error estimates " +
                 std::to_string(out.estimate_min) + " and " + std::to_string(out.estimate_max) +
                 ")";
    return out;
  }
  out.converged = true;
  return out;
}

}  // namespace

LanczosResult lanczos_extremes(Index n, const ComplexApply& apply, Eigen::VectorXcd start,
                               const LanczosSettings& settings) {
  return run_lanczos<Complex>(n, apply, std::vector<Complex>(start.begin(), start.end()), settings);
}

LanczosResult lanczos_extremes(Index n, const RealApply& apply, Eigen::VectorXd start,
                               const LanczosSettings& settings) {
  return run_lanczos<double>(n, apply, std::vector<double>(start.begin(), start.end()), settings);
}

}  // namespace freegap::linalg
