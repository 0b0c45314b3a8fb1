// The report of run files (report.hpp): analysis, tables and Markdown.
#include "freegap/analysis/reporting/report.hpp"

#include <algorithm>
#include <cmath>
#include <cstdarg>
#include <cstdio>
#include <filesystem>
#include <functional>
#include <limits>
#include <map>
#include <numbers>
#include <memory>
#include <optional>
#include <span>
#include <sstream>
#include <unordered_map>

#include "freegap/analysis/reporting/console.hpp"
#include "freegap/analysis/reporting/estimator_scores.hpp"
#include "freegap/analysis/statistics/fit.hpp"
#include "freegap/analysis/limits/free_convolution.hpp"
#include "freegap/analysis/limits/limit.hpp"
#include "freegap/analysis/statistics/metrics.hpp"
#include "freegap/analysis/limits/polynomial_limit.hpp"
#include "freegap/analysis/limits/tabulated_cdf.hpp"
#include "freegap/errors.hpp"
#include "freegap/stop.hpp"
#include "freegap/store.hpp"
#include "freegap/study.hpp"
#include "freegap/text.hpp"
#include "freegap/sweep.hpp"

namespace freegap::analysis {

namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
// A fitted exponent whose 95% interval is wider than ± this gets a note with the trials that
// would narrow it.
constexpr double kWideExponent = 0.1;

std::string fmt(const char* f, ...) {
  char buf[256];
  va_list ap;
  va_start(ap, f);
  std::vsnprintf(buf, sizeof buf, f, ap);
  va_end(ap);
  return buf;
}

// A number for the Markdown tables: 4 significant digits, "–" when unknown.
std::string num(double x) {
  if (!std::isfinite(x)) return "–";
  return fmt("%.4g", x);
}
std::string pm(const MetricValue& m) {
  if (!std::isfinite(m.value)) return "–";
  std::string s = num(m.value) + " ± " + num(m.standard_error);
  if (!m.resolved) s += " (unresolved)";
  return s;
}

// One size of one run, as read and analysed.
struct SizeResult {
  std::int64_t n = 0;
  std::int64_t units_done = 0, units_total = 0;
  std::int64_t trials_planned = 0;
  std::vector<double> edges;
  std::vector<observe::Histogram> units;
  std::vector<observe::TrialRecord> trials;  // non-failed ones
  std::int64_t failed = 0;
  std::map<std::string, std::int64_t> failure_reasons;
  SizeMetrics metrics;
  bool has_data() const { return units_done > 0 && !trials.empty(); }
};

struct FitResult {
  std::string quantity;  // e.g. "Kolmogorov (mean ESD)"
  std::string key;       // short machine name: "kolmogorov", "moment_4", ...
  PowerLawFit fit;
  std::optional<BootstrapInterval> bootstrap;
  std::optional<PublishedRate> published;
};

struct RunResult {
  std::string path;
  std::string label;  // file name
  store::RunHeader header;
  store::Provenance provenance;
  store::Integrity integrity;  // damaged units are left out of everything below
  DerivedLimit limit;
  LimitReference reference;
  std::vector<SizeResult> sizes;
  std::vector<FitResult> fits;
  std::vector<std::string> notes;
  std::vector<EstimateScore> estimates;  // plug-in estimators scored against their truths
};

LimitReference reference_of(const DerivedLimit& d, observe::SpectrumKind kind) {
  LimitReference r;
  r.edge_low = r.edge_high = r.norm = kNaN;
  if (!d.exact_moments.empty()) r.moments = d.exact_moments;
  if (!d.law) return r;
  const LawPtr law = d.law;
  if (const auto* sub = dynamic_cast<const SubordinatedLaw*>(law.get())) {
    // A law solved by subordination pays a solve for every F(x), and the distances evaluate F at
    // many points for every bootstrap replicate: tabulate it once (see TabulatedCdf).
    auto table = std::make_shared<const TabulatedCdf>(*law, sub->singular_points());
    r.distribution.cdf = [table](double x) { return table->cdf(x); };
    r.distribution.quantile = [table](double u) { return table->quantile(u); };
  } else {
    r.distribution.cdf = [law](double x) { return law->cdf(x); };
    r.distribution.quantile = [law](double u) { return law->quantile(u); };
  }
  const Support s = law->support();
  r.distribution.support_low = s.lo;
  r.distribution.support_high = s.hi;
  r.edge_low = s.lo;
  r.edge_high = s.hi;
  r.norm = kind == observe::SpectrumKind::singular_values ? s.hi
                                                          : std::max(std::abs(s.lo), std::abs(s.hi));
  return r;
}

// Whether a predicted outlier, not the bulk's edge, is the limit of the largest (`top`) or the
// smallest eigenvalue (outliers.hpp).
bool outlier_side(const RunResult& run, bool top) {
  const OutlierPrediction& p = run.limit.outliers;
  if (!p.predicted() || !run.limit.law) return false;
  const Support s = run.limit.law->support();
  return top ? p.largest > s.hi : p.smallest < s.lo;
}

// One separated outlier as the report follows it: the k-th largest (top) or smallest eigenvalue,
// k counted from the outermost, against its predicted limit.
struct OutlierTarget {
  double location = 0.0;
  double spike = 0.0;
  std::size_t rank = 1;
  bool top = true;
};

std::vector<OutlierTarget> outlier_targets(const RunResult& run) {
  std::vector<OutlierTarget> out;
  const OutlierPrediction& p = run.limit.outliers;
  if (!p.predicted() || !run.limit.law ||
      run.header.spectrum != observe::SpectrumKind::eigenvalues) {
    return out;
  }
  const Support s = run.limit.law->support();
  std::vector<OutlierTarget> above, below;
  for (const auto& o : p.outliers) {
    if (!o.separates) continue;
    (o.location > s.hi ? above : below).push_back({o.location, o.spike, 0, o.location > s.hi});
  }
  std::sort(above.begin(), above.end(), [](const auto& a, const auto& b) { return a.location > b.location; });
  std::sort(below.begin(), below.end(), [](const auto& a, const auto& b) { return a.location < b.location; });
  for (std::size_t i = 0; i < above.size(); ++i) above[i].rank = i + 1;
  for (std::size_t i = 0; i < below.size(); ++i) below[i].rank = i + 1;
  out = above;
  out.insert(out.end(), below.begin(), below.end());
  return out;
}

// The trial's eigenvalue that `t` follows: its max or min for rank 1, else from the kept spectrum
// (NaN when the trial kept none or it is too short).
double outlier_value(const OutlierTarget& o, const observe::TrialRecord& t) {
  if (o.rank == 1) return o.top ? t.max : t.min;
  if (t.spectrum.size() < o.rank) return std::numeric_limits<double>::quiet_NaN();
  std::vector<double> v = t.spectrum;
  const auto k = static_cast<std::ptrdiff_t>(o.rank - 1);
  if (o.top) {
    std::nth_element(v.begin(), v.begin() + k, v.end(), std::greater<double>());
  } else {
    std::nth_element(v.begin(), v.begin() + k, v.end());
  }
  return v[static_cast<std::size_t>(k)];
}

std::string outlier_name(const OutlierTarget& o) {
  return "outlier " + std::to_string(o.rank) + (o.top ? " above" : " below") + " the bulk (spike " +
         fmt("%.6g", o.spike) + ")";
}

// Whether every trial of every used size has the value of `o` (rank ≥ 2 needs kept spectra).
bool outlier_observed(const std::vector<const SizeResult*>& used, const OutlierTarget& o) {
  return std::all_of(used.begin(), used.end(), [&](const SizeResult* s) {
    return std::all_of(s->trials.begin(), s->trials.end(), [&](const observe::TrialRecord& t) {
      return std::isfinite(outlier_value(o, t));
    });
  });
}

// With predicted outliers the extremes and the norm go to them, not to the bulk's edges; the
// distances still compare with the bulk law (a finite rank moves no mass in the limit).
void aim_extremes_at_outliers(RunResult& run) {
  const OutlierPrediction& p = run.limit.outliers;
  if (!p.predicted() || run.header.spectrum != observe::SpectrumKind::eigenvalues) return;
  run.reference.edge_high = p.largest;
  run.reference.edge_low = p.smallest;
  run.reference.norm = std::max(std::abs(p.largest), std::abs(p.smallest));
}

// Which published exponents apply to which quantity of a model (fit.hpp's table).
std::optional<PublishedRate> published_for(const std::string& quantity, const std::string& model) {
  if (model.empty()) return std::nullopt;
  if (quantity == "kolmogorov") {
    if (model == "gue" || model == "wishart_complex") return find_published_rate("kolmogorov_mean_esd/gue");
    if (model == "goe" || model == "wigner") return find_published_rate("kolmogorov_mean_esd/wigner");
    return std::nullopt;
  }
  if (quantity.rfind("moment_", 0) == 0) return find_published_rate("moments/" + model);
  if (quantity == "largest" && model == "gue") return find_published_rate("edge/gue");
  return std::nullopt;
}

ErrorPoint point_of(double n, const MetricValue& m) {
  return {n, m.value, m.standard_error, m.resolved};
}

// What the fits of one run share: the run, its sizes with data and the bootstrap's options.
struct RunFits {
  RunResult& run;
  std::vector<const SizeResult*> used;
  BootstrapOptions boot;
};

// Adds the fit of one quantity to the run, with its bootstrap interval and published exponent.
void add_fit(RunFits& fits, std::string quantity, std::string key, std::vector<ErrorPoint> points,
             std::optional<BootstrapInterval> interval) {
  const std::string& model = fits.run.limit.rate_key;
  FitResult f;
  f.quantity = std::move(quantity);
  f.key = key;
  f.fit = fit_power_law(points);
  if (f.fit.ok && interval) f.bootstrap = interval;
  const bool outlier = (key == "largest" && outlier_side(fits.run, true)) ||
                       (key == "smallest" && outlier_side(fits.run, false)) ||
                       (key == "norm" && fits.run.limit.outliers.predicted());
  if (!outlier) f.published = published_for(key, model);  // the edge's exponents, not an outlier's
  fits.run.fits.push_back(std::move(f));
}

// Pooled distances from every trial's kept spectrum: bias-corrected values, and the exponent's
// interval from the per-size bootstrap replicates paired by index.
void fit_pooled_from_spectra(RunFits& fits) {
  for (int which = 0; which < 2; ++which) {
    std::vector<ErrorPoint> points;
    std::vector<std::vector<double>> reps;
    for (const auto* s : fits.used) {
      const auto& m = s->metrics;
      ErrorPoint p = point_of(static_cast<double>(s->n),
                              which == 0 ? m.pooled_kolmogorov : m.pooled_wasserstein1);
      // The bias the correction may leave counts as uncertainty (metrics.hpp).
      p.standard_error = std::hypot(p.standard_error, which == 0 ? m.spectra.kolmogorov_residual_bound
                                                                 : m.spectra.wasserstein1_residual_bound);
      points.push_back(p);
      reps.push_back(which == 0 ? m.spectra.kolmogorov_replicates : m.spectra.wasserstein1_replicates);
    }
    std::optional<BootstrapInterval> interval;
    if (std::all_of(reps.begin(), reps.end(), [](const auto& r) { return r.size() >= 2; })) {
      interval = bootstrap_alpha_from_replicates(points, reps, fits.boot);
    }
    add_fit(fits, which == 0 ? "Kolmogorov distance of the mean spectral distribution"
                             : "Wasserstein-1 distance of the mean spectral distribution",
            which == 0 ? "kolmogorov" : "wasserstein1", std::move(points), interval);
  }
}

// Pooled distances from histograms, bootstrapped over work units.
void fit_pooled_from_histograms(RunFits& fits) {
  const std::vector<const SizeResult*>& used = fits.used;
  std::vector<std::size_t> replicates;
  for (const auto* s : used) replicates.push_back(s->units.size());
  const LimitDistribution& limit = fits.run.reference.distribution;
  for (int which = 0; which < 2; ++which) {
    std::vector<ErrorPoint> points;
    for (const auto* s : used) {
      points.push_back(point_of(static_cast<double>(s->n),
                                which == 0 ? s->metrics.pooled_kolmogorov : s->metrics.pooled_wasserstein1));
    }
    const auto resample = [&](std::size_t j, std::span<const std::size_t> draw) {
      const SizeResult& s = *used[j];
      observe::Histogram h = s.units.front();
      std::fill(h.counts.begin(), h.counts.end(), 0);
      h.below = h.above = 0;
      for (std::size_t i : draw) observe::merge_into(h, s.units[i]);
      const BinnedDistances d = binned_distances(s.edges, h, limit);
      ErrorPoint p = points[j];
      p.error = which == 0 ? d.kolmogorov : d.wasserstein1;
      return p;
    };
    std::optional<BootstrapInterval> interval;
    if (std::all_of(replicates.begin(), replicates.end(), [](std::size_t r) { return r >= 2; })) {
      interval = bootstrap_alpha(replicates, resample, fits.boot);
    }
    add_fit(fits, which == 0 ? "Kolmogorov distance of the mean spectral distribution"
                             : "Wasserstein-1 distance of the mean spectral distribution",
            which == 0 ? "kolmogorov" : "wasserstein1", std::move(points), interval);
  }
}

// Signed quantities: per-trial values against a target.
void fit_per_trial_values(RunFits& fits, std::string quantity, std::string key, double target,
                          const std::function<double(const observe::TrialRecord&)>& value) {
  if (!std::isfinite(target)) return;
  std::vector<double> sizes;
  std::vector<std::vector<double>> values;
  std::vector<ErrorPoint> points;
  for (const auto* s : fits.used) {
    std::vector<double> v;
    for (const auto& t : s->trials) v.push_back(value(t));
    sizes.push_back(static_cast<double>(s->n));
    points.push_back(mean_error_point(static_cast<double>(s->n), v, target));
    values.push_back(std::move(v));
  }
  std::optional<BootstrapInterval> interval;
  if (std::all_of(values.begin(), values.end(), [](const auto& v) { return v.size() >= 2; })) {
    interval = bootstrap_alpha_of_means(sizes, values, target, fits.boot);
  }
  add_fit(fits, std::move(quantity), std::move(key), std::move(points), interval);
}

// Per-trial distances (the mean over trials of each trial's own distance), where every size
// kept spectra.
void fit_per_trial_distances(RunFits& fits) {
  for (int which = 0; which < 2; ++which) {
    std::vector<double> sizes;
    std::vector<std::vector<double>> values;
    std::vector<ErrorPoint> points;
    for (const auto* s : fits.used) {
      const auto& p = s->metrics.per_trial;
      const auto& v = which == 0 ? p.kolmogorov_values : p.wasserstein1_values;
      sizes.push_back(static_cast<double>(s->n));
      points.push_back(mean_error_point(static_cast<double>(s->n), v, 0.0));
      values.push_back(v);
    }
    std::optional<BootstrapInterval> interval;
    if (std::all_of(values.begin(), values.end(), [](const auto& v) { return v.size() >= 2; })) {
      interval = bootstrap_alpha_of_means(sizes, values, 0.0, fits.boot);
    }
    add_fit(fits, which == 0 ? "Kolmogorov distance per trial (mean over trials)"
                             : "Wasserstein-1 distance per trial (mean over trials)",
            which == 0 ? "kolmogorov_per_trial" : "wasserstein1_per_trial", std::move(points),
            interval);
  }
}

// The moments' errors against the exact limit moments, up to the options' highest moment.
void fit_moments(RunFits& fits, const ReportOptions& options) {
  const RunResult& run = fits.run;
  const int k_max = std::min<int>(options.max_moment_fitted,
                                  static_cast<int>(run.reference.moments.size()) - 1);
  const int stored = static_cast<int>(fits.used.front()->trials.front().moments.size()) - 1;
  for (int k = 1; k <= std::min(k_max, stored); ++k) {
    // A moment whose finite-N value equals the limit for every N (odd moments of a symmetric
    // model) has nothing to fit; it would only add warnings.
    bool any_resolved = false;
    for (const auto* s : fits.used) {
      if (static_cast<std::size_t>(k) < s->metrics.moment_errors.size()) {
        any_resolved |= s->metrics.moment_errors[static_cast<std::size_t>(k)].error.resolved;
      }
    }
    if (!any_resolved) continue;
    fit_per_trial_values(fits, "moment m_" + std::to_string(k) + " − limit",
                         "moment_" + std::to_string(k),
                         run.reference.moments[static_cast<std::size_t>(k)],
                         [k](const observe::TrialRecord& t) {
                           return t.moments[static_cast<std::size_t>(k)];
                         });
  }
}

// Fits of every error against N, with bootstrap intervals.
void fit_run(RunResult& run, const ReportOptions& options) {
  std::vector<const SizeResult*> used;
  for (const auto& s : run.sizes) {
    if (s.has_data()) used.push_back(&s);
  }
  if (used.empty()) return;
  BootstrapOptions boot;
  boot.replicates = options.fit_bootstrap_replicates;
  RunFits fits{run, std::move(used), boot};

  const bool from_spectra =
      std::all_of(fits.used.begin(), fits.used.end(), [](const SizeResult* s) {
        return s->metrics.has_pooled && s->metrics.pooled_from_spectra;
      });
  if (from_spectra) fit_pooled_from_spectra(fits);
  if (!from_spectra && std::all_of(fits.used.begin(), fits.used.end(),
                                   [](const SizeResult* s) { return s->metrics.has_pooled; })) {
    fit_pooled_from_histograms(fits);
  }

  if (std::all_of(fits.used.begin(), fits.used.end(),
                  [](const SizeResult* s) { return s->metrics.has_per_trial; })) {
    fit_per_trial_distances(fits);
  }

  if (!run.reference.moments.empty()) fit_moments(fits, options);
  fit_per_trial_values(fits,
                       outlier_side(run, true) ? "largest value − predicted outlier"
                                               : "largest value − limit edge",
                       "largest", run.reference.edge_high,
                       [](const observe::TrialRecord& t) { return t.max; });
  if (run.header.spectrum == observe::SpectrumKind::eigenvalues) {
    fit_per_trial_values(fits,
                         outlier_side(run, false) ? "smallest value − predicted outlier"
                                                  : "smallest value − limit edge",
                         "smallest", run.reference.edge_low,
                         [](const observe::TrialRecord& t) { return t.min; });
  }
  fit_per_trial_values(fits, "operator norm − limit norm", "norm", run.reference.norm,
                       [](const observe::TrialRecord& t) { return t.norm; });
  // Further outliers (the outermost on each side is the largest or smallest value above).
  for (const OutlierTarget& o : outlier_targets(run)) {
    if (o.rank == 1 || !outlier_observed(fits.used, o)) continue;
    fit_per_trial_values(fits, outlier_name(o) + " − predicted",
                         std::string(o.top ? "outlier_above_" : "outlier_below_") + std::to_string(o.rank),
                         o.location, [o](const observe::TrialRecord& t) { return outlier_value(o, t); });
  }
}

// The reference of the distances at size n: the run's limit, or for a free deterministic
// equivalent (DerivedLimit::deterministic_size) the equivalent formed at n itself, so that each
// size is compared with its own deterministic matrices. Falls back to the run's reference, with a
// note, when that one cannot be derived.
LimitReference size_reference(RunResult& run, std::int64_t n, int max_moment) {
  if (run.limit.deterministic_size <= 0 || !run.limit.law || n == run.limit.deterministic_size) {
    return run.reference;
  }
  try {
    const DerivedLimit own =
        study::Study::of_stored_job(run.header.job_text, run.header.job_canonical, run.path,
                                    run.header.job_directory)
            .limit(max_moment, n);
    if (own.law) return reference_of(own, run.header.spectrum);
    run.notes.push_back("N = " + std::to_string(n) + " is compared with the free deterministic "
                        "equivalent at N = " + std::to_string(run.limit.deterministic_size) +
                        ": its own has no law (" + own.reason + ")");
  } catch (const Stopped&) {
    throw;
  } catch (const Error& e) {
    run.notes.push_back("N = " + std::to_string(n) + " is compared with the free deterministic "
                        "equivalent at N = " + std::to_string(run.limit.deterministic_size) +
                        ": its own failed (" + e.what() + ")");
  }
  return run.reference;
}

RunResult analyse_run(const std::string& path, const ReportOptions& options) {
  RunResult run;
  run.path = path;
  run.label = std::filesystem::path(path).filename().string();
  const auto file = store::RunFile::open_read(path);
  run.header = file.header();
  run.integrity = file.integrity();
  run.provenance = file.read_provenance();
  const int max_moment = run.header.sizes.empty() ? 0 : run.header.sizes.front().observe.max_moment;
  try {
    run.limit = study::Study::of_stored_job(run.header.job_text, run.header.job_canonical, path,
                                              run.header.job_directory)
                    .limit(max_moment);
  } catch (const Stopped&) {
    throw;  // a stop request ends the command, it is not a reason
  } catch (const Error& e) {
    run.limit.reason = std::string("the job stored in the run file cannot be rebuilt here: ") + e.what();
  }
  try {
    run.reference = reference_of(run.limit, run.header.spectrum);
    aim_extremes_at_outliers(run);
  } catch (const NumericalError& e) {
    // Never abort the report: the finite-N data is reported without the distances that need the
    // limit's CDF, and the note says why.
    DerivedLimit without = run.limit;
    without.law = nullptr;
    run.reference = reference_of(without, run.header.spectrum);
    run.notes.push_back(std::string("the limit's CDF could not be computed (") + e.what() +
                        "), so the distances to the limit are not reported; its support, "
                        "moments and density are");
  }
  MetricsOptions metrics;
  metrics.bootstrap_replicates = options.bootstrap_replicates;
  if (run.limit.deterministic_size > 0 && run.limit.law) {
    run.notes.push_back(
        "the limit is a free deterministic equivalent: the distances of each size are to the "
        "equivalent formed at that size; the limit section, the moments and the extremes show "
        "the one at N = " + std::to_string(run.limit.deterministic_size));
  }
  for (std::size_t i = 0; i < run.header.sizes.size(); ++i) {
    const auto& layout = run.header.sizes[i];
    SizeResult s;
    s.n = layout.n;
    s.trials_planned = layout.trials;
    const auto committed = file.committed(i);
    s.units_total = static_cast<std::int64_t>(committed.size());
    s.units_done = std::count(committed.begin(), committed.end(), true);
    s.edges = layout.observe.bin_edges;
    if (s.units_done > 0) {
      s.units = file.read_unit_histograms(i);
      auto obs = file.read_observations(i);
      for (auto& t : obs.trials) {
        if (t.failed) {
          ++s.failed;
          ++s.failure_reasons[t.reason];
        } else {
          s.trials.push_back(std::move(t));
        }
      }
      SizeData data;
      data.n = s.n;
      data.edges = s.edges;
      data.unit_histograms = s.units;
      data.trials = s.trials;
      s.metrics = compute_size_metrics(data, size_reference(run, s.n, max_moment), metrics);
    }
    run.sizes.push_back(std::move(s));
  }
  fit_run(run, options);
  ScoreOptions score;
  if (run.limit.law) {
    const Support sup = run.limit.law->support();
    score.limit_edges = std::make_pair(sup.lo, sup.hi);
  }
  run.estimates = score_estimators(file, score);
  return run;
}

// The keys a sweep varied across these runs (sweep.hpp: the task jobs' point lines), in the order
// they first appear; empty when no run came from a sweep.
std::vector<std::string> sweep_keys(const std::vector<RunResult>& runs) {
  std::vector<std::string> keys;
  for (const auto& run : runs) {
    for (const auto& [key, value] : sweep::point_of_job_text(run.header.job_text)) {
      if (std::find(keys.begin(), keys.end(), key) == keys.end()) keys.push_back(key);
    }
  }
  return keys;
}

std::string point_value(const RunResult& run, const std::string& key) {
  for (const auto& [k, value] : sweep::point_of_job_text(run.header.job_text)) {
    if (k == key) return value;
  }
  return "";
}

std::string status_of(const SizeResult& s) {
  if (s.units_done == s.units_total) return "complete";
  if (s.units_done == 0) return "no data";
  return "incomplete";
}

// ---------------------------------------------------------------------------------- tables
// The report's tables, in the order they are written.
struct ReportTables {
  Table runs_t, sizes_t, moments_t, extremes_t, fits_t, hist_t, dens_t, atoms_t;
};

// The tables with their columns and no rows; the runs table gets a column per sweep key.
ReportTables empty_tables(const std::vector<std::string>& keys) {
  Table runs_t{"runs", {"run", "file", "job_name", "expression", "spectrum", "limit", "rule_or_reason",
                        "sizes", "complete"}, {}};
  for (const auto& key : keys) runs_t.columns.push_back("sweep." + key);
  Table sizes_t{"sizes",
                {"run", "n", "status", "units_committed", "units_total", "trials_planned", "trials_used",
                 "trials_failed", "kolmogorov", "kolmogorov_se", "kolmogorov_noise_floor",
                 "kolmogorov_resolved", "kolmogorov_bin_resolution", "wasserstein1", "wasserstein1_se",
                 "wasserstein1_noise_floor", "wasserstein1_resolved", "per_trial_count",
                 "per_trial_kolmogorov_mean", "per_trial_kolmogorov_se", "per_trial_kolmogorov_sd",
                 "per_trial_wasserstein1_mean", "per_trial_wasserstein1_se",
                 "per_trial_wasserstein1_sd", "distances_from_spectra", "kolmogorov_plugin",
                 "kolmogorov_bias", "wasserstein1_plugin", "wasserstein1_bias",
                 "wasserstein1_grid_bound"},
                {}};
  Table moments_t{"moments", {"run", "n", "k", "mean", "limit", "error", "standard_error", "resolved"}, {}};
  Table extremes_t{"extremes",
                   {"run", "n", "quantity", "mean", "limit", "error", "standard_error", "resolved"}, {}};
  Table fits_t{"fits",
               {"run", "quantity", "key", "ok", "points", "alpha", "alpha_se", "ci_low", "ci_high",
                "bootstrap_low", "bootstrap_high", "constant", "published_alpha", "published_source",
                "warnings"},
               {}};
  Table hist_t{"histograms", {"run", "n", "bin_low", "bin_high", "count", "density"}, {}};
  Table dens_t{"limit_density", {"run", "x", "density"}, {}};
  Table atoms_t{"limit_atoms", {"run", "value", "mass"}, {}};
  return {runs_t, sizes_t, moments_t, extremes_t, fits_t, hist_t, dens_t, atoms_t};
}

// The row of one run in the runs table.
void add_run_row(const RunResult& run, double id, const std::vector<std::string>& keys,
                 Table& runs_t) {
  const auto b = [](bool v) { return v ? 1.0 : 0.0; };
  bool complete = true;
  for (const auto& s : run.sizes) complete &= s.units_done == s.units_total;
  runs_t.rows.push_back({id, run.label,
                         run.header.metadata.count("job_name") ? run.header.metadata.at("job_name") : "",
                         run.header.expression, store::spectrum_name(run.header.spectrum),
                         run.limit.law ? run.limit.law->describe() : std::string("none"),
                         run.limit.law ? run.limit.rule : run.limit.reason,
                         static_cast<double>(run.sizes.size()), b(complete)});
  for (const auto& key : keys) runs_t.rows.back().push_back(point_value(run, key));
}

// The row of one size in the sizes table (NaN where the size has no such distance).
std::vector<Table::Cell> size_row(const SizeResult& s, double id) {
  const auto b = [](bool v) { return v ? 1.0 : 0.0; };
  const auto& m = s.metrics;
  const double n = static_cast<double>(s.n);
  const bool pooled = s.has_data() && m.has_pooled;
  const bool per = s.has_data() && m.has_per_trial;
  const auto v = [](bool have, double x) { return have ? x : kNaN; };
  return {id, n, status_of(s), static_cast<double>(s.units_done), static_cast<double>(s.units_total),
          static_cast<double>(s.trials_planned), static_cast<double>(s.trials.size()),
          static_cast<double>(s.failed), v(pooled, m.pooled_kolmogorov.value),
          v(pooled, m.pooled_kolmogorov.standard_error), v(pooled, m.pooled_kolmogorov.noise_floor),
          v(pooled, b(m.pooled_kolmogorov.resolved)), v(pooled, m.pooled_resolution),
          v(pooled, m.pooled_wasserstein1.value), v(pooled, m.pooled_wasserstein1.standard_error),
          v(pooled, m.pooled_wasserstein1.noise_floor), v(pooled, b(m.pooled_wasserstein1.resolved)),
          static_cast<double>(per ? m.per_trial.trials : 0), v(per, m.per_trial.kolmogorov.value),
          v(per, m.per_trial.kolmogorov.standard_error), v(per, m.per_trial.kolmogorov_sd),
          v(per, m.per_trial.wasserstein1.value), v(per, m.per_trial.wasserstein1.standard_error),
          v(per, m.per_trial.wasserstein1_sd), b(pooled && m.pooled_from_spectra),
          v(pooled && m.pooled_from_spectra, m.spectra.kolmogorov_plugin),
          v(pooled && m.pooled_from_spectra, m.spectra.kolmogorov_bias),
          v(pooled && m.pooled_from_spectra, m.spectra.wasserstein1_plugin),
          v(pooled && m.pooled_from_spectra, m.spectra.wasserstein1_bias),
          v(pooled && m.pooled_from_spectra, m.spectra.wasserstein1_grid_bound)};
}

// The rows of one size with data in the moments, extremes and histograms tables.
void add_size_detail_rows(const SizeResult& s, double id, ReportTables& t) {
  const auto b = [](bool v) { return v ? 1.0 : 0.0; };
  const auto& m = s.metrics;
  const double n = static_cast<double>(s.n);
  for (std::size_t k = 1; k < m.moment_errors.size(); ++k) {
    const auto& e = m.moment_errors[k];
    t.moments_t.rows.push_back({id, n, static_cast<double>(k), e.mean, e.limit, e.error.value,
                                e.error.standard_error, b(e.error.resolved)});
  }
  const std::pair<const char*, const SignedError*> ext[] = {
      {"largest", &m.max_edge}, {"smallest", &m.min_edge}, {"norm", &m.norm}};
  for (const auto& [name, e] : ext) {
    t.extremes_t.rows.push_back({id, n, std::string(name), e->mean, e->limit, e->error.value,
                                 e->error.standard_error, b(e->error.resolved)});
  }
  observe::Histogram h = s.units.front();
  for (std::size_t u = 1; u < s.units.size(); ++u) observe::merge_into(h, s.units[u]);
  const double total = static_cast<double>(h.total());
  for (std::size_t i = 0; i + 1 < s.edges.size(); ++i) {
    const double c = static_cast<double>(h.counts[i]);
    t.hist_t.rows.push_back({id, n, s.edges[i], s.edges[i + 1], c,
                             total > 0 ? c / (total * (s.edges[i + 1] - s.edges[i])) : kNaN});
  }
}

// The rows of one run's fits in the fits table.
void add_fit_rows(const RunResult& run, double id, Table& fits_t) {
  const auto b = [](bool v) { return v ? 1.0 : 0.0; };
  for (const auto& f : run.fits) {
    std::string warnings;
    for (const auto& w : f.fit.warnings) warnings += (warnings.empty() ? "" : "; ") + w;
    fits_t.rows.push_back(
        {id, f.quantity, f.key, b(f.fit.ok), static_cast<double>(f.fit.points), f.fit.alpha,
         f.fit.alpha_standard_error, f.fit.ok ? f.fit.ci_low : kNaN, f.fit.ok ? f.fit.ci_high : kNaN,
         f.bootstrap ? f.bootstrap->low : kNaN, f.bootstrap ? f.bootstrap->high : kNaN,
         f.fit.constant, f.published ? f.published->alpha : kNaN,
         f.published ? std::string(f.published->source) : std::string(), warnings});
  }
}

// The rows of a run's limit law (the run has one) in the limit density and atoms tables.
void add_limit_rows(const RunResult& run, double id, Table& dens_t, Table& atoms_t) {
  // The limit density on a grid covering the histogram range and the support.
  const Support sup = run.limit.law->support();
  double lo = sup.lo, hi = sup.hi;
  for (const auto& s : run.sizes) {
    if (!s.edges.empty()) {
      lo = std::min(lo, s.edges.front());
      hi = std::max(hi, s.edges.back());
    }
  }
  // A law solved point by point at the cost of an operator-valued solve gets fewer points.
  const int points = dynamic_cast<const PolynomialLaw*>(run.limit.law.get()) ? 401 : 801;
  std::vector<double> xs(points);
  for (int i = 0; i < points; ++i) xs[i] = lo + (hi - lo) * i / (points - 1);
  // Where the solver fails at a point that point is NaN (written as such in the tables and
  // left out of the figures) instead of the whole report failing.
  const auto ds = densities_or_nan(*run.limit.law, xs);
  for (int i = 0; i < points; ++i) dens_t.rows.push_back({id, xs[i], ds[i]});
  for (const Atom& a : sup.atoms) atoms_t.rows.push_back({id, a.value, a.weight});
}

void tables_of(const std::vector<RunResult>& runs, std::vector<Table>& out) {
  // Runs of a sweep get one column per varied key ("sweep.<key>"), their point's value.
  const std::vector<std::string> keys = sweep_keys(runs);
  ReportTables t = empty_tables(keys);
  for (std::size_t r = 0; r < runs.size(); ++r) {
    const RunResult& run = runs[r];
    const double id = static_cast<double>(r + 1);
    add_run_row(run, id, keys, t.runs_t);
    for (const auto& s : run.sizes) {
      t.sizes_t.rows.push_back(size_row(s, id));
      if (!s.has_data()) continue;
      add_size_detail_rows(s, id, t);
    }
    add_fit_rows(run, id, t.fits_t);
    if (run.limit.law) add_limit_rows(run, id, t.dens_t, t.atoms_t);
  }
  out = {t.runs_t, t.sizes_t, t.moments_t, t.extremes_t, t.fits_t, t.hist_t, t.dens_t, t.atoms_t};
}

// --------------------------------------------------------------------------------- Markdown
// The report's title, and how to read its errors.
std::string markdown_introduction(const ReportOptions& options) {
  std::string md = "# freegap report\n\n";
  md += "How far each size N is from its limit, and how fast the gap closes. Every error is "
        "given with its Monte Carlo standard error (± one SE); a value marked *unresolved* is "
        "below its own noise (distances from histograms: under " + num(kDistanceResolutionFactor) +
        "× the noise floor; distances from kept spectra: not above their noise floor, see their "
        "table; signed errors: under " + num(kSignedResolutionFactor) +
        " SE) and says only that the error is smaller than the noise. Bootstrap: " +
        std::to_string(options.bootstrap_replicates) + " replicates per size, " +
        std::to_string(options.fit_bootstrap_replicates) + " for the exponents, fixed seeds.\n\n";
  return md;
}

// What sets each run apart: the settings of its canonical job (one per line, or per "; "
// field with the line's prefix) that not every run shares.
struct RunFields {
  std::vector<std::vector<std::string>> fields;  // each run's settings, sorted, each once
  std::map<std::string, std::size_t> count;      // how many runs have each setting
};

RunFields run_fields(const std::vector<RunResult>& runs) {
  std::vector<std::vector<std::string>> fields(runs.size());
  std::map<std::string, std::size_t> count;
  for (std::size_t r = 0; r < runs.size(); ++r) {
    std::istringstream lines(runs[r].header.job_canonical);
    std::string line;
    while (std::getline(lines, line)) {
      const auto colon = line.find(": ");
      const std::string prefix = colon == std::string::npos ? std::string() : line.substr(0, colon + 2);
      std::string rest = colon == std::string::npos ? line : line.substr(colon + 2);
      std::size_t start = 0;
      while (start <= rest.size()) {
        const auto end = rest.find("; ", start);
        fields[r].push_back(prefix + rest.substr(start, end == std::string::npos ? std::string::npos : end - start));
        if (end == std::string::npos) break;
        start = end + 2;
      }
    }
    std::sort(fields[r].begin(), fields[r].end());
    fields[r].erase(std::unique(fields[r].begin(), fields[r].end()), fields[r].end());
    for (const auto& f : fields[r]) ++count[f];
  }
  return {std::move(fields), std::move(count)};
}

// One run's row of the collated table: what differs from the other runs and its main numbers.
std::string collated_row(const std::vector<RunResult>& runs, std::size_t r, const RunFields& apart,
                         const std::vector<std::string>& keys) {
  const auto& fields = apart.fields;
  const auto& count = apart.count;
  std::string md;
  const auto& run = runs[r];
  bool complete = true;
  const SizeResult* last = nullptr;
  for (const auto& s : run.sizes) {
    complete &= s.units_done == s.units_total;
    if (s.has_data()) last = &s;
  }
  std::string differs;
  for (const auto& f : fields[r]) {
    if (count.at(f) < runs.size()) differs += (differs.empty() ? "" : "; ") + f;
  }
  if (differs.empty()) differs = "–";
  if (differs.size() > 160) differs = differs.substr(0, 157) + "...";
  // The mean spectrum's distance is often unresolved (it needs many trials); the per-trial
  // distance resolves with few, so the runs stay comparable by a resolved quantity.
  std::string alpha = "–", alpha_per_trial = "–";
  for (const auto& f : run.fits) {
    if (f.key == "kolmogorov" && f.fit.ok) alpha = fmt("%.3f ± %.3f", f.fit.alpha, f.fit.alpha_standard_error);
    if (f.key == "kolmogorov_per_trial" && f.fit.ok) {
      alpha_per_trial = fmt("%.3f ± %.3f", f.fit.alpha, f.fit.alpha_standard_error);
    }
  }
  std::string key_cells;
  for (const auto& key : keys) key_cells += " " + point_value(run, key) + " |";
  md += "| " + std::to_string(r + 1) + " | " + run.label + " | " +
        (run.header.metadata.count("job_name") ? run.header.metadata.at("job_name") : "") + " |" +
        key_cells + " " + differs + " | `" + run.header.expression + "` | " + (run.limit.law ? run.limit.law->describe() : "none") + " | " +
        std::to_string(run.sizes.size()) + " | " + (complete ? "complete" : "incomplete") + " | " +
        (last && last->metrics.has_pooled ? "N = " + std::to_string(last->n) + ": " + pm(last->metrics.pooled_kolmogorov) : "–") +
        " | " + alpha + " | " +
        (last && last->metrics.has_per_trial ? "N = " + std::to_string(last->n) + ": " + pm(last->metrics.per_trial.kolmogorov) : "–") +
        " | " + alpha_per_trial + " |\n";
  return md;
}

// The runs side by side (a report of more than one run).
std::string markdown_collated_runs(const std::vector<RunResult>& runs) {
  const RunFields apart = run_fields(runs);
  std::string md;
  // A sweep's runs get one column per varied key, their point's value (sweep.hpp).
  const std::vector<std::string> keys = sweep_keys(runs);
  std::string key_head, key_rule;
  for (const auto& key : keys) {
    key_head += " " + key + " |";
    key_rule += "---|";
  }
  md += "## Runs collated\n\n| # | file | job |" + key_head +
        " what differs | expression | limit | sizes | status | Kolmogorov at largest N | α (Kolmogorov) | "
        "per-trial Kolmogorov at largest N | α (per-trial Kolmogorov) |\n"
        "|---|---|---|" + key_rule + "---|---|---|---|---|---|---|---|---|\n";
  for (std::size_t r = 0; r < runs.size(); ++r) md += collated_row(runs, r, apart, keys);
  md += "\n";
  return md;
}

// A run's heading: its job, expression, version, status and damaged units.
std::string markdown_run_summary(const RunResult& run, std::size_t r, std::size_t run_count) {
  std::string md;
  const auto& h = run.header;
  md += "## " + (run_count > 1 ? std::to_string(r + 1) + ". " : std::string()) + run.label + "\n\n";
  md += "- job: " + (h.metadata.count("job_name") ? h.metadata.at("job_name") : std::string("(unnamed)")) +
        ", seed " + (h.metadata.count("seed") ? h.metadata.at("seed") : std::string("?")) +
        ", job hash `" + h.job_hash.substr(0, 16) + "`\n";
  md += "- expression: `" + h.expression + "` (" + (h.self_adjoint ? "self-adjoint" : "not self-adjoint") +
        "; spectrum: " + store::spectrum_name(h.spectrum) + ")\n";
  md += "- written by freegap " + h.tool_version + "; evaluation path: " +
        (h.metadata.count("path") ? h.metadata.at("path") : std::string("dense")) + "\n";
  std::vector<std::string> incomplete;
  for (const auto& s : run.sizes) {
    if (s.units_done != s.units_total) {
      incomplete.push_back("N = " + std::to_string(s.n) + " (" + std::to_string(s.units_done) + " of " +
                           std::to_string(s.units_total) + " units" +
                           (s.units_done == 0 ? ", no data" : "") + ")");
    }
  }
  if (incomplete.empty()) {
    md += "- status: complete\n";
  } else {
    md += "- status: **incomplete** — the run was stopped or is still running; resume it with the "
          "same command. Incomplete sizes: ";
    for (std::size_t i = 0; i < incomplete.size(); ++i) md += (i ? ", " : "") + incomplete[i];
    md += ". Their numbers below use the committed units only.\n";
  }
  if (!run.integrity.checksummed) {
    md += "- checksums: none (unverified: written before checksums)\n";
  }
  if (!run.integrity.damaged.empty()) {
    md +=
        "- **damaged units, left out** (their bytes do not match the checksums written with "
        "them; resuming the run computes them again): ";
    for (std::size_t i = 0; i < run.integrity.damaged.size(); ++i) {
      const auto& d = run.integrity.damaged[i];
      md += (i ? "; " : "") + std::string("N = ") + std::to_string(d.n) + " unit " +
            std::to_string(d.unit) + " (" + d.reason + ")";
    }
    md += "\n";
  }
  return md;
}

// The limit law of a run: its rule, support and exact moments, or why there is none.
std::string markdown_limit(const RunResult& run) {
  std::string md;
  md += "\n### Limit\n\n";
  if (run.limit.law) {
    const Support s = run.limit.law->support();
    md += "- law: " + run.limit.law->describe() + "\n- rule: " + run.limit.rule + "\n";
    if (!run.limit.law_note.empty()) md += "- note: " + run.limit.law_note + "\n";
    md += "- support: [" + fmt("%.10g", s.lo) + ", " + fmt("%.10g", s.hi) + "]";
    if (!s.atoms.empty()) md += ", with " + std::to_string(s.atoms.size()) + " atom(s)";
    if (s.bands.size() > 1) {
      md += "; the continuous part lives on " + std::to_string(s.bands.size()) + " bands: ";
      for (std::size_t b = 0; b < s.bands.size(); ++b) {
        if (b == 8 && s.bands.size() > 10) {
          md += " ∪ … (" + std::to_string(s.bands.size() - 9) + " more) ∪ ";
          b = s.bands.size() - 1;
        } else if (b > 0) {
          md += " ∪ ";
        }
        md += "[" + fmt("%.10g", s.bands[b].lo) + ", " + fmt("%.10g", s.bands[b].hi) + "]";
      }
    }
    md += "; operator-norm limit " + fmt("%.10g", run.reference.norm) +
          (run.limit.outliers.predicted() ? " (with the outliers)" : "") + "\n";
    if (run.limit.outliers.spiked) {
      md += "- outliers of the spiked matrix (the bulk law above is its limit without them):\n\n```\n" +
            outliers_text(run.limit.outliers) + "```\n";
    }
  } else {
    md += "- no predictor applies: " + run.limit.reason + ". The finite-N data is reported below "
          "without distances to a limit.\n";
  }
  for (const std::string& note : run.notes) md += "- note: " + note + "\n";
  if (run.limit.exact_moment_text.size() >= 2) {  // none with max_moment 0 (extremes_only)
    md += "- exact limit moments m_1..m_" + std::to_string(run.limit.exact_moment_text.size() - 1) +
          " (free cumulants over non-crossing partitions): ";
    for (std::size_t k = 1; k < run.limit.exact_moment_text.size(); ++k) {
      md += (k > 1 ? ", " : "") + run.limit.exact_moment_text[k];
    }
    md += "\n";
    if (run.limit.law) {
      const auto lm = run.limit.law->moments(static_cast<int>(run.limit.exact_moments.size()) - 1);
      double worst = 0.0;
      for (std::size_t k = 1; k < lm.size(); ++k) {
        worst = std::max(worst, std::abs(lm[k] - run.limit.exact_moments[k]) /
                                    std::max(1.0, std::abs(run.limit.exact_moments[k])));
      }
      md += "- check: the law's own moments agree with the exact ones to " + fmt("%.1e", worst) +
            " (relative)\n";
    }
  } else if (!run.limit.moments_note.empty()) {
    md += "- no exact limit moments: " + run.limit.moments_note + "\n";
  }
  return md;
}

// The sizes of a run: their status, and their failed trials' reasons.
std::string markdown_sizes(const RunResult& run) {
  std::string md;
  md += "\n### Sizes\n\n| N | status | units | trials used | failed |\n|---|---|---|---|---|\n";
  for (const auto& s : run.sizes) {
    md += "| " + std::to_string(s.n) + " | " + status_of(s) + " | " + std::to_string(s.units_done) + "/" +
          std::to_string(s.units_total) + " | " + std::to_string(s.trials.size()) + "/" +
          std::to_string(s.trials_planned) + " | " + std::to_string(s.failed) + " |\n";
  }
  for (const auto& s : run.sizes) {
    for (const auto& [reason, count] : s.failure_reasons) {
      md += "\nN = " + std::to_string(s.n) + ": " + std::to_string(count) + " failed trial(s): " + reason + "\n";
    }
  }
  return md;
}

// The distances of the mean spectral distribution to the limit, from kept spectra or from
// histograms.
std::string markdown_pooled_distances(const RunResult& run) {
  std::string md;
  const bool any_pooled = std::any_of(run.sizes.begin(), run.sizes.end(),
                                      [](const SizeResult& s) { return s.has_data() && s.metrics.has_pooled; });
  if (any_pooled) {
    md += "\n### Distance of the mean spectral distribution to the limit\n\n";
    const bool any_spectra = std::any_of(run.sizes.begin(), run.sizes.end(), [](const SizeResult& s) {
      return s.has_data() && s.metrics.pooled_from_spectra;
    });
    const bool any_binned = std::any_of(run.sizes.begin(), run.sizes.end(), [](const SizeResult& s) {
      return s.has_data() && s.metrics.has_pooled && !s.metrics.pooled_from_spectra;
    });
    if (any_spectra) {
      md += "From every trial's kept eigenvalues (no bins): Kolmogorov exact over every jump of "
            "the pooled empirical CDF, Wasserstein-1 against the limit CDF's linear interpolant "
            "on a fine grid (its error at most the grid bound). Value = plug-in − bootstrap bias "
            "(trials resampled), ± the bootstrap standard error. Unresolved when, after that "
            "correction, it does not exceed the noise floor: where the corrected value of a "
            "zero distance lies, plus 2 standard errors (a one-sided test of \"the distance "
            "is 0\" at about the 2.5 % level: about one size in 40 of a model at its limit is "
            "called resolved).\n\n"
            "| N | trials | Kolmogorov | plug-in (bias) | noise floor | Wasserstein-1 | plug-in (bias) | noise floor | W1 grid bound |\n"
            "|---|---|---|---|---|---|---|---|---|\n";
      for (const auto& s : run.sizes) {
        if (!s.has_data() || !s.metrics.pooled_from_spectra) continue;
        const auto& d = s.metrics.spectra;
        md += "| " + std::to_string(s.n) + " | " + std::to_string(d.trials) + " | " +
              pm(s.metrics.pooled_kolmogorov) + " | " + num(d.kolmogorov_plugin) + " (" +
              num(d.kolmogorov_bias) + ") | " + num(d.kolmogorov.noise_floor) + " | " +
              pm(s.metrics.pooled_wasserstein1) + " | " + num(d.wasserstein1_plugin) + " (" +
              num(d.wasserstein1_bias) + ") | " + num(d.wasserstein1.noise_floor) + " | " +
              num(d.wasserstein1_grid_bound) + " |\n";
      }
    }
    if (any_binned) {
      md += std::string(any_spectra ? "\n" : "") +
            "Pooled histogram of all trials against the limit CDF at the bin edges (a lower "
            "bound of the Kolmogorov distance, short of it by at most the bin resolution); "
            "sizes whose trials did not all keep their spectra.\n\n"
            "| N | Kolmogorov | Wasserstein-1 | bin resolution |\n|---|---|---|---|\n";
      for (const auto& s : run.sizes) {
        if (!s.has_data() || !s.metrics.has_pooled || s.metrics.pooled_from_spectra) continue;
        md += "| " + std::to_string(s.n) + " | " + pm(s.metrics.pooled_kolmogorov) + " | " +
              pm(s.metrics.pooled_wasserstein1) + " | " + num(s.metrics.pooled_resolution) + " |\n";
      }
    }
  }
  return md;
}

// The per-trial distances, where sizes kept their spectra.
std::string markdown_per_trial_distances(const RunResult& run) {
  std::string md;
  const bool any_per = std::any_of(run.sizes.begin(), run.sizes.end(),
                                   [](const SizeResult& s) { return s.has_data() && s.metrics.has_per_trial; });
  if (any_per) {
    md += "\n### Per-trial distances (kept spectra)\n\n| N | trials | Kolmogorov mean (sd) | "
          "Wasserstein-1 mean (sd) |\n|---|---|---|---|\n";
    for (const auto& s : run.sizes) {
      if (!s.has_data() || !s.metrics.has_per_trial) continue;
      const auto& p = s.metrics.per_trial;
      md += "| " + std::to_string(s.n) + " | " + std::to_string(p.trials) + " | " + pm(p.kolmogorov) + " (" +
            num(p.kolmogorov_sd) + ") | " + pm(p.wasserstein1) + " (" + num(p.wasserstein1_sd) + ") |\n";
    }
  }
  return md;
}

// The moment errors of every size with data.
std::string markdown_moment_errors(const RunResult& run) {
  std::string md;
  const bool any_moments = std::any_of(run.sizes.begin(), run.sizes.end(), [](const SizeResult& s) {
    return s.has_data() && s.metrics.moment_errors.size() > 1;
  });
  if (any_moments) {
    std::size_t k_max = 0;
    for (const auto& s : run.sizes) {
      if (s.has_data()) k_max = std::max(k_max, s.metrics.moment_errors.size());
    }
    md += "\n### Moment errors: mean of tr X^k over trials − exact limit\n\n| N |";
    for (std::size_t k = 1; k < k_max; ++k) md += " k = " + std::to_string(k) + " |";
    md += "\n|---|";
    for (std::size_t k = 1; k < k_max; ++k) md += "---|";
    md += "\n";
    for (const auto& s : run.sizes) {
      if (!s.has_data()) continue;
      md += "| " + std::to_string(s.n) + " |";
      for (std::size_t k = 1; k < k_max; ++k) {
        md += ' ';
        md += k < s.metrics.moment_errors.size() ? pm(s.metrics.moment_errors[k].error) : "–";
        md += " |";
      }
      md += "\n";
    }
  }
  return md;
}

// Each separated outlier per N: the mean of the eigenvalue that follows it against its predicted
// limit, beside the bulk's edge on its side.
std::string markdown_outliers(const RunResult& run) {
  const auto targets = outlier_targets(run);
  if (targets.empty() || !run.limit.law) return "";
  const Support bulk = run.limit.law->support();
  std::string md = "\n### Outliers against their predicted limits (means over trials)\n\n"
                   "Bulk support [" + fmt("%.6g", bulk.lo) + ", " + fmt("%.6g", bulk.hi) +
                   "]. The k-th outlier on a side is the k-th largest (smallest) eigenvalue of each "
                   "trial; beyond the first it needs the trial's kept spectrum.\n\n| N |";
  std::string rule = "|---|";
  for (const auto& o : targets) {
    md += " " + outlier_name(o) + " | − predicted " + fmt("%.6g", o.location) + " |";
    rule += "---|---|";
  }
  md += "\n" + rule + "\n";
  for (const auto& s : run.sizes) {
    if (!s.has_data()) continue;
    md += "| " + std::to_string(s.n) + " |";
    for (const auto& o : targets) {
      std::vector<double> v;
      for (const auto& t : s.trials) v.push_back(outlier_value(o, t));
      if (std::any_of(v.begin(), v.end(), [](double x) { return !std::isfinite(x); })) {
        md += " – | (spectra not kept) |";
        continue;
      }
      const ErrorPoint e = mean_error_point(static_cast<double>(s.n), v, o.location);
      md += " " + fmt("%.6g", e.error + o.location) + " | " + fmt("%.4g", e.error) + " ± " +
            fmt("%.2g", e.standard_error) + (e.resolved ? "" : " (unresolved)") + " |";
    }
    md += "\n";
  }
  return md;
}

// The extreme values and the operator norm against their limits.
std::string markdown_extremes(const RunResult& run) {
  std::string md;
  const bool have_data = std::any_of(run.sizes.begin(), run.sizes.end(),
                                     [](const SizeResult& s) { return s.has_data(); });
  if (have_data) {
    md += "\n### Extremes and operator norm (means over trials)\n\n| N | largest | − " +
          std::string(outlier_side(run, true) ? "outlier " : "edge ") +
          (std::isfinite(run.reference.edge_high) ? fmt("%.6g", run.reference.edge_high) : std::string("(unknown)")) +
          " | smallest | − " + std::string(outlier_side(run, false) ? "outlier " : "edge ") +
          (std::isfinite(run.reference.edge_low) ? fmt("%.6g", run.reference.edge_low) : std::string("(unknown)")) +
          " | norm | − limit " +
          (std::isfinite(run.reference.norm) ? fmt("%.6g", run.reference.norm) : std::string("(unknown)")) +
          " |\n|---|---|---|---|---|---|---|\n";
    for (const auto& s : run.sizes) {
      if (!s.has_data()) continue;
      const auto& m = s.metrics;
      md += "| " + std::to_string(s.n) + " | " + fmt("%.6g", m.max_edge.mean) + " | " + pm(m.max_edge.error) +
            " | " + fmt("%.6g", m.min_edge.mean) + " | " + pm(m.min_edge.error) + " | " +
            fmt("%.6g", m.norm.mean) + " | " + pm(m.norm.error) + " |\n";
    }
  }
  return md;
}

// The convergence rates, their warnings, and the trials that would narrow the wide ones.
std::string markdown_fits(const RunResult& run) {
  std::string md;
  if (!run.fits.empty()) {
    md += "\n### Convergence rates: error ≈ C·N^(−α)\n\nWeighted least squares on log–log scales; "
          "normal 95% interval from the points' standard errors (widened by √(χ²/dof) when the "
          "points scatter more than their errors say; Student t when no errors are known) and "
          "percentile bootstrap interval over trials (signed errors, per-trial distances and "
          "distances from kept spectra; these add a bound on the bias the correction may leave "
          "to each point's error) or work units (distances from histograms).\n\n| quantity | α | 95% CI | bootstrap 95% CI | sizes | published α | "
          "source of the published α |\n|---|---|---|---|---|---|---|\n";
    std::vector<std::string> warnings;
    for (const auto& f : run.fits) {
      md += "| " + f.quantity + " | " + (f.fit.ok ? fmt("%.3f ± %.3f", f.fit.alpha, f.fit.alpha_standard_error) : "no fit") +
            " | " + (f.fit.ok ? fmt("%.3f – %.3f", f.fit.ci_low, f.fit.ci_high) : "–") + " | " +
            (f.bootstrap ? fmt("%.3f – %.3f", f.bootstrap->low, f.bootstrap->high) : "–") + " | " +
            std::to_string(f.fit.points) + " | " +
            (f.published ? num(f.published->alpha) + " | " + std::string(f.published->source)
                         : std::string("– | –")) +
            " |\n";
      for (const auto& w : f.fit.warnings) warnings.push_back(f.quantity + ": " + w);
    }
    if (!warnings.empty()) {
      md += "\nWarnings:\n\n";
      for (const auto& w : warnings) md += "- " + w + "\n";
    }
    // A fit too wide to say much: how many more trials would narrow it (its interval is
    // noise-limited, so its width falls like 1/√R; docs/check-values.md §4i).
    std::string wide;
    for (const auto& f : run.fits) {
      const double half = 0.5 * (f.fit.ci_high - f.fit.ci_low);
      if (!f.fit.ok || !(half > kWideExponent)) continue;
      wide += "- " + f.quantity + ": ± " + num(half) + "; about " +
              num((half / kWideExponent) * (half / kWideExponent)) + " × the trials at every size for ± " +
              num(kWideExponent) + " (`freegap plan JOB --rate-halfwidth " + num(kWideExponent) +
              " --pilot " + run.label + " --rate-quantity " + f.key + "` prices it)\n";
    }
    if (!wide.empty()) {
      md += "\nExponents whose 95% interval is wider than ± " + num(kWideExponent) + ":\n\n" + wide;
    }
  }
  return md;
}

std::string markdown_of(const std::vector<RunResult>& runs, const ReportOptions& options) {
  std::string md = markdown_introduction(options);
  if (runs.size() > 1) md += markdown_collated_runs(runs);
  for (std::size_t r = 0; r < runs.size(); ++r) {
    const RunResult& run = runs[r];
    md += markdown_run_summary(run, r, runs.size());
    md += markdown_limit(run);
    md += markdown_sizes(run);
    md += markdown_pooled_distances(run);
    md += markdown_per_trial_distances(run);
    md += markdown_moment_errors(run);
    md += markdown_extremes(run);
    md += markdown_outliers(run);
    md += markdown_fits(run);
    if (!run.estimates.empty()) {
      std::string section = estimator_scores_markdown(run.estimates);
      if (section.rfind("## ", 0) == 0) section = "\n#" + section;  // a subsection of this run
      md += section;
      if (options.figures) {
        md += "\nFigure: `figures/estimators_run" + std::to_string(r + 1) + "` (error against N per estimator).\n";
      }
    }
    md += "\n";
  }
  if (options.figures) {
    md += "## Figures\n\nIn `figures/`: `spectrum_run<r>_N<n>` (histogram against the limit density), "
          "`errors_run<r>` (errors against N on log–log scales with the fitted lines and their "
          "bands), `extremes_run<r>` (extreme values and norm against N with the limit edges)" +
          std::string(runs.size() > 1 ? ", `sweep_errors` (all runs together)" : "") +
          "; PNG and SVG.\n";
  }
  return md;
}

}  // namespace

