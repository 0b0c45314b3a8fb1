// Evaluation plans: the expression as a hash-consed graph (one node per distinct subexpression up
// to adjoints), lowered to BLAS steps with flop counts and a memory simulation, then evaluated.
#include <algorithm>
#include <bit>
#include <cmath>
#include <complex>
#include <cstdio>
#include <functional>
#include <map>
#include <set>
#include <sstream>
#include <type_traits>
#include <unordered_map>

#include "freegap/linalg.hpp"
#include "freegap/stop.hpp"
#include "freegap/text.hpp"
#include "internal.hpp"

namespace freegap::expr {
namespace detail {
namespace {

using Complex = std::complex<double>;

/// A use of a graph node, possibly adjointed.
struct Ref {
  int node = -1;
  bool adj = false;
  int key() const { return 2 * node + (adj ? 1 : 0); }
  bool operator==(const Ref&) const = default;
};

enum class NodeKind { leaf, product, gram, conjugate, sum };

struct Node {
  NodeKind kind = NodeKind::leaf;
  int leaf = -1;
  std::vector<Ref> args;      // product: a, b; gram: Y; conjugate: Y, D; sum: terms
  std::vector<Complex> coefs;  // sum: one per term (real unless the text has i)
  Complex identity = 0.0;      // sum: coefficient of I
  int rows = 0, cols = 0;     // symbolic dimensions
  bool real = false, diag = false, self_adjoint = false, unitary = false;
};

/// Linear combination c₀·I + Σ c_i·ref_i: the value of a syntax-tree node during lowering.
struct Lin {
  Complex identity = 0.0;
  std::vector<std::pair<Complex, Ref>> terms;
};

std::string bits(double x) { return std::to_string(std::bit_cast<std::uint64_t>(x)); }
std::string bits(Complex x) { return bits(x.real()) + '/' + bits(x.imag()); }

bool is_real_number(Complex c) { return c.imag() == 0.0; }

// The conjugate with a real number's imaginary part kept +0 (std::conj gives −0, whose bits
// would make 1 and conj(1) different keys).
Complex conjugate_number(Complex c) { return {c.real(), c.imag() == 0.0 ? 0.0 : -c.imag()}; }

// c^k for a scalar: std::pow for a real c (as before the imaginary unit existed, so results
// stay bit-identical), repeated squaring for a complex one, which is exact for i^k.
Complex scalar_power(Complex c, int k) {
  if (is_real_number(c)) return std::pow(c.real(), k);
  Complex out = 1.0;
  for (Complex base = c; k > 0; k >>= 1) {
    if (k & 1) out *= base;
    base *= base;
  }
  return out;
}

// "0.5", "-i", "2i", "(1+2i)": a coefficient as explain() prints it.
std::string coefficient_text(Complex c) {
  if (is_real_number(c)) return text::compact(c.real());
  if (c.real() == 0.0) {
    if (c.imag() == 1.0) return "i";
    if (c.imag() == -1.0) return "-i";
    return text::compact(c.imag()) + "i";
  }
  return "(" + text::compact(c.real()) + (c.imag() < 0 ? "-" : "+") +
         text::compact(std::abs(c.imag())) + "i)";
}

class Graph {
 public:
  explicit Graph(const ExpressionData& data) : data_(data) {}

  std::vector<Node> nodes;

  int rows(Ref r) const { return r.adj ? nodes[r.node].cols : nodes[r.node].rows; }
  int cols(Ref r) const { return r.adj ? nodes[r.node].rows : nodes[r.node].cols; }

  Ref adjoint(Ref r) const {
    if (nodes[r.node].self_adjoint) return r;
    return {r.node, !r.adj};
  }

  Ref leaf(int operand) {
    const Operand& o = data_.operands[operand];
    Node n;
    n.leaf = operand;
    n.rows = o.rows;
    n.cols = o.cols;
    n.real = o.real;
    n.diag = o.diagonal;
    n.self_adjoint = o.self_adjoint || o.diagonal;
    n.unitary = o.unitary;
    return {intern(std::move(n)), false};
  }

  // a·b, canonically oriented: of a·b and its adjoint b^*·a^*, the one with the smaller key list is
  // stored, so X1 X2 and X2 X1 = (X1 X2)^* (self-adjoint X1, X2) are one node.
  Ref mul(Ref a, Ref b) {
    const Node& na = nodes[a.node];
    const Node& nb = nodes[b.node];
    if (na.diag && nb.diag) {
      // Real diagonal matrices commute and are self-adjoint.
      if (b.key() < a.key()) std::swap(a, b);
      Node n;
      n.kind = NodeKind::product;
      n.args = {a, b};
      n.rows = n.cols = na.rows;
      n.real = n.diag = n.self_adjoint = true;
      return {intern(std::move(n)), false};
    }
    if (b == adjoint(a)) return gram(a);
    const Ref a2 = adjoint(b), b2 = adjoint(a);
    bool flip = std::pair(a2.key(), b2.key()) < std::pair(a.key(), b.key());
    if (na.diag != nb.diag) {
      // A diagonal factor scales its partner; keep the partner unadjointed so the scaling can
      // work in place (a canonical rule all the same: it depends only on the pair).
      const Ref dense = na.diag ? b : a;
      if (dense.adj != (na.diag ? a2 : b2).adj) flip = dense.adj;
    }
    if (flip) {
      a = a2;
      b = b2;
    }
    Node n;
    n.kind = NodeKind::product;
    n.args = {a, b};
    n.rows = rows(a);
    n.cols = cols(b);
    n.real = nodes[a.node].real && nodes[b.node].real;
    n.unitary = nodes[a.node].unitary && nodes[b.node].unitary;
    return {intern(std::move(n)), flip};
  }

  // Y·Y^*.
  Ref gram(Ref y) {
    Node n;
    n.kind = NodeKind::gram;
    n.args = {y};
    n.rows = n.cols = rows(y);
    n.real = nodes[y.node].real;
    n.self_adjoint = true;
    return {intern(std::move(n)), false};
  }

  // Y·D·Y^* with D diagonal.
  Ref conjugate(Ref y, Ref d) {
    Node n;
    n.kind = NodeKind::conjugate;
    n.args = {y, d};
    n.rows = n.cols = rows(y);
    n.real = nodes[y.node].real;
    n.self_adjoint = true;
    return {intern(std::move(n)), false};
  }

