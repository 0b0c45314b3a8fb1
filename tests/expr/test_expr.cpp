// Tests of the expr part: evaluation against plain Eigen products, the symbolic self-adjointness
// decision, exact error messages, shared subexpressions and the plan's cost model.
#include <gtest/gtest.h>

#include <Eigen/Dense>
#include <cmath>
#include <complex>
#include <functional>
#include <map>
#include <string>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/expr.hpp"

namespace fe = freegap::expr;
namespace en = freegap::ensembles;
using CMatrix = Eigen::MatrixXcd;
using RMatrix = Eigen::MatrixXd;
using Complex = std::complex<double>;

namespace {

en::MatrixSpec spec(const std::string& name, en::Kind kind, double ratio = 1.0,
                    std::vector<en::Atom> atoms = {}) {
  en::MatrixSpec s;
  s.name = name;
  s.kind = kind;
  s.ratio = ratio;
  s.diagonal.kind = en::DiagonalLawKind::atoms;
  s.diagonal.atoms = std::move(atoms);
  return s;
}

// The declared matrices of the evaluation table. G is N×M with M = round(N/c) = 2N.
std::vector<en::MatrixSpec> table_specs() {
  using K = en::Kind;
  return {
      spec("X1", K::gue),
      spec("X2", K::gue),
      spec("A", K::gue),
      spec("B", K::diagonal, 1.0, {{1.0, 0.5}, {-1.0, 0.5}}),
      spec("D", K::diagonal, 1.0, {{-1.0, 0.25}, {0.5, 0.25}, {2.0, 0.5}}),
      spec("U", K::haar_unitary),
      spec("U1", K::haar_unitary),
      spec("U2", K::haar_unitary),
      spec("V", K::haar_unitary),
      spec("G", K::ginibre_complex, 0.5),
      spec("W", K::wishart_complex),
      spec("S1", K::goe),
      spec("S2", K::goe),
      spec("O", K::haar_orthogonal),
      spec("R", K::ginibre_real),
  };
}

// Random samples built with Eigen directly (not the project's samplers), with the structure each
// kind promises: Hermitian, symmetric, exactly unitary/orthogonal (Householder QR), diagonal.
struct Inputs {
  std::vector<en::Sample> samples;
  std::map<std::string, CMatrix> dense;  // every input as a dense complex matrix
};

Inputs make_inputs(const std::vector<en::MatrixSpec>& specs, Eigen::Index n) {
  std::srand(12345);
  Inputs in;
  for (const auto& s : specs) {
    en::Sample sample;
    const Eigen::Index m = en::shape(s, n).cols;
    switch (s.kind) {
      case en::Kind::gue:
      case en::Kind::wishart_complex: {
        CMatrix a = CMatrix::Random(n, n);
        sample.storage = en::Sample::Storage::complex_dense;
        sample.complex = s.kind == en::Kind::gue ? CMatrix((a + a.adjoint()) / 2.0)
                                                 : CMatrix(a * a.adjoint() / double(n));
        break;
      }
      case en::Kind::goe: {
        RMatrix a = RMatrix::Random(n, n);
        sample.storage = en::Sample::Storage::real_dense;
        sample.real = (a + a.transpose()) / 2.0;
        break;
      }
      case en::Kind::haar_unitary: {
        sample.storage = en::Sample::Storage::complex_dense;
        sample.complex = CMatrix(CMatrix::Random(n, n).householderQr().householderQ());
        break;
      }
      case en::Kind::haar_orthogonal: {
        sample.storage = en::Sample::Storage::real_dense;
        sample.real = RMatrix(RMatrix::Random(n, n).householderQr().householderQ());
        break;
      }
      case en::Kind::ginibre_complex: {
        sample.storage = en::Sample::Storage::complex_dense;
        sample.complex = CMatrix::Random(n, m);
        break;
      }
      case en::Kind::ginibre_real: {
        sample.storage = en::Sample::Storage::real_dense;
        sample.real = RMatrix::Random(n, m);
        break;
      }
      case en::Kind::diagonal: {
        sample.storage = en::Sample::Storage::real_diagonal;
        const auto counts = en::atom_counts(s.diagonal.atoms, n);
        sample.diagonal.resize(n);
        Eigen::Index k = 0;
        for (std::size_t i = 0; i < counts.size(); ++i) {
          for (Eigen::Index j = 0; j < counts[i]; ++j)
            sample.diagonal[k++] = s.diagonal.atoms[i].value;
        }
        break;
      }
      default:
        break;
    }
    CMatrix dense;
    switch (sample.storage) {
      case en::Sample::Storage::complex_dense:
        dense = sample.complex;
        break;
      case en::Sample::Storage::real_dense:
        dense = sample.real.cast<Complex>();
        break;
      case en::Sample::Storage::real_diagonal:
        dense = sample.diagonal.cast<Complex>().asDiagonal();
        break;
    }
    in.dense[s.name] = dense;
    in.samples.push_back(std::move(sample));
  }
  return in;
}

CMatrix as_complex(const fe::Evaluated& e) {
  return e.is_complex ? e.complex : CMatrix(e.real.cast<Complex>());
}

// Relative Frobenius distance, over the lower triangle when only that is formed.
double relative_error(const fe::Evaluated& e, const CMatrix& reference) {
  CMatrix got = as_complex(e);
  CMatrix want = reference;
  if (e.lower_only) {
    got = CMatrix(got.triangularView<Eigen::Lower>());
    want = CMatrix(want.triangularView<Eigen::Lower>());
  }
  return (got - want).norm() / std::max(want.norm(), 1e-300);
}

struct Row {
  const char* text;
  bool self_adjoint;
  bool real;
  std::function<CMatrix(std::map<std::string, CMatrix>&)> reference;
};

// One row of an evaluation table: the expression's checks, the reference itself (self-adjoint
// rows give Hermitian references), and the plan's result, formed whole and as a lower triangle,
// against the reference.
void expect_row(const Row& row, const std::vector<en::MatrixSpec>& specs, Inputs& in,
                Eigen::Index n, bool complex_result) {
  SCOPED_TRACE(row.text);
  const fe::Expression e(row.text, specs);
  EXPECT_EQ(e.self_adjoint(), row.self_adjoint);
  EXPECT_EQ(e.is_real(), row.real);
  EXPECT_EQ(e.spectrum(),
            row.self_adjoint ? fe::Spectrum::eigenvalues : fe::Spectrum::singular_values);
  const CMatrix reference = row.reference(in.dense);
  if (row.self_adjoint) {
    EXPECT_LT((reference - reference.adjoint()).norm(), 1e-12 * reference.norm());
  } else {
    EXPECT_GT((reference - reference.adjoint()).norm(), 1e-6 * reference.norm());
  }
  for (const bool full : {false, true}) {
    const fe::Evaluation plan(e, n, fe::EvaluationOptions{full});
    const fe::Evaluated result = plan.evaluate(in.samples);
    EXPECT_EQ(result.is_complex, complex_result);
    if (full) {
      EXPECT_FALSE(result.lower_only);
    }
    EXPECT_LT(relative_error(result, reference), 1e-12) << plan.explain();
  }
}

}  // namespace

