// The freegap executable: parses the command line and calls the library (docs/building.md habit 1).
#include <CLI/CLI.hpp>
#include <algorithm>
#include <map>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <iostream>
#include <string>
#include <vector>

#include "commands.hpp"
#include "freegap/errors.hpp"
#include "freegap/linalg.hpp"
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

// What the checks found: whether the file has checksums, and each damaged unit, left out.
void print_integrity(const freegap::store::Integrity& integrity) {
  if (!integrity.checksummed) {
    std::printf("checksums:  none (unverified: written before checksums)\n");
  }
  for (const auto& d : integrity.damaged) {
    std::printf("damaged:    N = %lld, unit %lld: %s; left out (a resume computes it again)\n",
                static_cast<long long>(d.n), static_cast<long long>(d.unit), d.reason.c_str());
  }
}

// `inspect --verify`: every committed unit and the header against their checksums.
int run_verify(const std::string& path) {
  const auto integrity = freegap::store::verify(path);
  std::printf("run file:   %s\n", path.c_str());
  print_integrity(integrity);
  if (!integrity.checksummed) {
    std::printf(
        "verify:     nothing to compare (the file has no checksums); it reads without "
        "errors\n");
    return 0;
  }
  if (integrity.damaged.empty()) {
    std::printf("verify:     ok: the header and every committed unit match their checksums\n");
    return 0;
  }
  std::printf("verify:     %zu damaged unit(s); every other committed unit matches its checksum\n",
              integrity.damaged.size());
  return kExitDamaged;
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
    for (std::size_t i = 0; i < runners.size(); ++i) {
      std::cout << runners[i].explain() << "why the path: " << study.path_reason(i) << "\n\n";
    }
    return 0;
  }
  const auto& expression = runners.front().expression();
  std::printf("expression: %s  (%s; %s)\n", expression.text().c_str(),
              expression.self_adjoint() ? "self-adjoint" : "not self-adjoint",
              expression.spectrum() == freegap::expr::Spectrum::eigenvalues ? "eigenvalues"
                                                                          : "singular values");
  std::printf("seed %llu, %lld trials per size; moments m_k = (1/N) sum x^k, mean +- standard error\n\n",
              static_cast<unsigned long long>(opt.seed), opt.trials);
  std::printf("%8s %6s", "N", "failed");
  for (int k = 1; k <= opt.max_moment; ++k) std::printf("   %20s", ("m_" + std::to_string(k)).c_str());
  std::printf("   %18s %18s %10s\n", "largest", "norm", "s/trial");
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
    const auto s = freegap::observe::summarize(obs);
    std::printf("%8lld %6lld", static_cast<long long>(runner.size()), static_cast<long long>(s.failed));
    for (int k = 1; k <= opt.max_moment; ++k) {
      std::printf("   %10.5f +- %7.5f", s.moments[k].mean, s.moments[k].standard_error);
    }
    std::printf("   %8.5f +- %6.4f %8.5f +- %6.4f %10.3f\n", s.max.mean, s.max.standard_error,
                s.norm.mean, s.norm.standard_error, secs / static_cast<double>(opt.trials));
  }
  return 0;
}

// `inspect`: the stored job as this freegap compiles it (study::Study, as `report` does): its
// path and why, and whether that is the path the run recorded; or why it no longer compiles.
void print_compiled_study(const freegap::store::RunHeader& h, const std::string& path) {
  try {
    const auto study = freegap::study::Study::of_stored_job(h.job_text, h.job_canonical, path);
    if (study.runners().empty()) return;
    const bool tridiagonal = study.runners().front().path() == freegap::model::Path::tridiagonal;
    const std::string here = tridiagonal ? "tridiagonal" : "dense";
    const auto recorded = h.metadata.find("path");
    const bool differs = recorded != h.metadata.end() && recorded->second != here;
    std::printf("compiled:   %s%s\n", study.path_reason(0).c_str(),
                differs ? (" (the run recorded the " + recorded->second + " path)").c_str() : "");
  } catch (const freegap::InputError& e) {
    std::printf("compiled:   the stored job does not compile with this freegap: %s\n", e.what());
  }
}

// `inspect`: the run file's header — who wrote it, its metadata, expression, job hash and checks.
void print_inspect_header(const freegap::store::RunFile& file, const std::string& path) {
  const auto& h = file.header();
  std::printf("run file:   %s\n", path.c_str());
  std::printf("written by: freegap %s (%s), format %d.x\n", h.tool_version.c_str(),
              h.git_revision.c_str(), freegap::store::kFormatMajor);
  for (const auto& [key, value] : h.metadata) std::printf("%-13s %s\n", (key + ":").c_str(), value.c_str());
  std::printf("expression: %s (%s; %s)\n", h.expression.c_str(),
              h.self_adjoint ? "self-adjoint" : "not self-adjoint",
              freegap::store::spectrum_name(h.spectrum).c_str());
  std::printf("job hash:   %s\n", h.job_hash.c_str());
  print_compiled_study(h, path);
  print_integrity(file.integrity());
}

