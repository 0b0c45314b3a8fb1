// Internals of the expr part shared by its sources: syntax tree, symbolic shapes, operands.
#pragma once

#include <complex>
#include <string>
#include <vector>

#include "freegap/expr.hpp"

namespace freegap::expr::detail {

/// What the expression needs to know about one declared matrix.
struct Operand {
  std::string name;
  int rows = 0;  ///< symbolic dimension: 0 = N, k > 0 = the k-th companion size M_k
  int cols = 0;
  bool self_adjoint = false;
  bool unitary = false;
  bool real = false;
  bool diagonal = false;
};

struct AstNode {
  enum class Kind { name, number, sum, product, power, adjoint };
  Kind kind = Kind::number;
  int column = 1;    ///< 1-based column of the node's first token
  int matrix = -1;   ///< name: index into the operands
  std::complex<double> value = 0;  ///< number (the imaginary unit `i` is 0 + 1i)
  int exponent = 0;  ///< power
  std::vector<int> children;
  std::vector<int> signs;       ///< sum: +1 or −1 per child
  std::vector<int> op_columns;  ///< sum/product: column of the operator (or factor) before child i;
                                ///< power/adjoint: column of '^'
};

/// Symbolic shape of a subexpression: a scalar, or rows × cols in dimension symbols.
struct SymShape {
  bool scalar = true;
  int rows = 0;
  int cols = 0;
};

struct ExpressionData {
  std::string text;
  std::vector<ensembles::MatrixSpec> declared;
  std::vector<Operand> operands;
  std::vector<double> dim_ratios;      ///< ratio c of each companion dimension (index k−1)
  std::vector<std::string> dim_names;  ///< "N", "M", "M2", ...
  std::vector<AstNode> nodes;
  std::vector<SymShape> shapes;  ///< per node
  int root = -1;
  bool self_adjoint = false;
  bool real = false;
  bool has_imaginary = false;  ///< some number in the text is not real (the unit `i`)
  Spectrum spectrum = Spectrum::singular_values;
  std::string note;
  std::size_t max_letters = kMaxExpansionLetters;    ///< CheckOptions::max_expansion_letters
  std::size_t max_products = kMaxExpansionProducts;  ///< CheckOptions::max_expansion_products
};

/// Parses the text into `data.nodes` / `data.root` (operands must be filled). Throws ExprError.
void parse(ExpressionData& data);
/// Refuses an expression whose degree exceeds kMaxDegree, naming the column. Throws ExprError.
void check_degree(const ExpressionData& data);
/// Symbolic shapes of every node; throws ExprError on a mismatch or a non-square result.
void check_shapes(ExpressionData& data);
/// Decides self-adjointness by expansion into words; returns false and sets `note` past the cap.
bool decide_self_adjoint(ExpressionData& data, std::size_t max_monomials);

/// The expansion behind Expression::expansion; throws ExprError past the cap.
std::vector<Monomial> expand_monomials(const ExpressionData& data, std::size_t max_monomials);

}  // namespace freegap::expr::detail
