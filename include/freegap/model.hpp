// A model — declared matrices and an expression in them — and its trials: sample, evaluate,
// compute the spectrum, observe. The runner and the tests drive trials through this one path.
#pragma once

#include <Eigen/Core>
#include <cstdint>
#include <functional>
#include <optional>
#include <string>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/expr.hpp"
#include "freegap/linalg.hpp"
#include "freegap/observe.hpp"
#include "freegap/tridiagonal.hpp"

namespace freegap::model {

using Index = Eigen::Index;

/// Which path a job asks for: the cheapest of those that apply (by the predicted cost of one
/// trial, predicted_trial_seconds), or one by name.
enum class PathRequest { automatic, dense, tridiagonal, two_projection, krylov };

/// What a job declares about its matrices and expression.
struct Model {
  std::vector<ensembles::MatrixSpec> matrices;
  std::string expression;
  expr::CheckOptions check;
  /// Use dense matrices even where the tridiagonal path applies (for comparison); the same as
  /// path = PathRequest::dense.
  bool force_dense = false;
  PathRequest path = PathRequest::automatic;
  /// What a trial observes, for the predicted costs of the paths: the number of histogram bins,
  /// the largest moment, and the share of trials that keep their whole spectrum (0 to 1).
  std::int64_t bins = 200;
  int max_moment = 8;
  double kept_share = 0.0;
  /// Draw every Haar matrix whole on the dense path, even one the plan reads only by some of its
  /// columns (expr::Evaluation::haar_columns), for comparisons. Not a job key: results differ.
  bool full_haar = false;
  /// The job observes only the extremes and the norm (observe::ObserveConfig::extremes_only), so
  /// the Krylov path may apply.
  bool extremes_only = false;
  /// The Krylov path's stopping rule (linalg::lanczos_extremes): relative error estimate and
  /// most Lanczos steps. Not job keys; the tests lower max steps to reach a failure.
  double krylov_tolerance = 1e-12;
  int krylov_max_steps = 1000;
};

/// How a size's trials are computed.
enum class Path {
  dense,        ///< sample dense matrices, evaluate the expression, LAPACK spectrum
  tridiagonal,  ///< a·X + b of one β-ensemble matrix X: Dumitriu–Edelman model, Sturm counts,
                ///< bisection extremes, band moments; O(N) time per bin and O(N) memory
  two_projection,  ///< a·B + b·U B U^* (+ c) of a two-valued diagonal B and a Haar U: the
                   ///< β-Jacobi corner (Edelman & Sutton 2008) in a tridiagonal matrix with the
                   ///< same eigenvalues, observed as on the tridiagonal path; O(N) per bin
  krylov,  ///< extremes only, of a self-adjoint expression: dense samples, never the formed
           ///< matrix; Lanczos on products with the factors (expr::VectorProduct,
           ///< linalg::lanczos_extremes), with a certificate per trial
};

/// The path's name in the run file's /metadata path, `run --explain` and `plan`: "dense",
/// "tridiagonal" or "two_projection".
const char* path_name(Path path);

/// Predicted CPU seconds of one trial of size n on a path, for choosing between paths that apply:
/// dense: sampling and the eigenvalue step (complex or real); tridiagonal and
/// two_projection (both observe an n × n tridiagonal matrix): Sturm counts at bins + 1 edges,
/// sampling, extremes and moments, and the whole spectrum (dsterf, O(n²)) for the kept share of
/// trials. Fixed coefficients measured on the development machine (docs/performance.md §5b), so
/// that the choice depends on the job alone and never on the machine or the rank: within a
/// version, the same job computes the same numbers everywhere.
/// `extra_dense_seconds`: the dense path's sampling beyond a Wigner matrix's and its evaluation.
double predicted_trial_seconds(Path path, Index n, const Model& model, bool complex_dense,
                               double extra_dense_seconds);

/// Predicted CPU seconds of one Krylov trial of size n (Path::krylov): sampling, then about
/// 7.5·n^(1/3) Lanczos steps at the default tolerance 1e-12 (fewer for a looser `tolerance`, at
/// most `max_steps`), each reading `bytes_per_product` of samples
/// (expr::VectorProduct::bytes_read) and the basis at memory speed (docs/performance.md §5c).
double predicted_krylov_seconds(Index n, double bytes_per_product, double sample_seconds,
                                double tolerance = 1e-12, int max_steps = 1000);

/// The two-projection model of an expression, or nothing when it does not have that form: every
/// term of its expansion is a constant, a diagonal D, or U D U^* (or U^* D U throughout) for one
/// haar_unitary or haar_orthogonal U, with at least one of each of the last two kinds; every D is
/// a diagonal of atoms with exactly two distinct values on the same coordinates as the others
/// (same weights in the same order, same pattern of values), so D = α_D·I + δ_D·P for one
/// coordinate projection P; s = Σ a_D δ_D over the plain terms and t over the conjugated ones are
/// nonzero; and eigenvalues are observed. At size n, P's rank is counted as the sampler
/// places the atoms (ensembles::atom_counts). Decided from the expression and n alone.
std::optional<tridiagonal::TwoProjectionSpec> two_projection_form(const expr::Expression& e,
                                                                  Index n);

/// Parses a matrix declaration as written on the command line:
///   NAME=ENSEMBLE[:key=value]...
/// e.g. "X1=gue", "W=wishart_complex:ratio=0.5", "U=haar_unitary:method=polar",
/// "B=diagonal:atoms=1@0.5,-1@0.5" (value@weight pairs), "D=diagonal:law=uniform:low=0:high=2",
/// "S=diagonal:law=semicircle:variance=2", "P=diagonal:law=marchenko_pastur:ratio=0.25",
/// "E=diagonal:law=file:path=eigs.txt". Throws InputError naming the declaration and the fix.
ensembles::MatrixSpec parse_declaration(const std::string& text);

/// Seconds spent in each stage of one trial (for benchmarks and progress; never in results).
struct StageSeconds {
  double sample = 0.0;
  double evaluate = 0.0;
  double spectrum = 0.0;
};

/// One trial's spectrum, or the reason it has none.
struct TrialOutcome {
  std::uint64_t trial = 0;
  bool failed = false;
  std::string reason;
  Eigen::VectorXd spectrum;  ///< eigenvalues ascending or singular values descending
  StageSeconds seconds;
  /// The evaluated matrix the spectrum was computed from, when run() was given a MatrixBuffer
  /// (for estimators that read the matrix), in that buffer; data is null otherwise. Whole: a
  /// self-adjoint one has its upper triangle mirrored from the lower one, which is what the
  /// eigenvalues were computed from, and a real diagonal.
  expr::MatrixView matrix;
};

/// Where a trial keeps a copy of its evaluated matrix: returns room for `doubles` doubles, valid
/// until the next call (the runner hands the estimators' shared memory, so the copy is the only
/// one made).
using MatrixBuffer = std::function<double*(std::size_t doubles)>;

/// Copies an evaluated matrix whole into the room `room` gives: the layout of expr::MatrixView;
/// a self-adjoint one (diagonalised from its lower triangle) gets that triangle mirrored onto the
/// upper one and a real diagonal. What SizeRunner::spectrum_of does to keep a trial's matrix.
expr::MatrixView keep_copy(const expr::Evaluated& value, bool self_adjoint,
                           const MatrixBuffer& room);

/// Everything needed to run trials of a model at one size N: samplers, the checked expression
/// and its evaluation plan. Construction validates everything (throws InputError).
class SizeRunner {
 public:
  SizeRunner(const Model& model, Index n);