// `inspect`: a row per size (units, trials, failures, kept spectra), then the run's status and its
// trials' failure reasons.
void print_size_table(const freegap::store::RunFile& file) {
  const auto& h = file.header();
  std::printf("%10s %12s %14s %10s %8s\n", "N", "units", "trials", "failed", "spectra");
  bool complete = true;
  std::vector<std::string> failures;
  for (std::size_t i = 0; i < h.sizes.size(); ++i) {
    const auto& layout = h.sizes[i];
    const auto committed = file.committed(i);
    const auto done = std::count(committed.begin(), committed.end(), true);
    const auto obs = file.read_observations(i);
    const auto summary = freegap::observe::summarize(obs);
    std::printf("%10lld %5lld/%-6lld %6lld/%-7lld %10lld %8lld%s\n", static_cast<long long>(layout.n),
                static_cast<long long>(done), static_cast<long long>(committed.size()),
                static_cast<long long>(obs.trials.size()), static_cast<long long>(layout.trials),
                static_cast<long long>(summary.failed), static_cast<long long>(layout.keep_count()),
                done == static_cast<long long>(committed.size()) ? "" : "  incomplete");
    if (done != static_cast<long long>(committed.size())) complete = false;
    for (const auto& [reason, count] : summary.failure_reasons) {
      failures.push_back("N = " + std::to_string(layout.n) + ": " + std::to_string(count) +
                         " trial(s): " + reason);
    }
  }
  std::printf("\nstatus:     %s\n", complete ? "complete" : "incomplete (run the job again to resume)");
  for (const auto& f : failures) std::printf("failure:    %s\n", f.c_str());
}

// `inspect`: the estimators' columns, and per size how many committed trials each failed, and why.
void print_estimates(const freegap::store::RunFile& file) {
  const auto& h = file.header();
  std::string columns;
  for (const auto& c : h.estimates) {
    columns += (columns.empty() ? "" : ", ") + c.estimator + "." + c.estimate + " (truth " +
               c.truth + ")";
  }
  std::printf("estimates:  %s\n", columns.c_str());
  const auto names = h.estimators();
  for (std::size_t i = 0; i < h.sizes.size(); ++i) {
    const auto rows = file.read_estimates(i);
    for (std::size_t e = 0; e < names.size(); ++e) {
      std::map<std::string, std::int64_t> reasons;
      for (std::size_t t = 0; t < rows.trials.size(); ++t) {
        const auto& reason = rows.failures[t * names.size() + e];
        if (!reason.empty()) ++reasons[reason];
      }
      for (const auto& [reason, count] : reasons) {
        std::printf("estimate failure: N = %lld: %s: %lld trial(s): %s\n",
                    static_cast<long long>(h.sizes[i].n), names[e].c_str(),
                    static_cast<long long>(count), reason.c_str());
      }
    }
  }
}

// `inspect --moments`: per-size means over committed, non-failed trials, with standard errors
// (derived when read).
void print_moments(const freegap::store::RunFile& file) {
  const auto& h = file.header();
  std::printf("\nmoments m_k = (1/N) sum x^k over committed trials, mean +- standard error\n");
  for (std::size_t i = 0; i < h.sizes.size(); ++i) {
    const auto s = freegap::observe::summarize(file.read_observations(i));
    std::printf("N = %lld (%lld trials):\n", static_cast<long long>(h.sizes[i].n),
                static_cast<long long>(s.trials - s.failed));
    for (std::size_t k = 1; k < s.moments.size(); ++k) {
      std::printf("  m_%-2zu %14.6f +- %.6f\n", k, s.moments[k].mean, s.moments[k].standard_error);
    }
    std::printf("  smallest %9.6f, largest %9.6f, operator norm %.6f +- %.6f (mean over trials)\n",
                s.min.mean, s.max.mean, s.norm.mean, s.norm.standard_error);
  }
}

int run_inspect(const std::string& path, bool show_job, bool show_moments) {
  const auto file = freegap::store::RunFile::open_read(path);
  const auto& h = file.header();
  print_inspect_header(file, path);
  std::printf("\n");
  print_size_table(file);
  if (!h.estimates.empty()) print_estimates(file);
  const auto prov = file.read_provenance();
  std::printf("created:    %s\n", prov.created.c_str());
  for (std::size_t i = 0; i < prov.sessions.size(); ++i) {
    const auto& s = prov.sessions[i];
    std::printf("session %zu:  %s .. %s, %d rank(s), %s\n", i, s.started.c_str(),
                s.ended.empty() ? "?" : s.ended.c_str(), s.ranks, s.status.c_str());
  }
  if (show_moments) print_moments(file);
  if (show_job) std::printf("\n--- job file ---\n%s", h.job_text.c_str());
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