// The imaginary unit i (issue 17, item 5): complex coefficients through the plan, against the same
// products written out with Eigen and std::complex. Self-adjointness worked by hand: (i·P)^* =
// −i·P^*, so i·(P − P^*) is self-adjoint for any P, and i·X with X self-adjoint is not.
TEST(ExprEvaluate, ImaginaryUnitAgreesWithNaiveDenseProducts) {
  const Eigen::Index n = 30;
  const auto specs = table_specs();
  Inputs in = make_inputs(specs, n);
  const CMatrix I = CMatrix::Identity(n, n);
  const Complex j(0.0, 1.0);
  const std::vector<Row> rows = {
      {"i (X1 X2 - X2 X1)", true, false,
       [&](auto& m) -> CMatrix { return j * (m["X1"] * m["X2"] - m["X2"] * m["X1"]); }},
      {"i (S1 S2 - S2 S1)", true, false,
       [&](auto& m) -> CMatrix { return j * (m["S1"] * m["S2"] - m["S2"] * m["S1"]); }},
      {"i (U - U^*)", true, false,
       [&](auto& m) -> CMatrix { return j * (m["U"] - m["U"].adjoint()); }},
      {"i (O - O^*) + 0.5 i (U^* - U)", true, false,
       [&](auto& m) -> CMatrix {
         return j * (m["O"] - m["O"].adjoint()) + 0.5 * j * (m["U"].adjoint() - m["U"]);
       }},
      {"X1 + i", false, false, [&](auto& m) -> CMatrix { return m["X1"] + j * I; }},
      {"(X1 + i)(X1 - i)", true, false,
       [&](auto& m) -> CMatrix { return (m["X1"] + j * I) * (m["X1"] - j * I); }},
      {"i^2 S1", true, false, [](auto& m) -> CMatrix { return -m["S1"]; }},
      {"(i X1)^2", true, false, [](auto& m) -> CMatrix { return -(m["X1"] * m["X1"]); }},
      {"2i D", false, false, [&](auto& m) -> CMatrix { return 2.0 * j * m["D"]; }},
      {"i D S1 - i S1 D", true, false,
       [&](auto& m) -> CMatrix { return j * (m["D"] * m["S1"] - m["S1"] * m["D"]); }},
      {"(1 + 2 i) X1 X2 + (1 - 2 i) X2 X1", true, false,
       [&](auto& m) -> CMatrix {
         return (1.0 + 2.0 * j) * m["X1"] * m["X2"] + (1.0 - 2.0 * j) * m["X2"] * m["X1"];
       }},
      {"i X1", false, false, [&](auto& m) -> CMatrix { return j * m["X1"]; }},
      {"i (U B U^* B - B U B U^*)", true, false,
       [&](auto& m) -> CMatrix {
         const CMatrix p = m["U"] * m["B"] * m["U"].adjoint() * m["B"];
         return j * (p - p.adjoint());
       }},
      {"S1 - i S2 S1 + i S1 S2", true, false,
       [&](auto& m) -> CMatrix { return m["S1"] + j * (m["S1"] * m["S2"] - m["S2"] * m["S1"]); }},
  };
  // i² S1 = −S1 exactly: the plan folds the scalar and stays real; every other row is complex.
  for (const Row& row : rows) expect_row(row, specs, in, n, std::string(row.text) != "i^2 S1");
  // The factor i folds into the sum that forms the commutator: one product and one pass over
  // the result, as for a real factor, and the plan says so.
  const fe::Evaluation commutator(fe::Expression("i (X1 X2 - X2 X1)", specs), n);
  ASSERT_EQ(commutator.steps().size(), 2u) << commutator.explain();
  EXPECT_EQ(commutator.steps()[1].description, "i·(t1 - t1^*)") << commutator.explain();
  EXPECT_EQ(commutator.peak_temporary_bytes(), std::size_t{16} * 2 * n * n);
}

