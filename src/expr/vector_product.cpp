// Products of an expression with vectors, without forming it (expr.hpp, VectorProduct): the
// syntax tree applied from the right, one BLAS matrix–vector product per dense factor.
#include <complex>
#include <string>

#include "freegap/expr.hpp"
#include "freegap/linalg.hpp"
#include "internal.hpp"

namespace freegap::expr {

namespace {

using detail::AstNode;
using detail::ExpressionData;
using Complex = std::complex<double>;

Index dim_of(const ExpressionData& d, int symbol, Index n) {
  return symbol == 0 ? n : ensembles::companion_size(n, d.dim_ratios[static_cast<std::size_t>(symbol - 1)]);
}

template <typename T>
using Vec = Eigen::Matrix<T, Eigen::Dynamic, 1>;

// y = op(A)·x for a dense sample A (linalg's BLAS wrappers); op is the adjoint when `adj`.
template <typename M, typename T>
void dense_product(const M& a, bool self_adjoint, bool adj, const Vec<T>& x, Vec<T>& y) {
  y.resize(adj ? a.cols() : a.rows());
  const linalg::Op op = adj ? linalg::Op::adjoint : linalg::Op::none;
  if constexpr (std::is_same_v<M, Eigen::MatrixXd> && std::is_same_v<T, Complex>) {
    linalg::gemv(a, op, x.data(), y.data());
  } else {
    linalg::gemv(a, op, self_adjoint, x.data(), y.data());
  }
}

[[noreturn]] void wrong_sample(const ExpressionData& d, int m, const std::string& why) {
  throw InputError("vector product: the sample of " + d.operands[static_cast<std::size_t>(m)].name +
                   " " + why);
}

template <typename T>
struct Applier {
  const ExpressionData& d;
  const std::vector<ensembles::Sample>& samples;
  Index n;

  Vec<T> leaf(int m, bool adj, const Vec<T>& x) const {
    if (m < 0 || static_cast<std::size_t>(m) >= samples.size()) wrong_sample(d, m, "is missing");
    const auto& op = d.operands[static_cast<std::size_t>(m)];
    const ensembles::Sample& s = samples[static_cast<std::size_t>(m)];
    const Index rows = dim_of(d, op.rows, n), cols = dim_of(d, op.cols, n);
    if (s.rows() != rows || s.cols() != cols) wrong_sample(d, m, "has the wrong shape");
    if ((adj ? rows : cols) != x.size()) wrong_sample(d, m, "meets a vector of the wrong length");
    Vec<T> y;
    switch (s.storage) {
      case ensembles::Sample::Storage::real_diagonal:
        return x.cwiseProduct(s.diagonal.template cast<T>());
      case ensembles::Sample::Storage::real_dense:
        dense_product(s.real, op.self_adjoint, adj, x, y);
        return y;
      case ensembles::Sample::Storage::complex_dense:
        if constexpr (std::is_same_v<T, Complex>) {
          dense_product(s.complex, op.self_adjoint, adj, x, y);
          return y;
        } else {
          wrong_sample(d, m, "is complex in a real product");
        }
    }
    wrong_sample(d, m, "has an unknown storage");
  }

  Vec<T> node(int index, bool adj, const Vec<T>& x) const {
    const AstNode& a = d.nodes[static_cast<std::size_t>(index)];
    switch (a.kind) {
      case AstNode::Kind::name:
        return leaf(a.matrix, adj, x);
      case AstNode::Kind::number:
        // Real products (T = double) only for expressions without the imaginary unit.
        if constexpr (std::is_same_v<T, Complex>) {
          return x * (adj ? std::conj(a.value) : a.value);
        } else {
          return x * a.value.real();
        }
      case AstNode::Kind::adjoint:
        return node(a.children.front(), !adj, x);
      case AstNode::Kind::power: {
        Vec<T> y = x;
        for (int e = 0; e < a.exponent; ++e) y = node(a.children.front(), adj, y);
        return y;
      }
      case AstNode::Kind::sum: {
        Vec<T> y = node(a.children[0], adj, x) * static_cast<double>(a.signs[0]);
        for (std::size_t i = 1; i < a.children.size(); ++i) {
          y += node(a.children[i], adj, x) * static_cast<double>(a.signs[i]);
        }
        return y;
      }
      case AstNode::Kind::product: {
        // P = c0 c1 … ck: P x = c0(c1(… ck x)); P^* x = ck^*(… c0^* x).
        Vec<T> y = x;
        const auto count = a.children.size();
        for (std::size_t i = 0; i < count; ++i) {
          y = node(a.children[adj ? i : count - 1 - i], adj, y);
        }
        return y;
      }
    }
    return x;
  }
};

// Bytes of samples read by one product, walking the tree with each node's multiplicity.
double bytes_of(const ExpressionData& d, int index, Index n) {
  const AstNode& a = d.nodes[static_cast<std::size_t>(index)];
  double sum = 0.0;
  switch (a.kind) {
    case AstNode::Kind::name: {
      const auto& op = d.operands[static_cast<std::size_t>(a.matrix)];
      const double rows = static_cast<double>(dim_of(d, op.rows, n));
      const double cols = static_cast<double>(dim_of(d, op.cols, n));
      if (op.diagonal) return 8.0 * rows;
      return rows * cols * (op.real ? 8.0 : 16.0) * (op.self_adjoint ? 0.5 : 1.0);
    }
    case AstNode::Kind::number:
      return 0.0;
    case AstNode::Kind::power:
      return a.exponent * bytes_of(d, a.children.front(), n);
    default:
      for (const int c : a.children) sum += bytes_of(d, c, n);
      return sum;
  }
}

}  // namespace

VectorProduct::VectorProduct(const Expression& expression, Index n)
    : data_(expression.data_), n_(n), real_(expression.is_real()) {
  if (n < 1) throw InputError("vector product: N must be at least 1");
  bytes_ = bytes_of(*data_, data_->root, n);
}

void VectorProduct::apply(const std::vector<ensembles::Sample>& samples, const Complex* in,
                          Complex* out) const {
  const Applier<Complex> a{*data_, samples, n_};
  const Vec<Complex> y = a.node(data_->root, false, Eigen::Map<const Vec<Complex>>(in, n_));
  Eigen::Map<Vec<Complex>>(out, n_) = y;
}

void VectorProduct::apply(const std::vector<ensembles::Sample>& samples, const double* in,
                          double* out) const {
  if (!real_) throw InputError("vector product: a complex expression needs complex vectors");
  const Applier<double> a{*data_, samples, n_};
  const Vec<double> y = a.node(data_->root, false, Eigen::Map<const Vec<double>>(in, n_));
  Eigen::Map<Vec<double>>(out, n_) = y;
}

void VectorProduct::apply_gram(const std::vector<ensembles::Sample>& samples, const Complex* in,
                               Complex* out) const {
  const Applier<Complex> a{*data_, samples, n_};
  const Vec<Complex> y = a.node(data_->root, false, Eigen::Map<const Vec<Complex>>(in, n_));
  Eigen::Map<Vec<Complex>>(out, n_) = a.node(data_->root, true, y);
}

void VectorProduct::apply_gram(const std::vector<ensembles::Sample>& samples, const double* in,
                               double* out) const {
  if (!real_) throw InputError("vector product: a complex expression needs complex vectors");
  const Applier<double> a{*data_, samples, n_};
  const Vec<double> y = a.node(data_->root, false, Eigen::Map<const Vec<double>>(in, n_));
  Eigen::Map<Vec<double>>(out, n_) = a.node(data_->root, true, y);
}

}  // namespace freegap::expr
