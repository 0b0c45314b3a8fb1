// Parameter sweeps: one job file per value of one job key, from a small sweep description, so a
// study over a parameter runs as a job array (one task per job file) and reads as one study.
//
// The sweep file (TOML, our own):
//
//   base = "coupling.toml"        # required: the job every task starts from (relative to
//                                 # this file)
//   vary = "matrices.W.ratio"     # required: a dotted job key; added if the base job lacks it
//   values = [0.25, 0.5, 1.0]     # required: one job per value, in this order
//   directory = "coupling-sweep"  # optional: where the job files go (relative to this file);
//                                 # default: the sweep file's stem next to it
//
// Task i gets DIRECTORY/<stem>-<i>.toml (stem: the sweep file's stem): the base job with `vary`
// set to values[i], `name` set to "<base name> (<vary> = <value>)", `run.output` to <stem>-<i>.h5
// (next to the job file) and a relative `path` of a law = "file" diagonal made absolute. Every job
// is validated before any file is written; DIRECTORY/jobs.txt then lists the job files, line i+1
// for task i (what jobs/slurm/array.sbatch reads).
#pragma once

#include <string>
#include <vector>

namespace freegap::sweep {

struct Task {
  std::string job_path;  ///< the job file written
  std::string text;      ///< its text
  std::string value;     ///< the value as TOML text
};

struct Sweep {
  std::string directory;  ///< absolute
  std::string list_path;  ///< DIRECTORY/jobs.txt
  std::vector<Task> tasks;
};

/// Reads a sweep file and builds its jobs (nothing written). Throws InputError naming the sweep
/// file (or the generated job) and the fix.
Sweep expand(const std::string& sweep_path);

/// Writes the job files and jobs.txt (creating the directory); returns what it wrote.
void write(const Sweep& sweep);

}  // namespace freegap::sweep
