// Samplers against exact finite-N facts from outside the project. Stochastic checks use fixed
// seeds and tolerances of a stated number of standard errors of a stated sample size.
// Check values: docs/check-values.md (cited as "ref §x.y"), which gives each one's source.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <complex>
#include <cstdio>
#include <fstream>
#include <numbers>
#include <string>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/rng.hpp"
#include "stat_helpers.hpp"

namespace {

using namespace freegap::ensembles;
namespace linalg = freegap::linalg;
using freegap::testing::mean_se;
using freegap::testing::MeanSe;

constexpr std::uint64_t kSeed = 20261202;

MatrixSpec spec_of(const std::string& name, Kind kind, double ratio = 1.0,
                   HaarMethod haar = HaarMethod::qr) {
  MatrixSpec s;
  s.name = name;
  s.kind = kind;
  s.ratio = ratio;
  s.haar = haar;
  return s;
}

// Spectrum of a self-adjoint sample (dense real or complex).
Eigen::VectorXd spectrum(Sample s) {
  if (s.storage == Sample::Storage::complex_dense) return linalg::eigenvalues(s.complex);
  return linalg::eigenvalues(s.real);
}

// Per-trial normalised moments tr X^k = (1/N) Σ λ^k for k = 1..kmax over `trials` trials.
std::vector<MeanSe> moments(const MatrixSpec& spec, Eigen::Index n, int trials, int kmax) {
  Sampler sampler(spec);
  std::vector<std::vector<double>> per_k(kmax + 1, std::vector<double>(trials));
  for (int t = 0; t < trials; ++t) {
    const Eigen::VectorXd lambda = spectrum(sampler.draw(n, kSeed, t));
    for (int k = 1; k <= kmax; ++k) per_k[k][t] = lambda.array().pow(k).sum() / double(n);
  }
  std::vector<MeanSe> out(kmax + 1);
  for (int k = 1; k <= kmax; ++k) out[k] = mean_se(per_k[k]);
  return out;
}

// ---- Gaussian ensembles against exact finite-N moments ----------------------------------------

// Source: Harer & Zagier (1986), "The Euler characteristic of the moduli space of curves" —
// recursion (k+1)C_k = (4k−2)N C_{k−1} + (k−1)(2k−1)(2k−3)C_{k−2} (from memory for the exact
// form); normalised values tabulated in docs/check-values.md §2.1.
// 20000 trials at N = 5 and N = 2; tolerance 5 standard errors.
TEST(Gue, ExactFiniteNMomentsHarerZagier) {
  const auto m5 = moments(spec_of("X", Kind::gue), 5, 20000, 8);
  const double exact5[] = {0, 0, 1.0, 0, 51.0 / 25, 0, 27.0 / 5, 0, 10521.0 / 625};
  for (int k = 1; k <= 8; ++k) EXPECT_NEAR(m5[k].mean, exact5[k], 5 * m5[k].se) << "N=5 k=" << k;
  const auto m2 = moments(spec_of("X", Kind::gue), 2, 20000, 6);
  const double exact2[] = {0, 0, 1.0, 0, 9.0 / 4, 0, 15.0 / 2};
  for (int k = 1; k <= 6; ++k) EXPECT_NEAR(m2[k].mean, exact2[k], 5 * m2[k].se) << "N=2 k=" << k;
}

// Source: exact GOE moments with diagonal variance 2 (Wick rule E H_ab H_cd = δ_ad δ_bc + δ_ac δ_bd;
// E Tr H^4 = 2N^3 + 5N^2 + 5N, Goulden & Jackson 1997, from memory; recursion of Ledoux 2009,
// "A recursion formula for the moments of the Gaussian orthogonal ensemble"); table in
// docs/check-values.md §2.2. 20000 trials, 5 standard errors.
TEST(Goe, ExactFiniteNMoments) {
  const auto m5 = moments(spec_of("X", Kind::goe), 5, 20000, 6);
  const double exact5[] = {0, 0, 6.0 / 5, 0, 16.0 / 5, 0, 1476.0 / 125};
  for (int k = 1; k <= 6; ++k) EXPECT_NEAR(m5[k].mean, exact5[k], 5 * m5[k].se) << "N=5 k=" << k;
  const auto m2 = moments(spec_of("X", Kind::goe), 2, 20000, 6);
  const double exact2[] = {0, 0, 3.0 / 2, 0, 23.0 / 4, 0, 273.0 / 8};
  for (int k = 1; k <= 6; ++k) EXPECT_NEAR(m2[k].mean, exact2[k], 5 * m2[k].se) << "N=2 k=" << k;
}

// Wigner matrix with ±1 off-diagonal entries and zero diagonal: tr X^2 = (N−1)/N for every sample,
// and E tr X^4 = (N−1)(2N−3)/N^2 (derived here by counting closed walks of length 4 whose edges are
// each used twice; elementary). 20000 trials at N = 5, 5 standard errors.
TEST(WignerRademacher, ExactMoments) {
  const auto m = moments(spec_of("X", Kind::wigner_rademacher), 5, 20000, 4);
  EXPECT_NEAR(m[2].mean, 4.0 / 5, 1e-12);
  EXPECT_LT(m[2].se, 1e-12);
  EXPECT_NEAR(m[4].mean, 28.0 / 25, 5 * m[4].se);
  EXPECT_NEAR(m[1].mean, 0.0, 1e-12);  // zero diagonal: the trace vanishes up to rounding
}

// Source: exact Wishart moments E Tr (XX*)^k (complex: Hanlon, Stanley & Stembridge 1992, from
// memory), normalised (1/N) E Tr (XX*/M)^k at c = 1/2 in docs/check-values.md
// §2.3: complex N=5: 1, 3/2, 69/25, 57/10; real N=5: 1, 8/5, 81/25, 189/25. 20000 trials, 5 SE.
TEST(Wishart, ExactFiniteNMoments) {
  const auto mc = moments(spec_of("W", Kind::wishart_complex, 0.5), 5, 20000, 4);
  const double exact_c[] = {0, 1.0, 3.0 / 2, 69.0 / 25, 57.0 / 10};
  for (int k = 1; k <= 4; ++k) EXPECT_NEAR(mc[k].mean, exact_c[k], 5 * mc[k].se) << "complex k=" << k;
  const auto mr = moments(spec_of("W", Kind::wishart_real, 0.5), 5, 20000, 4);
  const double exact_r[] = {0, 1.0, 8.0 / 5, 81.0 / 25, 189.0 / 25};
  for (int k = 1; k <= 4; ++k) EXPECT_NEAR(mr[k].mean, exact_r[k], 5 * mr[k].se) << "real k=" << k;
}

// Source: square Ginibre (1/N) E Tr (GG*)^k with G = Z/√N: complex 1; 2; 5 + 1/N^2; real
// 1; 2 + 1/N; 5 + 6/N + 4/N^2 (docs/check-values.md §2.3, computed
// independently there). Through singular values: Tr (GG*)^k = Σ s^{2k}. 20000 trials, N = 4, 5 SE.
TEST(Ginibre, ExactFiniteNMomentsOfGGStar) {
  const int n = 4, trials = 20000;
  for (Kind kind : {Kind::ginibre_complex, Kind::ginibre_real}) {
    Sampler sampler(spec_of("G", kind));
    std::vector<std::vector<double>> m(4, std::vector<double>(trials));
    for (int t = 0; t < trials; ++t) {
      Sample s = sampler.draw(n, kSeed, t);
      const Eigen::VectorXd sv = s.storage == Sample::Storage::complex_dense
                                     ? linalg::singular_values(s.complex)
                                     : linalg::singular_values(s.real);
      for (int k = 1; k <= 3; ++k) m[k][t] = sv.array().pow(2 * k).sum() / n;
    }
    const double nn = n;
    const bool complex = kind == Kind::ginibre_complex;
    const double exact[] = {0, 1.0, complex ? 2.0 : 2.0 + 1 / nn,
                            complex ? 5.0 + 1 / (nn * nn) : 5.0 + 6 / nn + 4 / (nn * nn)};
    for (int k = 1; k <= 3; ++k) {
      const auto ms = mean_se(m[k]);
      EXPECT_NEAR(ms.mean, exact[k], 5 * ms.se) << kind_name(kind) << " k=" << k;
    }
  }
}

TEST(Ginibre, RectangularShapeAndNormalisation) {
  Sampler sampler(spec_of("G", Kind::ginibre_complex, 0.5));
  const Sample s = sampler.draw(10, kSeed, 0);
  EXPECT_EQ(s.rows(), 10);
  EXPECT_EQ(s.cols(), 20);
  EXPECT_EQ(shape(sampler.spec(), 10).cols, 20);
}

// ---- Haar unitary and orthogonal, both samplers ------------------------------------------------

struct HaarStats {
  std::vector<std::vector<double>> abs_trace_sq;  // |Tr U^k|^2, k = 1..5
  std::vector<double> u11_sq, u11_4;
  std::vector<double> one_angle;  // one eigenangle per matrix, index chosen independently of U
  double worst_unitarity = 0.0;
};

HaarStats haar_stats(HaarMethod method, Eigen::Index n, int trials) {
  Sampler sampler(spec_of("U", Kind::haar_unitary, 1.0, method));
  freegap::rng::Stream pick({kSeed, "pick an eigenvalue", static_cast<std::uint64_t>(n), 0});
  HaarStats st;
  st.abs_trace_sq.assign(6, std::vector<double>(trials));
  st.u11_sq.resize(trials);
  st.u11_4.resize(trials);
  st.one_angle.resize(trials);
  for (int t = 0; t < trials; ++t) {
    Sample s = sampler.draw(n, kSeed, t);
    const Eigen::MatrixXcd& u = s.complex;
    st.worst_unitarity = std::max(
        st.worst_unitarity,
        (u.adjoint() * u - Eigen::MatrixXcd::Identity(n, n)).cwiseAbs().maxCoeff());
    const double a = std::norm(u(0, 0));
    st.u11_sq[t] = a;
    st.u11_4[t] = a * a;
    Eigen::MatrixXcd copy = u;
    const Eigen::VectorXcd lambda = linalg::eigenvalues_general(copy);
    for (int k = 1; k <= 5; ++k) st.abs_trace_sq[k][t] = std::norm(lambda.array().pow(k).sum());
    const auto j = static_cast<Eigen::Index>(pick.uniform() * static_cast<double>(n));
    st.one_angle[t] = std::arg(lambda(j));
  }
  return st;
}

class HaarUnitary : public ::testing::TestWithParam<HaarMethod> {};

// Sources: E|Tr U^k|^2 = min(k, N) (Diaconis & Shahshahani 1994, "On the eigenvalues of random
// matrices"; Rains 1997 — from memory, recomputed exactly in ref §2.5);
// E|U_11|^2 = 1/N, E|U_11|^4 = 2/(N(N+1)) (Weingarten calculus, Collins & Śniady 2006, from memory;
// ref §2.5); expected eigenangle law exactly uniform for every N (Meckes & Meckes 2017).
// 6000 trials at N = 3 and N = 6; tolerance 5 standard errors; KS at level 0.001.
TEST_P(HaarUnitary, DiaconisShahshahaniEntriesAndAngles) {
  for (Eigen::Index n : {3, 6}) {
    const int trials = 6000;
    const HaarStats st = haar_stats(GetParam(), n, trials);
    for (int k = 1; k <= 5; ++k) {
      const auto m = mean_se(st.abs_trace_sq[k]);
      EXPECT_NEAR(m.mean, std::min<double>(k, n), 5 * m.se) << "N=" << n << " k=" << k;
    }
    const auto m2 = mean_se(st.u11_sq), m4 = mean_se(st.u11_4);
    EXPECT_NEAR(m2.mean, 1.0 / n, 5 * m2.se);
    EXPECT_NEAR(m4.mean, 2.0 / (n * (n + 1.0)), 5 * m4.se);
    EXPECT_LT(st.worst_unitarity, 1e-12);
    const double d = freegap::testing::ks_statistic(st.one_angle, [](double th) {
      return (th + std::numbers::pi) / (2 * std::numbers::pi);
    });
    EXPECT_LT(d, freegap::testing::ks_critical_001(trials)) << "N=" << n;
  }
}

INSTANTIATE_TEST_SUITE_P(BothSamplers, HaarUnitary,
                         ::testing::Values(HaarMethod::qr, HaarMethod::polar),
                         [](const ::testing::TestParamInfo<HaarMethod>& info) {
                           return info.param == HaarMethod::qr ? "qr" : "polar";
                         });

// Both samplers draw the same law: two-sample KS on |Tr U|^2 and |U_11|^2 (4000 trials each, N = 4,
// level 0.001; common practice).
TEST(HaarUnitary, QrAndPolarAgreeInLaw) {
  const HaarStats a = haar_stats(HaarMethod::qr, 4, 4000), b = haar_stats(HaarMethod::polar, 4, 4000);
  const double crit = freegap::testing::ks_two_sample_critical_001(4000, 4000);
  EXPECT_LT(freegap::testing::ks_two_sample(a.abs_trace_sq[1], b.abs_trace_sq[1]), crit);
  EXPECT_LT(freegap::testing::ks_two_sample(a.u11_sq, b.u11_sq), crit);
}

TEST(HaarUnitary, UnitaryToRoundingAtModerateN) {
  for (HaarMethod method : {HaarMethod::qr, HaarMethod::polar}) {
    Sampler sampler(spec_of("U", Kind::haar_unitary, 1.0, method));
    const Sample s = sampler.draw(300, kSeed, 1);
    const Eigen::MatrixXcd e = s.complex.adjoint() * s.complex - Eigen::MatrixXcd::Identity(300, 300);
    EXPECT_LT(e.cwiseAbs().maxCoeff(), 1e-12);
  }
}

// Sources: E Tr O^2 = 1 for every N ≥ 1 (∫_{O(N)} s_λ = 1 iff λ has even parts; Macdonald, from
// memory; ref §2.6) and E O_11^4 = 3/(N(N+2)) (orthogonal Weingarten calculus, Collins &
// Śniady 2006, from memory; ref §2.6). 8000 trials at N = 3 and 5; 5 standard errors.
TEST(HaarOrthogonal, TraceAndEntryMomentsBothSamplers) {
  for (HaarMethod method : {HaarMethod::qr, HaarMethod::polar}) {
    for (Eigen::Index n : {3, 5}) {
      Sampler sampler(spec_of("O", Kind::haar_orthogonal, 1.0, method));
      const int trials = 8000;
      std::vector<double> tr2(trials), o11_4(trials);
      double worst = 0;
      for (int t = 0; t < trials; ++t) {
        const Sample s = sampler.draw(n, kSeed, t);
        tr2[t] = (s.real * s.real).trace();
        o11_4[t] = std::pow(s.real(0, 0), 4);
        worst = std::max(worst, (s.real.transpose() * s.real - Eigen::MatrixXd::Identity(n, n))
                                    .cwiseAbs()
                                    .maxCoeff());
      }
      const auto a = mean_se(tr2), b = mean_se(o11_4);
      EXPECT_NEAR(a.mean, 1.0, 5 * a.se) << "N=" << n;
      EXPECT_NEAR(b.mean, 3.0 / (n * (n + 2.0)), 5 * b.se) << "N=" << n;
      EXPECT_LT(worst, 1e-12);
    }
  }
}

// The polar sampler at N = 40, where linalg::polar_factor always takes its Newton path (a
// Ginibre κ of about 2.4·N is far above the √(8N) ≈ 18 it would skip Newton at), while N = 3–6
// above mostly skip it. Per trial: |U_11|², the first column's mean of |U_i1|⁴, |Tr U|².
// Sources: E|U_11|² = 1/N, E|U_11|⁴ = 2/(N(N+1)) (unitary) and E O_11⁴ = 3/(N(N+2)) (orthogonal)
// by Weingarten calculus (Collins & Śniady 2006; from memory, ref §2.5–2.6); E|Tr U|² = 1 and
// E (Tr O)² = 1 for N ≥ 2 (Diaconis & Shahshahani 1994; from memory). 3000 trials each,
// tolerance 5 standard errors of the per-trial values.
TEST(HaarPolar, EntryAndTraceMomentsWhereNewtonRuns) {
  const Eigen::Index n = 40;
  const int trials = 3000;
  const double dn = static_cast<double>(n);
  for (Kind kind : {Kind::haar_unitary, Kind::haar_orthogonal}) {
    const bool unitary = kind == Kind::haar_unitary;
    Sampler sampler(spec_of("U", kind, 1.0, HaarMethod::polar));
    std::vector<double> sq(trials), fourth(trials), trace_sq(trials);
    for (int t = 0; t < trials; ++t) {
      const Sample s = sampler.draw(n, kSeed, t);
      const Eigen::MatrixXcd u = unitary ? s.complex : s.real.cast<std::complex<double>>();
      sq[t] = std::norm(u(0, 0));
      fourth[t] = u.col(0).cwiseAbs2().array().square().mean();
      trace_sq[t] = std::norm(u.trace());
    }
    const auto a = mean_se(sq), b = mean_se(fourth), c = mean_se(trace_sq);
    const std::string what = unitary ? "unitary" : "orthogonal";
    EXPECT_NEAR(a.mean, 1.0 / dn, 5 * a.se) << what;
    EXPECT_NEAR(b.mean, unitary ? 2.0 / (dn * (dn + 1)) : 3.0 / (dn * (dn + 2)), 5 * b.se) << what;
    EXPECT_NEAR(c.mean, 1.0, 5 * c.se) << what;
  }
}

// ---- deterministic diagonals --------------------------------------------------------------------

TEST(Diagonal, LargestRemainderRounding) {
  // The documented rule: floor(N·w_i), then one more each to the largest fractional parts, ties to
  // the earlier atom.
  const std::vector<Atom> thirds = {{1, 1.0 / 3}, {2, 1.0 / 3}, {3, 1.0 / 3}};
  EXPECT_EQ(atom_counts(thirds, 10), (std::vector<Eigen::Index>{4, 3, 3}));
  EXPECT_EQ(atom_counts(thirds, 11), (std::vector<Eigen::Index>{4, 4, 3}));
  const std::vector<Atom> halves = {{1, 0.5}, {-1, 0.5}};
  EXPECT_EQ(atom_counts(halves, 7), (std::vector<Eigen::Index>{4, 3}));
  EXPECT_EQ(atom_counts(halves, 8), (std::vector<Eigen::Index>{4, 4}));
  // 0.3·10 = 3.0000000000000004 in floating point: still exactly 3 and 7.
  EXPECT_EQ(atom_counts({{0, 0.3}, {1, 0.7}}, 10), (std::vector<Eigen::Index>{3, 7}));
  EXPECT_EQ(atom_counts({{0, 0.1}, {1, 0.25}, {2, 0.65}}, 3), (std::vector<Eigen::Index>{0, 1, 2}));
}

MatrixSpec diagonal_spec(DiagonalLaw law) {
  MatrixSpec s;
  s.name = std::string(1, 'D');  // not a literal: GCC 12 -Wrestrict false positive
  s.kind = Kind::diagonal;
  s.diagonal = std::move(law);
  return s;
}

TEST(Diagonal, AtomsInOrderAndNoRandomness) {
  DiagonalLaw law;
  law.atoms = {{1.0, 0.5}, {-1.0, 0.5}};
  Sampler sampler(diagonal_spec(law));
  const Sample a = sampler.draw(6, 1, 0), b = sampler.draw(6, 2, 99);
  EXPECT_EQ(a.storage, Sample::Storage::real_diagonal);
  EXPECT_EQ(a.diagonal, b.diagonal);
  Eigen::VectorXd expected(6);
  expected << 1, 1, 1, -1, -1, -1;
  EXPECT_EQ(a.diagonal, expected);
}

MatrixSpec toeplitz_spec(std::vector<double> coefficients, bool circulant) {
  MatrixSpec s;
  s.name = std::string(1, 'T');
  s.kind = Kind::toeplitz;
  s.coefficients = std::move(coefficients);
  s.circulant = circulant;
  return s;
}

// Banded Toeplitz entries T_ij = c_|i−j|, no randomness; circulant wrap-around, with collisions
// added when the band is wider than N.
TEST(Toeplitz, EntriesBandedAndCirculant) {
  Sampler banded(toeplitz_spec({4.0, 1.0, 0.5}, false));
  const Sample a = banded.draw(5, 1, 0), b = banded.draw(5, 7, 3);
  ASSERT_EQ(a.storage, Sample::Storage::real_dense);
  EXPECT_EQ(a.real, b.real);
  for (Index i = 0; i < 5; ++i) {
    for (Index j = 0; j < 5; ++j) {
      const Index d = std::abs(i - j);
      EXPECT_EQ(a.real(i, j), d == 0 ? 4.0 : d == 1 ? 1.0 : d == 2 ? 0.5 : 0.0) << i << "," << j;
    }
  }
  Sampler circulant(toeplitz_spec({4.0, 1.0, 0.5}, true));
  const Sample c = circulant.draw(5, 1, 0);
  EXPECT_EQ(c.real(0, 4), 1.0);  // i − j = −4 ≡ 1 (mod 5)
  EXPECT_EQ(c.real(0, 3), 0.5);  // −3 ≡ 2
  EXPECT_EQ(c.real(4, 0), 1.0);
  // N = 3 < band width 5: m = ±1 and ∓2 fall on the same offsets, c_1 + c_2 each.
  const Sample small = circulant.draw(3, 1, 0);
  EXPECT_EQ(small.real(1, 0), 1.5);
  EXPECT_EQ(small.real(0, 1), 1.5);
  EXPECT_EQ(small.real(0, 0), 4.0);
}

// A matrix from a file (ensemble "file"): the sampler's sample is the file's matrix, made
// self-adjoint as (A + A^*)/2, repeated on the block diagonal when one file serves every size.
std::string write_text(const std::string& name, const std::string& text) {
  const std::string path = ::testing::TempDir() + name;
  std::ofstream(path, std::ios::binary) << text;
  return path;
}

MatrixSpec file_spec(const std::string& path, bool complex, Index reference) {
  MatrixSpec spec;
  spec.name = "F";
  spec.kind = Kind::file_matrix;
  spec.file.path = path;
  spec.file.complex = complex;
  spec.file.reference_size = reference;
  return spec;
}

TEST(FileMatrix, RepeatedOnTheBlockDiagonal) {
  // Exactly symmetric up to 1e-13 (within the 1e-12 rule): A(2,1) = 0.5 + 1e-13, A(1,2) = 0.5.
  const std::string path = write_text("freegap_file_matrix_a.mtx",
                                      "%%MatrixMarket matrix array real general\n2 2\n"
                                      "2\n0.5000000000001\n0.5\n-1\n");
  Sampler sampler(file_spec(path, false, 6));
  const Sample s = sampler.draw(6, 1, 0);
  ASSERT_EQ(s.storage, Sample::Storage::real_dense);
  ASSERT_EQ(s.real.rows(), 6);
  const double off = 0.5 * (0.5000000000001 + 0.5);
  for (Index b = 0; b < 6; b += 2) {
    EXPECT_EQ(s.real(b, b), 2.0);
    EXPECT_EQ(s.real(b + 1, b + 1), -1.0);
    EXPECT_EQ(s.real(b + 1, b), off);
    EXPECT_EQ(s.real(b, b + 1), off);  // the mean of the two: exactly symmetric
  }
  EXPECT_EQ(s.real.cwiseAbs().sum(), 3.0 * (3.0 + 2.0 * off));  // nothing off the blocks
  EXPECT_EQ(sampler.draw(6, 9, 4).real, s.real);                 // deterministic
  EXPECT_FALSE(is_random(Kind::file_matrix));
  try {
    (void)sampler.draw(5, 1, 0);
    ADD_FAILURE() << "size 5 is not a multiple of 2";
  } catch (const freegap::InputError& e) {
    EXPECT_NE(std::string(e.what()).find("multiples of 2"), std::string::npos) << e.what();
  }
}

TEST(FileMatrix, ComplexHermitianPerSize) {
  // A Hermitian 2 × 2 in Matrix Market's hermitian storage (the lower triangle, conjugated above).
  write_text("freegap_file_matrix_h_2.mtx",
             "%%MatrixMarket matrix coordinate complex hermitian\n2 2 3\n1 1 1 0\n2 1 0.5 -2\n"
             "2 2 3 0\n");
  MatrixSpec spec = file_spec(::testing::TempDir() + "freegap_file_matrix_h_{N}.mtx", true, 2);
  EXPECT_FALSE(is_real(spec));
  Sampler sampler(spec);
  const Sample s = sampler.draw(2, 1, 0);
  ASSERT_EQ(s.storage, Sample::Storage::complex_dense);
  EXPECT_EQ(s.complex(1, 0), std::complex<double>(0.5, -2.0));
  EXPECT_EQ(s.complex(0, 1), std::complex<double>(0.5, 2.0));
  EXPECT_EQ(s.complex(1, 1), std::complex<double>(3.0, 0.0));
  // The file says complex where the declaration says real: refused, naming both.
  spec.file.complex = false;
  try {
    (void)Sampler(spec).draw(2, 1, 0);
    ADD_FAILURE() << "no error";
  } catch (const freegap::InputError& e) {
    EXPECT_NE(std::string(e.what()).find("holds complex entries"), std::string::npos) << e.what();
  }
}

// Spectra known in closed form (Gray 2006, "Toeplitz and circulant matrices: a review", §3 and
// §4.1): the tridiagonal Toeplitz matrix with ones beside the diagonal has eigenvalues
// 2 cos(πj/(N + 1)), j = 1..N; a circulant matrix's eigenvalues are its symbol at the N-th roots
// of unity, f(2πj/N) = c_0 + 2 Σ c_m cos(2πjm/N).
TEST(Toeplitz, SpectraInClosedForm) {
  const Index n = 40;
  Sampler tri(toeplitz_spec({0.0, 1.0}, false));
  Eigen::MatrixXd t = tri.draw(n, 1, 0).real;
  Eigen::VectorXd got = linalg::eigenvalues(t);
  std::vector<double> want;
  for (Index j = 1; j <= n; ++j) want.push_back(2.0 * std::cos(std::numbers::pi * j / (n + 1.0)));
  std::sort(want.begin(), want.end());
  for (Index j = 0; j < n; ++j) EXPECT_NEAR(got(j), want[static_cast<std::size_t>(j)], 1e-13);

  const std::vector<double> c = {1.0, -0.7, 0.3, 0.2};
  Sampler circ(toeplitz_spec(c, true));
  t = circ.draw(n, 1, 0).real;
  got = linalg::eigenvalues(t);
  want.clear();
  for (Index j = 0; j < n; ++j) {
    double f = c[0];
    for (std::size_t m = 1; m < c.size(); ++m) {
      f += 2.0 * c[m] * std::cos(2.0 * std::numbers::pi * static_cast<double>(j * static_cast<Index>(m)) / n);
    }
    want.push_back(f);
  }
  std::sort(want.begin(), want.end());
  for (Index j = 0; j < n; ++j) EXPECT_NEAR(got(j), want[static_cast<std::size_t>(j)], 1e-13);
}

TEST(Toeplitz, RefusesBadCoefficients) {
  EXPECT_THROW(Sampler(toeplitz_spec({}, false)), freegap::InputError);
  EXPECT_THROW(Sampler(toeplitz_spec(std::vector<double>(18, 1.0), false)), freegap::InputError);
  EXPECT_THROW(Sampler(toeplitz_spec({1.0, std::nan("")}, false)), freegap::InputError);
}

// Midpoint quantiles: uniform on [a, b] gives a + (b − a)(k + 1/2)/N exactly; the semicircle
// quantiles satisfy F(q_k) = (k + 1/2)/N with F from the ref §1.1 closed form; the
// Marchenko–Pastur quantiles are checked against F computed by composite Simpson quadrature of the
// density √((b−x)(x−a))/(2πcx) (Marchenko & Pastur 1967; quadrature: common practice), an
// independent code path.
TEST(Diagonal, QuantileLaws) {
  DiagonalLaw uni;
  uni.kind = DiagonalLawKind::uniform;
  uni.low = -1;
  uni.high = 3;
  const auto u = Sampler(diagonal_spec(uni)).diagonal_values(4);
  EXPECT_DOUBLE_EQ(u(0), -0.5);
  EXPECT_DOUBLE_EQ(u(3), 2.5);

  DiagonalLaw sc;
  sc.kind = DiagonalLawKind::semicircle_quantiles;
  sc.variance = 4.0;  // semicircle on [−4, 4]
  const int n = 50;
  const auto q = Sampler(diagonal_spec(sc)).diagonal_values(n);
  for (int k = 0; k < n; ++k) {
    const double x = q(k) / 2.0;  // back to the standard semicircle
    const double f = 0.5 + x * std::sqrt(4 - x * x) / (4 * std::numbers::pi) +
                     std::asin(x / 2) / std::numbers::pi;
    EXPECT_NEAR(f, (k + 0.5) / n, 1e-12) << k;
  }
  EXPECT_NEAR(q(n / 2) + q(n / 2 - 1), 0.0, 1e-12);  // symmetric

  for (double c : {0.5, 2.0}) {
    DiagonalLaw mp;
    mp.kind = DiagonalLawKind::marchenko_pastur_quantiles;
    mp.ratio = c;
    const int m = 40;
    const auto v = Sampler(diagonal_spec(mp)).diagonal_values(m);
    const double a = std::pow(1 - std::sqrt(c), 2), b = std::pow(1 + std::sqrt(c), 2);
    auto density = [&](double x) {
      return x <= a || x >= b ? 0.0 : std::sqrt((b - x) * (x - a)) / (2 * std::numbers::pi * c * x);
    };
    auto cdf = [&](double x) {  // Simpson in the variable x = a + (b−a) sin^2(θ/2), θ ∈ [0, π]
      const double atom = c > 1 ? 1 - 1 / c : 0.0;
      if (x <= a) return x < 0 ? 0.0 : atom;
      const double th_max = 2 * std::asin(std::sqrt(std::min(1.0, (x - a) / (b - a))));
      const int steps = 20000;
      const double h = th_max / steps;
      double s = 0;
      for (int i = 0; i <= steps; ++i) {
        const double th = i * h;
        const double xx = a + (b - a) * std::pow(std::sin(th / 2), 2);
        const double jac = (b - a) * std::sin(th / 2) * std::cos(th / 2);
        const double w = (i == 0 || i == steps) ? 1 : (i % 2 ? 4 : 2);
        s += w * density(xx) * jac;
      }
      return atom + s * h / 3;
    };
    for (int k = 0; k < m; ++k) {
      if (c > 1 && (k + 0.5) / m <= 1 - 1 / c) {
        EXPECT_EQ(v(k), 0.0) << "atom at zero, k=" << k;
      } else {
        EXPECT_NEAR(cdf(v(k)), (k + 0.5) / m, 1e-9) << "c=" << c << " k=" << k;
      }
    }
  }
}

TEST(Diagonal, FileLawGivesTheNumbersOrTheirQuantiles) {
  const std::string path = ::testing::TempDir() + "freegap_eigs.txt";
  {
    std::ofstream out(path);
    out << "# population spectrum of a made-up study\n3 1\n2  # two\n4\n";
  }
  DiagonalLaw law;
  law.kind = DiagonalLawKind::file;
  law.path = path;
  Sampler sampler(diagonal_spec(law));
  Eigen::VectorXd four(4), eight(8), two(2);
  four << 1, 2, 3, 4;
  eight << 1, 1, 2, 2, 3, 3, 4, 4;
  two << 1, 3;  // F^(-1)(1/4) = 1, F^(-1)(3/4) = 3 (left-continuous inverse)
  EXPECT_EQ(sampler.diagonal_values(4), four);
  EXPECT_EQ(sampler.diagonal_values(8), eight);
  EXPECT_EQ(sampler.diagonal_values(2), two);
  std::remove(path.c_str());
}

TEST(Diagonal, FileLawAtomsAreTheEmpiricalLawWithRepeatsMerged) {
  // The law the analysis gives a file diagonal: each distinct number once, ascending, weight
  // count/K (here K = 6 numbers, 2 and 5 twice).
  const std::string path = ::testing::TempDir() + "freegap_levels.txt";
  {
    std::ofstream out(path);
    out << "5 2 # levels\n-1 2\n5 0.5\n";
  }
  DiagonalLaw law;
  law.kind = DiagonalLawKind::file;
  law.path = path;
  std::vector<std::size_t> counts;
  const auto atoms = freegap::ensembles::file_law_atoms(diagonal_spec(law), &counts);
  ASSERT_EQ(atoms.size(), 4u);
  const double values[] = {-1, 0.5, 2, 5};
  const std::size_t expected[] = {1, 1, 2, 2};
  for (std::size_t i = 0; i < 4; ++i) {
    EXPECT_EQ(atoms[i].value, values[i]);
    EXPECT_EQ(counts[i], expected[i]);
    EXPECT_EQ(atoms[i].weight, static_cast<double>(expected[i]) / 6.0);
  }
  std::remove(path.c_str());
}

// ---- bad input: typed errors with exact messages ------------------------------------------------

template <class F>
std::string message_of(F&& f) {
  try {
    f();
  } catch (const freegap::InputError& e) {
    return e.what();
  }
  return "(no InputError thrown)";
}

TEST(BadInput, ExactMessages) {
  EXPECT_EQ(message_of([] { parse_kind("gaussian"); }),
            "unknown ensemble 'gaussian' (known: gue, goe, wigner_rademacher, wishart_complex, "
            "wishart_real, ginibre_complex, ginibre_real, haar_unitary, haar_orthogonal, diagonal, beta_hermite, beta_laguerre, toeplitz, file, jacobi)");
  EXPECT_EQ(message_of([] { Sampler(spec_of("X", Kind::gue)).draw(0, 1, 0); }),
            "matrix 'X': size N must be positive (got 0)");
  EXPECT_EQ(message_of([] { Sampler(spec_of("X", Kind::gue)).draw(-3, 1, 0); }),
            "matrix 'X': size N must be positive (got -3)");
  EXPECT_EQ(message_of([] { Sampler(spec_of("W", Kind::wishart_complex, -0.5)); }),
            "matrix 'W': ratio c = N/M must be a positive finite number (got -0.5)");
  EXPECT_EQ(message_of([] { Sampler(spec_of("W", Kind::wishart_real, 100.0)).draw(10, 1, 0); }),
            "matrix 'W': N/ratio = 0.1 rounds to 0 columns; use a smaller ratio or a larger N");
  EXPECT_EQ(message_of([] { Sampler(spec_of("", Kind::gue)); }),
            "a matrix has an empty name; give every matrix a name");
  DiagonalLaw law;
  law.atoms = {{1, 0.5}, {-1, 0.4}};
  EXPECT_EQ(message_of([&] { Sampler(diagonal_spec(law)); }),
            "matrix 'D': atom weights sum to 0.9, not 1; rescale them");
  law.atoms = {{1, 1.2}, {-1, -0.2}};
  EXPECT_EQ(message_of([&] { Sampler(diagonal_spec(law)); }),
            "matrix 'D': atom weight must be non-negative (got -0.2 for value -1)");
  law.atoms = {};
  EXPECT_EQ(message_of([&] { Sampler(diagonal_spec(law)); }),
            "matrix 'D': the atom list is empty; give at least one value and weight");
  DiagonalLaw file;
  file.kind = DiagonalLawKind::file;
  file.path = "/nonexistent/eigs.txt";
  EXPECT_EQ(message_of([&] { Sampler(diagonal_spec(file)); }),
            "matrix 'D': cannot read eigenvalue file '/nonexistent/eigs.txt'; check the path");
  const std::string bad = ::testing::TempDir() + "freegap_bad_eigs.txt";
  {
    std::ofstream out(bad);
    out << "1 2\n3 x4\n";
  }
  file.path = bad;
  EXPECT_EQ(message_of([&] { Sampler(diagonal_spec(file)); }),
            std::string("matrix 'D': eigenvalue file '").append(bad).append(
                "' line 2: 'x4' is not a finite number"));
  // A job may name any readable file: its first word is quoted only as a short prefix of
  // printable characters (here a line of a password file with a terminal escape sequence).
  {
    std::ofstream out(bad);
    out << "root:x:0:0:\x1b[2Jroot:/root:/bin/bash\n";
  }
  EXPECT_EQ(message_of([&] { Sampler(diagonal_spec(file)); }),
            std::string("matrix 'D': eigenvalue file '")
                .append(bad)
                .append("' line 1: 'root:x:0:0:?[2Jroot:/roo...' is not a finite number"));
  std::remove(bad.c_str());
  DiagonalLaw uni;
  uni.kind = DiagonalLawKind::uniform;
  uni.low = 1;
  uni.high = 1;
  EXPECT_EQ(message_of([&] { Sampler(diagonal_spec(uni)); }),
            "matrix 'D': uniform law needs finite low < high (got low = 1, high = 1)");
}

}  // namespace
