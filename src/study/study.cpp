// The model of a job, shared by every command (see study.hpp).
#include "freegap/study.hpp"

#include <string>

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
    // the matrices themselves were validated with the job.
    throw InputError(job.where("expression") + e.what());
  }
}

std::vector<model::SizeRunner> runners(const job::Job& job) {
  check_model(job);
  std::vector<model::SizeRunner> out;
  out.reserve(job.sizes.size());
  for (const auto n : job.sizes) out.push_back(runner_at(job, n));
  return out;
}

std::size_t estimate_peak_bytes(const model::SizeRunner& runner, bool keeps_matrix) {
  const auto n = static_cast<double>(runner.size());
  if (runner.path() == model::Path::tridiagonal) {
    // Diagonal, off-diagonal, their squares and the Sturm work rows: under 48 bytes per row
    // (measured 244 MiB at N = 10^7), plus the same 64 MiB allowance.
    return static_cast<std::size_t>(48.0 * n + 64.0 * 1024 * 1024);
  }
  // Samplers hold at most one N×N complex factorisation input besides their output (QR works in
  // place; the polar factor holds Z, W, V^* and U: 3 more), the plan its temporaries (exact), the
  // spectrum N doubles, plus 64 MiB for the process, LAPACK workspace and MPI buffers.
  const double sampler_transient = 3.0 * 16.0 * n * n;
  // Estimators that read the matrix: one whole N × N copy of it, in memory the rank shares with
  // its plug-in helpers (they map it; they do not copy it).
  const double matrix_copy =
      keeps_matrix ? n * n * (runner.expression().is_real() ? 8.0 : 16.0) : 0.0;
  return static_cast<std::size_t>(static_cast<double>(expr::peak_working_bytes(runner.expression(), runner.size())) +
                                  sampler_transient + matrix_copy + 8.0 * n + 64.0 * 1024 * 1024);
}

}  // namespace freegap::study
