// Exact integers, rationals and limit moments of polynomials in free variables.
// Reference values: docs/check-values.md (cited as "ref §x.y"), which names
// the published source of each (Nica & Speicher 2006 and the other papers there, several from
// memory as the reference says).
#include <gtest/gtest.h>

#include <cstdint>
#include <string>
#include <vector>

#include "freegap/analysis/limits/moments.hpp"
#include "freegap/errors.hpp"
#include "freegap/rng.hpp"

namespace fa = freegap::analysis;
using fa::BigInt;
using fa::FreeMomentEngine;
using fa::FreeVariable;
using fa::Rational;

namespace {

std::vector<std::string> texts(const std::vector<fa::ExactValue>& v) {
  std::vector<std::string> out;
  for (const auto& x : v) out.push_back(x.text);
  return out;
}

std::vector<std::string> moments_of(std::vector<FreeVariable> vars, const std::string& poly,
                                    const std::vector<std::string>& names, int order) {
  FreeMomentEngine engine(std::move(vars));
  return texts(engine.moments(fa::parse_polynomial(poly, names), order));
}

}  // namespace

// ---------------------------------------------------------------------------------------------
// BigInt and Rational

TEST(BigInt, FactorialAndPowersOfTwo) {
  BigInt f(1);
  for (int i = 2; i <= 30; ++i) f *= BigInt(i);
  // 30! (exact integer arithmetic; a standard value).
  EXPECT_EQ(f.to_string(), "265252859812191058636308480000000");
  EXPECT_EQ((f / BigInt(30)) * BigInt(30), f);
  EXPECT_EQ(f % BigInt(29), BigInt(0));
  const BigInt two200 = BigInt(1) << 200;
  EXPECT_EQ(two200.to_string(), "1606938044258990275541962092341162602522202993782792835301376");
  EXPECT_EQ((BigInt(1) << 100) * (BigInt(1) << 100), two200);
  EXPECT_EQ(two200.bit_length(), 201u);
  EXPECT_EQ(BigInt::parse(two200.to_string()), two200);
  EXPECT_EQ(two200 >> 199, BigInt(2));
  EXPECT_DOUBLE_EQ(two200.to_double(), std::ldexp(1.0, 200));
  EXPECT_EQ(BigInt(INT64_MIN).to_string(), "-9223372036854775808");
}

TEST(BigInt, SignsFollowBuiltInIntegers) {
  for (std::int64_t a : {17, -17, 0, 5, -5}) {
    for (std::int64_t b : {5, -5, 3, -1, 17}) {
      EXPECT_EQ(BigInt(a) / BigInt(b), BigInt(a / b)) << a << "/" << b;
      EXPECT_EQ(BigInt(a) % BigInt(b), BigInt(a % b)) << a << "%" << b;
      EXPECT_EQ(BigInt(a) - BigInt(b), BigInt(a - b));
      EXPECT_EQ(BigInt(a) < BigInt(b), a < b);
    }
  }
  EXPECT_THROW(BigInt(1) / BigInt(0), std::domain_error);
  EXPECT_THROW(BigInt::parse("12a"), freegap::InputError);
}

// Long division (Knuth's Algorithm D) checked by the identity a = q·b + r, 0 ≤ r < |b|, on
// operands built from limbs that provoke the rare branches (0, 1, 2^31, 2^32 − 1 and the like:
// the quotient-digit correction and the add-back step need top limbs near these values).
TEST(BigInt, DivisionIdentityOnAwkwardLimbs) {
  freegap::rng::Stream stream({2024, "bigint-division", 1, 0});
  const std::uint32_t special[] = {0u,          1u,          2u,          0x7fffffffu,
                                   0x80000000u, 0x80000001u, 0xfffffffeu, 0xffffffffu};
  auto random_big = [&](int limbs) {
    BigInt x(0);
    for (int i = 0; i < limbs; ++i) {
      const std::uint32_t word =
          (stream.next_u32() % 3 == 0) ? stream.next_u32() : special[stream.next_u32() % 8];
      x = (x << 32) + BigInt(static_cast<std::int64_t>(word));
    }
    return x;
  };
  int checked = 0;
  for (int trial = 0; trial < 4000; ++trial) {
    const BigInt a = random_big(1 + static_cast<int>(stream.next_u32() % 8));
    const BigInt b = random_big(1 + static_cast<int>(stream.next_u32() % 5));
    if (b.is_zero()) continue;
    BigInt q, r;
    divide_magnitudes(a, b, q, r);
    ASSERT_EQ(q * b + r, a) << a.to_string() << " / " << b.to_string();
    ASSERT_TRUE(!r.is_negative() && r < b);
    ++checked;
  }
  EXPECT_GT(checked, 3000);
}

