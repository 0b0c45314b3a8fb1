// Fuzz target: expression text → parse, checks (bounds, shapes, self-adjointness), expansion and
// an evaluation plan, over a fixed set of declared matrices that covers every kind of operand
// (self-adjoint, unitary, diagonal, rectangular). Any exception other than an InputError, and
// any error message without its column, is a failure.
#include <cstddef>
#include <cstdint>
#include <string_view>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/expr.hpp"
#include "fuzz_common.hpp"

namespace {

std::vector<freegap::ensembles::MatrixSpec> declared() {
  using freegap::ensembles::Kind;
  std::vector<freegap::ensembles::MatrixSpec> out;
  auto add = [&](const char* name, Kind kind) {
    freegap::ensembles::MatrixSpec spec;
    spec.name = name;
    spec.kind = kind;
    out.push_back(spec);
    return &out.back();
  };
  add("X1", Kind::gue);
  add("X2", Kind::goe);
  add("W", Kind::wishart_complex);
  add("U", Kind::haar_unitary);
  add("O", Kind::haar_orthogonal);
  add("G", Kind::ginibre_complex)->ratio = 0.5;
  add("H", Kind::ginibre_real);
  auto* b = add("B", Kind::diagonal);
  b->diagonal.kind = freegap::ensembles::DiagonalLawKind::atoms;
  b->diagonal.atoms = {{-1.0, 0.5}, {1.0, 0.5}};
  return out;
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  static const auto matrices = declared();
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  try {
    const freegap::expr::Expression expression(text, matrices, freegap::fuzz::check_options());
    try {
      (void)expression.expansion(freegap::fuzz::kMaxMonomials);
    } catch (const freegap::expr::ExprError& e) {
      freegap::fuzz::check_expr_error(e);  // past the expansion's bounds: refused, named
    }
    const freegap::expr::Evaluation plan(expression, 16);
    (void)plan.explain();
    (void)freegap::expr::peak_working_bytes(expression, 16);
  } catch (const freegap::expr::ExprError& e) {
    freegap::fuzz::check_expr_error(e);
  } catch (const freegap::InputError&) {
    // refused with a message: what bad input should get
  }
  return 0;
}