// Source: the issue's table of expressions; references are naive left-to-right dense products
// written out here with Eigen; expected self-adjointness worked out by hand (adjoint of each term).
TEST(ExprEvaluate, AgreesWithNaiveDenseProducts) {
  const Eigen::Index n = 40;
  const auto specs = table_specs();
  Inputs in = make_inputs(specs, n);
  const CMatrix I = CMatrix::Identity(n, n);
  const std::vector<Row> rows = {
      {"B + U B U^*", true, false,
       [](auto& m) -> CMatrix { return m["B"] + m["U"] * m["B"] * m["U"].adjoint(); }},
      {"A B A", true, false, [](auto& m) -> CMatrix { return m["A"] * m["B"] * m["A"]; }},
      {"X1 X2 + X2 X1", true, false,
       [](auto& m) -> CMatrix { return m["X1"] * m["X2"] + m["X2"] * m["X1"]; }},
      {"U1 + U1^* + U2 + U2^*", true, false,
       [](auto& m) -> CMatrix {
         return m["U1"] + m["U1"].adjoint() + m["U2"] + m["U2"].adjoint();
       }},
      {"G G^*", true, false, [](auto& m) -> CMatrix { return m["G"] * m["G"].adjoint(); }},
      {"X1^2 + X2", true, false, [](auto& m) -> CMatrix { return m["X1"] * m["X1"] + m["X2"]; }},
      {"(A B)^* (A B)", true, false,
       [](auto& m) -> CMatrix { return (m["A"] * m["B"]).adjoint() * (m["A"] * m["B"]); }},
      {"1/2 (X1 X2 + X2 X1)", true, false,
       [](auto& m) -> CMatrix { return 0.5 * (m["X1"] * m["X2"] + m["X2"] * m["X1"]); }},
      {"X1 - 0.25 X2^3", true, false,
       [](auto& m) -> CMatrix { return m["X1"] - 0.25 * m["X2"] * m["X2"] * m["X2"]; }},
      {"S1 S2 S1 + O S2 O^*", true, true,
       [](auto& m) -> CMatrix {
         return m["S1"] * m["S2"] * m["S1"] + m["O"] * m["S2"] * m["O"].adjoint();
       }},
      {"S1 S2 - S2 S1", false, true,
       [](auto& m) -> CMatrix { return m["S1"] * m["S2"] - m["S2"] * m["S1"]; }},
      {"(X1 X2)(X1 X2)^* + X1 X2 + (X1 X2)^*", true, false,
       [](auto& m) -> CMatrix {
         CMatrix p = m["X1"] * m["X2"];
         return p * p.adjoint() + p + p.adjoint();
       }},
      {"U D U^*", true, false,
       [](auto& m) -> CMatrix { return m["U"] * m["D"] * m["U"].adjoint(); }},
      {"U D U^* + V D V^*", true, false,
       [](auto& m) -> CMatrix {
         return m["U"] * m["D"] * m["U"].adjoint() + m["V"] * m["D"] * m["V"].adjoint();
       }},
      {"X1 X2", false, false, [](auto& m) -> CMatrix { return m["X1"] * m["X2"]; }},
      {"X1 X2 - X2 X1", false, false,
       [](auto& m) -> CMatrix { return m["X1"] * m["X2"] - m["X2"] * m["X1"]; }},
      {"U^2 + U^2^*", true, false,
       [](auto& m) -> CMatrix {
         CMatrix u2 = m["U"] * m["U"];
         return u2 + u2.adjoint();
       }},
      {"(U^*)^2 U^3", false, false,
       [](auto& m) -> CMatrix {
         CMatrix a = m["U"].adjoint();
         return a * a * m["U"] * m["U"] * m["U"];
       }},
      {"G^* X1 G", true, false,
       [](auto& m) -> CMatrix { return m["G"].adjoint() * m["X1"] * m["G"]; }},
      {"X1/2 + 3*X2 - 1", true, false,
       [&](auto& m) -> CMatrix { return m["X1"] / 2.0 + 3.0 * m["X2"] - I; }},
      {"R^* R + S1", true, true,
       [](auto& m) -> CMatrix { return m["R"].adjoint() * m["R"] + m["S1"]; }},
      {"D^2 - D + 1", true, true, [&](auto& m) -> CMatrix { return m["D"] * m["D"] - m["D"] + I; }},
      {"U^*", false, false, [](auto& m) -> CMatrix { return m["U"].adjoint(); }},
      {"X1", true, false, [](auto& m) -> CMatrix { return m["X1"]; }},
      {"B D", true, true, [](auto& m) -> CMatrix { return m["B"] * m["D"]; }},
      {"O^* S1 O", true, true,
       [](auto& m) -> CMatrix { return m["O"].adjoint() * m["S1"] * m["O"]; }},
      {"U^* D U", true, false,
       [](auto& m) -> CMatrix { return m["U"].adjoint() * m["D"] * m["U"]; }},
      {"W X1 W", true, false, [](auto& m) -> CMatrix { return m["W"] * m["X1"] * m["W"]; }},
      {"(X1 + X2)^3", true, false,
       [](auto& m) -> CMatrix {
         CMatrix s = m["X1"] + m["X2"];
         return s * s * s;
       }},
      {"D U D", false, false, [](auto& m) -> CMatrix { return m["D"] * m["U"] * m["D"]; }},
      {"2 (X1 X2)^* - X1", false, false,
       [](auto& m) -> CMatrix { return 2.0 * (m["X1"] * m["X2"]).adjoint() - m["X1"]; }},
      {"X1 U^* D U X1", true, false,
       [](auto& m) -> CMatrix { return m["X1"] * m["U"].adjoint() * m["D"] * m["U"] * m["X1"]; }},
      {"O B O^*", true, true,
       [](auto& m) -> CMatrix { return m["O"] * m["B"] * m["O"].adjoint(); }},
      {"S1 + R", false, true, [](auto& m) -> CMatrix { return m["S1"] + m["R"]; }},
      {"X1 + O", false, false, [](auto& m) -> CMatrix { return m["X1"] + m["O"]; }},
      {"X1 O X1", false, false, [](auto& m) -> CMatrix { return m["X1"] * m["O"] * m["X1"]; }},
      {"-(X1 - X2)^2 B + B (X2 - X1)^2", false, false,
       [](auto& m) -> CMatrix {
         CMatrix d = m["X1"] - m["X2"];
         return -(d * d) * m["B"] + m["B"] * d * d;
       }},
      {"D (U + U^*) D", true, false,
       [](auto& m) -> CMatrix { return m["D"] * (m["U"] + m["U"].adjoint()) * m["D"]; }},
  };
  for (const Row& row : rows) expect_row(row, specs, in, n, !row.real);
}

