// `freegap sweep SWEEP.toml`: one job file per value of a parameter, for a job array.
#include "freegap/sweep.hpp"

#include <iostream>

#include "commands.hpp"

namespace freegap::cli {

Subcommand add_sweep_command(CLI::App& app) {
  auto path = std::make_shared<std::string>();
  auto* cmd = app.add_subcommand(
      "sweep", "Write one job file per point of a sweep (values of one or several job keys, as a "
      "grid or zipped lists) for a job array");
  cmd->add_option("sweep_file", *path,
                  "Sweep file (TOML: base, vary with values or a [vary] table, combine, directory)")
      ->required();
  return {cmd, [path] {
            const auto s = sweep::expand(*path);
            sweep::write(s);
            for (std::size_t i = 0; i < s.tasks.size(); ++i) {
              std::cout << i << "  " << s.tasks[i].job_path << "  (" << s.tasks[i].value << ")\n";
            }
            std::cout << "wrote " << s.tasks.size() << " job files and " << s.list_path
                      << "\nsubmit them as an array, e.g.: sbatch --array=0-" << s.tasks.size() - 1
                      << " jobs/slurm/array.sbatch " << s.list_path << "\n";
            return 0;
          }};
}

}  // namespace freegap::cli