TEST(Rational, LowestTermsParsingAndDoubles) {
  EXPECT_EQ(Rational(BigInt(6), BigInt(-4)).to_string(), "-3/2");
  EXPECT_EQ(Rational::parse("0.125"), Rational(BigInt(1), BigInt(8)));
  EXPECT_EQ(Rational::parse("2e-3").to_string(), "1/500");
  EXPECT_EQ(Rational::parse("-12/8").to_string(), "-3/2");
  EXPECT_EQ(Rational::from_double(0.1).to_string(), "1/10");
  EXPECT_EQ(Rational::from_double(0.5).to_string(), "1/2");
  EXPECT_EQ(Rational::from_double(-2.75).to_string(), "-11/4");
  EXPECT_THROW(Rational::parse("1/0"), freegap::InputError);
  EXPECT_THROW(Rational::parse("x"), freegap::InputError);
  // Numerator and denominator far beyond double: the quotient is still correctly rounded.
  const BigInt big = BigInt(10) * (BigInt(1) << 1500);
  EXPECT_DOUBLE_EQ(Rational(big + BigInt(1), BigInt(3) * big).to_double(), 1.0 / 3.0);
  EXPECT_DOUBLE_EQ(Rational(BigInt(1), BigInt(3)).to_double(), 1.0 / 3.0);
  EXPECT_EQ(Rational(BigInt(2), BigInt(3)).pow(-2).to_string(), "9/4");
}

// Catalan numbers (ref §1.1) and the count of non-crossing partitions |NC(n)| = Cat(n)
// (Nica & Speicher 2006, from memory).
TEST(Combinatorics, CatalanCountsNoncrossingPartitions) {
  EXPECT_EQ(fa::catalan(10), BigInt(16796));
  for (int n = 0; n <= 10; ++n) {
    EXPECT_EQ(BigInt(static_cast<std::int64_t>(fa::noncrossing_partitions(n).size())),
              fa::catalan(n))
        << n;
  }
}

// ---------------------------------------------------------------------------------------------
// Laws of single variables

TEST(FreeVariable, MarchenkoPasturMomentsAreNarayanaSums) {
  // ref §1.2: MP(1/2) moments 1, 3/2, 11/4, 45/8, 197/16, 903/32, 4279/64, 20793/128.
  const FreeVariable mp = FreeVariable::marchenko_pastur(Rational(BigInt(1), BigInt(2)));
  const std::vector<std::string> expected = {"1",      "3/2",    "11/4",    "45/8",
                                             "197/16", "903/32", "4279/64", "20793/128"};
  for (int n = 1; n <= 8; ++n) EXPECT_EQ(mp.moment(n).to_string(), expected[n - 1]) << n;
  // m_20 of MP(1/3) = Σ_j Nar(20, j) (1/3)^{j−1} (ref §1.2, Narayana formula), exact.
  const FreeVariable third = FreeVariable::marchenko_pastur(Rational(BigInt(1), BigInt(3)));
  EXPECT_EQ(third.moment(20).to_string(), "1027656663676600/1162261467");
}

TEST(FreeVariable, ExactBeyondSixtyFourBits) {
  // MP(1) is the free Poisson law with Catalan moments (ref §1.2); Cat(38) exceeds 2^64, so
  // a fixed-width integer would overflow here.
  const Rational m38 = FreeVariable::marchenko_pastur(Rational(1)).moment(38);
  EXPECT_EQ(m38.to_string(), "176733862787006701400");
  EXPECT_EQ(m38, Rational(fa::catalan(38)));
  EXPECT_GT(m38.numerator().bit_length(), 64u);
}

TEST(FreeVariable, BernoulliCumulantsAreSignedCatalans) {
  // ref §1.3: free cumulants of (δ_{−1} + δ_1)/2: 0, 1, 0, −1, 0, 2, 0, −5, 0, 14, 0, −42.
  const FreeVariable b = FreeVariable::bernoulli();
  const std::vector<int> expected = {0, 1, 0, -1, 0, 2, 0, -5, 0, 14, 0, -42};
  for (int n = 1; n <= 12; ++n) EXPECT_EQ(b.cumulant(n), Rational(expected[n - 1])) << n;
}