Report build_report(const std::vector<std::string>& run_files, const ReportOptions& options) {
  if (run_files.empty()) throw InputError("report: give at least one run file");
  std::vector<RunResult> runs;
  for (const auto& path : run_files) runs.push_back(analyse_run(path, options));
  Report out;
  tables_of(runs, out.tables);
  out.markdown = markdown_of(runs, options);
  for (std::size_t r = 0; r < runs.size(); ++r) {
    if (!runs[r].estimates.empty()) {
      out.files.emplace_back("estimators_run" + std::to_string(r + 1) + ".csv",
                             estimator_scores_csv(runs[r].estimates));
    }
  }
  for (const auto& run : runs) {
    for (const auto& d : run.integrity.damaged) {
      out.integrity.push_back(run.label + ": N = " + std::to_string(d.n) + ", unit " +
                              std::to_string(d.unit) + ": " + d.reason + "; left out");
    }
    for (const auto& s : run.sizes) {
      if (s.units_done != s.units_total) {
        out.incomplete.push_back(run.label + ": N = " + std::to_string(s.n) + " (" +
                                 std::to_string(s.units_done) + " of " + std::to_string(s.units_total) +
                                 " units)");
      }
    }
  }
  return out;
}

std::string to_csv(const Table& table) {
  std::string out;
  for (std::size_t i = 0; i < table.columns.size(); ++i) out += (i ? "," : "") + table.columns[i];
  out += "\n";
  for (const auto& row : table.rows) {
    for (std::size_t i = 0; i < row.size(); ++i) {
      if (i) out += ",";
      if (const double* d = std::get_if<double>(&row[i])) {
        if (std::isnan(*d)) {
          out += "nan";
        } else {
          out += text::exact(*d);
        }
      } else {
        const std::string& s = std::get<std::string>(row[i]);
        if (s.find_first_of(",\"\n") == std::string::npos) {
          out += s;
        } else {
          std::string q = "\"";
          for (char c : s) q += c == '"' ? std::string("\"\"") : std::string(1, c);
          out += q + "\"";
        }
      }
    }
    out += "\n";
  }
  return out;
}

}  // namespace freegap::analysis
