// Subcommands that live in files of their own register through this interface: each adds itself
// to the application and returns the action main() runs when it was chosen. Actions throw
// freegap::InputError for bad input (exit 2) and freegap::Error for failures (exit 1).
#pragma once

#include <CLI/CLI.hpp>
#include <functional>

namespace freegap::cli {

struct Subcommand {
  CLI::App* command = nullptr;
  std::function<int()> action;
};

// One line per subcommand file, each defined in src/cli/<name>.cpp; main() calls them in the order
// they are listed in main() (the order of `--help`).
Subcommand add_report_command(CLI::App& app);
Subcommand add_limit_command(CLI::App& app);
Subcommand add_plan_command(CLI::App& app);
Subcommand add_sweep_command(CLI::App& app);

}  // namespace freegap::cli
