// The model of a job, shared by every command (see study.hpp).
#include "freegap/study.hpp"

#include <string>

#include "freegap/ensembles.hpp"
#include "freegap/errors.hpp"

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
    if (spec.kind == ensembles::Kind::beta_hermite || spec.kind == ensembles::Kind::beta_laguerre) {
      throw InputError(job.where("estimator." + job.estimators.front().name) +
                       "estimators need every trial's spectrum, and matrix '" + spec.name + "' (" +
                       std::string(ensembles::kind_name(spec.kind)) +
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

}  // namespace freegap::study