TEST(FreeVariable, KnownOrdersAreEnforced) {
  const FreeVariable v = FreeVariable::from_moments({Rational(0), Rational(1)});
  EXPECT_EQ(v.cumulant(2), Rational(1));
  try {
    (void)v.moment(3);
    FAIL() << "expected InputError";
  } catch (const freegap::InputError& e) {
    EXPECT_STREQ(e.what(), "the law is known only up to order 2; order 3 is needed");
  }
  EXPECT_THROW(FreeVariable::atoms({{Rational(1), Rational(BigInt(1), BigInt(3))}}),
               freegap::InputError);
}

// ---------------------------------------------------------------------------------------------
// The engine against a brute-force sum over NC(n)

namespace {

Rational brute_force_trace(const std::vector<FreeVariable>& vars, const fa::Word& w) {
  const int n = static_cast<int>(w.size());
  Rational total(0);
  for (const auto& pi : fa::noncrossing_partitions(n)) {
    int blocks = 0;
    for (int b : pi) blocks = std::max(blocks, b + 1);
    Rational product(1);
    for (int b = 0; b < blocks && !product.is_zero(); ++b) {
      int var = -1;
      std::vector<bool> flags;
      bool mixed = false;
      for (int i = 0; i < n; ++i) {
        if (pi[static_cast<std::size_t>(i)] != b) continue;
        if (var == -1) var = w[static_cast<std::size_t>(i)].variable;
        if (w[static_cast<std::size_t>(i)].variable != var) mixed = true;
        flags.push_back(w[static_cast<std::size_t>(i)].adjoint);
      }
      // Mixed cumulants of free variables vanish (Speicher's characterisation of freeness,
      // Nica & Speicher 2006, from memory).
      product =
          mixed ? Rational(0) : product * vars[static_cast<std::size_t>(var)].block_cumulant(flags);
    }
    total += product;
  }
  return total;
}

}  // namespace

TEST(FreeMomentEngine, AgreesWithTheSumOverNoncrossingPartitions) {
  const std::vector<FreeVariable> vars = {
      FreeVariable::semicircular(Rational(2)),
      FreeVariable::bernoulli(),
      FreeVariable::marchenko_pastur(Rational(BigInt(1), BigInt(2))),
      FreeVariable::haar_unitary(),
      FreeVariable::circular(),
      FreeVariable::uniform(Rational(0), Rational(1))};
  FreeMomentEngine engine(vars);
  freegap::rng::Stream stream({7, "engine-words", 1, 0});
  int nonzero = 0;
  for (int trial = 0; trial < 150; ++trial) {
    const int length = 1 + static_cast<int>(stream.next_u32() % 10);
    fa::Word w;
    for (int i = 0; i < length; ++i) {
      // Two or three variables per word, so that blocks interleave.
      const int var =
          static_cast<int>((stream.next_u32() % 3 + static_cast<std::uint32_t>(trial)) % 6);
      w.push_back({var, stream.next_u32() % 2 == 1});
    }
    // The brute force sees the word as given; reduce U U^* first as the engine does, since the
    // cumulant formula needs no reduction but the unreduced and reduced words are equal in τ.
    std::vector<FreeVariable> v = vars;
    fa::Word clean;
    for (auto l : w) {
      if (vars[static_cast<std::size_t>(l.variable)].self_adjoint()) l.adjoint = false;
      clean.push_back(l);
    }
    const Rational expected = brute_force_trace(v, clean);
    ASSERT_EQ(engine.trace(w), expected) << "trial " << trial;
    if (!expected.is_zero()) ++nonzero;
  }
  EXPECT_GT(nonzero, 20);  // the comparison is not vacuous
}

TEST(FreeMomentEngine, HaarUnitaryMixedMoments) {
  FreeMomentEngine engine({FreeVariable::haar_unitary(), FreeVariable::haar_unitary()});
  const auto P = [](const std::string& s) { return fa::parse_polynomial(s, {"u", "v"}); };
  // τ(u u^* u u^*) = 1; τ(u^2 u^{*2}) = 1; τ(u v u^* v^*) = 0 (free: not the identity in the
  // free group).
  EXPECT_EQ(engine.trace(P("u u^* u u^*")), Rational(1));
  EXPECT_EQ(engine.trace(P("u u u^* u^*")), Rational(1));
  EXPECT_EQ(engine.trace(P("u v u^* v^*")), Rational(0));
  EXPECT_EQ(engine.trace(P("u")), Rational(0));
}