// Source: the issue ("at least 15 malformed expressions, each with its exact message").
TEST(ExprParse, MalformedExpressionsGiveExactMessages) {
  using K = en::Kind;
  const std::vector<en::MatrixSpec> specs = {spec("A", K::gue), spec("B", K::gue),
                                             spec("U", K::haar_unitary)};
  const std::vector<std::pair<const char*, const char*>> cases = {
      {"", "the expression is empty"},
      {"   ", "the expression is empty"},
      {"A + B +", "expected a matrix name, a number or '(' after '+' at column 8"},
      {"A + * B", "expected a matrix name, a number or '(' after '+' at column 5"},
      {"A ** B", "expected a matrix name, a number or '(' after '*' at column 4"},
      {"A + -B", "expected a matrix name, a number or '(' after '+' at column 5"},
      {"-", "expected a matrix name, a number or '(' after '-' at column 2"},
      {")", "expected a matrix name, a number or '(' at column 1"},
      {"A + Y", "unknown matrix 'Y' at column 5 (declared: A, B, U)"},
      {"A + (B", "unbalanced parenthesis opened at column 5"},
      {"((A B) + U", "unbalanced parenthesis opened at column 1"},
      {"A + B)", "unmatched ')' at column 6"},
      {"()", "expected a matrix name, a number or '(' after '(' at column 2"},
      {"A + B^-1", "power must be a non-negative integer at column 7"},
      {"A + B^1.5", "power must be a non-negative integer at column 7"},
      {"A^", "power must be a non-negative integer at column 3"},
      {"A^k", "power must be a non-negative integer at column 3"},
      {"A^(2)", "power must be a non-negative integer at column 3"},
      {"A^1001", "power must be at most 1000 at column 3"},
      {"A / B", "division is only by a number at column 5"},
      {"A / (2)", "division is only by a number at column 5"},
      {"A / i", "division is only by a real number; write \"-i X\" for X/i at column 5"},
      {"iA + B", "unknown matrix 'iA' at column 1 (declared: A, B, U)"},
      {"2 i", "the expression has no matrix in it"},
      {"A/0", "division by zero at column 3"},
      {"A $ B", "unexpected character '$' at column 3"},
      {"A 2", "a number cannot follow a factor without '*' at column 3"},
      {"1/2 3 A", "a number cannot follow a factor without '*' at column 5"},
      {"2", "the expression has no matrix in it"},
      {"(1 + 1/2)^2", "the expression has no matrix in it"},
      {"1e999 A", "number out of range at column 1"},
      {"A + é", "unexpected character 'é' at column 5"},
      {"U^* é", "unexpected character 'é' at column 5"},
  };
  for (const auto& [text, message] : cases) {
    SCOPED_TRACE(text);
    try {
      const fe::Expression e(text, specs);
      ADD_FAILURE() << "no error";
    } catch (const fe::ExprError& error) {
      EXPECT_EQ(std::string(error.what()), message);
    }
  }
}

