// The one step that turns a job into the model every command computes with, so that `run` and
// `plan` cannot disagree on the path or on what they refuse (the first piece of the compiled
// study; DEVELOPERS.md, parts).
#pragma once
#include <cstddef>
#include <cstdint>
#include <vector>

#include "freegap/job.hpp"
#include "freegap/model.hpp"

namespace freegap::study {

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
std::size_t estimate_peak_bytes(const model::SizeRunner& runner, bool keeps_matrix = false);

}  // namespace freegap::study