// ---------------------------------------------------------------------------------------------
// Limit moments from the reference

// ref §1.8: anticommutator of free standard semicirculars, moments 1, 0, 2, 0, 10, 0, 66, 0, 498,
// 0, 4066 (Nica & Speicher 1998; Perales 2021; computed independently in the reference).
TEST(LimitMoments, AnticommutatorOfFreeSemicirculars) {
  EXPECT_EQ(
      moments_of({FreeVariable::semicircular(), FreeVariable::semicircular()}, "s1 s2 + s2 s1",
                 {"s1", "s2"}, 10),
      (std::vector<std::string>{"1", "0", "2", "0", "10", "0", "66", "0", "498", "0", "4066"}));
}

// ref §1.8: the commutator i(s1 s2 − s2 s1) has the same moments; with the i taken out,
// τ((i C)^{2k}) = (−1)^k τ(C^{2k}) for C = s1 s2 − s2 s1.
TEST(LimitMoments, CommutatorOfFreeSemicirculars) {
  const auto m = moments_of({FreeVariable::semicircular(), FreeVariable::semicircular()},
                            "s1 s2 - s2 s1", {"s1", "s2"}, 8);
  EXPECT_EQ(m[2], "-2");
  EXPECT_EQ(m[4], "10");
  EXPECT_EQ(m[6], "-66");
  EXPECT_EQ(m[8], "498");
}

// ref §1.6: A B A with A semicircular free from B = ±1 Bernoulli: m_2, m_4, m_6, m_8 = 1, 3, 12,
// 55 (ternary numbers), odd moments 0.
TEST(LimitMoments, ABAWithBernoulli) {
  const auto m =
      moments_of({FreeVariable::semicircular(), FreeVariable::bernoulli()}, "a b a", {"a", "b"}, 8);
  EXPECT_EQ(m, (std::vector<std::string>{"1", "0", "1", "0", "3", "0", "12", "0", "55"}));
}

// ref §1.4: Kesten–McKay, U1 + U1^* + ... + Ud + Ud^* for free Haar unitaries (Kesten 1959;
// McKay 1981, from memory): d = 2 → 4, 28, 232, 2092; d = 3 → 6, 66, 876.
TEST(LimitMoments, KestenMcKay) {
  const auto d2 = moments_of({FreeVariable::haar_unitary(), FreeVariable::haar_unitary()},
                             "u1 + u1^* + u2 + u2^*", {"u1", "u2"}, 8);
  EXPECT_EQ(d2, (std::vector<std::string>{"1", "0", "4", "0", "28", "0", "232", "0", "2092"}));
  const auto d3 = moments_of(
      {FreeVariable::haar_unitary(), FreeVariable::haar_unitary(), FreeVariable::haar_unitary()},
      "u1 + u1^* + u2 + u2^* + u3 + u3^*", {"u1", "u2", "u3"}, 6);
  EXPECT_EQ(d3[2], "6");
  EXPECT_EQ(d3[4], "66");
  EXPECT_EQ(d3[6], "876");
}

// ref §1.3: B + U B U^* with B = ±1 and U Haar: the arcsine law, m_{2k} = C(2k, k).
TEST(LimitMoments, ArcsineFromHaarRotation) {
  const auto m = moments_of({FreeVariable::bernoulli(), FreeVariable::haar_unitary()},
                            "b + u b u^*", {"b", "u"}, 8);
  EXPECT_EQ(m, (std::vector<std::string>{"1", "0", "2", "0", "6", "0", "20", "0", "70"}));
}

// ref §1.5: (G1 G2)(G1 G2)^* with free circular G1, G2 has the Fuss–Catalan moments for s = 2:
// 1, 3, 12, 55, 273 (Penson & Życzkowski 2011).
TEST(LimitMoments, FussCatalanFromCircularProducts) {
  const auto m = moments_of({FreeVariable::circular(), FreeVariable::circular()}, "g1 g2 g2^* g1^*",
                            {"g1", "g2"}, 5);
  EXPECT_EQ(m, (std::vector<std::string>{"1", "1", "3", "12", "55", "273"}));
}

