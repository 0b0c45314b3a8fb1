// `freegap limit`: the N → ∞ law of an expression from the matrices' declarations alone (no
// sampling) — support edges, operator-norm limit, moments, and a density/CDF table with plots.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <string>
#include <vector>

#include "commands.hpp"
#include "freegap/analysis/limits/limit.hpp"
#include "freegap/analysis/limits/polynomial_limit.hpp"
#include "freegap/errors.hpp"
#include "freegap/install_paths.hpp"
#include "freegap/model.hpp"
#include "freegap/output_dir.hpp"
#include "freegap/stop.hpp"
#include "freegap/study.hpp"

namespace freegap::cli {

namespace {

struct LimitOptions {
  std::vector<std::string> declarations;
  std::string expression;
  std::string output;
  int points = 400;
  int max_moment = 6;
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

// The law found: the expression, its spectrum, the rule and the law (a polynomial's free
// variables and pencil), the support and its bands, and the operator-norm limit.
void print_law(const expr::Expression& expression, const analysis::DerivedLimit& derived,
               const analysis::Law& law, const analysis::PolynomialLaw* polynomial,
               const analysis::Support& support, bool singular) {
  std::printf("expression: %s\n", expression.text().c_str());
  std::printf("spectrum: %s\n", singular ? "singular values" : "eigenvalues");
  std::printf("rule: %s\n", derived.rule.c_str());
  std::printf("law: %s\n", law.describe().c_str());
  if (polynomial != nullptr) {
    std::printf("free variables:\n");
    for (const auto& l : polynomial->polynomial().letters) {
      std::printf("  %-14s %s\n", l.name.c_str(), l.law->describe().c_str());
    }
    std::printf("pencil size: %d (self-adjoint linearization)\n", polynomial->pencil_size());
  }
  std::printf("support: [%.10f, %.10f]\n", support.lo, support.hi);
  if (support.bands.size() > 1) {
    std::printf("bands of the continuous part: %zu\n", support.bands.size());
    for (const auto& band : support.bands) std::printf("  [%.10f, %.10f]\n", band.lo, band.hi);
  }
  const double norm = polynomial != nullptr ? polynomial->norm_limit()
                      : singular ? support.hi
                                 : std::max(std::abs(support.lo), std::abs(support.hi));
  std::printf("operator-norm limit: %.10f\n", norm);
}

// The moments from the solver (or the law) beside the exact ones where they are known.
void print_moments(const analysis::Law& law, const analysis::PolynomialLaw* polynomial,
                   const analysis::DerivedLimit& derived, int max_moment) {
  const auto solver = polynomial != nullptr ? polynomial->solver_moments(max_moment)
                                            : law.moments(max_moment);
  const auto& exact = derived.exact_moments;
  std::printf("moments     %-20s  exact\n", polynomial != nullptr ? "solver" : "law");
  for (int k = 1; k <= max_moment; ++k) {
    if (k < static_cast<int>(exact.size())) {
      std::printf("  m%-3d %20.12g  %20.12g\n", k, solver[k], exact[k]);
    } else {
      std::printf("  m%-3d %20.12g  %20s\n", k, solver[k], "(not available)");
    }
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

/// The density at every point of the grid (NaN where it failed), which points converged, and the
/// polynomial solver's iterations (all points together, and the most at one point).
struct Densities {
  std::vector<double> density;
  std::vector<bool> ok;
  long long steps = 0, worst = 0;
};

// Every point gets a density or is named as failed; a failure never ends the command.
Densities evaluate_densities(const analysis::Law& law, const analysis::PolynomialLaw* polynomial,
                             const std::vector<double>& xs) {
  Densities d;
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

// How many points converged (with the solver's iterations), each point that did not, the point
// masses and the law's note.
void print_density_summary(const Densities& d, const std::vector<double>& xs, int points,
                           const analysis::PolynomialLaw* polynomial,
                           const analysis::Support& support,
                           const analysis::DerivedLimit& derived) {
  const auto converged = std::count(d.ok.begin(), d.ok.end(), true);
  if (polynomial != nullptr) {
    std::printf("density grid: %d points, %lld converged; iterations per point: mean %.1f, max %lld\n",
                points, static_cast<long long>(converged), static_cast<double>(d.steps) / points,
                d.worst);
  } else {
    std::printf("density grid: %d points, %lld converged\n", points,
                static_cast<long long>(converged));
  }
  for (std::size_t i = 0; i < xs.size(); ++i) {
    if (!d.ok[i]) std::printf("  not converged at x = %.10g (no value reported)\n", xs[i]);
  }
  for (const auto& a : support.atoms) std::printf("point mass: %.6f at x = %.10g\n", a.weight, a.value);
  if (!derived.law_note.empty()) std::printf("note: %s\n", derived.law_note.c_str());
}

// Writes the table x, density, cdf to `csv` (`output`: the -o directory, for the messages).
void write_limit_csv(const std::filesystem::path& csv, const std::string& output,
                     const std::vector<double>& xs, const std::vector<double>& density,
                     const analysis::Law& law) {
  std::ofstream out(csv);
  if (!out) throw InputError("-o " + output + ": cannot write " + csv.string());
  out << "x,density,cdf\n";
  char line[128];
  for (std::size_t i = 0; i < xs.size(); ++i) {
    check_stop();  // the CDF integrates the density: stop before the table is complete
    double cdf = std::nan("");
    try {
      cdf = law.cdf(xs[i]);
    } catch (const NumericalError&) {
    }
    std::snprintf(line, sizeof line, "%.12g,%.12g,%.12g\n", xs[i], density[i], cdf);
    out << line;
  }
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
  for (const auto& d : opt.declarations) specs.push_back(model::parse_declaration(d));
  // The compiled study of the expression: the same checks and the same derivation as `report`,
  // `plan` and the estimators' truths (closed-form rules, then free convolutions, then the
  // polynomial solver; singular values from the law of P^*P).
  const study::Study study = study::Study::of_expression(specs, opt.expression);
  const expr::Expression& expression = study.expression();
  const analysis::DerivedLimit derived = study.limit(opt.max_moment);
  if (!derived.law) throw InputError("no limit is derived for '" + expression.text() + "': " + derived.reason);
  const analysis::LawPtr law = derived.law;
  const auto* polynomial = dynamic_cast<const analysis::PolynomialLaw*>(law.get());
  const auto support = law->support();
  const bool singular = expression.spectrum() == expr::Spectrum::singular_values;

  print_law(expression, derived, *law, polynomial, support, singular);
  print_moments(*law, polynomial, derived, opt.max_moment);

  const std::vector<double> xs = density_grid(opt, support);
  const Densities densities = evaluate_densities(*law, polynomial, xs);
  print_density_summary(densities, xs, opt.points, polynomial, support, derived);

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
  std::printf("wrote %s\n", (dir / "limit.csv").string().c_str());
  if (rc == 0) {
    std::printf("wrote %s and %s\n", (dir / "limit.png").string().c_str(),
                (dir / "limit.svg").string().c_str());
  } else {
    std::printf(
        "note: no figures (the plot script %s failed; it needs /usr/bin/python3 with "
        "matplotlib: apt-get install python3-matplotlib); the CSV is complete\n",
        script.c_str());
  }
  return 0;
}

}  // namespace

Subcommand add_limit_command(CLI::App& app) {
  auto opt = std::make_shared<LimitOptions>();
  auto* cmd = app.add_subcommand(
      "limit", "The N → ∞ law of an expression from the declarations alone (no sampling)");
  cmd->add_option("-m,--matrix", opt->declarations,
                  "Declare a matrix: NAME=ENSEMBLE[:key=value]... (repeatable)")
      ->required();
  cmd->add_option("-e,--expression", opt->expression,
                  "Expression in the matrices (eigenvalues if self-adjoint, else singular values)")
      ->required();
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
  return {cmd, [opt] { return run_limit(*opt); }};
}

}  // namespace freegap::cli
