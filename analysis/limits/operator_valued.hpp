// Private: the M_n(ℂ)-valued Cauchy transform G(β) = E[(β − Σ_i b_i x_i)^{−1}] of a pencil in free
// variables (not installed; used by polynomial_limit.cpp and its tests through the public API).
#pragma once

#include <Eigen/Core>
#include <Eigen/Eigenvalues>
#include <algorithm>
#include <complex>
#include <vector>

#include "freegap/analysis/limits/polynomial_limit.hpp"

namespace freegap::analysis {

class OperatorValuedSolver {
 public:
  using cd = std::complex<double>;
  using Matrix = Eigen::MatrixXcd;

  /// The unknowns of the fixed point: {G} when every variable is semicircular, otherwise the
  /// subordination functions {ω_1, …, ω_m} of the m other variables.
  struct State {
    std::vector<Matrix> unknowns;
  };

  OperatorValuedSolver(const Pencil& pencil, const std::vector<FreeLetter>& letters);

  int size() const { return n_; }
  /// Complex unknowns of the fixed point (n² per matrix unknown).
  long long unknowns() const {
    return static_cast<long long>(n_) * n_ *
           (general_.empty() ? 1 : static_cast<long long>(general_.size()));
  }
  /// Whether every letter is semicircular or atomic: then the fixed point has a real solution on
  /// the real axis outside the support (an atomic letter's Cauchy transform has poles there, no
  /// cut), which find_edge continues. A letter with a continuous law is evaluated at the
  /// eigenvalues of its subordination function, which need not stay off the law's support
  /// (measured: Newton found no real solution for two Wishart letters even at the norm bound).
  bool real_axis_solvable() const {
    return std::all_of(general_.begin(), general_.end(),
                       [](const General& g) { return !g.atoms.empty(); });
  }
  /// β = Λ_ε(z) − b_0, Λ_ε(z) = diag(z, iε, …, iε) (Belinschi, Mai & Speicher 2017).
  Matrix beta(cd z, double epsilon) const;
  /// A starting state for β with Im β > 0: G = β^{−1}, ω_j = β.
  State start(const Matrix& beta) const;
  /// G of a state.
  Matrix cauchy(const Matrix& beta, const State& state) const;
  /// Averaged fixed-point iteration (HRS for the semicircular part, Gauss–Seidel sweeps over the
  /// subordination functions); true when max|ΔG| < tol (1 + max|G|) within max_steps.
  bool average(const Matrix& beta, State& state, int max_steps, double tol, int& steps) const;
  /// Newton with the analytic Jacobian (reused while it contracts); true when the step is below
  /// tol (1 + max|unknowns|). The state is unchanged on failure.
  bool newton(const Matrix& beta, State& state, int max_steps, double tol, int& steps) const;

 private:
  // G_{b_j x_j}(ω) = ∫ (ω − t b_j)^{−1} dμ_j(t); with `derivative`, also the n² × n² matrix of
  // its derivative Δ ↦ −∫ (ω − t b_j)^{−1} Δ (ω − t b_j)^{−1} dμ_j(t) on column-major vec.
  Matrix letter_cauchy(int j, const Matrix& omega, Matrix* derivative = nullptr) const;
  // Newton's Jacobian at the packed state y when some letter is not semicircular.
  void general_jacobian(const Eigen::VectorXcd& y, Matrix& J) const;
  Matrix eta(const Matrix& g) const;
  Eigen::VectorXcd residual(const Matrix& beta, const Eigen::VectorXcd& y) const;
  Eigen::VectorXcd pack(const State& s) const;
  State unpack(const Eigen::VectorXcd& y) const;

  struct General {
    int letter = 0;
    Matrix b;
    std::vector<Atom> atoms;
    LawPtr law;
    Matrix range;           // E (n×r): eigenvectors of b with non-zero eigenvalues
    Eigen::VectorXd eigen;  // s (r)
    std::vector<double> moments;
    double radius = 0.0;
  };
  int n_ = 0;
  std::vector<Matrix> semicircular_;  // σ_i b_i
  std::vector<General> general_;
  Matrix constant_;
};

}  // namespace freegap::analysis