// ref §1.7: MP(c) ⊠ ν through τ((W D)^n) with W ~ MP(c) free from D ~ ν — exact rationals.
TEST(LimitMoments, MarchenkoPasturTimesTwoPointLaw) {
  const Rational half(BigInt(1), BigInt(2));
  const auto a = moments_of({FreeVariable::marchenko_pastur(half),
                             FreeVariable::atoms({{Rational(1), half}, {Rational(3), half}})},
                            "w d", {"w", "d"}, 6);
  EXPECT_EQ(a, (std::vector<std::string>{"1", "2", "7", "31", "154", "819", "18237/4"}));
  const auto b = moments_of({FreeVariable::marchenko_pastur(Rational(1)),
                             FreeVariable::atoms({{Rational(0), half}, {Rational(1), half}})},
                            "w d", {"w", "d"}, 6);
  EXPECT_EQ(b, (std::vector<std::string>{"1", "1/2", "3/4", "11/8", "45/16", "197/32", "903/64"}));
}

// ref §1.8 (extra): s1² + s1 s2 + s2 s1 has moments 1, 1, 4, 14, 60, 267, 1254.
TEST(LimitMoments, MixedQuadratic) {
  const auto m = moments_of({FreeVariable::semicircular(), FreeVariable::semicircular()},
                            "s1 s1 + s1 s2 + s2 s1", {"s1", "s2"}, 6);
  EXPECT_EQ(m, (std::vector<std::string>{"1", "1", "4", "14", "60", "267", "1254"}));
}

TEST(LimitMoments, DoublesAndCoefficients) {
  FreeMomentEngine engine({FreeVariable::semicircular(), FreeVariable::semicircular()});
  // ½(s1 s2 + s2 s1): every moment of order k scales by 2^{−k}: m_4 = 10/16 = 5/8.
  const auto m = engine.moments(fa::parse_polynomial("1/2 s1 s2 + 1/2 s2 s1", {"s1", "s2"}), 4);
  EXPECT_EQ(m[4].text, "5/8");
  EXPECT_DOUBLE_EQ(m[4].value, 0.625);
  // s1 − 1: τ((s − 1)^2) = 1 + 1 = 2.
  EXPECT_EQ(engine.moments(fa::parse_polynomial("s1 - 1", {"s1", "s2"}), 2)[2].text, "2");
  EXPECT_THROW(fa::parse_polynomial("s1 x", {"s1", "s2"}), freegap::InputError);
  EXPECT_THROW(engine.trace(fa::Word{{5, false}}), freegap::InputError);
}

TEST(LimitMoments, WordCapIsEnforced) {
  FreeMomentEngine engine({FreeVariable::semicircular(), FreeVariable::semicircular()},
                          fa::EngineOptions{100});
  EXPECT_THROW(engine.moments(fa::parse_polynomial("s1 + s2", {"s1", "s2"}), 8),
               freegap::InputError);
}

TEST(LimitMoments, VariablesForDeclaredMatrices) {
  freegap::declarations::MatrixSpec w;
  w.name = "W";
  w.kind = freegap::declarations::Kind::wishart_complex;
  w.ratio = 0.5;
  EXPECT_EQ(fa::free_variable_for(w).moment(2).to_string(), "3/2");  // ref §1.2
  freegap::declarations::MatrixSpec u;
  u.kind = freegap::declarations::Kind::haar_orthogonal;
  EXPECT_EQ(fa::free_variable_for(u).kind(), fa::VariableKind::haar_unitary);
  freegap::declarations::MatrixSpec b;
  b.kind = freegap::declarations::Kind::diagonal;
  b.diagonal.atoms = {{-1.0, 0.5}, {1.0, 0.5}};
  EXPECT_EQ(fa::free_variable_for(b).cumulant(4), Rational(-1));  // ref §1.3
  freegap::declarations::MatrixSpec g;
  g.name = "G";
  g.kind = freegap::declarations::Kind::ginibre_complex;
  g.ratio = 0.5;
  EXPECT_THROW(fa::free_variable_for(g), freegap::InputError);
}

