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

int run_limit(const LimitOptions& opt) {
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

  std::printf("expression: %s\n", expression.text().c_str());
  std::printf("spectrum: %s\n", singular ? "singular values" : "eigenvalues");
  std::printf("rule: %s\n", derived.rule.c_str());
  std::printf("law: %s\n", law->describe().c_str());
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

  const auto solver = polynomial != nullptr ? polynomial->solver_moments(opt.max_moment)
                                            : law->moments(opt.max_moment);
  const auto& exact = derived.exact_moments;
  std::printf("moments     %-20s  exact\n", polynomial != nullptr ? "solver" : "law");
  for (int k = 1; k <= opt.max_moment; ++k) {
    if (k < static_cast<int>(exact.size())) {
      std::printf("  m%-3d %20.12g  %20.12g\n", k, solver[k], exact[k]);
    } else {
      std::printf("  m%-3d %20.12g  %20s\n", k, solver[k], "(not available)");
    }
  }

  // The grid covers the support with a 5% margin on each side, or the window given, ends
  // included (the points x_i = LO + (HI − LO) i/(P − 1) of a report's density table).
  const double width = support.hi - support.lo;
  std::vector<double> xs;
  for (int i = 0; i < opt.points; ++i) {
    xs.push_back(opt.window.empty()
                     ? support.lo - 0.05 * width + 1.1 * width * (i + 0.5) / opt.points
                     : opt.window[0] + (opt.window[1] - opt.window[0]) * i / (opt.points - 1));
  }
  // Every point gets a density or is named as failed; a failure never ends the command.
  std::vector<double> density(xs.size(), std::nan(""));
  std::vector<bool> ok(xs.size(), false);
  long long steps = 0, worst = 0;
  if (polynomial != nullptr) {
    const auto reports = polynomial->evaluate(xs);
    for (std::size_t i = 0; i < reports.size(); ++i) {
      ok[i] = reports[i].converged;
      if (ok[i]) density[i] = reports[i].density;
      steps += reports[i].averaged_steps + reports[i].newton_steps;
      worst = std::max<long long>(worst, reports[i].averaged_steps + reports[i].newton_steps);
    }
  } else {
    density = analysis::densities_or_nan(*law, xs);
    for (std::size_t i = 0; i < xs.size(); ++i) ok[i] = !std::isnan(density[i]);
  }
  const auto converged = std::count(ok.begin(), ok.end(), true);
  if (polynomial != nullptr) {
    std::printf("density grid: %d points, %lld converged; iterations per point: mean %.1f, max %lld\n",
                opt.points, static_cast<long long>(converged), static_cast<double>(steps) / opt.points,
                worst);
  } else {
    std::printf("density grid: %d points, %lld converged\n", opt.points,
                static_cast<long long>(converged));
  }
  for (std::size_t i = 0; i < xs.size(); ++i) {
    if (!ok[i]) std::printf("  not converged at x = %.10g (no value reported)\n", xs[i]);
  }
  for (const auto& a : support.atoms) std::printf("point mass: %.6f at x = %.10g\n", a.mass, a.value);
  if (!derived.law_note.empty()) std::printf("note: %s\n", derived.law_note.c_str());

  if (opt.output.empty()) return 0;
  namespace fs = std::filesystem;
  const fs::path dir(opt.output);
  output_dir::Staged staged(dir, "limit", "-o");
  const fs::path csv = staged.path() / "limit.csv";
  {
    std::ofstream out(csv);
    if (!out) throw InputError("-o " + opt.output + ": cannot write " + csv.string());
    out << "x,density,cdf\n";
    char line[128];
    for (std::size_t i = 0; i < xs.size(); ++i) {
      check_stop();  // the CDF integrates the density: stop before the table is complete
      double cdf = std::nan("");
      try {
        cdf = law->cdf(xs[i]);
      } catch (const NumericalError&) {
      }
      std::snprintf(line, sizeof line, "%.12g,%.12g,%.12g\n", xs[i], density[i], cdf);
      out << line;
    }
    if (!out) throw Error("writing " + csv.string() + " failed");
  }

  const char* env = std::getenv("FREEGAP_PLOT_LIMIT");
  // const: a non-const std::string would pick std::quoted (found by ADL) over ours below.
  const std::string script = [&]() -> std::string {
    if (env && *env) return env;
    try {
      return install_paths::analysis_script("plot_limit.py");
    } catch (const Error&) {
      return "plot_limit.py (not found beside freegap)";
    }
  }();
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
