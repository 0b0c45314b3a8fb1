// Parameter sweeps: one job file per point of a grid (or list) of job-key values, from a small
// sweep description, so a study over parameters runs as a job array (one task per job file) and
// reads as one study.
//
// The sweep file (TOML, our own). One key:
//
//   base = "coupling.toml"        # required: the job every task starts from (relative to
//                                 # this file)
//   vary = "matrices.W.ratio"     # a dotted job key; added if the base job lacks it
//   values = [0.25, 0.5, 1.0]     # one job per value, in this order
//   directory = "coupling-sweep"  # optional: where the job files go (relative to this file);
//                                 # default: the sweep file's stem next to it
//
// Several keys: a [vary] table of keys and value lists, and how to combine them:
//
//   combine = "grid"              # every combination (default; the last key varies fastest),
//                                 # or "zip": the i-th values of every key together
//   [vary]
//   "matrices.W.ratio" = [0.25, 0.5]
//   trials = [100, 200, 400]      # grid: 2 × 3 = 6 tasks
//
// Task i gets DIRECTORY/<stem>-<i>.toml (stem: the sweep file's stem): the base job with every
// varied key set to the point's value, `name` set to "<base name> (<key> = <value>, ...)",
// `run.output` to <stem>-<i>.h5 (next to the job file), every relative path the job names made
// absolute, and one comment line per key (kPointPrefix) that `freegap report` reads to collate the
// runs by point. Every job is validated before any file is written; DIRECTORY/jobs.txt then lists
// the job files, line i+1 for task i (what jobs/slurm/array.sbatch reads).
#pragma once

#include <cstddef>
#include <string>
#include <utility>
#include <vector>

namespace freegap::sweep {

/// At most this many tasks in one sweep (a grid grows as the product of its lists).
inline constexpr std::size_t kMaxTasks = 10000;

/// A task job file's comment line naming one varied key: "# sweep point: KEY = VALUE".
inline constexpr const char* kPointPrefix = "# sweep point: ";

struct Task {
  std::string job_path;  ///< the job file written
  std::string text;      ///< its text
  std::string value;     ///< the point as text: "key = value, key = value"
  std::vector<std::pair<std::string, std::string>> point;  ///< (key, value as TOML text)
};

/// The sweep point recorded in a task job's text (its kPointPrefix lines); empty for other jobs.
std::vector<std::pair<std::string, std::string>> point_of_job_text(const std::string& job_text);

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