// Source: the issue (shape errors "G G" and "G + X1" with G rectangular, named by column).
TEST(ExprCheck, ShapeErrorsGiveExactMessages) {
  using K = en::Kind;
  const std::vector<en::MatrixSpec> specs = {
      spec("G", K::ginibre_complex, 0.5), spec("H", K::ginibre_complex, 2.0),
      spec("K", K::ginibre_complex, 0.5), spec("X1", K::gue), spec("Q", K::ginibre_complex)};
  const std::vector<std::pair<const char*, const char*>> cases = {
      {"G G", "cannot multiply N×M1 by N×M1 (inner sizes M1 and N differ) at column 3"},
      {"G + X1", "cannot add N×M1 and N×N at column 3"},
      {"X1 + G G^* + G", "cannot add N×N and N×M1 at column 12"},
      {"G H^*", "cannot multiply N×M1 by M2×N (inner sizes M1 and M2 differ) at column 3"},
      {"G^2 + X1", "power of a non-square N×M1 matrix at column 2"},
      {"G + 1", "cannot add a number to an N×M1 matrix at column 3"},
      {"G", "the expression is N×M1; it must be square"},
      {"X1 G", "the expression is N×M1; it must be square"},
      {"(G - G)^0", "power of a non-square N×M1 matrix at column 8"},
  };
  for (const auto& [text, message] : cases) {
    SCOPED_TRACE(text);
    try {
      const fe::Expression e(text, specs);
      ADD_FAILURE() << "no error";
    } catch (const fe::ExprError& error) {
      EXPECT_EQ(std::string(error.what()), message);
    }
  }
  // Allowed: the products are square; equal ratios share one symbol; square Ginibre is N×N.
  EXPECT_EQ(fe::Expression("G K^* + X1", specs).shape(), "N×N");
  EXPECT_EQ(fe::Expression("G^* X1 G", specs).shape(), "M1×M1");
  EXPECT_EQ(fe::Expression("Q Q + X1", specs).shape(), "N×N");
  // One rectangular ratio is called plain M.
  try {
    const fe::Expression e("G G", {spec("G", K::ginibre_complex, 0.5)});
    ADD_FAILURE();
  } catch (const fe::ExprError& error) {
    EXPECT_EQ(std::string(error.what()),
              "cannot multiply N×M by N×M (inner sizes M and N differ) at column 3");
    EXPECT_EQ(error.column(), 3);
  }
}

// Source: the issue's CSE requirement: (X1 X2)(X1 X2)^* + X1 X2 computes X1 X2 once.
TEST(ExprPlan, CommonSubexpressionComputedOnce) {
  const auto specs = table_specs();
  const fe::Expression e("(X1 X2)(X1 X2)^* + X1 X2", specs);
  const fe::Evaluation plan(e, 40);
  const auto& steps = plan.steps();
  ASSERT_EQ(steps.size(), 3u) << plan.explain();
  EXPECT_EQ(steps[0].kind, fe::StepKind::gemm);
  EXPECT_EQ(steps[0].description, "X1·X2");
  EXPECT_EQ(steps[1].kind, fe::StepKind::herk);
  EXPECT_EQ(steps[1].description, "t1·t1^*");
  EXPECT_EQ(steps[2].kind, fe::StepKind::sum);
  EXPECT_EQ(steps[2].description, "t2 + t1");
  // X2 X1 is the adjoint of X1 X2 for self-adjoint X1, X2: one product for the anticommutator.
  const fe::Evaluation anti(fe::Expression("X1 X2 + X2 X1", specs), 40);
  ASSERT_EQ(anti.steps().size(), 2u) << anti.explain();
  EXPECT_EQ(anti.steps()[0].description, "X1·X2");
  EXPECT_EQ(anti.steps()[1].description, "t1 + t1^*");
}