  Ref sum(const std::vector<std::pair<Complex, Ref>>& terms, Complex identity, int rows_dim,
          int cols_dim) {
    std::map<int, Complex> merged;  // by key
    for (const auto& [c, r] : terms) merged[r.key()] += c;
    std::vector<std::pair<Complex, Ref>> list;
    for (const auto& [key, c] : merged) {
      if (c != 0.0) list.push_back({c, Ref{key / 2, (key & 1) != 0}});
    }
    if (list.size() == 1 && list[0].first == 1.0 && identity == 0.0) return list[0].second;
    using Bits = std::pair<std::uint64_t, std::uint64_t>;
    auto keys = [](const std::vector<std::pair<Complex, Ref>>& l) {
      std::vector<std::pair<int, Bits>> k;
      for (const auto& [c, r] : l) {
        k.push_back({r.key(), {std::bit_cast<std::uint64_t>(c.real()),
                               std::bit_cast<std::uint64_t>(c.imag())}});
      }
      std::sort(k.begin(), k.end());
      return k;
    };
    // The adjoint of Σ c_i t_i + c_0 I is Σ conj(c_i) t_i^* + conj(c_0) I.
    std::vector<std::pair<Complex, Ref>> adjointed;
    for (const auto& [c, r] : list) adjointed.push_back({conjugate_number(c), adjoint(r)});
    const auto k1 = keys(list), k2 = keys(adjointed);
    const bool real_identity = is_real_number(identity);
    const bool flip = real_identity && k2 < k1;
    Node n;
    n.kind = NodeKind::sum;
    n.identity = identity;
    n.rows = flip ? cols_dim : rows_dim;
    n.cols = flip ? rows_dim : cols_dim;
    n.self_adjoint = real_identity && k1 == k2;
    n.real = n.diag = real_identity;
    for (const auto& [key, c] : flip ? k2 : k1) {
      const Ref r{key / 2, (key & 1) != 0};
      const Complex coef(std::bit_cast<double>(c.first), std::bit_cast<double>(c.second));
      n.args.push_back(r);
      n.coefs.push_back(coef);  // flipped: already conj(c) of the adjointed list
      // A complex multiple of a real matrix is complex; diagonals are stored as real vectors.
      n.real = n.real && nodes[r.node].real && is_real_number(coef);
      n.diag = n.diag && nodes[r.node].diag && is_real_number(coef);
    }
    if (list.empty() && rows_dim != cols_dim) n.diag = false;  // a rectangular zero
    if (n.diag) n.self_adjoint = true;
    return {intern(std::move(n)), flip && !n.self_adjoint};
  }

  // The product of factors given left to right (no scalars).
  Ref product(std::vector<Ref> refs) {
    std::vector<Ref> merged;  // adjacent diagonal factors multiplied as vectors
    for (const Ref r : refs) {
      if (!merged.empty() && nodes[merged.back().node].diag && nodes[r.node].diag) {
        merged.back() = mul(merged.back(), r);
      } else {
        merged.push_back(r);
      }
    }
    const std::size_t k = merged.size();
    if (k == 1) return merged[0];
    // Palindromes Y Y^* and Y D Y^*: rank-k updates instead of general products.
    bool palindrome = k % 2 == 0 || nodes[merged[k / 2].node].diag;
    for (std::size_t i = 0; palindrome && i < k / 2; ++i) {
      palindrome = merged[k - 1 - i] == adjoint(merged[i]);
    }
    if (palindrome) {
      const Ref y = product(std::vector<Ref>(merged.begin(), merged.begin() + k / 2));
      return k % 2 == 0 ? gram(y) : conjugate(y, merged[k / 2]);
    }
    const Ref head = product(std::vector<Ref>(merged.begin(), merged.end() - 1));
    return mul(head, merged.back());
  }

  // X^k, k ≥ 1, by repeated squaring; a self-adjoint X has X^(2m) = (X^m)(X^m)^*, a herk.
  Ref power(Ref x, int k) {
    if (k == 1) return x;
    if (k % 2 == 1) return mul(power(x, k - 1), x);
    const Ref h = power(x, k / 2);
    if (nodes[x.node].self_adjoint && !nodes[x.node].diag) return gram(h);
    return mul(h, h);
  }

 private:
  int intern(Node n) {
    check_stop();  // every node of the graph passes here: a stop request ends planning
    std::ostringstream key;
    key << static_cast<int>(n.kind) << ':' << n.leaf << ':' << n.rows << 'x' << n.cols << ':'
        << bits(n.identity);
    for (std::size_t i = 0; i < n.args.size(); ++i) {
      key << ';' << n.args[i].key();
      if (i < n.coefs.size()) key << '*' << bits(n.coefs[i]);
    }
    const auto [it, inserted] = index_.try_emplace(key.str(), static_cast<int>(nodes.size()));
    if (inserted) nodes.push_back(std::move(n));
    return it->second;
  }

  const ExpressionData& data_;
  std::unordered_map<std::string, int> index_;
};

class Lowering {
 public:
  Lowering(const ExpressionData& data, Graph& graph) : data_(data), graph_(graph) {}

  Ref root() { return materialize(lower(data_.root), data_.shapes[data_.root]); }

 private:
  Ref materialize(const Lin& lin, const SymShape& shape) {
    if (lin.terms.size() == 1 && lin.terms[0].first == 1.0 && lin.identity == 0.0) {
      return lin.terms[0].second;
    }
    return graph_.sum(lin.terms, lin.identity, shape.rows, shape.cols);
  }

  Lin lower(int index) {
    const AstNode& node = data_.nodes[index];
    Lin out;
    switch (node.kind) {
      case AstNode::Kind::name:
        out.terms.push_back({1.0, graph_.leaf(node.matrix)});
        break;
      case AstNode::Kind::number:
        out.identity = node.value;
        break;
      case AstNode::Kind::sum:
        for (std::size_t i = 0; i < node.children.size(); ++i) {
          const Lin child = lower(node.children[i]);
          const double sign = node.signs[i];
          out.identity += sign * child.identity;
          for (const auto& [c, r] : child.terms) out.terms.push_back({sign * c, r});
        }
        break;
      case AstNode::Kind::product: {
        Complex coef = 1.0;
        std::vector<Ref> factors;
        for (const int child_index : node.children) {
          const Lin child = lower(child_index);
          const SymShape& shape = data_.shapes[child_index];
          if (shape.scalar) {
            coef *= child.identity;
          } else if (child.terms.size() == 1 && child.identity == 0.0) {
            coef *= child.terms[0].first;
            factors.push_back(child.terms[0].second);
          } else {
            factors.push_back(graph_.sum(child.terms, child.identity, shape.rows, shape.cols));
          }
        }
        if (factors.empty()) {
          out.identity = coef;
        } else {
          out.terms.push_back({coef, graph_.product(factors)});
        }
        break;
      }
      case AstNode::Kind::power: {
        const int child_index = node.children[0];
        const Lin child = lower(child_index);
        const SymShape& shape = data_.shapes[child_index];
        if (node.exponent == 0) {
          out.identity = 1.0;
        } else if (shape.scalar) {
          out.identity = scalar_power(child.identity, node.exponent);
        } else if (child.terms.size() == 1 && child.identity == 0.0) {
          out.terms.push_back({scalar_power(child.terms[0].first, node.exponent),
                               graph_.power(child.terms[0].second, node.exponent)});
        } else {
          out.terms.push_back(
              {1.0, graph_.power(graph_.sum(child.terms, child.identity, shape.rows, shape.cols),
                                 node.exponent)});
        }
        break;
      }
      case AstNode::Kind::adjoint: {
        // (c₀·I + Σ c·t)^* = conj(c₀)·I + Σ conj(c)·t^*.
        out = lower(node.children[0]);
        out.identity = conjugate_number(out.identity);
        for (auto& term : out.terms) {
          term.first = conjugate_number(term.first);
          term.second = graph_.adjoint(term.second);
        }
        break;
      }
    }
    return out;
  }

