// Samplers for the declared matrices; normalisations in include/freegap/ensembles.hpp.
#include "freegap/ensembles.hpp"
#include "freegap/text.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <mutex>
#include <numeric>
#include <sstream>

#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/rng.hpp"

namespace freegap::ensembles {

namespace {

constexpr double pi = 3.14159265358979323846;

std::string num(double x) { return text::readable(x); }
[[noreturn]] void fail(const MatrixSpec& spec, const std::string& what) {
  declarations::refuse(spec, what);
}

// ---- quantiles of the continuous laws -------------------------------------------------------

// Standard semicircle CDF on [−2, 2]: F(x) = 1/2 + x√(4−x²)/(4π) + arcsin(x/2)/π
// (docs/check-values.md §1.1).
double semicircle_cdf(double x) {
  if (x <= -2.0) return 0.0;
  if (x >= 2.0) return 1.0;
  return 0.5 + x * std::sqrt(4.0 - x * x) / (4.0 * pi) + std::asin(x / 2.0) / pi;
}
double semicircle_density(double x) {
  return std::abs(x) >= 2.0 ? 0.0 : std::sqrt(4.0 - x * x) / (2.0 * pi);
}

// Marchenko–Pastur(c) absolutely continuous part on [a, b], a = (1−√c)², b = (1+√c)², density
// √((b−t)(t−a))/(2πct) (Marchenko & Pastur 1967). Its antiderivative (checked against scipy
// quadrature to 1e-12 when this was written) is
//   P(t) = [r + (a+b)/2·asin((2t−a−b)/(b−a)) − √(ab)·asin(((a+b)t − 2ab)/(t(b−a)))]/(2πc),
// r = √((b−t)(t−a)); both arcsines are written as atan2 so they stay accurate near the edges.
struct MarchenkoPastur {
  double c, a, b;
  explicit MarchenkoPastur(double ratio)
      : c(ratio), a((1 - std::sqrt(ratio)) * (1 - std::sqrt(ratio))),
        b((1 + std::sqrt(ratio)) * (1 + std::sqrt(ratio))) {}
  double antiderivative(double t) const {
    const double r = std::sqrt(std::max((b - t) * (t - a), 0.0));
    double v = r + 0.5 * (a + b) * std::atan2(2 * t - a - b, 2 * r);
    if (a > 0) v -= std::sqrt(a * b) * std::atan2((a + b) * t - 2 * a * b, 2 * std::sqrt(a * b) * r);
    return v / (2 * pi * c);
  }
  double atom() const { return c > 1 ? 1 - 1 / c : 0.0; }
  double cdf(double x) const {
    if (x < 0) return 0.0;
    if (x <= a) return atom();
    if (x >= b) return 1.0;
    const double continuous_mass = 1.0 - atom();
    const double lo = antiderivative(a), hi = antiderivative(b);
    return atom() + continuous_mass * (antiderivative(x) - lo) / (hi - lo);
  }
  double density(double x) const {
    if (x <= a || x >= b) return 0.0;
    return std::sqrt((b - x) * (x - a)) / (2 * pi * c * x);
  }
};

// Quantile by Newton's method safeguarded with bisection on [lo, hi] (common practice).
template <class Cdf, class Density>
double invert_cdf(double p, double lo, double hi, Cdf cdf, Density density) {
  double x = 0.5 * (lo + hi);
  for (int it = 0; it < 200; ++it) {
    const double f = cdf(x) - p;
    if (f > 0) hi = x; else lo = x;
    const double d = density(x);
    double next = d > 0 ? x - f / d : 0.5 * (lo + hi);
    if (!(next > lo && next < hi)) next = 0.5 * (lo + hi);
    if (std::abs(next - x) <= 1e-15 * (1 + std::abs(x)) || hi - lo <= 1e-15 * (1 + std::abs(x))) {
      return next;
    }
    x = next;
  }
  return x;
}

// ---- dense draws --------------------------------------------------------------------------------

// A GUE matrix scaled by inv_sqrt_n.
void draw_gue(Index n, double inv_sqrt_n, rng::Stream& stream, Sample& out) {
  // Lower triangle column by column: H_jj ~ N(0,1), H_ij (i > j) complex normal, E|H_ij|^2 = 1.
  out.storage = Sample::Storage::complex_dense;
  auto& h = out.complex;
  linalg::resize_fresh(h, n, n);
  for (Index j = 0; j < n; ++j) {
    h(j, j) = stream.normal();
    for (Index i = j + 1; i < n; ++i) h(i, j) = stream.complex_normal();
  }
  linalg::mirror_lower(h);
  h *= inv_sqrt_n;
}

// A real symmetric Wigner matrix scaled by inv_sqrt_n: GOE when gauss, otherwise Rademacher
// entries off a zero diagonal.
void draw_real_wigner(bool gauss, Index n, double inv_sqrt_n, rng::Stream& stream, Sample& out) {
  out.storage = Sample::Storage::real_dense;
  auto& h = out.real;
  linalg::resize_fresh(h, n, n);
  for (Index j = 0; j < n; ++j) {
    h(j, j) = gauss ? std::sqrt(2.0) * stream.normal() : 0.0;  // GOE diagonal variance 2
    for (Index i = j + 1; i < n; ++i) h(i, j) = gauss ? stream.normal() : stream.rademacher();
  }
  linalg::mirror_lower(h);
  h *= inv_sqrt_n;
}

// A Haar unitary matrix from a complex Ginibre one, by `method`.
void draw_haar_unitary(HaarMethod method, Index n, rng::Stream& stream, Sample& out) {
  out.storage = Sample::Storage::complex_dense;
  Eigen::MatrixXcd z;
  linalg::resize_fresh(z, n, n);
  stream.fill_complex_normal({z.data(), static_cast<std::size_t>(z.size())});
  if (method == HaarMethod::qr) {
    linalg::haar_from_qr(z);
    out.complex = std::move(z);
  } else {
    out.complex = linalg::polar_factor(std::move(z));
  }
}

// A Haar orthogonal matrix from a real Ginibre one, by `method`.
void draw_haar_orthogonal(HaarMethod method, Index n, rng::Stream& stream, Sample& out) {
  out.storage = Sample::Storage::real_dense;
  Eigen::MatrixXd z;
  linalg::resize_fresh(z, n, n);
  stream.fill_normal({z.data(), static_cast<std::size_t>(z.size())});
  if (method == HaarMethod::qr) {
    linalg::haar_from_qr(z);
    out.real = std::move(z);
  } else {
    out.real = linalg::polar_factor(std::move(z));
  }
}

// r columns of a Haar unitary or orthogonal matrix: the N×r block of Ginibre numbers that the
// full draw puts in its first r columns (the same stream positions), orthonormalised. With the
// QR method (Cholesky QR for 2r ≤ N, linalg::haar_isometry) the result is, up to rounding, the
// first r columns of the full draw; with the polar method it has the same law (an N×r Haar
// isometry) but not the same values.
void draw_haar_columns(const MatrixSpec& spec, Index n, Index r, rng::Stream& stream,
                       Sample& out) {
  if (spec.kind == Kind::haar_unitary) {
    out.storage = Sample::Storage::complex_dense;
    Eigen::MatrixXcd z;
    linalg::resize_fresh(z, n, r);
    stream.fill_complex_normal({z.data(), static_cast<std::size_t>(z.size())});
    if (spec.haar == HaarMethod::qr) {
      linalg::haar_isometry(z);
      out.complex = std::move(z);
    } else {
      out.complex = linalg::polar_isometry(std::move(z));
    }
  } else {
    out.storage = Sample::Storage::real_dense;
    Eigen::MatrixXd z;
    linalg::resize_fresh(z, n, r);
    stream.fill_normal({z.data(), static_cast<std::size_t>(z.size())});
    if (spec.haar == HaarMethod::qr) {
      linalg::haar_isometry(z);
      out.real = std::move(z);
    } else {
      out.real = linalg::polar_isometry(std::move(z));
    }
  }
}

// T_ij = c_|i−j| on the band |i − j| ≤ k; circulant: Σ c_|m| over m ≡ i − j (mod N), |m| ≤ k
// (declarations.hpp, MatrixSpec::coefficients).
void toeplitz_matrix(const MatrixSpec& spec, Index n, Eigen::MatrixXd& t) {
  linalg::resize_fresh(t, n, n);
  t.setZero();
  const auto k = static_cast<Index>(spec.coefficients.size()) - 1;
  for (Index m = -k; m <= k; ++m) {
    const double c = spec.coefficients[static_cast<std::size_t>(m < 0 ? -m : m)];
    if (!spec.circulant) {
      if (m < n && -m < n) t.diagonal(-m).array() += c;  // the entries with i − j = m
      continue;
    }
    for (Index j = 0; j < n; ++j) {
      const Index i = ((j + m) % n + n) % n;
      t(i, j) += c;
    }
  }
}

// J_ii = a_{i mod p}, J_{i,i+1} = J_{i+1,i} = b_{i mod p} (declarations.hpp, MatrixSpec).
void jacobi_matrix(const MatrixSpec& spec, Index n, Eigen::MatrixXd& j) {
  linalg::resize_fresh(j, n, n);
  j.setZero();
  const auto p = static_cast<Index>(spec.jacobi_diagonal.size());
  for (Index i = 0; i < n; ++i) {
    j(i, i) = spec.jacobi_diagonal[static_cast<std::size_t>(i % p)];
    if (i + 1 < n) j(i, i + 1) = j(i + 1, i) = spec.jacobi_off_diagonal[static_cast<std::size_t>(i % p)];
  }
}

void require_size(const MatrixSpec& spec, Index n) {
  if (n <= 0) fail(spec, "size N must be positive (got " + std::to_string(n) + ")");
}

}  // namespace

Index Sample::rows() const {
  switch (storage) {
    case Storage::real_dense:
      return real.rows();
    case Storage::complex_dense:
      return complex.rows();
    case Storage::real_diagonal:
      return diagonal.size();
  }
  return 0;
}

Index Sample::cols() const {
  switch (storage) {
    case Storage::real_dense:
      return real.cols();
    case Storage::complex_dense:
      return complex.cols();
    case Storage::real_diagonal:
      return diagonal.size();
  }
  return 0;
}

struct Sampler::FileCache {
  std::mutex lock;
  Index n = 0;
  std::shared_ptr<const matrix_file::Matrix> matrix;
};

Sampler::Sampler(MatrixSpec spec) : spec_(std::move(spec)) {
  declarations::validate(spec_);
  if (spec_.kind == Kind::diagonal && spec_.diagonal.kind == DiagonalLawKind::file) {
    file_values_ = declarations::file_values(spec_);
  }
  if (spec_.kind == Kind::file_matrix) file_cache_ = std::make_shared<FileCache>();
}

namespace {

// The sample of a file_matrix at size N: k = N/n copies of the file's n × n matrix A on the block
// diagonal, each (A + A^*)/2 (A itself, bit for bit, when A is exactly self-adjoint).
template <class Dense>
void repeat_self_adjoint(const Dense& a, Index n, Dense& out) {
  linalg::resize_fresh(out, n, n);
  out.setZero();
  const Index m = a.rows();
  for (Index b = 0; b < n; b += m) out.block(b, b, m, m).noalias() = 0.5 * (a + a.adjoint());
}

}  // namespace

Sample Sampler::draw_file_matrix(Index n) const {
  Sample out;
  std::shared_ptr<const matrix_file::Matrix> m;
  {
    const std::lock_guard<std::mutex> hold(file_cache_->lock);
    if (file_cache_->n != n || !file_cache_->matrix) {
      file_cache_->matrix = declarations::file_matrix_at(spec_, n);
      file_cache_->n = n;
    }
    m = file_cache_->matrix;
  }
  if (m->complex) {
    out.storage = Sample::Storage::complex_dense;
    repeat_self_adjoint(m->values, n, out.complex);
  } else {
    out.storage = Sample::Storage::real_dense;
    repeat_self_adjoint(m->real, n, out.real);
  }
  return out;
}

Eigen::VectorXd Sampler::diagonal_values(Index n) const {
  require_size(spec_, n);
  Eigen::VectorXd d(n);
  const DiagonalLaw& law = spec_.diagonal;
  auto p_of = [n](Index k) { return (static_cast<double>(k) + 0.5) / static_cast<double>(n); };
  switch (law.kind) {
    case DiagonalLawKind::atoms: {
      const auto counts = atom_counts(law.atoms, n);
      Index at = 0;
      for (std::size_t i = 0; i < counts.size(); ++i) {
        d.segment(at, counts[i]).setConstant(law.atoms[i].value);
        at += counts[i];
      }
      break;
    }
    case DiagonalLawKind::uniform:
      for (Index k = 0; k < n; ++k) d(k) = law.low + (law.high - law.low) * p_of(k);
      break;
    case DiagonalLawKind::semicircle_quantiles: {
      const double sigma = std::sqrt(law.variance);
      for (Index k = 0; k < n; ++k) {
        d(k) = sigma * invert_cdf(p_of(k), -2.0, 2.0, semicircle_cdf, semicircle_density);
      }
      break;
    }
    case DiagonalLawKind::marchenko_pastur_quantiles: {
      const MarchenkoPastur mp(law.ratio);
      for (Index k = 0; k < n; ++k) {
        const double p = p_of(k);
        d(k) = p <= mp.atom() ? 0.0
                              : invert_cdf(
                                    p, mp.a, mp.b, [&](double x) { return mp.cdf(x); },
                                    [&](double x) { return mp.density(x); });
      }
      break;
    }
    case DiagonalLawKind::file: {
      const auto k_values = static_cast<double>(file_values_.size());
      for (Index k = 0; k < n; ++k) {
        // Left-continuous inverse of the empirical CDF: the ⌈pK⌉-th smallest value.
        auto idx = static_cast<std::size_t>(std::ceil(p_of(k) * k_values)) - 1;
        d(k) = file_values_[std::min(idx, file_values_.size() - 1)];
      }
      break;
    }
    case DiagonalLawKind::spiked: {
      const auto rank = static_cast<Index>(law.spikes.size());
      if (n < rank) {
        fail(spec_, "size N = " + std::to_string(n) + " is below its " + std::to_string(rank) +
                        " spike values; start the sizes at N ≥ " + std::to_string(rank));
      }
      d.setConstant(law.base);
      for (Index k = 0; k < rank; ++k) d(k) = law.spikes[static_cast<std::size_t>(k)];
      break;
    }
  }
  return d;
}

Sample Sampler::draw_columns(Index n, Index r, std::uint64_t seed, std::uint64_t trial) const {
  require_size(spec_, n);
  if (!is_unitary(spec_.kind)) fail(spec_, "only a Haar matrix can be drawn by columns");
  if (r < 0 || r > n) {
    fail(spec_, "cannot draw " + std::to_string(r) + " columns at size " + std::to_string(n));
  }
  Sample out;
  rng::Stream stream({seed, spec_.name, static_cast<std::uint64_t>(n), trial});
  draw_haar_columns(spec_, n, r, stream, out);
  return out;
}

Sample Sampler::draw(Index n, std::uint64_t seed, std::uint64_t trial) const {
  require_size(spec_, n);
  Sample out;
  if (spec_.kind == Kind::diagonal) {
    out.storage = Sample::Storage::real_diagonal;
    out.diagonal = diagonal_values(n);
    return out;
  }
  if (spec_.kind == Kind::file_matrix) return draw_file_matrix(n);
  rng::Stream stream({seed, spec_.name, static_cast<std::uint64_t>(n), trial});
  const double inv_sqrt_n = 1.0 / std::sqrt(static_cast<double>(n));
  Index m = n;
  if (declarations::uses_ratio(spec_.kind)) {
    m = companion_size(n, spec_.ratio);
    if (m < 1) {
      fail(spec_, "N/ratio = " + num(static_cast<double>(n) / spec_.ratio) +
                      " rounds to 0 columns; use a smaller ratio or a larger N");
    }
  }
  switch (spec_.kind) {
    case Kind::gue:
      draw_gue(n, inv_sqrt_n, stream, out);
      break;
    case Kind::goe:
    case Kind::wigner_rademacher:
      draw_real_wigner(spec_.kind == Kind::goe, n, inv_sqrt_n, stream, out);
      break;
    case Kind::wishart_complex: {
      Eigen::MatrixXcd x;
      linalg::resize_fresh(x, n, m);
      stream.fill_complex_normal({x.data(), static_cast<std::size_t>(x.size())});
      out.storage = Sample::Storage::complex_dense;
      linalg::herk(x, linalg::Op::none, out.complex, 1.0 / static_cast<double>(m));
      linalg::mirror_lower(out.complex);
      break;
    }
    case Kind::wishart_real: {
      Eigen::MatrixXd x;
      linalg::resize_fresh(x, n, m);
      stream.fill_normal({x.data(), static_cast<std::size_t>(x.size())});
      out.storage = Sample::Storage::real_dense;
      linalg::syrk(x, linalg::Op::none, out.real, 1.0 / static_cast<double>(m));
      linalg::mirror_lower(out.real);
      break;
    }
    case Kind::ginibre_complex: {
      out.storage = Sample::Storage::complex_dense;
      linalg::resize_fresh(out.complex, n, m);
      stream.fill_complex_normal({out.complex.data(), static_cast<std::size_t>(out.complex.size())});
      out.complex *= 1.0 / std::sqrt(static_cast<double>(m));
      break;
    }
    case Kind::ginibre_real: {
      out.storage = Sample::Storage::real_dense;
      linalg::resize_fresh(out.real, n, m);
      stream.fill_normal({out.real.data(), static_cast<std::size_t>(out.real.size())});
      out.real *= 1.0 / std::sqrt(static_cast<double>(m));
      break;
    }
    case Kind::haar_unitary:
      draw_haar_unitary(spec_.haar, n, stream, out);
      break;
    case Kind::haar_orthogonal:
      draw_haar_orthogonal(spec_.haar, n, stream, out);
      break;
    case Kind::diagonal:  // both returned above
    case Kind::file_matrix:
      break;
    case Kind::toeplitz:
    case Kind::jacobi:
      out.storage = Sample::Storage::real_dense;
      (spec_.kind == Kind::toeplitz ? toeplitz_matrix : jacobi_matrix)(spec_, n, out.real);
      break;
    case Kind::beta_hermite:
    case Kind::beta_laguerre:
      // Reached only through a misuse of the API: the model refuses dense use of these kinds.
      fail(spec_, "has only a tridiagonal model; it cannot be drawn as a dense matrix");
  }
  return out;
}

}  // namespace freegap::ensembles