// Source: docs/performance.md §4 (B + U B U^* as one zherk on the N/2 "+1" columns, 0.33 s against
// 1.57 s for zgemm at N = 2000). Flops by the header's conventions: 4·N²·(N/2) for the herk plus
// 2·N·(N/2) for scaling the columns (none when U is drawn as the N/2 columns alone: the herk reads
// the sample, the weight 2 = 1 − (−1) going into alpha), N for adding diag(B).
TEST(ExprPlan, FreeSumIsOneHerkOnHalfTheColumns) {
  const auto specs = table_specs();
  const fe::Expression e("B + U B U^*", specs);
  const fe::Evaluation whole(e, 2000, fe::EvaluationOptions{.full_haar = true});
  ASSERT_EQ(whole.steps().size(), 2u) << whole.explain();
  EXPECT_EQ(whole.steps()[0].routine,
            "zherk on 1000 scaled columns, shift by the most frequent value of B");
  EXPECT_DOUBLE_EQ(whole.flops(), 4.0 * 2000 * 2000 * 1000 + 2.0 * 2000 * 1000 + 2000);
  // The result (16 N²) plus the scaled half of U (16 N²/2) during the herk.
  EXPECT_EQ(whole.peak_temporary_bytes(), std::size_t{16} * 2000 * 2000 * 3 / 2);
  EXPECT_EQ(whole.input_bytes(), std::size_t{16} * 2000 * 2000 + 8 * 2000);
  EXPECT_EQ(whole.haar_columns(), std::vector<fe::Index>(specs.size(), -1));
  EXPECT_EQ(whole.explain().find("sampling:"), std::string::npos);

  const fe::Evaluation plan(e, 2000);
  const auto& steps = plan.steps();
  ASSERT_EQ(steps.size(), 2u) << plan.explain();
  EXPECT_EQ(steps[0].kind, fe::StepKind::conjugate);
  EXPECT_EQ(steps[0].routine,
            "zherk on 1000 scaled columns, shift by the most frequent value of B, from the 1000 "
            "sampled columns");
  EXPECT_DOUBLE_EQ(steps[0].flops, 4.0 * 2000 * 2000 * 1000);
  EXPECT_EQ(steps[1].kind, fe::StepKind::sum);
  EXPECT_EQ(steps[1].output, "t1");  // in place
  EXPECT_DOUBLE_EQ(plan.flops(), 4.0 * 2000 * 2000 * 1000 + 2000);
  // U is sampled as its N/2 used columns (16 N²/2 bytes); the result (16 N²) is the only
  // temporary.
  EXPECT_EQ(plan.peak_temporary_bytes(), std::size_t{16} * 2000 * 2000);
  EXPECT_EQ(plan.input_bytes(), std::size_t{16} * 2000 * 1000 + 8 * 2000);
  EXPECT_EQ(fe::peak_working_bytes(e, 2000), plan.input_bytes() + plan.peak_temporary_bytes());
  std::vector<fe::Index> columns(specs.size(), -1);
  columns[5] = 1000;  // U
  EXPECT_EQ(plan.haar_columns(), columns);
  const std::string text = plan.explain();
  EXPECT_NE(text.find("arithmetic: complex"), std::string::npos) << text;
  EXPECT_NE(text.find("self-adjoint: yes (proven symbolically)"), std::string::npos) << text;
  EXPECT_NE(text.find("spectrum: eigenvalues; only the lower triangle is formed"),
            std::string::npos)
      << text;
  EXPECT_NE(text.find("t1 = U·B·U^*"), std::string::npos) << text;
  EXPECT_NE(text.find("t1 = t1 + diag(B)"), std::string::npos) << text;
}

// Source: header conventions (real gemm 2mnk, dsyrk n²k; real arithmetic when every factor is
// real).
TEST(ExprPlan, RealArithmeticAndFlopCounts) {
  const auto specs = table_specs();
  const fe::Evaluation plan(fe::Expression("S1 S2 + R^* R", specs), 10);
  const auto& steps = plan.steps();
  ASSERT_EQ(steps.size(), 3u) << plan.explain();
  EXPECT_EQ(steps[0].routine, "dgemm");
  EXPECT_DOUBLE_EQ(steps[0].flops, 2.0 * 1000);
  EXPECT_EQ(steps[1].routine, "dsyrk");
  EXPECT_DOUBLE_EQ(steps[1].flops, 1.0 * 1000);
  EXPECT_NE(plan.explain().find("arithmetic: real"), std::string::npos);
  // Diagonal factors are scalings, never products: D U D is two O(N²) scalings.
  const fe::Evaluation scaled(fe::Expression("D U D", specs), 10);
  ASSERT_EQ(scaled.steps().size(), 2u) << scaled.explain();
  EXPECT_EQ(scaled.steps()[0].kind, fe::StepKind::scale_rows);
  EXPECT_EQ(scaled.steps()[1].kind, fe::StepKind::scale_columns);
  EXPECT_EQ(scaled.steps()[1].output, "t1");  // in place
  // A self-adjoint square is a herk: X1^4 = (X1²)(X1²)^*.
  const fe::Evaluation power(fe::Expression("X1^4", specs), 10);
  ASSERT_EQ(power.steps().size(), 2u) << power.explain();
  EXPECT_EQ(power.steps()[0].routine, "zherk");
  EXPECT_EQ(power.steps()[1].routine, "zherk");
  // Scalars fold into BLAS alpha: no sum step for 0.5 X1 X2.
  const fe::Evaluation folded(fe::Expression("0.5 X1 X2 - 2 (X1 X2)", specs), 10);
  ASSERT_EQ(folded.steps().size(), 1u) << folded.explain();
  EXPECT_EQ(folded.steps()[0].kind, fe::StepKind::gemm);
}