  const ExpressionData& data_;
  Graph& graph_;
};

struct Step {
  StepKind kind = StepKind::sum;
  int node = -1;
  int out = -1;  // buffer
  bool complex = false;
  bool in_place = false;  // `out` already holds the accumulator / the matrix to scale
  bool mirror = false;    // copy the lower triangle to the upper one afterwards
  bool unitary = false;   // conjugate: Y unitary, shift by the most frequent value of D
  int acc_step = -1;      // sum in place: the step that produced the accumulator
  std::vector<Ref> in;
  std::vector<Complex> coefs;  // real unless the node is complex
  Complex identity = 0.0;
  double alpha = 1.0;
  std::size_t scratch = 0;  // transient bytes inside the step
  std::vector<int> reads;   // buffers read
  StepInfo info;
};

std::string format_flops(double x) {
  char buffer[32];
  std::snprintf(buffer, sizeof buffer, "%.2e", x);
  return buffer;
}

std::string format_bytes(double bytes) {
  char buffer[48];
  std::snprintf(buffer, sizeof buffer, "%.1f MiB", bytes / (1024.0 * 1024.0));
  return buffer;
}

}  // namespace

struct EvaluationData {
  std::shared_ptr<const ExpressionData> expression;
  Index n = 0;
  std::vector<Index> dims;  // concrete size of each dimension symbol
  std::vector<Node> nodes;
  Ref root;
  std::vector<int> buffer;  // per node, −1 for inputs
  std::vector<bool> buffer_is_vector;
  std::vector<Step> steps;
  std::vector<StepInfo> infos;
  std::vector<int> last_use;  // per buffer: last step that touches it
  int result_buffer = -1;
  bool result_complex = false;
  bool result_lower = false;
  double flops = 0.0;
  std::size_t peak = 0;
  std::size_t inputs = 0;
  std::size_t result_bytes = 0;
  // Per declared matrix: the coordinates S of a Haar matrix drawn as an N×|S| isometry (column j
  // of the sample stands for coordinate S[j]), and each coordinate's column (−1 outside S).
  std::vector<bool> reduced;
  std::vector<std::vector<Index>> columns;
  std::vector<std::vector<Index>> position;
};

}  // namespace detail

using detail::Complex;
using detail::format_bytes;
using detail::format_flops;
using detail::Node;
using detail::NodeKind;
using detail::EvaluationData;
using detail::Ref;
using detail::Step;

namespace {

// A zero matrix of r × c on fresh storage advised for huge pages (linalg::resize_fresh).
template <class Matrix>
void zero_fresh(Matrix& m, Index r, Index c) {
  linalg::resize_fresh(m, r, c);
  m.setZero();
}

/// Column counts (k₊, k₋) of the two rank-k updates for Y D Y^*, estimated at plan time from the
/// declared law of D (exact for atom and spiked laws; otherwise all N columns, one fewer for a
/// unitary Y).
std::pair<Index, Index> conjugate_columns(const EvaluationData& p, const Node& d, bool unitary) {
  const Index n = p.dims[d.rows];
  if (d.kind == NodeKind::leaf) {
    const auto entries = ensembles::planned_entries(p.expression->declared[d.leaf], n);
    if (!entries.empty()) {
      std::map<double, Index> by_value;
      for (const double v : entries) ++by_value[v];
      double shift = 0.0;
      if (unitary) {
        Index best = -1;
        for (const auto& [v, c] : by_value) {
          if (c > best) best = c, shift = v;  // ties: the smallest value, as at run time
        }
      }
      Index plus = 0, minus = 0;
      for (const auto& [v, c] : by_value) {
        if (v > shift) plus += c;
        if (v < shift) minus += c;
      }
      return {plus, minus};
    }
  }
  return {unitary ? n - 1 : n, 0};
}

/// The entries of a diagonal leaf with an atoms or spiked law at size n, as the sampler places
/// them (ensembles::Sampler::diagonal_values); empty for any other law.
std::vector<double> atom_diagonal(const ensembles::MatrixSpec& spec, Index n) {
  return ensembles::planned_entries(spec, n);
}

/// The most frequent value of d, the smallest one on a tie: the shift of Y D Y^* for unitary Y
/// (the evaluator's rule, applied again at run time to the sampled diagonal).
double most_frequent(std::vector<double> d) {
  std::sort(d.begin(), d.end());
  double shift = 0.0;
  std::size_t best = 0;
  for (std::size_t i = 0; i < d.size();) {
    std::size_t j = i;
    while (j < d.size() && d[j] == d[i]) ++j;
    if (j - i > best) best = j - i, shift = d[i];
    i = j;
  }
  return shift;
}

/// Which Haar matrices the plan can draw as isometries of only the columns it uses. A Haar leaf
/// U qualifies when each of its uses is the Y of a conjugation Y D Y^*, all with the same
/// orientation (all U D U^*, or all U^* D U), each D a diagonal leaf with an atoms law. Then
/// Y D Y^* = d_r I + Σ_{i ∈ S_D} (d_i − d_r) y_i y_i^* reads only the columns y_i of Y at the
/// coordinates S_D where D differs from its most frequent value d_r; the union S of the S_D is
/// what the plan needs. The columns of a Haar unitary (or orthogonal) matrix are exchangeable,
/// and so are those of U^*, so an N×|S| Haar isometry has the law of the columns of Y at S
/// (Mezzadri 2007 for the construction). Decided from the expression and N alone.
void decide_haar_columns(EvaluationData& p, const std::vector<bool>& reachable) {
  const auto& e = *p.expression;
  const std::size_t count = e.operands.size();
  p.reduced.assign(count, false);
  p.columns.assign(count, {});
  p.position.assign(count, {});
  std::vector<int> orientation(count, -1);  // −1 none yet, 0 U D U^*, 1 U^* D U, 2 refused
  std::vector<std::vector<bool>> in_s(count);
  auto refuse = [&](int o) { orientation[o] = 2; };
  for (std::size_t v = 0; v < p.nodes.size(); ++v) {
    if (!reachable[v]) continue;
    const Node& node = p.nodes[v];
    for (std::size_t a = 0; a < node.args.size(); ++a) {
      const Node& arg = p.nodes[node.args[a].node];
      if (arg.kind != NodeKind::leaf || !e.operands[arg.leaf].unitary) continue;
      const int o = arg.leaf;
      const Node& d = p.nodes[node.args[node.args.size() - 1].node];
      std::vector<double> values;
      if (node.kind == NodeKind::conjugate && a == 0 && d.kind == NodeKind::leaf) {
        values = atom_diagonal(e.declared[d.leaf], p.n);
      }
      const int side = node.args[a].adj ? 1 : 0;
      if (values.empty() || (orientation[o] >= 0 && orientation[o] != side)) {
        refuse(o);
        continue;
      }
      if (orientation[o] == 2) continue;
      orientation[o] = side;
      in_s[o].resize(static_cast<std::size_t>(p.n), false);
      const double shift = most_frequent(values);
      for (std::size_t i = 0; i < values.size(); ++i) {
        if (values[i] != shift) in_s[o][i] = true;
      }
    }
  }
  if (p.nodes[p.root.node].kind == NodeKind::leaf) refuse(p.nodes[p.root.node].leaf);
  for (std::size_t o = 0; o < count; ++o) {
    if (orientation[o] < 0 || orientation[o] == 2) continue;
    p.reduced[o] = true;
    p.position[o].assign(static_cast<std::size_t>(p.n), -1);
    for (Index i = 0; i < p.n; ++i) {
      if (!in_s[o][static_cast<std::size_t>(i)]) continue;
      p.position[o][static_cast<std::size_t>(i)] = static_cast<Index>(p.columns[o].size());
      p.columns[o].push_back(i);
    }
  }
}

class EvaluationBuilder {
 public:
  EvaluationBuilder(EvaluationData& p, const EvaluationOptions& options) : p_(p), options_(options) {}

