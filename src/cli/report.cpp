// `freegap report RUN.h5 [RUN.h5 ...] [-o DIR]`: finite-N errors against the limit, rate fits,
// tables and figures (analysis/report.hpp).
#include <iostream>
#include <memory>
#include <string>
#include <vector>

#include "commands.hpp"
#include "freegap/analysis/reporting/report.hpp"

namespace freegap::cli {

Subcommand add_report_command(CLI::App& app) {
  struct State {
    std::vector<std::string> files;
    analysis::ReportOptions options;
    bool no_figures = false;
  };
  auto state = std::make_shared<State>();
  auto* cmd = app.add_subcommand(
      "report",
      "Compare run files with their limit: errors per N with standard errors, rate fits, "
      "report.md, CSV, HDF5 and figures; several files of one sweep are reported together");
  cmd->add_option("run_files", state->files, "Run files (HDF5); complete, partial or killed")
      ->required()
      ->check(CLI::ExistingFile);
  cmd->add_option("-o,--output", state->options.output_dir,
                  "Report directory (default: <first run file's stem>-report beside it); "
                  "an earlier report there is replaced");
  cmd->add_flag("--no-figures", state->no_figures, "Tables only: do not run matplotlib");
  cmd->add_option("--bootstrap", state->options.bootstrap_replicates,
                  "Bootstrap replicates per size for the distances' standard errors")
      ->check(CLI::Range(2, 100000));
  cmd->add_option("--fit-bootstrap", state->options.fit_bootstrap_replicates,
                  "Bootstrap replicates for the exponents' intervals")
      ->check(CLI::Range(2, 100000));
  return {cmd, [state]() {
            state->options.figures = !state->no_figures;
            analysis::Report report;
            const std::string dir = analysis::write_report(state->files, state->options, &report);
            std::cout << "report written to " << dir << "/report.md\n";
            for (const auto& s : report.incomplete) std::cout << "incomplete: " << s << "\n";
            for (const auto& s : report.integrity) std::cout << "damaged: " << s << "\n";
            return 0;
          }};
}

}  // namespace freegap::cli