// Source: header (syntax decisions: chaining of ^* and ^k left to right, unary minus, fractions).
TEST(ExprParse, DocumentedSyntaxDecisions) {
  const auto specs = table_specs();
  const Eigen::Index n = 12;
  Inputs in = make_inputs(specs, n);
  auto value = [&](const char* text) {
    const fe::Expression e(text, specs);
    return as_complex(fe::Evaluation(e, n, fe::EvaluationOptions{true}).evaluate(in.samples));
  };
  auto same = [](const CMatrix& a, const CMatrix& b) { return (a - b).norm() <= 1e-12 * b.norm(); };
  EXPECT_TRUE(same(value("U^2^*"), value("(U^2)^*")));
  EXPECT_TRUE(same(value("U^*^2"), value("(U^*)^2")));
  EXPECT_TRUE(same(value("-X1^2"), value("-(X1^2)")));
  EXPECT_TRUE(same(value("1/2 X1"), value("0.5 X1")));
  EXPECT_TRUE(same(value("X1/2"), value("0.5*X1")));
  EXPECT_TRUE(same(value("1/2^2 X1"), value("0.25 X1")));
  EXPECT_TRUE(same(value("X1^0 X2"), value("X2")));
  EXPECT_TRUE(same(value("X1 + (-X2)"), value("X1 - X2")));
  EXPECT_TRUE(same(value("U^*^*"), value("U")));
  EXPECT_TRUE(same(value("2e-1 X1"), value("0.2 X1")));
  // The imaginary unit is a number like 2: "2i" is 2·i, it may follow a factor, and powers of it
  // are exact (i² = −1 bit for bit, so "i^2 X1" is −X1).
  EXPECT_TRUE(same(value("2i X1"), value("2 * i * X1")));
  EXPECT_TRUE(same(value("X1 i"), value("i X1")));
  EXPECT_EQ(value("i^2 X1"), value("-X1"));
  EXPECT_EQ(value("i^4 X1"), value("X1"));
  EXPECT_TRUE(same(value("(i X1)^*"), value("-i X1")));
}

// A matrix cannot be called i: the name is the imaginary unit.
TEST(ExprParse, NoMatrixIsCalledI) {
  try {
    const fe::Expression e("i + X", {spec("i", en::Kind::gue), spec("X", en::Kind::gue)});
    FAIL() << "a matrix named i was accepted";
  } catch (const freegap::InputError& e) {
    EXPECT_NE(std::string(e.what()).find("'i' is the imaginary unit"), std::string::npos)
        << e.what();
  }
}

// Source: the issue (symbolic self-adjointness; U^* U = I may simplify; expansion cap).
TEST(ExprCheck, SelfAdjointnessDecisions) {
  const auto specs = table_specs();
  auto sa = [&](const char* text) { return fe::Expression(text, specs).self_adjoint(); };
  EXPECT_TRUE(sa("U^* U"));
  EXPECT_TRUE(sa("U X1 U^* U U^*"));  // U^* U cancels
  EXPECT_TRUE(sa("B D"));             // diagonals commute
  EXPECT_FALSE(sa("B U"));
  EXPECT_TRUE(sa("X1 X2 X1 - X1 + 3"));
  EXPECT_FALSE(sa("X1 X2 X1 + X1 X2"));
  EXPECT_FALSE(sa("X1 - X1 + U"));
  EXPECT_TRUE(sa("U - U + A"));  // the non-self-adjoint part cancels
  // Forced singular values.
  fe::CheckOptions force;
  force.force_singular_values = true;
  const fe::Expression forced("B + U B U^*", specs, force);
  EXPECT_TRUE(forced.self_adjoint());
  EXPECT_EQ(forced.spectrum(), fe::Spectrum::singular_values);
  // Past the cap: not proven, with a note.
  fe::CheckOptions cap;
  cap.max_monomials = 1000;
  const fe::Expression big("(X1 + X2 + A + U)^8", specs, cap);
  EXPECT_FALSE(big.self_adjoint());
  EXPECT_EQ(big.note(),
            "self-adjointness not decided: the expansion exceeds 1000 monomials; singular values "
            "are computed");
  EXPECT_NE(fe::Evaluation(big, 8).explain().find("self-adjoint: not decided"), std::string::npos);
}

// Source: the issue (evaluation refuses samples that do not fit the plan).
TEST(ExprEvaluate, RefusesWrongSamples) {
  const auto specs = table_specs();
  Inputs in = make_inputs(specs, 8);
  const fe::Evaluation plan(fe::Expression("B + U B U^*", specs), 10);
  try {
    plan.evaluate(in.samples);
    ADD_FAILURE();
  } catch (const freegap::InputError& error) {
    EXPECT_EQ(std::string(error.what()), "sample of 'B' is 8×8, the plan expects 10×10");
  }
  in.samples.pop_back();
  EXPECT_THROW(plan.evaluate(in.samples), freegap::InputError);
}