  void run() {
    const auto& nodes = p_.nodes;
    const std::size_t count = nodes.size();
    // Reachable nodes and their number of uses.
    uses_.assign(count, 0);
    reachable_.assign(count, false);
    std::function<void(int)> visit = [&](int v) {
      if (reachable_[v]) return;
      reachable_[v] = true;
      for (const Ref r : nodes[v].args) {
        ++uses_[r.node];
        visit(r.node);
      }
    };
    visit(p_.root.node);
    ++uses_[p_.root.node];

    // Which results must be full matrices, and which may hold only the lower triangle.
    need_full_.assign(count, false);
    lower_.assign(count, false);
    need_full_[p_.root.node] =
        options_.full_result || p_.expression->spectrum == Spectrum::singular_values || p_.root.adj;
    for (int v = static_cast<int>(count) - 1; v >= 0; --v) {
      if (!reachable_[v]) continue;
      const Node& node = nodes[v];
      if (node.diag) continue;
      switch (node.kind) {
        case NodeKind::leaf:
          break;
        case NodeKind::gram:
        case NodeKind::conjugate:
          lower_[v] = !need_full_[v];
          need_full_[node.args[0].node] = true;
          break;
        case NodeKind::product:
          for (const Ref r : node.args) need_full_[r.node] = true;
          break;
        case NodeKind::sum:
          lower_[v] = node.self_adjoint && !need_full_[v];
          if (!lower_[v]) {
            for (const Ref r : node.args) need_full_[r.node] = true;
          }
          break;
      }
    }

    decide_haar_columns(p_, reachable_);
    if (options_.full_haar) p_.reduced.assign(p_.reduced.size(), false);

    p_.buffer.assign(count, -1);
    step_of_.assign(count, -1);
    for (int v = 0; v < static_cast<int>(count); ++v) {
      if (!reachable_[v]) continue;
      check_stop();
      emit(v);
    }
    finish();
    simulate_memory();
  }

 private:
  Index rows(Ref r) const { return p_.dims[r.adj ? p_.nodes[r.node].cols : p_.nodes[r.node].rows]; }
  Index cols(Ref r) const { return p_.dims[r.adj ? p_.nodes[r.node].rows : p_.nodes[r.node].cols]; }
  bool is_leaf(int v) const { return p_.nodes[v].kind == NodeKind::leaf; }

  std::string name(Ref r) const {
    const Node& node = p_.nodes[r.node];
    std::string s = is_leaf(r.node) ? p_.expression->operands[node.leaf].name
                                    : "t" + std::to_string(p_.buffer[r.node] + 1);
    return r.adj ? s + "^*" : s;
  }

  int new_buffer(bool vector) {
    p_.buffer_is_vector.push_back(vector);
    return static_cast<int>(p_.buffer_is_vector.size()) - 1;
  }

  // Whether the result of node v can be overwritten by its single consumer.
  bool owned_once(Ref r) const { return !is_leaf(r.node) && uses_[r.node] == 1 && !r.adj; }

  std::size_t entry_bytes(bool complex) const { return complex ? 16 : 8; }

  int add_step(Step step) {
    for (const Ref r : step.in) {
      if (p_.buffer[r.node] >= 0) step.reads.push_back(p_.buffer[r.node]);
    }
    step.info.output = "t" + std::to_string(step.out + 1);
    p_.steps.push_back(std::move(step));
    return static_cast<int>(p_.steps.size()) - 1;
  }

  // Multiplies the result of step s by alpha (a scalar folded into BLAS alpha).
  void fold(int s, Complex alpha) {
    Step& step = p_.steps[s];
    if (step.kind != StepKind::sum) {
      step.alpha *= alpha.real();  // real: can_fold
      return;
    }
    // A sum scales its terms; in place, the accumulator's producer scales too.
    for (Complex& c : step.coefs) c *= alpha;
    step.identity *= alpha;
    if (!detail::is_real_number(alpha)) {
      step.info.description =
          detail::coefficient_text(alpha) + "·(" + step.info.description + ")";
    }
    if (step.in_place) fold(step.acc_step, alpha);
  }

  // Whether step s can take the factor alpha: any real one (BLAS alpha, or a sum's coefficients);
  // a complex one only into complex sums, whose coefficients are complex already.
  bool can_fold(int s, Complex alpha) const {
    if (detail::is_real_number(alpha)) return true;
    const Step& step = p_.steps[s];
    return step.kind == StepKind::sum && step.complex &&
           (!step.in_place || can_fold(step.acc_step, alpha));
  }

  void emit(int v) {
    const Node& node = p_.nodes[v];
    const bool complex = !node.real;
    Step step;
    step.node = v;
    step.complex = complex;
    switch (node.kind) {
      case NodeKind::leaf:
        return;
      case NodeKind::product:
        emit_product(node, step);
        break;
      case NodeKind::gram:
        emit_gram(v, node, step);
        break;
      case NodeKind::conjugate:
        emit_conjugate(v, node, step);
        break;
      case NodeKind::sum:
        if (!emit_sum(v, node, step)) return;
        break;
    }
    p_.buffer[v] = step.out;
    step_of_[v] = add_step(std::move(step));
  }

  // Fills `step` for a product: a diagonal product, a row or column scaling, or a gemm.
  void emit_product(const Node& node, Step& step) {
    const bool complex = step.complex;
    const Ref a = node.args[0], b = node.args[1];
    const bool da = p_.nodes[a.node].diag, db = p_.nodes[b.node].diag;
    if (da && db) {
      step.kind = StepKind::diagonal;
      step.in = {a, b};
      step.out = new_buffer(true);
      step.info = {StepKind::diagonal, "", name(a) + "·" + name(b), "diagonal product",
                   static_cast<double>(rows(a))};
    } else if (da || db) {
      const Ref x = da ? b : a, d = da ? a : b;
      step.kind = da ? StepKind::scale_rows : StepKind::scale_columns;
      step.in = {x, d};
      step.in_place = owned_once(x);
      step.out = step.in_place ? p_.buffer[x.node] : new_buffer(false);
      step.info = {step.kind, "", name(a) + "·" + name(b),
                   da ? "row scaling" : "column scaling",
                   (complex ? 2.0 : 1.0) * rows(x) * cols(x)};
    } else {
      step.kind = StepKind::gemm;
      step.in = {a, b};
      step.out = new_buffer(false);
      const double m = rows(a), k = cols(a), nn = cols(b);
      step.info = {StepKind::gemm, "", name(a) + "·" + name(b), complex ? "zgemm" : "dgemm",
                   (complex ? 8.0 : 2.0) * m * nn * k};
      for (const Ref r : {a, b}) {
        if (complex && p_.nodes[r.node].real) step.scratch += 16 * rows(r) * cols(r);
      }
    }
  }

  // Fills `step` for a Gram product Y Y^* (herk or syrk).
  void emit_gram(int v, const Node& node, Step& step) {
    const bool complex = step.complex;
    const Ref y = node.args[0];
    step.kind = StepKind::herk;
    step.in = {y};
    step.out = new_buffer(false);
    step.mirror = !lower_[v];
    const double n = rows(y), k = cols(y);
    step.info = {StepKind::herk, "", name(y) + "·" + name(p_nodes_adjoint(y)),
                 complex ? "zherk" : "dsyrk", (complex ? 4.0 : 1.0) * n * n * k};
  }

