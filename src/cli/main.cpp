// The freegap executable: parses the command line and calls the library (docs/building.md habit 1).
#include <CLI/CLI.hpp>
#include <chrono>
#include <cmath>
#include <cstdlib>
#include <iostream>
#include <string>
#include <vector>

#include "commands.hpp"
#include "freegap/analysis/reporting/console.hpp"
#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
#include "freegap/matrix_file.hpp"
#include "freegap/model.hpp"
#include "freegap/observe.hpp"
#include "freegap/plan.hpp"
#include "freegap/run.hpp"
#include "freegap/stop.hpp"
#include "freegap/store.hpp"
#include "freegap/study.hpp"
#include "freegap/version.hpp"

namespace {

using freegap::kExitBadInput;
using freegap::kExitDamaged;
using freegap::kExitFailure;

// `inspect --verify`: every committed unit and the header against their checksums; exit 4 when
// a unit is damaged.
int run_verify(const std::string& path) {
  const auto integrity = freegap::store::verify(path);
  std::cout << freegap::analysis::verify_text(integrity, path);
  return integrity.checksummed && !integrity.damaged.empty() ? kExitDamaged : 0;
}

struct SampleOptions {
  std::vector<std::string> declarations;
  std::string expression;
  std::vector<long long> sizes;
  long long trials = 10;
  std::uint64_t seed = 1;
  int max_moment = 6;
  bool explain = false;
  bool singular_values = false;
};

int run_sample(const SampleOptions& opt) {
  std::vector<freegap::declarations::MatrixSpec> matrices;
  for (const auto& d : opt.declarations) matrices.push_back(freegap::model::parse_declaration(d));
  if (opt.trials < 1) throw freegap::InputError("--trials must be at least 1 (got " + std::to_string(opt.trials) + ")");
  for (std::size_t i = 0; i < opt.sizes.size(); ++i) {
    if (opt.sizes[i] < 1) throw freegap::InputError("--sizes: every size must be positive (got " + std::to_string(opt.sizes[i]) + ")");
    if (i > 0 && opt.sizes[i] <= opt.sizes[i - 1]) {
      throw freegap::InputError("--sizes must be increasing (got " + std::to_string(opt.sizes[i]) +
                                " after " + std::to_string(opt.sizes[i - 1]) + ")");
    }
  }
  // The compiled study (every size's runner) first, so a bad declaration or expression fails
  // before any work; the same model as a job's.
  const freegap::study::Study study = freegap::study::Study::of_expression(
      matrices, opt.expression, opt.singular_values, {opt.sizes.begin(), opt.sizes.end()});
  const auto& runners = study.runners();
  if (opt.explain) {
    std::cout << freegap::analysis::sample_explain_text(study);
    return 0;
  }
  std::cout << freegap::analysis::sample_table_header(runners.front().expression(), opt.seed,
                                                     opt.trials, opt.max_moment);
  for (const auto& runner : runners) {
    freegap::observe::ObserveConfig config;
    config.bin_edges = freegap::observe::uniform_edges(-1.0, 1.0, 1);  // histogram unused here
    config.max_moment = opt.max_moment;
    config.kind = runner.spectrum_kind();
    auto obs = freegap::observe::start_observations(config);
    const auto start = std::chrono::steady_clock::now();
    for (long long t = 0; t < opt.trials; ++t) {
      freegap::check_stop();
      freegap::model::record(obs, runner.run(opt.seed, static_cast<std::uint64_t>(t)));
    }
    const double secs = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
    std::cout << freegap::analysis::sample_row(static_cast<long long>(runner.size()),
                                               freegap::observe::summarize(obs), opt.max_moment,
                                               secs / static_cast<double>(opt.trials));
  }
  return 0;
}

// `inspect`: the run file described (analysis::inspect_text).
int run_inspect(const std::string& path, bool show_job, bool show_moments) {
  const auto file = freegap::store::RunFile::open_read(path);
  std::cout << freegap::analysis::inspect_text(file, path, show_job, show_moments);
  return 0;
}

// `sample`: its options, bound to `sample`.
CLI::App* add_sample_command(CLI::App& app, SampleOptions& sample) {
  auto* sample_cmd = app.add_subcommand(
      "sample", "Sample a model in this process and print its moments per size");
  sample_cmd->add_option("-m,--matrix", sample.declarations,
                         "Declare a matrix: NAME=ENSEMBLE[:key=value]... (repeatable)")
      ->required();
  sample_cmd->add_option("-e,--expression", sample.expression, "Expression in the declared matrices")
      ->required();
  sample_cmd->add_option("-n,--sizes", sample.sizes, "Sizes N, increasing")->required()->delimiter(',');
  sample_cmd->add_option("-t,--trials", sample.trials, "Trials per size");
  sample_cmd->add_option("-s,--seed", sample.seed, "Job seed");
  sample_cmd->add_option("-k,--max-moment", sample.max_moment, "Highest moment shown")
      ->check(CLI::Range(1, 12));
  sample_cmd->add_flag("--explain", sample.explain, "Print what each size computes (its path and why) and stop");
  sample_cmd->add_flag("--singular-values", sample.singular_values,
                       "Singular values even for a self-adjoint expression");
  return sample_cmd;
}

// `run`: its options, bound to the arguments; `run_output` is set to its -o option.
CLI::App* add_run_command(CLI::App& app, std::string& job_path,
                          freegap::run::RunOptions& run_options, std::string& stop_before,
                          CLI::Option*& run_output) {
  auto* run_cmd = app.add_subcommand(
      "run", "Run (or resume) a job file; under mpirun/srun with any number of ranks");
  run_cmd->add_option("job", job_path, "Job file (TOML)")->required();
  run_output = run_cmd->add_option("-o,--output", run_options.output,
                                   "Run file (default: the job's output)");
  run_cmd->add_flag("--confine", run_options.confine,
                    "Refuse a job file that names any path outside its own directory (eigenvalue "
                    "files, run.output, plug-in libraries, commands)");
  run_cmd->add_flag("--ignore-free-space", run_options.ignore_free_space,
                    "Run even if the run file's predicted size exceeds the free space on its "
                    "file system");
  run_cmd->add_flag("--fresh", run_options.fresh, "Delete an existing run file and start over");
  run_cmd->add_flag("--explain", run_options.explain,
                    "Print the evaluation plans, units and memory estimates; run nothing");
  run_cmd->add_option("--threads", run_options.threads, "BLAS threads per rank")
      ->check(CLI::Range(1, 1024));
  run_cmd->add_option("--progress-every", run_options.progress_seconds,
                      "Seconds between progress lines when stderr is not a terminal")
      ->check(CLI::Validator(
          [](std::string& value) -> std::string {
            try {
              std::size_t used = 0;
              const double v = std::stod(value, &used);
              if (used == value.size() && v > 0 && std::isfinite(v)) return {};
            } catch (const std::exception&) {
            }
            return "must be a positive number of seconds (got " + value + ")";
          },
          "SECONDS>0"));
  run_cmd->add_flag("-q,--quiet", run_options.quiet, "No progress output");
  run_cmd->add_option("--stop-before", stop_before,
                      "Start no unit that would not finish within this time (e.g. 90s, 10m, "
                      "1h30m), then commit and exit 3; SLURM_JOB_END_TIME is also obeyed");
  return run_cmd;
}

// `inspect`: its options, bound to the arguments.
CLI::App* add_inspect_command(CLI::App& app, std::string& inspect_path, bool& inspect_job,
                              bool& inspect_moments, bool& inspect_verify) {
  auto* inspect_cmd = app.add_subcommand("inspect", "Describe a run file: contents, completeness, failures");
  inspect_cmd->add_option("run_file", inspect_path, "Run file (HDF5)")->required();
  inspect_cmd->add_flag("--job", inspect_job, "Also print the job file stored in the run file");
  inspect_cmd->add_flag("--moments", inspect_moments,
                        "Also print each size's moments, extremes and norm with standard errors");
  inspect_cmd->add_flag("--verify", inspect_verify,
                        "Check every committed unit against its checksums and list damaged units "
                        "(exit 4 if any)");
  return inspect_cmd;
}

// An unknown first word is a mistyped command: say so plainly (CLI11 would report only that a
// subcommand is required). Returns whether it refused the command line.
bool refuse_unknown_command(CLI::App& app, int argc, char** argv) {
  if (argc > 1 && argv[1][0] != '-') {
    const std::string first = argv[1];
    bool known = false;
    for (const auto* sub : app.get_subcommands([](const CLI::App*) { return true; })) {
      known |= sub->get_name() == first;
    }
    if (!known) {
      std::string names;
      for (const auto* sub : app.get_subcommands([](const CLI::App*) { return true; })) {
        names += (names.empty() ? "" : ", ") + sub->get_name();
      }
      std::cerr << "freegap: unknown command '" << first << "'; the commands are " << names
                << " (see freegap --help)\n";
      return true;
    }
  }
  return false;
}

// `run`: checks -o, reads --stop-before and the scheduler's end time, then runs the job under MPI.
int start_run(int& argc, char**& argv, const std::string& job_path,
              freegap::run::RunOptions& run_options, const std::string& stop_before,
              const CLI::Option* run_output) {
  if (run_output->count() > 0 && run_options.output.empty()) {
    // An empty -o would silently mean "the job's output"; say so instead.
    std::cerr << "freegap: -o/--output: the run file's path is empty; give a path, or leave "
                 "out -o to write the job's output\n";
    return kExitBadInput;
  }
  freegap::run::install_signal_handlers();
  try {
    if (!stop_before.empty()) {
      run_options.stop_before_seconds = freegap::plan::parse_duration(stop_before);
    }
    // Slurm sets the job's end time (Unix seconds) in newer versions; older ones do not, and
    // the batch scripts in jobs/slurm/ pass --stop-before instead.
    if (const char* end = std::getenv("SLURM_JOB_END_TIME"); end && *end) {
      char* rest = nullptr;
      const long long t = std::strtoll(end, &rest, 10);
      if (rest && *rest == '\0' && t > 0) run_options.scheduler_end_time = t;
    }
  } catch (const freegap::InputError& e) {
    std::cerr << "freegap: --stop-before " << e.what() << "\n";
    return kExitBadInput;
  }
  return freegap::run::run_job_in_world(argc, argv, job_path, run_options, std::cout, std::cerr);
}

// Runs a command (other than `run`); every error it throws becomes a message and an exit code.
template <class Command>
int run_reporting_errors(Command&& command) {
  try {
    return command();
  } catch (const freegap::InputError& e) {
    std::cerr << "freegap: " << e.what() << "\n";
    return kExitBadInput;
  } catch (const freegap::Stopped& e) {
    std::cerr << "freegap: " << e.what() << "\n";
    return freegap::stopped_exit_status(e.signal());
  } catch (const freegap::Error& e) {
    std::cerr << "freegap: " << e.what() << "\n";
    return kExitFailure;
  } catch (const std::exception& e) {
    // Anything else (a file system or allocation failure) is still a message and an exit code,
    // never a termination.
    std::cerr << "freegap: " << e.what() << "\n";
    return kExitFailure;
  }
}

}  // namespace

