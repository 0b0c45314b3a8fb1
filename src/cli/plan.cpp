// `freegap plan JOB.toml`: estimated time, core-hours, memory and output per size before a run.
#include "freegap/plan.hpp"

#include <iostream>

#include "commands.hpp"
#include "freegap/errors.hpp"
#include "freegap/job.hpp"

namespace freegap::cli {

namespace {

struct PlanArgs {
  std::string job;
  std::string deadline;
  plan::Options options;
  bool confine = false;
};

}  // namespace

Subcommand add_plan_command(CLI::App& app) {
  auto args = std::make_shared<PlanArgs>();
  auto* cmd = app.add_subcommand(
      "plan", "Estimate a job's time per trial, core-hours, memory per rank and output size");
  cmd->add_option("job", args->job, "Job file (TOML)")->required();
  cmd->add_option("--ranks", args->options.ranks, "MPI ranks the job would run on (default 1)")
      ->check(CLI::Range(1, 1 << 24));
  cmd->add_option("--threads", args->options.threads, "BLAS threads per rank (default 1)")
      ->check(CLI::Range(1, 1024));
  cmd->add_option(
      "--deadline", args->deadline,
      "Wall time available, e.g. 2h or 1d12h: suggests a rank count and a time request");
  cmd->add_option("--calibration", args->options.calibration_path,
                  "Calibration file (default $XDG_CACHE_HOME/freegap/calibration.toml)");
  cmd->add_flag("--remeasure", args->options.remeasure,
                "Measure the cost again even if the calibration file has this model");
  cmd->add_option("--calibration-budget", args->options.calibration_budget,
                  "Seconds a new measurement of the cost may take (default 60): larger sizes "
                  "are timed while they fit")
      ->check(CLI::Range(0.1, 86400.0));
  cmd->add_flag("--confine", args->confine,
                "Refuse a job file that names any path outside its own directory (as freegap run "
                "--confine)");
  return {cmd, [args] {
            if (!args->deadline.empty()) {
              try {
                args->options.deadline_seconds = plan::parse_duration(args->deadline);
              } catch (const InputError& e) {
                throw InputError(std::string("--deadline ") + e.what());
              }
            }
            const auto job = job::load_job(
                args->job, args->confine ? job::Paths::confined : job::Paths::anywhere);
            const auto e = plan::estimate(job, args->options, std::cerr);
            std::cout << plan::format(e);
            return 0;
          }};
}

}  // namespace freegap::cli
