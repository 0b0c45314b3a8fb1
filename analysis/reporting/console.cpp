// Console text of the commands (see include/freegap/analysis/reporting/console.hpp). Each
// function composes with the format strings the commands printed with, so the output is the same
// whichever way it reaches the terminal.
#include "freegap/analysis/reporting/console.hpp"

#include <algorithm>
#include <cstdarg>
#include <cstdio>
#include <map>
#include <sstream>

#include "freegap/errors.hpp"

namespace freegap::analysis {

namespace {

// Appends printf-style text to `out`, however long it is.
__attribute__((format(printf, 2, 3))) void appendf(std::string& out, const char* f, ...) {
  va_list ap;
  va_start(ap, f);
  va_list again;
  va_copy(again, ap);
  const int size = std::vsnprintf(nullptr, 0, f, ap);
  va_end(ap);
  if (size > 0) {
    std::string text(static_cast<std::size_t>(size) + 1, '\0');
    std::vsnprintf(text.data(), text.size(), f, again);
    text.resize(static_cast<std::size_t>(size));
    out += text;
  }
  va_end(again);
}

// One number in printf form `f` ("%.3g", "%.0f", ...).
std::string number(double v, const char* f) {
  std::string out;
  appendf(out, f, v);
  return out;
}

// What the checks found: whether the file has checksums, and each damaged unit, left out.
std::string integrity_text(const store::Integrity& integrity) {
  std::string out;
  if (!integrity.checksummed) {
    appendf(out, "checksums:  none (unverified: written before checksums)\n");
  }
  for (const auto& d : integrity.damaged) {
    appendf(out, "damaged:    N = %lld, unit %lld: %s; left out (a resume computes it again)\n",
            static_cast<long long>(d.n), static_cast<long long>(d.unit), d.reason.c_str());
  }
  return out;
}

// The stored job as this freegap compiles it (study::Study, as `report` does): its path and why,
// and whether that is the path the run recorded; or why it no longer compiles.
std::string compiled_study_text(const store::RunHeader& h, const std::string& path) {
  std::string out;
  try {
    const auto study = study::Study::of_stored_job(h.job_text, h.job_canonical, path, h.job_directory);
    if (study.runners().empty()) return out;
    const std::string here = model::path_name(study.runners().front().path());
    const auto recorded = h.metadata.find("path");
    const bool differs = recorded != h.metadata.end() && recorded->second != here;
    appendf(out, "compiled:   %s%s\n", study.path_reason(0).c_str(),
            differs ? (" (the run recorded the " + recorded->second + " path)").c_str() : "");
  } catch (const InputError& e) {
    appendf(out, "compiled:   the stored job does not compile with this freegap: %s\n", e.what());
  }
  return out;
}

// The run file's header — who wrote it, its metadata, expression, job hash and checks.
std::string inspect_header_text(const store::RunFile& file, const std::string& path) {
  const auto& h = file.header();
  std::string out;
  appendf(out, "run file:   %s\n", path.c_str());
  appendf(out, "written by: freegap %s (%s), format %d.x\n", h.tool_version.c_str(),
          h.git_revision.c_str(), store::kFormatMajor);
  for (const auto& [key, value] : h.metadata) {
    appendf(out, "%-13s %s\n", (key + ":").c_str(), value.c_str());
  }
  appendf(out, "expression: %s (%s; %s)\n", h.expression.c_str(),
          h.self_adjoint ? "self-adjoint" : "not self-adjoint",
          store::spectrum_name(h.spectrum).c_str());
  appendf(out, "job hash:   %s\n", h.job_hash.c_str());
  out += compiled_study_text(h, path);
  out += integrity_text(file.integrity());
  return out;
}

// A row per size (units, trials, failures, kept spectra), then the run's status and its trials'
// failure reasons.
std::string size_table_text(const store::RunFile& file) {
  const auto& h = file.header();
  std::string out;
  appendf(out, "%10s %12s %14s %10s %8s\n", "N", "units", "trials", "failed", "spectra");
  bool complete = true;
  std::vector<std::string> failures;
  for (std::size_t i = 0; i < h.sizes.size(); ++i) {
    const auto& layout = h.sizes[i];
    const auto committed = file.committed(i);
    const auto done = std::count(committed.begin(), committed.end(), true);
    const auto obs = file.read_observations(i);
    const auto summary = observe::summarize(obs);
    appendf(out, "%10lld %5lld/%-6lld %6lld/%-7lld %10lld %8lld%s\n",
            static_cast<long long>(layout.n), static_cast<long long>(done),
            static_cast<long long>(committed.size()), static_cast<long long>(obs.trials.size()),
            static_cast<long long>(layout.trials), static_cast<long long>(summary.failed),
            static_cast<long long>(layout.keep_count()),
            done == static_cast<long long>(committed.size()) ? "" : "  incomplete");
    if (done != static_cast<long long>(committed.size())) complete = false;
    for (const auto& [reason, count] : summary.failure_reasons) {
      failures.push_back("N = " + std::to_string(layout.n) + ": " + std::to_string(count) +
                         " trial(s): " + reason);
    }
  }
  appendf(out, "\nstatus:     %s\n",
          complete ? "complete" : "incomplete (run the job again to resume)");
  for (const auto& f : failures) appendf(out, "failure:    %s\n", f.c_str());
  return out;
}

// The estimators' columns, and per size how many committed trials each failed, and why.
std::string estimates_text(const store::RunFile& file) {
  const auto& h = file.header();
  std::string columns;
  for (const auto& c : h.estimates) {
    columns += (columns.empty() ? "" : ", ") + c.estimator + "." + c.estimate + " (truth " +
               c.truth + ")";
  }
  std::string out;
  appendf(out, "estimates:  %s\n", columns.c_str());
  const auto names = h.estimators();
  for (std::size_t i = 0; i < h.sizes.size(); ++i) {
    const auto rows = file.read_estimates(i);
    for (std::size_t e = 0; e < names.size(); ++e) {
      std::map<std::string, std::int64_t> reasons;
      for (std::size_t t = 0; t < rows.trials.size(); ++t) {
        const auto& reason = rows.failures[t * names.size() + e];
        if (!reason.empty()) ++reasons[reason];
      }
      for (const auto& [reason, count] : reasons) {
        appendf(out, "estimate failure: N = %lld: %s: %lld trial(s): %s\n",
                static_cast<long long>(h.sizes[i].n), names[e].c_str(),
                static_cast<long long>(count), reason.c_str());
      }
    }
  }
  return out;
}

// When the file was created, and each session of the writer.
std::string sessions_text(const store::Provenance& prov) {
  std::string out;
  appendf(out, "created:    %s\n", prov.created.c_str());
  for (std::size_t i = 0; i < prov.sessions.size(); ++i) {
    const auto& s = prov.sessions[i];
    appendf(out, "session %zu:  %s .. %s, %d rank(s), %s\n", i, s.started.c_str(),
            s.ended.empty() ? "?" : s.ended.c_str(), s.ranks, s.status.c_str());
  }
  return out;
}

// `inspect --moments`: per-size means over committed, non-failed trials, with standard errors
// (derived when read).
std::string moments_text(const store::RunFile& file) {
  const auto& h = file.header();
  std::string out;
  appendf(out, "\nmoments m_k = (1/N) sum x^k over committed trials, mean +- standard error\n");
  for (std::size_t i = 0; i < h.sizes.size(); ++i) {
    const auto s = observe::summarize(file.read_observations(i));
    appendf(out, "N = %lld (%lld trials):\n", static_cast<long long>(h.sizes[i].n),
            static_cast<long long>(s.trials - s.failed));
    for (std::size_t k = 1; k < s.moments.size(); ++k) {
      appendf(out, "  m_%-2zu %14.6f +- %.6f\n", k, s.moments[k].mean,
              s.moments[k].standard_error);
    }
    appendf(out,
            "  smallest %9.6f, largest %9.6f, operator norm %.6f +- %.6f (mean over trials)\n",
            s.min.mean, s.max.mean, s.norm.mean, s.norm.standard_error);
  }
  return out;
}

}  // namespace

std::string inspect_text(const store::RunFile& file, const std::string& path, bool show_job,
                         bool show_moments) {
  const auto& h = file.header();
  std::string out = inspect_header_text(file, path);
  out += "\n";
  out += size_table_text(file);
  if (!h.estimates.empty()) out += estimates_text(file);
  out += sessions_text(file.read_provenance());
  if (show_moments) out += moments_text(file);
  if (show_job) appendf(out, "\n--- job file ---\n%s", h.job_text.c_str());
  return out;
}

std::string verify_text(const store::Integrity& integrity, const std::string& path) {
  std::string out;
  appendf(out, "run file:   %s\n", path.c_str());
  out += integrity_text(integrity);
  if (!integrity.checksummed) {
    appendf(out,
            "verify:     nothing to compare (the file has no checksums); it reads without "
            "errors\n");
  } else if (integrity.damaged.empty()) {
    appendf(out, "verify:     ok: the header and every committed unit match their checksums\n");
  } else {
    appendf(out,
            "verify:     %zu damaged unit(s); every other committed unit matches its checksum\n",
            integrity.damaged.size());
  }
  return out;
}

std::string limit_law_text(const expr::Expression& expression, const DerivedLimit& derived,
                           const Law& law, const PolynomialLaw* polynomial,
                           const Support& support, bool singular, double norm) {
  std::string out;
  appendf(out, "expression: %s\n", expression.text().c_str());
  appendf(out, "spectrum: %s\n", singular ? "singular values" : "eigenvalues");
  appendf(out, "rule: %s\n", derived.rule.c_str());
  appendf(out, "law: %s\n", law.describe().c_str());
  if (polynomial != nullptr) {
    appendf(out, "free variables:\n");
    for (const auto& l : polynomial->polynomial().letters) {
      appendf(out, "  %-14s %s\n", l.name.c_str(), l.law->describe().c_str());
    }
    appendf(out, "pencil size: %d (self-adjoint linearization)\n", polynomial->pencil_size());
  }
  appendf(out, "support: [%.10f, %.10f]\n", support.lo, support.hi);
  if (support.bands.size() > 1) {
    appendf(out, "bands of the continuous part: %zu\n", support.bands.size());
    for (const auto& band : support.bands) appendf(out, "  [%.10f, %.10f]\n", band.lo, band.hi);
  }
  appendf(out, "operator-norm limit: %.10f%s\n", norm,
          derived.outliers.spiked ? " (of the bulk)" : "");
  out += outliers_text(derived.outliers);
  return out;
}

std::string outliers_text(const OutlierPrediction& p) {
  std::string out;
  if (!p.spiked) return out;
  if (!p.predicted()) {
    appendf(out, "outliers: not predicted: %s\n", p.reason.c_str());
    return out;
  }
  appendf(out, "outliers: %s\n", p.rule.c_str());
  for (const auto& o : p.outliers) {
    if (o.separates) {
      appendf(out, "  spike %.10g (θ = %.10g): outlier at %.10f (it separates for |θ| > %.6f)\n",
              o.spike, o.theta, o.location, std::abs(o.threshold));
    } else if (std::isfinite(o.threshold)) {
      appendf(out, "  spike %.10g (θ = %.10g): no outlier (it needs |θ| > %.6f)\n", o.spike,
              o.theta, std::abs(o.threshold));
    } else {
      appendf(out, "  spike %.10g (θ = %.10g): no outlier\n", o.spike, o.theta);
    }
  }
  appendf(out, "largest eigenvalue → %.10f, smallest → %.10f, operator norm → %.10f\n",
          p.largest, p.smallest, std::max(std::abs(p.largest), std::abs(p.smallest)));
  return out;
}

std::string limit_moments_text(const std::vector<double>& computed, bool solver,
                               const DerivedLimit& derived, int max_moment) {
  const auto& exact = derived.exact_moments;
  std::string out;
  appendf(out, "moments     %-20s  exact\n", solver ? "solver" : "law");
  for (int k = 1; k <= max_moment; ++k) {
    if (k < static_cast<int>(exact.size())) {
      appendf(out, "  m%-3d %20.12g  %20.12g\n", k, computed[k], exact[k]);
    } else {
      appendf(out, "  m%-3d %20.12g  %20s\n", k, computed[k], "(not available)");
    }
  }
  return out;
}

std::string limit_density_text(const LimitDensities& d, const std::vector<double>& xs,
                               bool solver, const Support& support, const DerivedLimit& derived) {
  const auto converged = std::count(d.ok.begin(), d.ok.end(), true);
  const int points = static_cast<int>(xs.size());
  std::string out;
  if (solver) {
    appendf(out,
            "density grid: %d points, %lld converged; iterations per point: mean %.1f, max %lld\n",
            points, static_cast<long long>(converged), static_cast<double>(d.steps) / points,
            d.worst);
  } else {
    appendf(out, "density grid: %d points, %lld converged\n", points,
            static_cast<long long>(converged));
  }
  for (std::size_t i = 0; i < xs.size(); ++i) {
    if (!d.ok[i]) appendf(out, "  not converged at x = %.10g (no value reported)\n", xs[i]);
  }
  for (const auto& a : support.atoms) {
    appendf(out, "point mass: %.6f at x = %.10g\n", a.weight, a.value);
  }
  if (!derived.law_note.empty()) appendf(out, "note: %s\n", derived.law_note.c_str());
  return out;
}

std::string limit_csv(const std::vector<double>& xs, const std::vector<double>& density,
                      const std::vector<double>& cdf) {
  std::string out = "x,density,cdf\n";
  for (std::size_t i = 0; i < xs.size(); ++i) {
    appendf(out, "%.12g,%.12g,%.12g\n", xs[i], density[i], cdf[i]);
  }
  return out;
}

std::string limit_files_text(const std::filesystem::path& dir, bool figures,
                             const std::string& script) {
  std::string out;
  appendf(out, "wrote %s\n", (dir / "limit.csv").string().c_str());
  if (figures) {
    appendf(out, "wrote %s and %s\n", (dir / "limit.png").string().c_str(),
            (dir / "limit.svg").string().c_str());
  } else {
    appendf(out,
            "note: no figures (the plot script %s failed; it needs /usr/bin/python3 with "
            "matplotlib: apt-get install python3-matplotlib); the CSV is complete\n",
            script.c_str());
  }
  return out;
}

std::string sample_explain_text(const study::Study& study) {
  std::string out;
  const auto& runners = study.runners();
  for (std::size_t i = 0; i < runners.size(); ++i) {
    out += runners[i].explain() + "why the path: " + study.path_reason(i) + "\n\n";
  }
  return out;
}

std::string sample_table_header(const expr::Expression& expression, std::uint64_t seed,
                                long long trials, int max_moment) {
  std::string out;
  appendf(out, "expression: %s  (%s; %s)\n", expression.text().c_str(),
          expression.self_adjoint() ? "self-adjoint" : "not self-adjoint",
          expression.spectrum() == expr::Spectrum::eigenvalues ? "eigenvalues"
                                                               : "singular values");
  appendf(out,
          "seed %llu, %lld trials per size; moments m_k = (1/N) sum x^k, mean +- standard "
          "error\n\n",
          static_cast<unsigned long long>(seed), trials);
  appendf(out, "%8s %6s", "N", "failed");
  for (int k = 1; k <= max_moment; ++k) {
    appendf(out, "   %20s", ("m_" + std::to_string(k)).c_str());
  }
  appendf(out, "   %18s %18s %10s\n", "largest", "norm", "s/trial");
  return out;
}

std::string sample_row(long long n, const observe::Summary& s, int max_moment,
                       double seconds_per_trial) {
  std::string out;
  appendf(out, "%8lld %6lld", n, static_cast<long long>(s.failed));
  for (int k = 1; k <= max_moment; ++k) {
    appendf(out, "   %10.5f +- %7.5f", s.moments[k].mean, s.moments[k].standard_error);
  }
  appendf(out, "   %8.5f +- %6.4f %8.5f +- %6.4f %10.3f\n", s.max.mean, s.max.standard_error,
          s.norm.mean, s.norm.standard_error, seconds_per_trial);
  return out;
}

namespace {

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
