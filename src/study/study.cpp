// The model of a job, shared by every command (see study.hpp).
#include "freegap/study.hpp"

#include <algorithm>
#include <filesystem>
#include <string>
#include <utility>

#include "freegap/declarations.hpp"
#include "freegap/errors.hpp"
#include "freegap/expr.hpp"

namespace freegap::study {

model::Model model_of(const job::Job& job) {
  model::Model m;
  m.matrices = job.matrices;
  m.expression = job.expression;
  m.check.force_singular_values = job.observe.singular_values;
  m.force_dense = job.force_dense || !job.estimators.empty();
  m.path = job.run_path == "dense"            ? model::PathRequest::dense
           : job.run_path == "tridiagonal"    ? model::PathRequest::tridiagonal
           : job.run_path == "two_projection" ? model::PathRequest::two_projection
           : job.run_path == "krylov"         ? model::PathRequest::krylov
                                              : model::PathRequest::automatic;
  m.extremes_only = job.observe.extremes_only;
  if (job.observe.extremes_tolerance > 0) m.krylov_tolerance = job.observe.extremes_tolerance;
  if (job.observe.extremes_max_steps > 0) {
    m.krylov_max_steps = static_cast<int>(job.observe.extremes_max_steps);
  }
  // What a trial observes, for the predicted costs of the paths (model::predicted_trial_seconds).
  m.bins = job.observe.extremes_only ? 0 : job.observe.bins;
  m.max_moment = job.observe.max_moment;
  std::int64_t fewest = 0;
  for (const auto t : job.trials) fewest = fewest == 0 ? t : std::min(fewest, t);
  m.kept_share = fewest > 0 ? std::min(1.0, static_cast<double>(job.observe.keep_spectra) /
                                                static_cast<double>(fewest))
                            : 0.0;
  return m;
}

void check_model(const job::Job& job) {
  if (job.estimators.empty()) return;
  for (const auto& spec : job.matrices) {
    if (spec.kind == declarations::Kind::beta_hermite || spec.kind == declarations::Kind::beta_laguerre) {
      throw InputError(job.where("estimator." + job.estimators.front().name) +
                       "estimators need every trial's spectrum, and matrix '" + spec.name + "' (" +
                       std::string(declarations::kind_name(spec.kind)) +
                       ") has only a tridiagonal model, which computes none; use gue, goe, "
                       "wishart_complex or wishart_real, or remove the estimators");
    }
  }
}

model::SizeRunner runner_at(const job::Job& job, std::int64_t n) {
  try {
    return model::SizeRunner(model_of(job), n);
  } catch (const InputError& e) {
    // Expression errors and the model's refusals (a tridiagonal-only matrix in a product, ...);
    // the matrices themselves were validated with the job. A forced path that does not apply
    // is the [run] path key's fault, so that is the place named.
    const bool forced_path = std::string(e.what()).rfind("path = \"", 0) == 0 &&
                             job.run_path != "auto";
    throw InputError(job.where(forced_path ? "run.path" : "expression") + e.what());
  }
}

std::vector<model::SizeRunner> runners(const job::Job& job) {
  check_model(job);
  std::vector<model::SizeRunner> out;
  out.reserve(job.sizes.size());
  for (const auto n : job.sizes) out.push_back(runner_at(job, n));
  return out;
}

namespace {

// Matrices read from files stay in memory while a size runs: the file's matrix at this size (one
// file: its n × n; per size: N × N), and the reader's shared copy of the previous one
// (matrix_file::read_shared keeps two).
double file_matrix_bytes(const model::SizeRunner& runner) {
  double bytes = 0.0;
  for (const auto& spec : runner.expression().declared()) {
    if (spec.kind != declarations::Kind::file_matrix) continue;
    const auto n = static_cast<double>(declarations::file_matrix_per_size(spec)
                                           ? runner.size()
                                           : spec.file.file_size);
    bytes += 2.0 * n * n * (spec.file.complex ? 16.0 : 8.0);
  }
  return bytes;
}

}  // namespace

std::size_t peak_bytes(const model::SizeRunner& runner, bool keeps_matrix) {
  const auto n = static_cast<double>(runner.size());
  if (runner.path() == model::Path::krylov) {
    // The whole samples (the plan's inputs), a sampler's transient, and the Lanczos basis of at
    // most krylov_max_steps + 1 vectors (SizeRunner::explain states it), plus 64 MiB.
    const double steps = std::min(n, 1001.0);
    const double basis = (runner.expression().is_real() ? 8.0 : 16.0) * n * steps;
    return static_cast<std::size_t>(static_cast<double>(runner.evaluation().input_bytes()) +
                                    3.0 * 16.0 * n * n + basis + file_matrix_bytes(runner) +
                                    64.0 * 1024 * 1024);
  }
  if (runner.path() != model::Path::dense) {
    // Tridiagonal and two_projection paths alike (the latter's corner, 4 vectors of N/2 at
    // most, is freed before the tridiagonal matrix's Sturm work starts). Diagonal, off-diagonal, their squares and the Sturm work rows: under 48 bytes per row
    // (measured 244 MiB at N = 10^7), plus the same 64 MiB allowance.
    return static_cast<std::size_t>(48.0 * n + 64.0 * 1024 * 1024);
  }
  // Samplers hold at most one N×N complex factorisation input besides their output (QR works in
  // place; the polar factor holds Z, X, X^*X and its eigenvectors, or Z, X, P and U: 3 more), the
  // plan its temporaries (exact), the spectrum N doubles, plus 64 MiB for the process, LAPACK
  // workspace and MPI buffers.
  const double sampler_transient = 3.0 * 16.0 * n * n;
  // Estimators that read the matrix: one whole N × N copy of it, in memory the rank shares with
  // its plug-in helpers (they map it; they do not copy it).
  const double matrix_copy =
      keeps_matrix ? n * n * (runner.expression().is_real() ? 8.0 : 16.0) : 0.0;
  // The runner's own plan: its inputs (a Haar matrix read by r columns counts N×r) and temporaries.
  const expr::Evaluation& plan = runner.evaluation();
  const double working = static_cast<double>(plan.input_bytes() + plan.peak_temporary_bytes());
  return static_cast<std::size_t>(working + sampler_transient + matrix_copy + 8.0 * n +
                                  file_matrix_bytes(runner) + 64.0 * 1024 * 1024);
}

namespace {

expr::Expression checked_expression(const job::Job& job) {
  check_model(job);  // its refusals first, as `run` gives them
  const model::Model m = model_of(job);
  try {
    return expr::Expression(m.expression, m.matrices, m.check);
  } catch (const InputError& e) {
    throw InputError(job.where("expression") + e.what());
  }
}

}  // namespace

Study::Study(job::Job job, expr::Expression expression)
    : job_(std::move(job)), expression_(std::move(expression)) {}

Study::Study(job::Job job) : job_(std::move(job)), expression_(checked_expression(job_)) {
  runners_ = study::runners(job_);
}

Study Study::of_expression(std::vector<declarations::MatrixSpec> matrices,
                           const std::string& expression, bool singular_values,
                           std::vector<std::int64_t> sizes) {
  job::Job job;
  job.matrices = std::move(matrices);
  job.expression = expression;
  job.observe.singular_values = singular_values;
  job.trials.assign(sizes.size(), 0);
  job.sizes = std::move(sizes);
  const model::Model m = model_of(job);
  expr::Expression checked(m.expression, m.matrices, m.check);
  Study study(std::move(job), std::move(checked));
  for (const auto n : study.job_.sizes) study.runners_.emplace_back(m, n);
  return study;
}

Study Study::of_stored_job(const std::string& job_text, const std::string& job_canonical,
                           const std::string& run_file, const std::string& job_directory) {
  // A relative path in the job (an eigenvalue or matrix file) was relative to the job file's
  // directory: it is looked for beside the run file, then in that directory (as the run file
  // recorded it), then in the current directory. The digests decide which file is the run's.
  std::vector<std::string> anchors;
  if (!run_file.empty()) {
    anchors.push_back((std::filesystem::path(run_file).parent_path() / "job.toml").string());
  }
  if (!job_directory.empty()) {
    anchors.push_back((std::filesystem::path(job_directory) / "job.toml").string());
  }
  anchors.push_back("<job stored in the run file>");
  std::string last_error;
  bool other_numbers = false;
  for (const std::string& anchor : anchors) {
    try {
      job::Job job = job::parse_job(job_text, anchor);
      const bool reads_files = std::any_of(job.file_digests.begin(), job.file_digests.end(),
                                           [](const std::string& d) { return !d.empty(); });
      if (reads_files && !job_canonical.empty() && job.canonical() != job_canonical) {
        other_numbers = true;
        continue;
      }
      return Study(std::move(job));
    } catch (const InputError& e) {
      last_error = e.what();
    }
  }
  if (other_numbers) {
    throw InputError(
        "a file the job reads (eigenvalues or a matrix) holds other numbers than the run used (its SHA-256 "
        "differs from the one stored in the run file); put the run's own file beside the run "
        "file or in the current directory");
  }
  throw InputError(last_error + (run_file.empty() ? "" : " (looked for beside the run file too)"));
}

std::string Study::path_names() const {
  std::string out;
  const char* last = nullptr;
  for (const auto& r : runners_) {
    const char* name = model::path_name(r.path());
    if (last != nullptr && std::string(name) == last) continue;
    out += (out.empty() ? "" : ",") + std::string(name);
    last = name;
  }
  return out;
}

namespace {

// On the dense path, the Haar matrices the plan draws by columns (expr::Evaluation::haar_columns),
// as a sentence to follow the path's reason; empty when there are none.
std::string haar_columns_note(const model::SizeRunner& runner) {
  std::string note;
  const auto columns = runner.evaluation().haar_columns();
  const auto& declared = runner.expression().declared();
  for (std::size_t o = 0; o < columns.size(); ++o) {
    if (columns[o] < 0) continue;
    note += "; " + declared[o].name + " is drawn as an N × r isometry, r = " +
            std::to_string(columns[o]) + " of its " + std::to_string(runner.size()) +
            " columns (the ones its conjugations read)";
  }
  return note;
}

std::string dense_path_reason(const job::Job& job, const model::SizeRunner& runner) {
  const bool estimators = !job.estimators.empty();
  if (estimators || job.force_dense || job.run_path == "dense") {
    model::Model unforced = model_of(job);
    unforced.force_dense = false;
    unforced.path = model::PathRequest::automatic;
    const model::SizeRunner would(unforced, runner.size());
    const std::string automatic = std::string(" (automatically: ") +
                                  model::path_name(would.path()) + ", " + would.path_choice() +
                                  ")";
    if (estimators) {
      return "dense: the estimators read every trial's spectrum, which only the dense path "
             "computes" + automatic;
    }
    return std::string("dense: forced by ") +
           (job.force_dense ? "force_dense = true" : "path = \"dense\"") + " in [run]" +
           automatic;
  }
  const std::string& choice = runner.path_choice();
  if (choice.rfind("the cheape", 0) == 0) return "dense: " + choice;  // cheaper or cheapest
  return "dense: the tridiagonal path applies only to a·X + b of one GUE, GOE, Wishart or "
         "β-ensemble matrix, and the two_projection path only to a·B + b·U B U^* (+ c) of a "
         "two-valued diagonal B and a Haar U, with eigenvalues observed";
}

}  // namespace

std::string Study::path_reason(std::size_t i) const {
  const model::SizeRunner& runner = runners_.at(i);
  const std::string& choice = runner.path_choice();
  if (runner.path() == model::Path::two_projection) {
    return "two_projection: the expression is a·B + b·U B U^* (+ c) of a diagonal B with two "
           "values and a Haar U, and its eigenvalues are observed, so a trial samples the corner "
           "of U from the beta-Jacobi model (Edelman & Sutton 2008) in O(N) memory and no dense "
           "matrix; " + choice;
  }
  if (runner.path() == model::Path::krylov) {
    if (runner.spectrum_kind() == observe::SpectrumKind::singular_values) {
      return "krylov: only the extreme singular values and the norm are observed "
             "(observe.extremes_only), so a trial runs Lanczos on P^*P by products of the "
             "expression and its adjoint with vectors and never forms the matrix; " + choice;
    }
    return "krylov: only the extremes and the norm are observed (observe.extremes_only) of a "
           "self-adjoint expression, so a trial runs Lanczos on products of the expression with "
           "vectors and never forms the matrix; " + choice;
  }
  if (runner.path() == model::Path::tridiagonal) {
    return "tridiagonal: the expression is a·X + b of one matrix with an exact tridiagonal model "
           "(Dumitriu & Edelman 2002) and its eigenvalues are observed, so a trial costs O(N) "
           "memory and no dense matrix; " + choice;
  }
  return dense_path_reason(job_, runner) + haar_columns_note(runner);
}

std::int64_t Study::unit_count(std::size_t i) const {
  const std::int64_t b = job_.trials_per_unit;
  return b <= 0 ? 0 : (job_.trials.at(i) + b - 1) / b;
}

std::int64_t Study::trials_in_unit(std::size_t i, std::int64_t unit) const {
  const std::int64_t b = job_.trials_per_unit;
  return std::max<std::int64_t>(0, std::min(b, job_.trials.at(i) - unit * b));
}

std::size_t Study::peak_bytes(std::size_t i, bool keeps_matrix) const {
  return study::peak_bytes(runners_.at(i), keeps_matrix);
}

void Study::check_threads(int threads) const {
  if (threads <= 1) return;
  // OpenBLAS 0.3.21 (Debian 12) crashes in threaded zgesdd (inside zgebrd's zgemv) in most
  // runs at N ≥ 200 (measured here); refuse rather than crash mid-run.
  bool complex_svd = false;
  for (const auto& m : job_.matrices) {
    complex_svd |=
        m.kind == declarations::Kind::haar_unitary && m.haar == declarations::HaarMethod::polar;
  }
  complex_svd |= expression_.spectrum() == expr::Spectrum::singular_values && !expression_.is_real();
  if (complex_svd) {
    throw InputError("--threads " + std::to_string(threads) +
                     ": this job needs complex singular value decompositions, which crash "
                     "with more than one OpenBLAS thread in the OpenBLAS shipped with "
                     "Debian 12; use --threads 1 and more ranks instead");
  }
}

analysis::DerivedLimit Study::limit(int max_moment, Eigen::Index deterministic_size) const {
  if (deterministic_size <= 0 && !job_.sizes.empty()) deterministic_size = job_.sizes.back();
  return analysis::derive_limit(expression_, max_moment, deterministic_size);
}

}  // namespace freegap::study