int main(int argc, char** argv) {
  // Matrix files in HDF5 are read by the store, the one part that links HDF5 (docs/parts.toml).
  freegap::matrix_file::set_hdf5_reader(&freegap::store::read_matrix_dataset);
  CLI::App app{"freegap: finite-N random matrices against their free-probability limits"};
  app.set_version_flag("--version", std::string(freegap::tool_version) + " (" +
                                        freegap::git_revision + ")");
  app.require_subcommand(1);

  SampleOptions sample;
  auto* sample_cmd = add_sample_command(app, sample);

  std::string job_path;
  freegap::run::RunOptions run_options;
  std::string stop_before;
  CLI::Option* run_output = nullptr;
  auto* run_cmd = add_run_command(app, job_path, run_options, stop_before, run_output);

  std::string inspect_path;
  bool inspect_job = false;
  bool inspect_moments = false;
  bool inspect_verify = false;
  auto* inspect_cmd =
      add_inspect_command(app, inspect_path, inspect_job, inspect_moments, inspect_verify);

  // Subcommands in files of their own (commands.hpp).
  std::vector<freegap::cli::Subcommand> extra;
  extra.push_back(freegap::cli::add_report_command(app));
  extra.push_back(freegap::cli::add_limit_command(app));
  extra.push_back(freegap::cli::add_plan_command(app));
  extra.push_back(freegap::cli::add_sweep_command(app));

  if (refuse_unknown_command(app, argc, argv)) return kExitBadInput;
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    const int rc = app.exit(e);
    return rc == 0 ? 0 : kExitBadInput;
  }
  if (*run_cmd) return start_run(argc, argv, job_path, run_options, stop_before, run_output);
  // A stop request (SIGINT, SIGTERM) ends the long phases of the other commands — validation,
  // sampling, the limit solver, reports — at their next poll, before anything is written
  // (freegap/stop.hpp); they exit with 128 + the signal's number. `inspect` only reads, and
  // `plan` and `sweep` keep the default action of the signals.
  if (*sample_cmd || app.got_subcommand("limit") || app.got_subcommand("report")) {
    freegap::install_stop_handlers();
  }
  // One OpenBLAS thread for the limit solver, which spreads its points over threads of its own
  // and calls LAPACK on small matrices. With OpenBLAS's threads the limit's last digits depended
  // on OPENBLAS_NUM_THREADS (a CDF differed by 5e-12), and its threads inside ours made Newton
  // systems of 144 unknowns slower (a pencil-12 limit: 16 s instead of 11 s on 2 cores).
  if (app.got_subcommand("limit") || app.got_subcommand("report")) {
    freegap::linalg::set_blas_threads(1);
  }
  return run_reporting_errors([&] {
    if (*inspect_cmd && inspect_verify) return run_verify(inspect_path);
    if (*inspect_cmd) return run_inspect(inspect_path, inspect_job, inspect_moments);
    if (*sample_cmd) return run_sample(sample);
    for (const auto& sub : extra) {
      if (*sub.command) return sub.action();
    }
    return 0;
  });
}
