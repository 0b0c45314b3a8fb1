// `freegap limit`: the N → ∞ law of an expression from the matrices' declarations alone (no
// sampling) — support edges, operator-norm limit, moments, and a density/CDF table with plots.
#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <string>
#include <vector>

#include "commands.hpp"
#include "freegap/analysis/limits/limit.hpp"
#include "freegap/analysis/limits/polynomial_limit.hpp"
#include "freegap/analysis/reporting/console.hpp"
#include "freegap/errors.hpp"
#include "freegap/install_paths.hpp"
#include "freegap/job.hpp"
#include "freegap/model.hpp"
#include "freegap/output_dir.hpp"
#include "freegap/stop.hpp"
#include "freegap/study.hpp"

namespace freegap::cli {

namespace {

struct LimitOptions {
  std::vector<std::string> declarations;
  std::string expression;
  std::string job;  ///< a job file: its matrices and expression instead of -m and -e
  std::string output;
  int points = 400;
  int max_moment = 6;
  std::int64_t size = 0;  // --size: where deterministic matrices are formed (0: none given)
  std::vector<double> window;  ///< LO, HI: the table's first and last x (empty: the support ± 5 %)
};

std::string quoted(const std::string& s) {
  std::string out = "'";
  for (char c : s) {
    if (c == '\'') {
      out += "'\\''";
    } else {
      out += c;
    }
  }
  return out + "'";
}

// The most density points `limit` solves for. Each point is one operator-valued solve
// (milliseconds for small pencils, more for large ones); 100,000 points resolve a density far
// finer than any histogram of a finite-N run or any figure, and still finish in minutes.
constexpr int kMaxPoints = 100000;

// Refuses a --points or --window that `limit` does not take.
void check_limit_options(const LimitOptions& opt) {
  if (opt.job.empty() && (opt.declarations.empty() || opt.expression.empty())) {
    throw InputError("limit needs the model: --job FILE, or -m NAME=ENSEMBLE (repeatable) and "
                     "-e EXPRESSION");
  }
  if (!opt.job.empty() && (!opt.declarations.empty() || !opt.expression.empty())) {
    throw InputError("--job takes the matrices and the expression from the job file; drop -m "
                     "and -e, or drop --job");
  }
  if (opt.points < 10 || opt.points > kMaxPoints) {
    throw InputError("--points must be between 10 and " + std::to_string(kMaxPoints) + " (got " +
                     std::to_string(opt.points) + ")");
  }
  if (!opt.window.empty() &&
      (opt.window.size() != 2 || !std::isfinite(opt.window[0]) ||
       !std::isfinite(opt.window[1]) || !(opt.window[0] < opt.window[1]))) {
    throw InputError(
        "--window takes two finite numbers LO,HI with LO < HI (the first and last x of the "
        "density table), for example --window -3,3");
  }
}

// The grid covers the support with a 5% margin on each side, or the window given, ends
// included (the points x_i = LO + (HI − LO) i/(P − 1) of a report's density table).
std::vector<double> density_grid(const LimitOptions& opt, const analysis::Support& support) {
  const double width = support.hi - support.lo;
  std::vector<double> xs;
  for (int i = 0; i < opt.points; ++i) {
    xs.push_back(opt.window.empty()
                     ? support.lo - 0.05 * width + 1.1 * width * (i + 0.5) / opt.points
                     : opt.window[0] + (opt.window[1] - opt.window[0]) * i / (opt.points - 1));
  }
  return xs;
}

// Every point gets a density or is named as failed; a failure never ends the command.
analysis::LimitDensities evaluate_densities(const analysis::Law& law,
                                            const analysis::PolynomialLaw* polynomial,
                                            const std::vector<double>& xs) {
  analysis::LimitDensities d;
  d.density.assign(xs.size(), std::nan(""));
  d.ok.assign(xs.size(), false);
  if (polynomial != nullptr) {
    const auto reports = polynomial->evaluate(xs);
    for (std::size_t i = 0; i < reports.size(); ++i) {
      d.ok[i] = reports[i].converged;
      if (d.ok[i]) d.density[i] = reports[i].density;
      d.steps += reports[i].averaged_steps + reports[i].newton_steps;
      d.worst = std::max<long long>(d.worst, reports[i].averaged_steps + reports[i].newton_steps);
    }
  } else {
    d.density = analysis::densities_or_nan(law, xs);
    for (std::size_t i = 0; i < xs.size(); ++i) d.ok[i] = !std::isnan(d.density[i]);
  }
  return d;
}

// The CDF at every point of the grid (NaN where it failed); it integrates the density, so a stop
// request ends it between points.
std::vector<double> evaluate_cdf(const analysis::Law& law, const std::vector<double>& xs) {
  std::vector<double> cdf(xs.size(), std::nan(""));
  for (std::size_t i = 0; i < xs.size(); ++i) {
    check_stop();
    try {
      cdf[i] = law.cdf(xs[i]);
    } catch (const NumericalError&) {
    }
  }
  return cdf;
}

// Writes the table x, density, cdf to `csv` (`output`: the -o directory, for the messages).
void write_limit_csv(const std::filesystem::path& csv, const std::string& output,
                     const std::vector<double>& xs, const std::vector<double>& density,
                     const analysis::Law& law) {
  const std::string table = analysis::limit_csv(xs, density, evaluate_cdf(law, xs));
  std::ofstream out(csv);
  if (!out) throw InputError("-o " + output + ": cannot write " + csv.string());
  out << table;
  if (!out) throw Error("writing " + csv.string() + " failed");
}

// The plot script: FREEGAP_PLOT_LIMIT if set, else plot_limit.py where freegap finds its scripts.
std::string plot_script() {
  const char* env = std::getenv("FREEGAP_PLOT_LIMIT");
  if (env && *env) return env;
  try {
    return install_paths::analysis_script("plot_limit.py");
  } catch (const Error&) {
    return "plot_limit.py (not found beside freegap)";
  }
}

int run_limit(const LimitOptions& opt) {
  check_limit_options(opt);
  // An output directory holding anything freegap did not write is refused before any work.
  if (!opt.output.empty()) output_dir::check_replaceable(opt.output, "limit", "-o");
  std::vector<declarations::MatrixSpec> specs;
  std::string expression_text = opt.expression;
  std::int64_t size = opt.size;
  if (!opt.job.empty()) {
    // A job file's matrices as the run reads them (matrix files included, checked at its sizes).
    job::Job job = job::load_job(opt.job);
    specs = job.matrices;
    expression_text = job.expression;
    if (size == 0 && !job.sizes.empty()) size = job.sizes.back();
  }
  for (const auto& d : opt.declarations) specs.push_back(model::parse_declaration(d));
  // The compiled study of the expression: the same checks and the same derivation as `report`,
  // `plan` and the estimators' truths (closed-form rules, then free convolutions, then the
  // polynomial solver; singular values from the law of P^*P).
  const study::Study study = study::Study::of_expression(specs, expression_text);
  const expr::Expression& expression = study.expression();
  const analysis::DerivedLimit derived = study.limit(opt.max_moment, size);
  if (!derived.law) throw InputError("no limit is derived for '" + expression.text() + "': " + derived.reason);
  const analysis::LawPtr law = derived.law;
  const auto* polynomial = dynamic_cast<const analysis::PolynomialLaw*>(law.get());
  const auto support = law->support();
  const bool singular = expression.spectrum() == expr::Spectrum::singular_values;

  const double norm = polynomial != nullptr ? polynomial->norm_limit()
                      : singular ? support.hi
                                 : std::max(std::abs(support.lo), std::abs(support.hi));
  std::cout << analysis::limit_law_text(expression, derived, *law, polynomial, support, singular,
                                        norm);
  const auto moments = polynomial != nullptr ? polynomial->solver_moments(opt.max_moment)
                                             : law->moments(opt.max_moment);
  std::cout << analysis::limit_moments_text(moments, polynomial != nullptr, derived,
                                            opt.max_moment);

  const std::vector<double> xs = density_grid(opt, support);
  const analysis::LimitDensities densities = evaluate_densities(*law, polynomial, xs);
  std::cout << analysis::limit_density_text(densities, xs, polynomial != nullptr, support,
                                            derived);

  if (opt.output.empty()) return 0;
  namespace fs = std::filesystem;
  const fs::path dir(opt.output);
  output_dir::Staged staged(dir, "limit", "-o");
  const fs::path csv = staged.path() / "limit.csv";
  write_limit_csv(csv, opt.output, xs, densities.density, *law);

  // const: a non-const std::string would pick std::quoted (found by ADL) over ours below.
  const std::string script = plot_script();
  const std::string title = "N → ∞ law of " + expression.text();
  const std::string command = "/usr/bin/python3 " + quoted(script) + " " + quoted(csv.string()) +
                              " " + quoted((staged.path() / "limit").string()) + " " +
                              quoted(title) + " " +
                              std::to_string(support.lo) + " " + std::to_string(support.hi);
  const int rc = std::system(command.c_str());
  staged.commit();
  std::cout << analysis::limit_files_text(dir, rc == 0, script);
  return 0;
}

}  // namespace

Subcommand add_limit_command(CLI::App& app) {
  auto opt = std::make_shared<LimitOptions>();
  auto* cmd = app.add_subcommand(
      "limit", "The N → ∞ law of an expression from the declarations alone (no sampling)");
  cmd->add_option("-m,--matrix", opt->declarations,
                  "Declare a matrix: NAME=ENSEMBLE[:key=value]... (repeatable)");
  cmd->add_option("-e,--expression", opt->expression,
                  "Expression in the matrices (eigenvalues if self-adjoint, else singular values)");
  cmd->add_option("--job", opt->job,
                  "A job file: its matrices and expression (instead of -m and -e; matrices read "
                  "from files are declared this way)");
  cmd->add_option("-o,--output", opt->output,
                  "Directory for limit.csv (x, density, cdf) and limit.png / limit.svg");
  cmd->add_option("--points", opt->points, "Grid points of the density table (default 400)");
  cmd->add_option("--window", opt->window,
                  "LO,HI: the density table runs from LO to HI, both included (default: the "
                  "support with 5% on each side)")
      ->delimiter(',')
      ->expected(2);
  cmd->add_option("-k,--max-moment", opt->max_moment, "Highest moment shown (default 6)")
      ->check(CLI::Range(1, 10));
  cmd->add_option("--size", opt->size,
                  "N at which deterministic matrices that are not free of each other are formed "
                  "(the free deterministic equivalent; default: a job's largest size)")
      ->check(CLI::Range(std::int64_t{1}, std::int64_t{100000}));
  return {cmd, [opt] { return run_limit(*opt); }};
}

}  // namespace freegap::cli