namespace {

freegap::declarations::MatrixSpec declared(const std::string& name, freegap::declarations::Kind kind) {
  freegap::declarations::MatrixSpec s;
  s.name = name;
  s.kind = kind;
  return s;
}

// Limit moments straight from a job's expression text and declarations.
// Sources: anticommutator of free semicirculars 2, 10, 66, 498 (ref §1.8, computed there by
// Schwinger–Dyson word counting; Nica & Speicher 1998 for the law); A B A with B = ±1 Bernoulli:
// 1, 3, 12, 55 (ref §1.6); U1 + U1^* + U2 + U2^*: Kesten–McKay d = 2, 4, 28, 232 (Kesten
// 1959, McKay 1981, from memory; ref §1.4).
TEST(LimitMomentsOfExpressions, FromExpressionText) {
  using freegap::declarations::Kind;
  auto even = [](const std::vector<fa::ExactValue>& m) {
    std::vector<std::string> out;
    for (std::size_t k = 2; k < m.size(); k += 2) out.push_back(m[k].text);
    return out;
  };
  const freegap::expr::Expression anti("X1 X2 + X2 X1",
                                       {declared("X1", Kind::gue), declared("X2", Kind::gue)});
  EXPECT_EQ(even(fa::limit_moments(anti, 8)), (std::vector<std::string>{"2", "10", "66", "498"}));
  auto b = declared("B", Kind::diagonal);
  b.diagonal.atoms = {{1.0, 0.5}, {-1.0, 0.5}};
  const freegap::expr::Expression aba("A B A", {declared("A", Kind::gue), b});
  EXPECT_EQ(even(fa::limit_moments(aba, 8)), (std::vector<std::string>{"1", "3", "12", "55"}));
  const freegap::expr::Expression km(
      "U1 + U1^* + U2 + U2^*", {declared("U1", Kind::haar_unitary), declared("U2", Kind::haar_unitary)});
  EXPECT_EQ(even(fa::limit_moments(km, 6)), (std::vector<std::string>{"4", "28", "232"}));
  const auto odd = fa::limit_moments(km, 5);
  EXPECT_EQ(odd[1].text, "0");
  EXPECT_EQ(odd[3].text, "0");
}

// The imaginary unit in the exact moments: coefficients in ℚ(i). The commutator i(s1 s2 − s2 s1)
// of free semicirculars has the law of their anticommutator (ref §1.8; Nica & Speicher 1998), so
// its even moments are 2, 10, 66, 498 as above; by hand, τ(c²) = −τ((s1 s2 − s2 s1)²)
// = −(0 − 1 − 1 + 0) = 2. Odd moments vanish.
TEST(LimitMomentsOfExpressions, ImaginaryUnitCoefficients) {
  using freegap::declarations::Kind;
  const std::vector<freegap::declarations::MatrixSpec> d = {declared("X1", Kind::gue),
                                                            declared("X2", Kind::gue)};
  const auto m = fa::limit_moments(freegap::expr::Expression("i (X1 X2 - X2 X1)", d), 8);
  std::vector<std::string> text;
  for (const auto& v : m) text.push_back(v.text);
  EXPECT_EQ(text, (std::vector<std::string>{"1", "0", "2", "0", "10", "0", "66", "0", "498"}));
  // P = (1 + 2i) X1 X2 + (1 − 2i) X2 X1, by hand: τ(P²) = |1 + 2i|²·(τ(s1 s2 s2 s1) +
  // τ(s2 s1 s1 s2)) + (1 + 2i)²·τ(s1 s2 s1 s2) + (1 − 2i)²·τ(s2 s1 s2 s1) = 5·2 + 0 = 10.
  const auto p = fa::limit_moments(
      freegap::expr::Expression("(1 + 2 i) X1 X2 + (1 - 2 i) X2 X1", d), 2);
  EXPECT_EQ(p[2].text, "10");
  // A polynomial that is not self-adjoint has a complex trace: refused, not truncated.
  fa::FreeMomentEngine engine({fa::FreeVariable::semicircular(), fa::FreeVariable::semicircular()});
  const fa::Polynomial ix{fa::Term{fa::ComplexRational(fa::Rational(0), fa::Rational(1)),
                                   fa::Word{{0, false}, {0, false}}}};
  EXPECT_THROW(engine.trace(ix), freegap::InputError);
  EXPECT_EQ(engine.adjoint(ix)[0].coefficient, fa::ComplexRational(fa::Rational(0), fa::Rational(-1)));
}

}  // namespace