  Index size() const { return n_; }
  Path path() const {
    return tri_     ? Path::tridiagonal
           : two_   ? Path::two_projection
           : krylov_ ? Path::krylov
                     : Path::dense;
  }
  /// Why this path: forced by the job, the only one that applies, or the cheapest predicted
  /// (with the predicted seconds per trial of the paths compared).
  const std::string& path_choice() const { return path_choice_; }
  /// What will be computed: the evaluation plan, or the tridiagonal model and its observations.
  std::string explain() const;
  /// How this freegap's samplers draw this model's trials differently from those of run-file
  /// format 1.3 and before (which the run file records as /metadata sampler_changes and a resume
  /// compares): "NAME: what changed" per matrix, joined by "; ", or empty when nothing did.
  std::string sampler_changes() const;
  /// Observes trial `trial` into `obs` (either path). Failed trials become failure rows.
  void observe_trial(observe::Observations& obs, std::uint64_t seed, std::uint64_t trial) const;
  /// Smallest and largest eigenvalue (or singular value) of one trial, for an automatic
  /// histogram range; throws NumericalError if the trial fails.
  std::pair<double, double> pilot_range(std::uint64_t seed, std::uint64_t trial) const;
  const expr::Expression& expression() const { return expression_; }
  const expr::Evaluation& evaluation() const { return evaluation_; }
  observe::SpectrumKind spectrum_kind() const;

