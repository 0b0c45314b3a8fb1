// Expression: declared matrices → operands with symbolic shapes; parse, check, decide the spectrum.
#include <algorithm>
#include <set>

#include "internal.hpp"

namespace freegap::expr {

namespace {

bool is_rectangular_ginibre(const ensembles::MatrixSpec& spec) {
  return (spec.kind == ensembles::Kind::ginibre_complex ||
          spec.kind == ensembles::Kind::ginibre_real) &&
         spec.ratio != 1.0;
}

void collect_used(const detail::ExpressionData& data, std::set<int>& used) {
  for (const auto& node : data.nodes) {
    if (node.kind == detail::AstNode::Kind::name) used.insert(node.matrix);
  }
}

}  // namespace

Expression::Expression(std::string_view text, std::vector<ensembles::MatrixSpec> declared,
                       const CheckOptions& options) {
  auto data = std::make_shared<detail::ExpressionData>();
  data->text = std::string(text);
  data->declared = std::move(declared);
  data->dim_names = {"N"};
  for (const auto& spec : data->declared) {
    for (const auto& op : data->operands) {
      if (op.name == spec.name) throw InputError("matrix '" + spec.name + "' is declared twice");
    }
    if (spec.name == "i") {
      throw InputError("'i' is the imaginary unit in expressions and cannot name a matrix; rename "
                       "it");
    }
    detail::Operand op;
    op.name = spec.name;
    op.self_adjoint = ensembles::is_self_adjoint(spec.kind);
    op.unitary = ensembles::is_unitary(spec.kind);
    op.real = ensembles::is_real(spec);
    op.diagonal = spec.kind == ensembles::Kind::diagonal;
    if (is_rectangular_ginibre(spec)) {
      // One symbol per distinct ratio: equal ratios give equal M = round(N/c) at every N.
      const auto it = std::find(data->dim_ratios.begin(), data->dim_ratios.end(), spec.ratio);
      op.cols = static_cast<int>(it - data->dim_ratios.begin()) + 1;
      if (it == data->dim_ratios.end()) data->dim_ratios.push_back(spec.ratio);
    }
    data->operands.push_back(op);
  }
  for (std::size_t k = 0; k < data->dim_ratios.size(); ++k) {
    std::string name = "M";
    if (data->dim_ratios.size() > 1) name += std::to_string(k + 1);
    data->dim_names.push_back(name);
  }
  data->max_letters = options.max_expansion_letters;
  data->max_products = options.max_expansion_products;
  detail::parse(*data);
  detail::check_degree(*data);
  detail::check_shapes(*data);
  data->self_adjoint = detail::decide_self_adjoint(*data, options.max_monomials);
  data->spectrum = data->self_adjoint && !options.force_singular_values ? Spectrum::eigenvalues
                                                                        : Spectrum::singular_values;
  std::set<int> used;
  collect_used(*data, used);
  data->real = !data->has_imaginary &&
               std::all_of(used.begin(), used.end(), [&](int i) { return data->operands[i].real; });
  data_ = std::move(data);
}

const std::string& Expression::text() const { return data_->text; }
const std::vector<ensembles::MatrixSpec>& Expression::declared() const { return data_->declared; }
bool Expression::self_adjoint() const { return data_->self_adjoint; }
Spectrum Expression::spectrum() const { return data_->spectrum; }
bool Expression::is_real() const { return data_->real; }
const std::string& Expression::note() const { return data_->note; }
std::vector<Monomial> Expression::expansion(std::size_t max_monomials) const {
  return detail::expand_monomials(*data_, max_monomials);
}

bool real_coefficients(const std::vector<Monomial>& terms) {
  return std::all_of(terms.begin(), terms.end(),
                     [](const Monomial& m) { return m.coefficient.imag() == 0.0; });
}

std::string Expression::shape() const {
  const auto& s = data_->shapes[data_->root];
  return data_->dim_names[s.rows] + "×" + data_->dim_names[s.cols];
}

}  // namespace freegap::expr
