// Console text of the commands (see include/freegap/analysis/reporting/console.hpp). Each
// function composes with the format strings the commands printed with, so the output is the same
// whichever way it reaches the terminal.
#include "freegap/analysis/reporting/console.hpp"

#include <algorithm>
#include <cstdio>
#include <sstream>

namespace freegap::analysis {

namespace {

// One number in printf form `f` ("%.3g", "%.0f", ...).
std::string number(double v, const char* f) {
  char buf[64];
  std::snprintf(buf, sizeof buf, f, v);
  return buf;
}

using plan::CostFit;
using plan::format_duration;
using plan::human_bytes;
using plan::kMemoryMargin;
using plan::slurm_time;

}  // namespace

std::string forecast_text(const plan::Forecast& e) {
  std::ostringstream out;
  char line[256];
  out << "job:          " << e.job_path << "\n";
  out << "expression:   " << e.expression << " (" << e.path << " path)\n";
  out << "why the path: " << e.path_reason << "\n";
  out << "ranks:        " << e.options.ranks << " × " << e.options.threads << " BLAS thread(s)\n";
  out << "cost model:   t(N) = " << e.cost.formula() << " per trial, " << e.cost_source << "\n";
  if (e.cost.terms.size() > 1 && !e.sizes.empty()) {
    // Each part of a trial fitted on its own, and its share at the job's largest size.
    const std::int64_t n = e.sizes.back().n;
    const double total = std::max(e.cost.predict(n), 1e-300);
    std::string parts;
    for (const auto& t : e.cost.terms) {
      CostFit f;
      f.powers = t.powers;
      f.coefficients = t.coefficients;
      parts += (parts.empty() ? "" : "; ") + t.name + " " + f.formula() + " (" +
               number(100.0 * f.predict(n) / total, "%.0f") + " %)";
    }
    out << "cost parts:   " << parts << " — shares at N = " << n << "\n";
  }
  out << "cost error:   " << number(100.0 * e.cost.fit_error, "%.2g")
      << " % at most at the timed sizes (N ≤ " << e.cost.largest_calibrated() << ")";
  if (e.cost.step_error >= 0) {
    out << "; " << number(100.0 * e.cost.step_error, "%.2g")
        << " % predicting the largest timed size from the smaller ones";
  }
  out << "\n";
  out << "memory/rank:  "
      << (e.memory_limit ? human_bytes(static_cast<double>(e.memory_limit))
                         : std::string("unknown"))
      << " (" << e.memory_source << ")\n\n";
  std::snprintf(line, sizeof line, "%10s %10s %12s %12s %12s %12s\n", "N", "trials", "s/trial",
                "core-hours", "peak/rank", "output");
  out << line;
  for (const auto& s : e.sizes) {
    std::snprintf(
        line, sizeof line, "%10lld %10lld %12.4g %12.4g %12s %12s%s\n", static_cast<long long>(s.n),
        static_cast<long long>(s.trials), s.seconds_per_trial, s.core_hours,
        human_bytes(static_cast<double>(s.peak_bytes)).c_str(),
        human_bytes(static_cast<double>(s.output_bytes)).c_str(), s.fits ? "" : "  does not fit");
    out << line;
  }
  std::snprintf(line, sizeof line,
                "\ntotal:        %.4g core-hours in %zu units; run file about %s\n", e.core_hours,
                e.units, human_bytes(static_cast<double>(e.output_bytes)).c_str());
  out << line;
  out << "run file:     " << e.output_path << ": about "
      << human_bytes(static_cast<double>(e.output_bytes)) << ", "
      << (e.output_free >= 0 ? human_bytes(static_cast<double>(e.output_free)) + " free there"
                             : std::string("free space there unknown"))
      << "\n";
  out << "spectra kept: " << e.kept_spectra << "\n";
  out << "wall time:    about " << format_duration(e.wall_seconds) << " on " << e.options.ranks
      << " rank(s) (units largest first, one rank per core)\n";
  if (e.options.deadline_seconds > 0) {
    out << "deadline:     " << format_duration(e.options.deadline_seconds) << ": ";
    if (e.suggested_ranks > 0) {
      out << e.suggested_ranks << " rank(s), about " << format_duration(e.suggested_run_seconds)
          << "; request " << slurm_time(e.suggested_wall_seconds)
          << " (sbatch --ntasks=" << e.suggested_ranks
          << " --time=" << slurm_time(e.suggested_wall_seconds) << ")\n";
    } else {
      out << "not reachable (see the warning)\n";
    }
  }
  out << "slurm:        " << e.slurm_command << "\n"
      << "              (--mem-per-cpu: the largest peak per rank × "
      << number(kMemoryMargin, "%.2f")
      << (e.cost.trial_bytes.empty() ? " from the runner's estimate"
                                     : ", measured trial memory + 40 MiB per rank")
      << "; --time: the wall time × 1.25 and the checkpoint margin of jobs/slurm/run.sbatch)\n";
  for (const auto& w : e.warnings) out << "warning:      " << w << "\n";
  out << "\nThese are estimates from a short measurement on this machine; other nodes, other load "
         "and\n"
         "the site's scheduling policies and limits decide the real costs.\n";
  return out.str();
}

}  // namespace freegap::analysis