  /// Draws the samples of trial `trial` (only the matrices the expression uses; a Haar matrix
  /// the plan reads by r of its columns as an N×r isometry).
  std::vector<ensembles::Sample> draw(std::uint64_t seed, std::uint64_t trial) const;
  /// Evaluates and diagonalises given samples. A non-finite entry in the evaluated matrix or a
  /// LAPACK failure gives a failed outcome with its reason; nothing is thrown for those.
  /// Given `keep_matrix`, also copies the evaluated matrix into the room it returns
  /// (TrialOutcome::matrix).
  TrialOutcome spectrum_of(std::uint64_t trial, const std::vector<ensembles::Sample>& samples,
                           const MatrixBuffer& keep_matrix = {}) const;
  /// draw + spectrum_of.
  TrialOutcome run(std::uint64_t seed, std::uint64_t trial,
                   const MatrixBuffer& keep_matrix = {}) const;

 private:
  Index n_;
  std::vector<ensembles::Sampler> samplers_;
  std::vector<bool> used_;
  expr::Expression expression_;
  expr::Evaluation evaluation_;
  std::vector<Index> haar_columns_;  ///< per declared matrix, Evaluation::haar_columns
  std::optional<tridiagonal::ModelSpec> tri_;
  double tri_scale_ = 1.0, tri_shift_ = 0.0;
  std::optional<tridiagonal::TwoProjectionSpec> two_;
  std::optional<expr::VectorProduct> krylov_;
  linalg::LanczosSettings krylov_settings_;
  std::string path_choice_;
  std::string predicted_;  // the predicted costs compared, for explain()
  /// The tridiagonal form a·X + b of the expression, when it has one (and the refusals of
  /// matrices that have only a tridiagonal model, in any other expression).
  std::optional<tridiagonal::ModelSpec> tridiagonal_form(const Model& model, double& scale,
                                                         double& shift) const;
  /// Picks the path from the job's request and the predicted costs (sets tri_ / two_ / krylov_).
  void choose_path(const Model& model, std::optional<tridiagonal::ModelSpec> tri, double scale,
                   double shift, std::optional<tridiagonal::TwoProjectionSpec> two);
  /// The cheapest of the paths that apply by predicted cost (sets path_choice_ and predicted_).
  Path cheapest_path(const Model& model, bool linear, bool two, bool krylov);
  /// Whether the Krylov path applies, and if not why (for a forced request's message).
  bool krylov_applies(const Model& model, std::string& why) const;
  std::string explain_krylov() const;
  /// One trial of the Krylov path into `obs` (a failure row when Lanczos does not converge).
  void observe_krylov_trial(observe::Observations& obs, std::uint64_t seed,
                            std::uint64_t trial) const;
};

/// Records an outcome into observations (a failed one as a failure row).
void record(observe::Observations& obs, const TrialOutcome& outcome);

}  // namespace freegap::model