// End to end with the project's samplers. Source: docs/performance.md §4 pipeline (B = ±1 halves,
// U Haar); Tr(B + U B U^*) = 2 Tr B = 0 exactly, and Tr M² is checked against a dense product.
TEST(ExprEndToEnd, FreeSumWithProjectSamplers) {
  const auto specs = table_specs();
  const Eigen::Index n = 60;
  std::vector<en::Sample> samples;
  for (const auto& s : specs) samples.push_back(en::Sampler(s).draw(n, 7, 0));
  const fe::Expression e("B + U B U^*", specs);
  const fe::Evaluation plan(e, n);
  fe::Evaluated m = plan.evaluate(samples);
  const auto& u = samples[5].complex;
  const Eigen::VectorXd b = samples[3].diagonal;
  const CMatrix reference =
      CMatrix(b.cast<Complex>().asDiagonal()) + u * b.cast<Complex>().asDiagonal() * u.adjoint();
  EXPECT_LT(relative_error(m, reference), 1e-12);
  const Eigen::VectorXd ev = fe::compute_spectrum(plan.spectrum(), m);
  ASSERT_EQ(ev.size(), n);
  EXPECT_NEAR(ev.sum(), 0.0, 1e-10);
  EXPECT_NEAR(ev.squaredNorm(), (reference * reference).trace().real(), 1e-9);
  EXPECT_GE(ev.minCoeff(), -2.0 - 1e-12);  // ‖B‖ + ‖U B U^*‖ = 2
  EXPECT_LE(ev.maxCoeff(), 2.0 + 1e-12);
  // Singular values of the commutator: the largest is the operator norm.
  const fe::Evaluation commutator(fe::Expression("X1 X2 - X2 X1", specs), n);
  fe::Evaluated c = commutator.evaluate(samples);
  const Eigen::VectorXd sv = fe::compute_spectrum(commutator.spectrum(), c);
  const CMatrix x1 = samples[0].complex, x2 = samples[1].complex;
  const CMatrix ref = x1 * x2 - x2 * x1;
  Eigen::JacobiSVD<CMatrix> svd(ref);
  EXPECT_NEAR(sv[0], svd.singularValues()[0], 1e-10 * sv[0]);
}

namespace {

// The public expansion: coefficients and words of small expressions, worked by hand.
TEST(ExprExpansion, MonomialsOfSmallExpressions) {
  const std::vector<en::MatrixSpec> decl = {spec("X", en::Kind::gue), spec("U", en::Kind::haar_unitary),
                                            spec("Y", en::Kind::gue)};
  auto words = [&](const std::string& text) {
    std::map<std::vector<std::pair<int, bool>>, double> out;
    for (const auto& m : fe::Expression(text, decl).expansion()) {
      EXPECT_EQ(m.coefficient.imag(), 0.0) << text;
      out[m.letters] = m.coefficient.real();
    }
    return out;
  };
  using W = std::vector<std::pair<int, bool>>;
  std::map<W, Complex> complex_words;
  for (const auto& m : fe::Expression("i (X Y - Y X) + (1 - 2i) U", decl).expansion()) {
    complex_words[m.letters] = m.coefficient;
  }
  EXPECT_EQ(complex_words, (std::map<W, Complex>{{W{{0, false}, {2, false}}, Complex(0, 1)},
                                                 {W{{2, false}, {0, false}}, Complex(0, -1)},
                                                 {W{{1, false}}, Complex(1, -2)}}));
  EXPECT_FALSE(fe::real_coefficients(fe::Expression("i (X Y - Y X)", decl).expansion()));
  EXPECT_TRUE(fe::real_coefficients(fe::Expression("(i X)^2", decl).expansion()));
  EXPECT_EQ(words("2 X + 1"), (std::map<W, double>{{W{}, 1.0}, {W{{0, false}}, 2.0}}));
  EXPECT_EQ(words("X Y + Y X"),
            (std::map<W, double>{{W{{0, false}, {2, false}}, 1.0}, {W{{2, false}, {0, false}}, 1.0}}));
  EXPECT_EQ(words("U X U^*"),
            (std::map<W, double>{{W{{1, false}, {0, false}, {1, true}}, 1.0}}));
  EXPECT_EQ(words("U U^* + X - X"), (std::map<W, double>{{W{}, 1.0}}));  // U U^* = I; X − X = 0
  // The imaginary unit: i² = −1 exactly, so "(i X)^2 + 1" has real coefficients.
  EXPECT_EQ(words("(i X)^2 + 1"), (std::map<W, double>{{W{}, 1.0}, {W{{0, false}, {0, false}}, -1.0}}));
  EXPECT_EQ(words("(X + 1)^2"),
            (std::map<W, double>{{W{}, 1.0}, {W{{0, false}}, 2.0}, {W{{0, false}, {0, false}}, 1.0}}));
  EXPECT_THROW(fe::Expression("(X + Y)^20", decl).expansion(1000), fe::ExprError);
}

}  // namespace