  // Fills `step` for a conjugation Y D Y^* (one or two rank-k updates).
  void emit_conjugate(int v, const Node& node, Step& step) {
    const bool complex = step.complex;
    const Ref y = node.args[0], d = node.args[1];
    step.kind = StepKind::conjugate;
    step.in = {y, d};
    step.out = new_buffer(false);
    step.mirror = !lower_[v];
    step.unitary = p_.nodes[y.node].unitary;
    const auto [plus, minus] = conjugate_columns(p_, p_.nodes[d.node], step.unitary);
    const double n = rows(y);
    const double k = static_cast<double>(plus + minus);
    const Node& yn = p_.nodes[y.node];
    const bool reduced = yn.kind == NodeKind::leaf && p_.reduced[yn.leaf];
    const Index copied = conjugate_copy_columns(y, d, plus, minus);
    step.scratch = entry_bytes(complex) * rows(y) * copied;
    const double scale_flops = (complex ? 2.0 : 1.0) * n * k;  // none when nothing is copied
    std::string routine = std::string(complex ? "zherk" : "dsyrk") + " on " +
                          std::to_string(plus + minus) + " scaled columns";
    if (plus > 0 && minus > 0) routine += " (two updates)";
    if (step.unitary) routine += ", shift by the most frequent value of " + name(d);
    if (reduced) {
      routine += ", from the " + std::to_string(p_.columns[yn.leaf].size()) + " sampled columns";
    }
    step.info = {StepKind::conjugate, "",
                 name(y) + "·" + name(d) + "·" + name(p_nodes_adjoint(y)), routine,
                 (complex ? 4.0 : 1.0) * n * n * k + (copied > 0 ? scale_flops : 0.0)};
  }

  // Fills `step` for a linear combination; false when it is only a scalar multiple folded into
  // the producer of its accumulator, so that no step is added.
  bool emit_sum(int v, const Node& node, Step& step) {
    const double entry_flops = step.complex ? 4.0 : 2.0;  // add a scaled term
    step.kind = node.diag ? StepKind::diagonal : StepKind::sum;
    step.identity = node.identity;
    const Index n = p_.dims[node.rows];
    int acc = -1;
    if (!node.diag) {
      for (std::size_t i = 0; i < node.args.size(); ++i) {
        const Ref r = node.args[i];
        const Node& t = p_.nodes[r.node];
        // The accumulator's coefficient folds into its producer (can_fold).
        if (owned_once(r) && !t.diag && t.real == node.real && step_of_[r.node] >= 0 &&
            can_fold(step_of_[r.node], node.coefs[i])) {
          acc = static_cast<int>(i);
          break;
        }
      }
    }
    std::string text;
    double flops = 0.0;
    std::vector<std::size_t> order;  // the accumulator first, as it reads in explain()
    if (acc >= 0) order.push_back(static_cast<std::size_t>(acc));
    for (std::size_t i = 0; i < node.args.size(); ++i) {
      if (static_cast<int>(i) != acc) order.push_back(i);
    }
    for (const std::size_t i : order) {
      const Ref r = node.args[i];
      const Complex c = node.coefs[i];
      if (static_cast<int>(i) != acc) {
        step.in.push_back(r);
        step.coefs.push_back(c);
        flops +=
            p_.nodes[r.node].diag ? static_cast<double>(n) : entry_flops * rows(r) * cols(r);
      }
      std::string term =
          (c == 1.0    ? ""
           : c == -1.0 ? "-"
                       : detail::coefficient_text(c) + "·") +
          (p_.nodes[r.node].diag && !node.diag && is_leaf(r.node) ? "diag(" + name(r) + ")"
                                                                  : name(r));
      text += text.empty() ? term : (term[0] == '-' ? " - " + term.substr(1) : " + " + term);
    }
    if (node.identity != 0.0) {
      text += (text.empty() ? "" : " + ") + detail::coefficient_text(node.identity) + "·I";
      flops += static_cast<double>(n);
    }
    if (text.empty()) text = "0";
    if (acc >= 0) {
      const Ref a = node.args[acc];
      step.in_place = true;
      step.out = p_.buffer[a.node];
      step.acc_step = step_of_[a.node];
      fold(step.acc_step, node.coefs[acc]);
      if (step.in.empty() && node.identity == 0.0) {
        // Only a scalar multiple, folded into the producer: no step.
        p_.buffer[v] = step.out;
        step_of_[v] = step.acc_step;
        return false;
      }
    } else {
      step.out = new_buffer(node.diag);
    }
    step.info = {step.kind, "", text, node.diag ? "diagonal arithmetic" : "sum", flops};
    return true;
  }

  // Columns copied for the larger update of Y D Y^*: none when one update takes every column of
  // a column-reduced sample Y with one weight (the herk reads the sample itself, the weight going
  // into alpha: Evaluator::conjugate), else the update's columns.
  Index conjugate_copy_columns(Ref y, Ref d, Index plus, Index minus) const {
    const Node& yn = p_.nodes[y.node];
    const bool reduced = yn.kind == NodeKind::leaf && p_.reduced[yn.leaf];
    if (reduced && (plus == 0 || minus == 0) &&
        plus + minus == static_cast<Index>(p_.columns[yn.leaf].size())) {
      const auto values = atom_diagonal(p_.expression->declared[p_.nodes[d.node].leaf], p_.n);
      const double shift = most_frequent(values);
      std::set<double> weights;
      for (const double v : values) {
        if (v != shift) weights.insert(std::abs(v - shift));
      }
      if (weights.size() <= 1) return 0;
    }
    return std::max(plus, minus);
  }

  Ref p_nodes_adjoint(Ref r) const {
    if (p_.nodes[r.node].self_adjoint) return r;
    return {r.node, !r.adj};
  }

  void finish() {
    const Ref root = p_.root;
    const Node& node = p_.nodes[root.node];
    p_.result_complex = !node.real;
    const Index n = p_.n;
    if (is_leaf(root.node) || node.diag) {
      Step step;
      step.kind = node.diag ? StepKind::to_dense : StepKind::copy;
      step.node = root.node;
      step.complex = !node.real;
      step.in = {root};
      step.out = new_buffer(false);
      step.info = {step.kind, "", name(root), node.diag ? "diagonal written densely" : "copy", 0.0};
      p_.result_buffer = step.out;
      add_step(std::move(step));
      p_.result_lower = false;
    } else if (root.adj) {
      Step step;
      step.kind = StepKind::adjoint;
      step.node = root.node;
      step.complex = !node.real;
      step.in = {root};
      step.in_place = uses_[root.node] == 1;
      step.out = step.in_place ? p_.buffer[root.node] : new_buffer(false);
      step.info = {StepKind::adjoint, "", name(root), step.in_place ? "in-place transpose" : "copy",
                   0.0};
      p_.result_buffer = step.out;
      add_step(std::move(step));
      p_.result_lower = false;
    } else {
      p_.result_buffer = p_.buffer[root.node];
      p_.result_lower = lower_[root.node];
    }
    p_.result_bytes = entry_bytes(p_.result_complex) * n * n;
    for (auto& step : p_.steps) {
      p_.flops += step.info.flops;
      p_.infos.push_back(step.info);
    }
  }

