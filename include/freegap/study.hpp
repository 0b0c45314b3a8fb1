// The compiled study: the one step that turns a job into what every command needs — its
// declarations and checked expression, the evaluation path of each size and what it computes, the
// work units, the memory a rank needs, and the limit — so that `run`, `plan`, `limit`, `report`,
// `inspect` and the estimators' truths cannot disagree (docs/design.md, parts).
#pragma once
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "freegap/analysis/limits/limit.hpp"
#include "freegap/declarations.hpp"
#include "freegap/expr.hpp"
#include "freegap/job.hpp"
#include "freegap/model.hpp"

namespace freegap::study {

/// A job compiled once. Every command builds its view of a job from one of these.
class Study {
 public:
  /// The job's study: check_model, the checked expression and one runner per size (InputError
  /// with the job's place for every refusal, as `run` gives it).
  explicit Study(job::Job job);

  /// The study of declarations and an expression without a job file (`freegap limit`, `freegap
  /// sample`): the same checks of the expression as a job's, and one runner per size when sizes
  /// are given (increasing, positive; no work units).
  static Study of_expression(std::vector<declarations::MatrixSpec> matrices,
                             const std::string& expression, bool singular_values = false,
                             std::vector<std::int64_t> sizes = {});

  /// The study of the job a run file stores (its text and canonical text). A relative path the
  /// job names (an eigenvalue or matrix file) is looked for beside `run_file` (when given), then
  /// in `job_directory` (the job file's directory the run file recorded, when given), then in the
  /// current directory, and a file is used only when its numbers are those the run used (the
  /// canonical text, which holds each file's SHA-256, equals the stored one). InputError when the
  /// stored job no longer parses or no such file is found.
  static Study of_stored_job(const std::string& job_text, const std::string& job_canonical,
                             const std::string& run_file = "", const std::string& job_directory = "");

  const job::Job& job() const { return job_; }
  /// The expression as the runner computes it (its spectrum choice included).
  const expr::Expression& expression() const { return expression_; }
  /// One runner per size, in the job's order: its path (`path()`) and what it computes
  /// (`explain()`). Empty for a study of an expression alone.
  const std::vector<model::SizeRunner>& runners() const { return runners_; }
  /// Why size `i` takes its path, in one sentence for `plan` and `run --explain`.
  /// The paths of the sizes, in ladder order without repeats, joined by ","; one name when every
  /// size takes the same path (at small N with many bins the dense trial may be the cheaper one
  /// and at large N the O(N) path, so a ladder can cross over). /metadata path and `plan`.
  std::string path_names() const;
  std::string path_reason(std::size_t i) const;
  /// The work units of size `i`: trials in blocks of the job's trials_per_unit, the last one
  /// shorter (unit u holds trials [u·B, min((u+1)·B, T))).
  std::int64_t unit_count(std::size_t i) const;
  std::int64_t trials_in_unit(std::size_t i, std::int64_t unit) const;
  /// Peak bytes one rank holds for one trial of size `i` (peak_bytes below; `keeps_matrix`: an
  /// estimator reads the trial's matrix).
  std::size_t peak_bytes(std::size_t i, bool keeps_matrix) const;
  /// Refuses `threads` > 1 BLAS threads per rank when the job needs complex singular value
  /// decompositions, which crash with more than one thread in the OpenBLAS Debian 12 ships
  /// (InputError naming --threads and the fix).
  void check_threads(int threads) const;
  /// The limit of the expression with its exact moments up to max_moment: closed-form rules,
  /// free convolutions, then the polynomial solver (limit.hpp). Never throws for a model it
  /// cannot predict: `reason` says why.
  /// The limit of the model. Deterministic matrices that are not free of each other are formed
  /// at `deterministic_size` (the free deterministic equivalent, analysis::derive_limit); 0 takes
  /// the job's largest size, and a study of an expression alone has none.
  analysis::DerivedLimit limit(int max_moment, Eigen::Index deterministic_size = 0) const;

 private:
  Study(job::Job job, expr::Expression expression);
  job::Job job_;
  expr::Expression expression_;
  std::vector<model::SizeRunner> runners_;
};

/// The trial model of a job: its declarations, expression and spectrum choice, and the path.
/// The dense path is forced by `force_dense`, and by estimators, which read every trial's
/// spectrum (only the dense path computes one).
model::Model model_of(const job::Job& job);

/// What the model refuses before any work, with the job's place: estimators beside a matrix
/// that has only a tridiagonal model (it computes no spectrum). InputError.
void check_model(const job::Job& job);

/// check_model, then one runner per size in the job's order (InputError with the job's place
/// for the expression's and the model's refusals).
std::vector<model::SizeRunner> runners(const job::Job& job);

/// The runner of one size (after check_model).
model::SizeRunner runner_at(const job::Job& job, std::int64_t n);

/// Peak bytes one rank holds while running one trial of `runner`'s model at its size: the
/// samples, the sampler's transient factorisation storage, the plan's temporaries and the
/// spectrum, plus a fixed allowance for the process itself; `keeps_matrix` (an estimator reads
/// the trial's matrix) adds the copy kept for it.
std::size_t peak_bytes(const model::SizeRunner& runner, bool keeps_matrix = false);

}  // namespace freegap::study
