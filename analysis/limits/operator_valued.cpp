// The M_n(ℂ)-valued Cauchy transform of a pencil in free variables: Helton, Rashidi Far & Speicher
// (2007) for the semicircular part, operator-valued subordination (Belinschi, Mai & Speicher 2017)
// for the others, polished by Newton.
#include "operator_valued.hpp"

#include <Eigen/Dense>
#include <algorithm>
#include <cmath>

#include "freegap/linalg.hpp"
#include "freegap/stop.hpp"

namespace freegap::analysis {

using cd = std::complex<double>;
using Matrix = OperatorValuedSolver::Matrix;

namespace {

bool finite(const Matrix& m) { return m.allFinite(); }

double max_abs(const Matrix& m) { return m.cwiseAbs().maxCoeff(); }

// Pencil-sized inverses (n ≤ 8) by Eigen, larger ones by LAPACK (linalg::ComplexLU). LAPACK is
// 2x faster on one thread at n = 5, but the solver calls it from several threads at once
// (solve_densities), and OpenBLAS's calls then wait on a shared lock: with Eigen here the density
// table of catalogue model 12 took 0.4 s a round on 2 threads instead of 0.7 s (2026-12-05).
Matrix inverse(const Matrix& m) {
  return m.rows() <= 8 ? Matrix(m.partialPivLu().inverse()) : linalg::inverse(m);
}

// The analytic Jacobian at G of the residual (β − η(G))G − I of semicircular letters only, into
// J (n² × n²), given A = β − η(G).
void semicircular_jacobian(const Matrix& G, const Matrix& A,
                           const std::vector<Matrix>& semicircular, int n, Matrix& J) {
  J.setZero();
  for (int c = 0; c < n; ++c) J.block(c * n, c * n, n, n) = A;
  for (const auto& b : semicircular) {
    const Matrix X = (b * G).transpose();
    for (int r1 = 0; r1 < n; ++r1) {
      for (int c1 = 0; c1 < n; ++c1) {
        if (X(r1, c1) != 0.0) J.block(r1 * n, c1 * n, n, n) -= X(r1, c1) * b;
      }
    }
  }
}

// Adds c (Xᵀ ⊗ Y) to the n² × n² matrix J: the matrix of Δ ↦ c Y Δ X on column-major vec
// (vec(Y Δ X) = (Xᵀ ⊗ Y) vec Δ).
void add_kron(Matrix& J, cd c, const Matrix& X, const Matrix& Y) {
  const Eigen::Index n = X.rows();
  for (Eigen::Index r1 = 0; r1 < n; ++r1) {
    for (Eigen::Index c1 = 0; c1 < n; ++c1) {
      const cd f = c * X(c1, r1);
      if (f != 0.0) J.block(r1 * n, c1 * n, n, n) += f * Y;
    }
  }
}

}  // namespace

OperatorValuedSolver::OperatorValuedSolver(const Pencil& pencil,
                                           const std::vector<FreeLetter>& letters)
    : n_(pencil.size), constant_(pencil.constant) {
  for (std::size_t i = 0; i < letters.size(); ++i) {
    const Matrix& b = pencil.coefficients[i];
    if (b.cwiseAbs().maxCoeff() == 0.0) continue;
    if (letters[i].semicircular) {
      semicircular_.push_back(std::sqrt(letters[i].variance) * b);
      continue;
    }
    General g;
    g.letter = static_cast<int>(i);
    g.b = b;
    g.atoms = letters[i].atoms;
    g.law = letters[i].law;
    Eigen::SelfAdjointEigenSolver<Matrix> es(b);
    const double top = es.eigenvalues().cwiseAbs().maxCoeff();
    std::vector<int> keep;
    for (int k = 0; k < n_; ++k) {
      if (std::abs(es.eigenvalues()(k)) > 1e-12 * top) keep.push_back(k);
    }
    g.range.resize(n_, static_cast<Eigen::Index>(keep.size()));
    g.eigen.resize(static_cast<Eigen::Index>(keep.size()));
    for (std::size_t k = 0; k < keep.size(); ++k) {
      g.range.col(static_cast<Eigen::Index>(k)) = es.eigenvectors().col(keep[k]);
      g.eigen(static_cast<Eigen::Index>(k)) = es.eigenvalues()(keep[k]);
    }
    const Support s = g.law->support();
    g.radius = std::max(std::abs(s.lo), std::abs(s.hi));
    g.moments = g.law->moments(40);
    general_.push_back(std::move(g));
  }
}

Matrix OperatorValuedSolver::beta(cd z, double epsilon) const {
  Matrix b = -constant_;
  b(0, 0) += z;
  for (int k = 1; k < n_; ++k) b(k, k) += cd(0.0, epsilon);
  return b;
}

Matrix OperatorValuedSolver::eta(const Matrix& g) const {
  Matrix out = Matrix::Zero(n_, n_);
  for (const auto& b : semicircular_) out.noalias() += b * g * b;
  return out;
}

Matrix OperatorValuedSolver::letter_cauchy(int j, const Matrix& omega, Matrix* derivative) const {
  const General& g = general_[j];
  const Eigen::Index nn = static_cast<Eigen::Index>(n_) * n_;
  if (derivative != nullptr) derivative->setZero(nn, nn);
  if (!g.atoms.empty()) {
    // G(ω) = Σ_a w_a R_a with R_a = (ω − a b)^{−1}; its derivative Δ ↦ −Σ_a w_a R_a Δ R_a.
    Matrix sum = Matrix::Zero(n_, n_);
    for (const Atom& a : g.atoms) {
      const Matrix R = inverse(omega - a.value * g.b);
      sum += a.weight * R;
      if (derivative != nullptr) add_kron(*derivative, -a.weight, R, R);
    }
    return sum;
  }
  // Woodbury with b = E S E^*: (ω − t b)^{−1} = A + t A E (I − t K)^{−1} S E^* A, A = ω^{−1},
  // K = S E^* A E. With K = W diag(κ) W^{−1}, ∫ t/(1 − tκ) dμ(t) = a(a G_μ(a) − 1), a = 1/κ
  // (derived here from t/(a − t) = a/(a − t) − 1), or the series Σ_{n≥1} m_n κ^{n−1} for large |a|.
  const Matrix A = inverse(omega);
  const Matrix AE = A * g.range;
  const Matrix EA = g.range.adjoint() * A;
  const Matrix K = g.eigen.cast<cd>().asDiagonal() * (g.range.adjoint() * AE);
  Eigen::ComplexEigenSolver<Matrix> es(K);
  const Matrix& W = es.eigenvectors();
  const Eigen::Index r = K.rows();
  Eigen::VectorXcd phi(r), dphi(r);  // Φ(κ_k) and Φ′(κ_k) = ∫ t²/(1 − tκ_k)² dμ(t)
  for (Eigen::Index k = 0; k < r; ++k) {
    const cd kappa = es.eigenvalues()(k);
    const cd a = 1.0 / kappa;
    if (std::abs(a) > 8.0 * g.radius + 1e-300) {
      cd sum = 0.0, dsum = 0.0, power = 1.0;  // power = κ^{n−1}
      for (std::size_t m = 1; m < g.moments.size(); ++m) {
        sum += g.moments[m] * power;
        if (m >= 2) dsum += static_cast<double>(m - 1) * g.moments[m] * power / kappa;
        power *= kappa;
        if (std::abs(power) * std::pow(g.radius, static_cast<double>(m)) < 1e-18 * std::abs(sum)) {
          break;
        }
      }
      // κ = 0 exactly (a letter's block orthogonal to ω^{−1}): Φ′(0) = m_2.
      if (kappa == 0.0 && g.moments.size() > 2) dsum = g.moments[2];
      phi(k) = sum;
      dphi(k) = dsum;
    } else {
      const bool lower = a.imag() < 0.0;
      auto [G, dG] = g.law->cauchy_with_derivative(lower ? std::conj(a) : a);
      if (lower) {
        G = std::conj(G);
        dG = std::conj(dG);
      }
      phi(k) = a * (a * G - 1.0);
      // dΦ/dκ = dΦ/da · da/dκ = (2aG + a²G′ − 1)(−a²).
      dphi(k) = -a * a * (2.0 * a * G + a * a * dG - 1.0);
    }
  }
  const Matrix P = AE * W;  // columns p_k
  const Matrix Q =
      linalg::ComplexLU(W).solve(Matrix(g.eigen.cast<cd>().asDiagonal() * EA));  // rows q_k
  const Matrix H = P * phi.asDiagonal() * Q;
  if (derivative != nullptr) {
    // (ω − t b)^{−1} = A + Σ_k φ_k(t) C_k with C_k = p_k q_k and φ_k(t) = t/(1 − tκ_k), so
    // E[R Δ R] = AΔA + HΔA + AΔH + Σ_{i,k} E[φ_i φ_k] C_i Δ C_k with H = Σ_k Φ_k C_k, and
    // E[φ_i φ_k] = (Φ_i − Φ_k)/(κ_i − κ_k) (from t²κ/(1 − tκ) = φ(t) − t), Φ′ where κ_i = κ_k.
    Matrix& L = *derivative;
    add_kron(L, -1.0, A, A);
    add_kron(L, -1.0, A, H);
    add_kron(L, -1.0, H, A);
    std::vector<Matrix> C(static_cast<std::size_t>(r));
    for (Eigen::Index k = 0; k < r; ++k) C[static_cast<std::size_t>(k)] = P.col(k) * Q.row(k);
    for (Eigen::Index i = 0; i < r; ++i) {
      for (Eigen::Index k = 0; k < r; ++k) {
        const cd ki = es.eigenvalues()(i), kk = es.eigenvalues()(k);
        const bool close = std::abs(ki - kk) <= 1e-6 * (std::abs(ki) + std::abs(kk));
        const cd psi = close ? 0.5 * (dphi(i) + dphi(k)) : (phi(i) - phi(k)) / (ki - kk);
        add_kron(L, -psi, C[static_cast<std::size_t>(k)], C[static_cast<std::size_t>(i)]);
      }
    }
  }
  return A + H;
}

OperatorValuedSolver::State OperatorValuedSolver::start(const Matrix& beta) const {
  State s;
  if (general_.empty()) {
    s.unknowns.push_back(inverse(beta));
  } else {
    s.unknowns.assign(general_.size(), beta);
  }
  return s;
}

Matrix OperatorValuedSolver::cauchy(const Matrix& /*beta*/, const State& state) const {
  if (general_.empty()) return state.unknowns[0];
  return letter_cauchy(0, state.unknowns[0]);
}

bool OperatorValuedSolver::average(const Matrix& beta, State& state, int max_steps, double tol,
                                   int& steps) const {
  steps = 0;
  if (general_.empty()) {
    Matrix& G = state.unknowns[0];
    for (steps = 1; steps <= max_steps; ++steps) {
      check_stop();  // the solver's loops are where `limit` and `report` spend their time
      // G ← ½[G + (β − η(G))^{−1}] (Helton, Rashidi Far & Speicher 2007).
      const Matrix next = 0.5 * (G + inverse(beta - eta(G)));
      if (!finite(next)) return false;
      const double change = max_abs(next - G);
      G = next;
      if (change < tol * (1.0 + max_abs(G))) return true;
    }
    return false;
  }
  const std::size_t m = general_.size();
  std::vector<Matrix> Gs(m), hs(m);
  for (std::size_t j = 0; j < m; ++j) {
    Gs[j] = letter_cauchy(static_cast<int>(j), state.unknowns[j]);
    hs[j] = inverse(Gs[j]) - state.unknowns[j];
  }
  Matrix current = Gs[0];
  for (steps = 1; steps <= max_steps; ++steps) {
    check_stop();
    const Matrix before = current;
    for (std::size_t j = 0; j < m; ++j) {
      // ω_j ← ½[ω_j + β − η(G) + Σ_{k≠j} h_k(ω_k)]: at the fixed point every G_{X_k}(ω_k) = G
      // (Belinschi, Mai & Speicher 2017; for m = 2 and no semicircular part this is their map).
      Matrix target = beta - eta(current);
      for (std::size_t k = 0; k < m; ++k) {
        if (k != j) target += hs[k];
      }
      Matrix& omega = state.unknowns[j];
      omega = 0.5 * (omega + target);
      Gs[j] = letter_cauchy(static_cast<int>(j), omega);
      if (!finite(Gs[j])) return false;
      hs[j] = inverse(Gs[j]) - omega;
      current = Gs[j];
    }
    if (!finite(current)) return false;
    if (max_abs(current - before) < tol * (1.0 + max_abs(current))) return true;
  }
  return false;
}

Eigen::VectorXcd OperatorValuedSolver::pack(const State& s) const {
  const Eigen::Index nn = static_cast<Eigen::Index>(n_) * n_;
  Eigen::VectorXcd y(nn * static_cast<Eigen::Index>(s.unknowns.size()));
  for (std::size_t j = 0; j < s.unknowns.size(); ++j) {
    y.segment(static_cast<Eigen::Index>(j) * nn, nn) =
        Eigen::Map<const Eigen::VectorXcd>(s.unknowns[j].data(), nn);
  }
  return y;
}

OperatorValuedSolver::State OperatorValuedSolver::unpack(const Eigen::VectorXcd& y) const {
  const Eigen::Index nn = static_cast<Eigen::Index>(n_) * n_;
  State s;
  for (Eigen::Index j = 0; j * nn < y.size(); ++j) {
    s.unknowns.push_back(Eigen::Map<const Matrix>(y.data() + j * nn, n_, n_));
  }
  return s;
}

Eigen::VectorXcd OperatorValuedSolver::residual(const Matrix& beta,
                                                const Eigen::VectorXcd& y) const {
  const State s = unpack(y);
  std::vector<Matrix> r;
  if (general_.empty()) {
    const Matrix& G = s.unknowns[0];
    r.push_back((beta - eta(G)) * G - Matrix::Identity(n_, n_));
  } else {
    // G_{X_j}(ω_j) = G (j ≥ 2) and Σ_j ω_j = β − η(G) + (m − 1) G^{−1}.
    const std::size_t m = general_.size();
    const Matrix G = letter_cauchy(0, s.unknowns[0]);
    Matrix sum = -beta + eta(G);
    if (m > 1) sum -= static_cast<double>(m - 1) * inverse(G);
    for (const auto& w : s.unknowns) sum += w;
    r.push_back(sum);
    for (std::size_t j = 1; j < m; ++j) {
      r.push_back(letter_cauchy(static_cast<int>(j), s.unknowns[j]) - G);
    }
  }
  State out{r};
  return pack(out);
}

void OperatorValuedSolver::general_jacobian(const Eigen::VectorXcd& y, Matrix& J) const {
  // The residual's blocks are r_0 = Σ_j ω_j − β + η(G) − (m − 1)G^{−1} and r_j = G_j(ω_j) − G
  // (j ≥ 1), with G = G_0(ω_0). With L_j the derivative of G_j at ω_j: dG = L_0Δ_0,
  // dr_0 = Σ_j Δ_j + [η + (m − 1) G^{−1}(·)G^{−1}] L_0Δ_0 and dr_j = L_jΔ_j − L_0Δ_0.
  check_stop();
  const State s = unpack(y);
  const std::size_t m = general_.size();
  const Eigen::Index nn = static_cast<Eigen::Index>(n_) * n_;
  std::vector<Matrix> L(m);
  const Matrix G = letter_cauchy(0, s.unknowns[0], &L[0]);
  Matrix outer = Matrix::Zero(nn, nn);
  for (const auto& b : semicircular_) add_kron(outer, 1.0, b, b);
  if (m > 1) {
    const Matrix Gi = inverse(G);
    add_kron(outer, static_cast<double>(m - 1), Gi, Gi);
  }
  J.setZero();
  J.block(0, 0, nn, nn) = Matrix::Identity(nn, nn) + outer * L[0];
  for (std::size_t j = 1; j < m; ++j) {
    (void)letter_cauchy(static_cast<int>(j), s.unknowns[j], &L[j]);
    const Eigen::Index at = static_cast<Eigen::Index>(j) * nn;
    J.block(0, at, nn, nn) = Matrix::Identity(nn, nn);
    J.block(at, 0, nn, nn) = -L[0];
    J.block(at, at, nn, nn) = L[j];
  }
}

bool OperatorValuedSolver::newton(const Matrix& beta, State& state, int max_steps, double tol,
                                  int& steps) const {
  Eigen::VectorXcd y = pack(state);
  Eigen::VectorXcd r = residual(beta, y);
  const Eigen::Index D = y.size();
  linalg::ComplexLU lu;
  bool fresh = false, have = false;
  const auto jacobian = [&]() {
    Matrix J(D, D);
    if (general_.empty()) {
      // Analytic: d[(β − η(G))G][Δ] = (β − η(G))Δ − η(Δ)G, and vec(Y Δ X) = (Xᵀ ⊗ Y) vec Δ.
      const Matrix G = Eigen::Map<const Matrix>(y.data(), n_, n_);
      const Matrix A = beta - eta(G);
      semicircular_jacobian(G, A, semicircular_, n_, J);
    } else {
      general_jacobian(y, J);
    }
    lu.compute(J);
    fresh = true;
    have = true;
  };
  steps = 0;
  for (int it = 0; it < max_steps; ++it) {
    // Each step polls: the analytic Jacobian (semicircular letters only) polls nowhere else.
    check_stop();
    ++steps;
    if (!r.allFinite()) return false;
    if (!have) jacobian();
    Eigen::VectorXcd delta = lu.solve(Eigen::VectorXcd(-r));
    if (!delta.allFinite()) return false;
    Eigen::VectorXcd next = y + delta;
    Eigen::VectorXcd r_next = residual(beta, next);
    const double size = 1.0 + y.cwiseAbs().maxCoeff();
    // Backtracking with a fresh Jacobian: halve the step while the residual does not decrease
    // (standard practice for damped Newton).
    double fraction = 1.0;
    const auto decreased = [&]() {
      return r_next.allFinite() && r_next.norm() <= (1.0 - 0.1 * fraction) * r.norm();
    };
    for (int halving = 0; fresh && halving < 12 && !decreased(); ++halving) {
      fraction *= 0.5;
      delta *= 0.5;
      next = y + delta;
      r_next = residual(beta, next);
    }
    if (!decreased()) {
      // Not contracting: refresh a stale Jacobian, else give up (the caller falls back).
      if (!fresh && delta.cwiseAbs().maxCoeff() > tol * size) {
        jacobian();
        continue;
      }
      // The residual is at its rounding floor: accept when the step is that small too (ill-
      // conditioned points near singular edges reach only ~1e−9 relative).
      if (r_next.allFinite() && delta.cwiseAbs().maxCoeff() <= std::max(tol, 1e-9) * size) {
        y = next;
        state = unpack(y);
        return true;
      }
      return false;
    }
    // A stale Jacobian that contracts slowly is refreshed: its steps converge only linearly.
    // Measured on catalogue model 12: Newton steps per density-table point 76 -> 47.
    const bool slow = !fresh && r_next.norm() > 0.25 * r.norm();
    fresh = false;
    y = next;
    r = r_next;
    if (slow) have = false;
    if (delta.cwiseAbs().maxCoeff() <= tol * size) {
      state = unpack(y);
      return true;
    }
  }
  return false;
}

}  // namespace freegap::analysis