  void simulate_memory() {
    const std::size_t buffers = p_.buffer_is_vector.size();
    p_.last_use.assign(buffers, -1);
    std::vector<std::size_t> bytes(buffers, 0);
    for (int s = 0; s < static_cast<int>(p_.steps.size()); ++s) {
      const Step& step = p_.steps[s];
      for (const int b : step.reads) p_.last_use[b] = s;
      p_.last_use[step.out] = s;
      const Node& node = p_.nodes[step.node];
      const Index r = p_.dims[node.rows], c = p_.dims[node.cols];
      if (!step.in_place) {
        bytes[step.out] = p_.buffer_is_vector[step.out] ? 8 * r : entry_bytes(step.complex) * r * c;
      }
    }
    p_.last_use[p_.result_buffer] = static_cast<int>(p_.steps.size());
    std::size_t live = 0, peak = 0;
    std::vector<bool> allocated(buffers, false);
    for (int s = 0; s < static_cast<int>(p_.steps.size()); ++s) {
      const Step& step = p_.steps[s];
      if (!allocated[step.out]) {
        allocated[step.out] = true;
        live += bytes[step.out];
      }
      peak = std::max(peak, live + step.scratch);
      for (std::size_t b = 0; b < buffers; ++b) {
        if (allocated[b] && p_.last_use[b] == s) {
          live -= bytes[b];
          bytes[b] = 0;
        }
      }
    }
    p_.peak = peak;
    std::set<int> used;
    for (const Node& node : p_.nodes) {
      if (node.kind == NodeKind::leaf) used.insert(node.leaf);
    }
    for (const int i : used) {
      const auto& o = p_.expression->operands[i];
      const Index r = p_.dims[o.rows];
      const Index c = p_.reduced[i] ? static_cast<Index>(p_.columns[i].size()) : p_.dims[o.cols];
      p_.inputs += o.diagonal ? 8 * r : entry_bytes(!o.real) * r * c;
    }
  }

  EvaluationData& p_;
  const EvaluationOptions& options_;
  std::vector<int> uses_;
  std::vector<bool> reachable_;
  std::vector<bool> need_full_;
  std::vector<bool> lower_;
  std::vector<int> step_of_;
};

}  // namespace

Evaluation::Evaluation(const Expression& expression, Index n, const EvaluationOptions& options) {
  if (n < 1) throw InputError("matrix size must be at least 1 (got " + std::to_string(n) + ")");
  auto p = std::make_shared<EvaluationData>();
  p->expression = expression.data_;
  p->n = n;
  p->dims.push_back(n);
  for (const double c : p->expression->dim_ratios) {
    p->dims.push_back(ensembles::companion_size(n, c));
  }
  detail::Graph graph(*p->expression);
  p->root = detail::Lowering(*p->expression, graph).root();
  p->nodes = std::move(graph.nodes);
  EvaluationBuilder(*p, options).run();
  data_ = std::move(p);
}

Index Evaluation::size() const { return data_->n; }
std::vector<Index> Evaluation::haar_columns() const {
  std::vector<Index> out;
  for (std::size_t o = 0; o < data_->reduced.size(); ++o) {
    out.push_back(data_->reduced[o] ? static_cast<Index>(data_->columns[o].size()) : -1);
  }
  return out;
}
Spectrum Evaluation::spectrum() const { return data_->expression->spectrum; }
const std::vector<StepInfo>& Evaluation::steps() const { return data_->infos; }
double Evaluation::flops() const { return data_->flops; }
std::size_t Evaluation::peak_temporary_bytes() const { return data_->peak; }
std::size_t Evaluation::input_bytes() const { return data_->inputs; }

std::string Evaluation::explain() const {
  const EvaluationData& p = *data_;
  const auto& e = *p.expression;
  std::ostringstream out;
  out << "expression: " << e.text << "\n";
  out << "size: N = " << p.n;
  for (std::size_t k = 1; k < p.dims.size(); ++k) {
    out << ", " << e.dim_names[k] << " = " << p.dims[k]
        << " (c = " << text::compact(e.dim_ratios[k - 1]) << ")";
  }
  out << "\n";
  out << "arithmetic: " << (p.result_complex ? "complex" : "real") << "\n";
  if (e.self_adjoint) {
    out << "self-adjoint: yes (proven symbolically)\n";
  } else {
    out << "self-adjoint: " << (e.note.empty() ? "no" : "not decided") << "\n";
    if (!e.note.empty()) out << "note: " << e.note << "\n";
  }
  out << "spectrum: "
      << (e.spectrum == Spectrum::eigenvalues ? "eigenvalues"
                                              : "singular values (operator norm = largest)");
  if (p.result_lower) out << "; only the lower triangle is formed";
  out << "\n";
  for (std::size_t o = 0; o < p.reduced.size(); ++o) {
    if (!p.reduced[o]) continue;
    out << "sampling: " << e.operands[o].name << " drawn as an N × r isometry, r = "
        << p.columns[o].size() << " of its " << p.n
        << " columns (only the columns its conjugations use: where the diagonal differs from its "
           "most frequent value; Haar columns are exchangeable)\n";
  }
  out << "steps:\n";
  for (const auto& s : p.infos) {
    out << "  " << s.output << " = " << s.description << "   [" << s.routine << ", "
        << format_flops(s.flops) << " flops]\n";
  }
  const double nn = static_cast<double>(p.n) * static_cast<double>(p.n);
  out << "total: " << format_flops(p.flops) << " flops\n";
  out << "memory: inputs " << format_bytes(static_cast<double>(p.inputs)) << ", peak temporaries "
      << format_bytes(static_cast<double>(p.peak)) << " (" << text::compact(p.peak / (16.0 * nn))
      << " N×N complex matrices)\n";
  return out.str();
}

std::size_t peak_working_bytes(const Expression& expression, Index n) {
  const Evaluation plan(expression, n);
  return plan.input_bytes() + plan.peak_temporary_bytes();
}

// ---- evaluation ---------------------------------------------------------------------------------

namespace {

using CMatrix = Eigen::MatrixXcd;
using RMatrix = Eigen::MatrixXd;
using Vector = Eigen::VectorXd;

struct Buffer {
  RMatrix real;
  CMatrix complex;
  Vector diagonal;
};

class Evaluator {
 public:
  Evaluator(const EvaluationData& p, const std::vector<ensembles::Sample>& samples)
      : p_(p), samples_(samples), buffers_(p.buffer_is_vector.size()) {}

  Evaluated run() {
    validate();
    for (int s = 0; s < static_cast<int>(p_.steps.size()); ++s) {
      execute(p_.steps[s]);
      for (std::size_t b = 0; b < buffers_.size(); ++b) {
        if (p_.last_use[b] == s) buffers_[b] = Buffer{};
      }
    }
    Evaluated result;
    result.is_complex = p_.result_complex;
    result.lower_only = p_.result_lower;
    Buffer& out = buffers_[p_.result_buffer];
    if (result.is_complex) {
      result.complex = std::move(out.complex);
    } else {
      result.real = std::move(out.real);
    }
    return result;
  }

