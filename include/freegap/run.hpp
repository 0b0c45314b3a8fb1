// The MPI runner: turns a job into a run file on one process or many ranks, with dynamic
// cost-balanced scheduling, crash-safe streaming, resume, signals and progress.
//
// Work units are (size, block of trials) with the block size fixed by the job, so the units — and
// the numbers in them — are the same however many ranks run. Rank 0 coordinates, computes like any
// other rank between coordination steps, and is the only writer. Units go out biggest first
// (cost ∝ N³ × trials, the dense work), each worker asking for its next unit when it starts one,
// so the answer is waiting when it finishes.
//
// Signals: SIGUSR1 means "checkpoint now and stop cleanly": every rank stops at its next trial
// boundary, drops its unfinished unit, the committed units stay in the file, and the run exits
// with kExitResumable. SIGTERM and SIGINT do the same (under mpirun a rank has only 1–2 s after
// SIGTERM before SIGKILL — docs/cluster-notes.md §1.5 — but every unit is committed as
// it arrives, so a kill loses at most the units in flight).
//
// Deadlines (RunOptions::stop_before_seconds, RunOptions::scheduler_end_time): rank 0 hands out a
// unit only if, by the measured durations of finished units, it would end before the deadline;
// otherwise every rank finishes its current unit, the run commits and exits kExitResumable.
#pragma once

#include <mpi.h>

#include <cstdint>
#include <iosfwd>
#include <string>

#include "freegap/errors.hpp"
#include "freegap/job.hpp"
#include "freegap/model.hpp"

namespace freegap::run {

// Exit statuses: freegap::kExit* (errors.hpp), returned by run_job.

struct RunOptions {
  std::string output;     ///< run file; empty: the job's output
  bool fresh = false;     ///< delete an existing run file and start over
  bool explain = false;   ///< print the evaluation plans and the work, run nothing
  int threads = 1;        ///< BLAS threads per rank
  double progress_seconds = 30.0;  ///< plain progress line interval when stderr is not a terminal
  bool quiet = false;     ///< no progress output
  /// --stop-before: start no unit that would not finish within this many seconds of run_job's
  /// start (by measured unit durations), then commit and exit kExitResumable; 0 = no limit.
  double stop_before_seconds = 0.0;
  /// The scheduler's end time of the job in Unix seconds (SLURM_JOB_END_TIME, which the caller
  /// reads), 0 = unknown: start no unit that would not finish kSchedulerEndMarginSeconds before it.
  std::int64_t scheduler_end_time = 0;
  /// --confine: every path the job file names must lie inside its directory (job::Paths).
  bool confine = false;
  /// --ignore-free-space: create or resume the run file even when its predicted size
  /// (plan::run_file_bytes) exceeds the free space on the output's file system.
  bool ignore_free_space = false;
};

/// Time kept free before the scheduler's end time: prediction error, the last commit, and the
/// scheduler's own signals (which may come up to a minute early; docs/cluster-notes.md §3.5).
inline constexpr double kSchedulerEndMarginSeconds = 60.0;

/// Installs the SIGUSR1/SIGTERM/SIGINT handlers that turn a signal into a clean stop. run_job
/// installs them too; main calls this before MPI_Init so a signal forwarded during start-up does
/// not kill the process.
void install_signal_handlers();

/// Runs (or resumes) a job on the ranks of `comm`. Every rank calls it with the same arguments.
/// Returns the exit status; messages go to `err` on rank 0 only.
int run_job(const std::string& job_path, const RunOptions& options, MPI_Comm comm,
            std::ostream& out, std::ostream& err);

/// The `run` command's whole MPI life: starts MPI (a process without a launcher runs as one rank
/// over shared memory only), runs the job on MPI_COMM_WORLD, ends every rank on an unexpected
/// error (MPI_Abort with kExitFailure), finalizes, and returns the exit status. Only the runner
/// knows MPI: main calls this and nothing else of it.
int run_job_in_world(int& argc, char**& argv, const std::string& job_path,
                     const RunOptions& options, std::ostream& out, std::ostream& err);

}  // namespace freegap::run