 private:
  void validate() const {
    const auto& e = *p_.expression;
    if (samples_.size() != e.operands.size()) {
      throw InputError("expression evaluation needs " + std::to_string(e.operands.size()) +
                       " samples (one per declared matrix), got " +
                       std::to_string(samples_.size()));
    }
    for (const Node& node : p_.nodes) {
      if (node.kind != NodeKind::leaf) continue;
      const auto& o = e.operands[node.leaf];
      const auto& s = samples_[node.leaf];
      using Storage = ensembles::Sample::Storage;
      const Storage want = o.diagonal ? Storage::real_diagonal
                           : o.real   ? Storage::real_dense
                                      : Storage::complex_dense;
      if (s.storage != want) {
        throw InputError("sample of '" + o.name + "' has the wrong storage for the plan");
      }
      const Index r = p_.dims[o.rows], c = p_.dims[o.cols];
      const Index sr = o.diagonal ? s.diagonal.size() : o.real ? s.real.rows() : s.complex.rows();
      const Index sc = o.diagonal ? s.diagonal.size() : o.real ? s.real.cols() : s.complex.cols();
      // A Haar matrix the plan reads by columns may come as those columns or whole.
      const Index cr = p_.reduced[node.leaf] ? static_cast<Index>(p_.columns[node.leaf].size()) : c;
      if (sr != r || (sc != c && sc != cr)) {
        throw InputError("sample of '" + o.name + "' is " + std::to_string(sr) + "×" +
                         std::to_string(sc) + ", the plan expects " + std::to_string(r) + "×" +
                         std::to_string(c) + (cr != c ? " or " + std::to_string(r) + "×" +
                         std::to_string(cr) : ""));
      }
    }
  }

  const Node& node(Ref r) const { return p_.nodes[r.node]; }

  const RMatrix& real(Ref r) const {
    const Node& n = node(r);
    return n.kind == NodeKind::leaf ? samples_[n.leaf].real : buffers_[p_.buffer[r.node]].real;
  }
  const CMatrix& complex(Ref r) const {
    const Node& n = node(r);
    return n.kind == NodeKind::leaf ? samples_[n.leaf].complex
                                    : buffers_[p_.buffer[r.node]].complex;
  }
  const Vector& diagonal(Ref r) const {
    const Node& n = node(r);
    return n.kind == NodeKind::leaf ? samples_[n.leaf].diagonal
                                    : buffers_[p_.buffer[r.node]].diagonal;
  }

  // A complex view of a dense operand; a real one is promoted into `scratch`.
  const CMatrix& as_complex(Ref r, CMatrix& scratch) const {
    if (!node(r).real) return complex(r);
    scratch = real(r).cast<Complex>();
    return scratch;
  }

  static linalg::Op op(Ref r, bool complex) {
    if (!r.adj) return linalg::Op::none;
    return complex ? linalg::Op::adjoint : linalg::Op::transpose;
  }

  void execute(const Step& step) {
    Buffer& out = buffers_[step.out];
    switch (step.kind) {
      case StepKind::gemm: {
        const Ref a = step.in[0], b = step.in[1];
        if (step.complex) {
          CMatrix sa, sb;
          linalg::gemm(as_complex(a, sa), op(a, true), as_complex(b, sb), op(b, true), out.complex,
                       step.alpha);
        } else {
          linalg::gemm(real(a), op(a, false), real(b), op(b, false), out.real, step.alpha);
        }
        break;
      }
      case StepKind::herk: {
        const Ref y = step.in[0];
        if (step.complex) {
          linalg::herk(complex(y), op(y, true), out.complex, step.alpha);
        } else {
          linalg::syrk(real(y), op(y, false), out.real, step.alpha);
        }
        break;
      }
      case StepKind::conjugate:
        conjugate(step, out);
        break;
      case StepKind::scale_rows:
      case StepKind::scale_columns:
        scale(step, out);
        break;
      case StepKind::sum:
        sum(step, out);
        break;
      case StepKind::diagonal:
        diagonal_arithmetic(step, out);
        break;
      case StepKind::to_dense: {
        const Vector& d = diagonal(step.in[0]);
        out.real = d.asDiagonal();
        break;
      }
      case StepKind::copy: {
        const Ref r = step.in[0];
        // Fresh storage of the right shape first (huge pages advised), then the copy fills it
        // (adjoint() of a real matrix is its transpose).
        const auto copy_into = [&r](auto& into, const auto& in) {
          linalg::resize_fresh(into, r.adj ? in.cols() : in.rows(), r.adj ? in.rows() : in.cols());
          if (r.adj) {
            into = in.adjoint();
          } else {
            into = in;
          }
        };
        if (step.complex) {
          copy_into(out.complex, complex(r));
        } else {
          copy_into(out.real, real(r));
        }
        break;
      }
      case StepKind::adjoint:
        take_adjoint(step, out);
        break;
    }
    if (step.mirror) {
      if (step.complex) {
        linalg::mirror_lower(out.complex);
      } else {
        linalg::mirror_lower(out.real);
      }
    }
  }

  // A product or linear combination of diagonal matrices, kept as a vector.
  void diagonal_arithmetic(const Step& step, Buffer& out) const {
    const Node& n = p_.nodes[step.node];
    if (n.kind == NodeKind::product) {
      out.diagonal = step.alpha * diagonal(step.in[0]).cwiseProduct(diagonal(step.in[1]));
    } else {
      // A diagonal sum has real coefficients (Graph::sum).
      out.diagonal = Vector::Constant(p_.dims[n.rows], step.identity.real());
      for (std::size_t i = 0; i < step.in.size(); ++i) {
        out.diagonal += step.coefs[i].real() * diagonal(step.in[i]);
      }
      out.diagonal *= step.alpha;
    }
  }

  // The adjoint (transpose, for a real matrix) of a result, in place when the step owns it.
  void take_adjoint(const Step& step, Buffer& out) const {
    const Ref r = step.in[0];
    if (step.in_place) {
      if (step.complex) {
        out.complex.adjointInPlace();
      } else {
        out.real.transposeInPlace();
      }
    } else if (step.complex) {
      out.complex = complex({r.node, false}).adjoint();
    } else {
      out.real = real({r.node, false}).transpose();
    }
  }

  // Whether Y's sample holds only the columns the plan reads (fewer than N; a whole sample of a
  // matrix the plan reads by columns is read as a whole one).
  bool columns_only(Ref y) const {
    const Node& n = node(y);
    if (n.kind != NodeKind::leaf || !p_.reduced[n.leaf]) return false;
    return (n.real ? real(y).cols() : complex(y).cols()) < p_.n;
  }

  // Y D Y^* = d_r I + W₊W₊^* − W₋W₋^*, W± = √|d − d_r| times the columns of Y where d ≷ d_r
  // (rows of Y^*, when Y enters adjointed). d_r is the most frequent value of D for unitary Y
  // (Y Y^* = I), otherwise 0.
  void conjugate(const Step& step, Buffer& out) {
    const Ref y = step.in[0];
    const Vector& d = diagonal(step.in[1]);
    const double shift =
        step.unitary ? most_frequent(std::vector<double>(d.data(), d.data() + d.size())) : 0.0;
    std::vector<Index> plus, minus;
    for (Index i = 0; i < d.size(); ++i) {
      if (d[i] > shift) plus.push_back(i);
      if (d[i] < shift) minus.push_back(i);
    }
    const bool reduced = columns_only(y);
    const Index n = y.adj && !reduced ? (node(y).real ? real(y).cols() : complex(y).cols())
                                      : (node(y).real ? real(y).rows() : complex(y).rows());
    bool written = false;
    for (const auto& [idx, sign] : {std::pair{&plus, 1.0}, std::pair{&minus, -1.0}}) {
      if (idx->empty()) continue;
      Vector w(static_cast<Index>(idx->size()));
      for (std::size_t k = 0; k < idx->size(); ++k) w[k] = std::abs(d[(*idx)[k]] - shift);
      const double beta = written ? 1.0 : 0.0;
      if (reduced) {
        update_from_columns(step, y, *idx, w, sign, beta, out);
      } else if (step.complex) {
        update(complex(y), y.adj, *idx, w, sign * step.alpha, beta, out.complex);
      } else {
        update(real(y), y.adj, *idx, w, sign * step.alpha, beta, out.real);
      }
      written = true;
    }
    if (step.complex) {
      if (!written) zero_fresh(out.complex, n, n);
      out.complex.diagonal().array() += step.alpha * shift;
    } else {
      if (!written) zero_fresh(out.real, n, n);
      out.real.diagonal().array() += step.alpha * shift;
    }
  }

  // out ← alpha·W W^* + beta·out, W = the columns idx of m scaled by √w (rows of m, W^* W, when
  // `rows`): zherk / dsyrk on a copy of those columns.
  template <class M>
  static void update(const M& m, bool rows, const std::vector<Index>& idx, const Vector& w,
                     double alpha, double beta, M& out) {
    using Scalar = typename M::Scalar;
    const auto s = w.cwiseSqrt().cast<Scalar>();
    M part;
    if (rows) {
      part = m(idx, Eigen::all);
      part.array().colwise() *= s.array();
    } else {
      part = m(Eigen::all, idx);
      part.array().rowwise() *= s.transpose().array();
    }
    if constexpr (std::is_same_v<Scalar, Complex>) {
      linalg::herk(part, rows ? linalg::Op::adjoint : linalg::Op::none, out, alpha, beta);
    } else {
      linalg::syrk(part, rows ? linalg::Op::transpose : linalg::Op::none, out, alpha, beta);
    }
  }

  // The update over coordinates idx for a Y drawn as an N×r isometry Q (Evaluation::
  // haar_columns): coordinate i is Q's column position[i], whichever side Y enters on (Q then
  // stands for columns of U^*, whose rows-of-U outer products U^* e_i e_i^* U they give). When
  // idx takes every column of Q in order with one weight, the herk reads Q itself.
  void update_from_columns(const Step& step, Ref y, const std::vector<Index>& idx,
                           const Vector& w, double sign, double beta, Buffer& out) const {
    const auto& position = p_.position[node(y).leaf];
    std::vector<Index> cols;
    for (const Index i : idx) cols.push_back(position[static_cast<std::size_t>(i)]);
    const Index r = node(y).real ? real(y).cols() : complex(y).cols();
    bool whole = static_cast<Index>(cols.size()) == r && w.maxCoeff() == w.minCoeff();
    for (std::size_t k = 0; whole && k < cols.size(); ++k) whole = cols[k] == static_cast<Index>(k);
    const double alpha = sign * step.alpha;
    if (whole && step.complex) {
      linalg::herk(complex(y), linalg::Op::none, out.complex, alpha * w[0], beta);
    } else if (whole) {
      linalg::syrk(real(y), linalg::Op::none, out.real, alpha * w[0], beta);
    } else if (step.complex) {
      update(complex(y), false, cols, w, alpha, beta, out.complex);
    } else {
      update(real(y), false, cols, w, alpha, beta, out.real);
    }
  }

  void scale(const Step& step, Buffer& out) {
    const Ref x = step.in[0];
    const Vector d = step.alpha * diagonal(step.in[1]);
    const bool rows = step.kind == StepKind::scale_rows;
    if (step.complex) {
      if (!step.in_place) out.complex = x.adj ? CMatrix(complex(x).adjoint()) : complex(x);
      const Eigen::VectorXcd dc = d.cast<Complex>();
      if (rows) {
        out.complex.array().colwise() *= dc.array();
      } else {
        out.complex.array().rowwise() *= dc.transpose().array();
      }
    } else {
      if (!step.in_place) out.real = x.adj ? RMatrix(real(x).transpose()) : real(x);
      if (rows) {
        out.real.array().colwise() *= d.array();
      } else {
        out.real.array().rowwise() *= d.transpose().array();
      }
    }
  }

  // m += a·t for a real dense term t (transposed when adjointed).
  void add_real(CMatrix& m, Complex a, Ref t) const {
    if (t.adj) {
      m.real() += a.real() * real(t).transpose();
      if (a.imag() != 0.0) m.imag() += a.imag() * real(t).transpose();
    } else {
      m.real() += a.real() * real(t);
      if (a.imag() != 0.0) m.imag() += a.imag() * real(t);
    }
  }

  void sum(const Step& step, Buffer& out) {
    const Node& n = p_.nodes[step.node];
    const Index r = p_.dims[n.rows], c = p_.dims[n.cols];
    if (step.complex) {
      if (!step.in_place) zero_fresh(out.complex, r, c);
      CMatrix& m = out.complex;
      for (std::size_t i = 0; i < step.in.size(); ++i) {
        const Ref t = step.in[i];
        const Complex a = step.alpha * step.coefs[i];
        // A real term goes into the real and imaginary parts separately: no complex copy.
        if (node(t).diag) {
          m.diagonal().real() += a.real() * diagonal(t);
          if (a.imag() != 0.0) m.diagonal().imag() += a.imag() * diagonal(t);
        } else if (node(t).real) {
          add_real(m, a, t);
        } else if (t.adj) {
          m += a * complex(t).adjoint();
        } else {
          m += a * complex(t);
        }
      }
      m.diagonal().array() += step.alpha * step.identity;
    } else {
      if (!step.in_place) zero_fresh(out.real, r, c);
      RMatrix& m = out.real;
      for (std::size_t i = 0; i < step.in.size(); ++i) {
        const Ref t = step.in[i];
        const double a = step.alpha * step.coefs[i].real();
        if (node(t).diag) {
          m.diagonal() += a * diagonal(t);
        } else if (t.adj) {
          m += a * real(t).transpose();
        } else {
          m += a * real(t);
        }
      }
      m.diagonal().array() += step.alpha * step.identity.real();
    }
  }

  const EvaluationData& p_;
  const std::vector<ensembles::Sample>& samples_;
  std::vector<Buffer> buffers_;
};

}  // namespace

Evaluated Evaluation::evaluate(const std::vector<ensembles::Sample>& samples) const {
  return Evaluator(*data_, samples).run();
}

Eigen::VectorXd compute_spectrum(Spectrum spectrum, Evaluated& result) {
  if (spectrum == Spectrum::eigenvalues) {
    return result.is_complex ? linalg::eigenvalues(result.complex)
                             : linalg::eigenvalues(result.real);
  }
  if (result.lower_only) {
    if (result.is_complex) {
      linalg::mirror_lower(result.complex);
    } else {
      linalg::mirror_lower(result.real);
    }
  }
  return result.is_complex ? linalg::singular_values(result.complex)
                           : linalg::singular_values(result.real);
}

}  // namespace freegap::expr
