// Scoring of plug-in and built-in estimators against their truths
// (include/freegap/analysis/reporting/estimator_scores.hpp).
#include "freegap/analysis/reporting/estimator_scores.hpp"
#include "freegap/analysis/limits/limit.hpp"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <limits>
#include <map>

#include "freegap/analysis/limits/laws.hpp"
#include "freegap/analysis/limits/moments.hpp"
#include "freegap/errors.hpp"
#include "freegap/stop.hpp"
#include "freegap/expr.hpp"
#include "freegap/job.hpp"
#include "freegap/observe.hpp"
#include "freegap/rng.hpp"
#include "freegap/study.hpp"
#include "freegap/text.hpp"

namespace freegap::analysis {

namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

std::vector<std::string> split(const std::string& text, char sep) {
  std::vector<std::string> parts;
  std::size_t start = 0;
  for (;;) {
    const std::size_t at = text.find(sep, start);
    parts.push_back(text.substr(start, at == std::string::npos ? std::string::npos : at - start));
    if (at == std::string::npos) return parts;
    start = at + 1;
  }
}

std::string fmt(const char* format, double x) {
  char buf[64];
  std::snprintf(buf, sizeof buf, format, x);
  return buf;
}

// Support edges of the model's limit law, by the same derivation the report uses (limit.hpp:
// closed-form rules, else the polynomial solver).
std::optional<std::pair<double, double>> limit_edges_of(const store::RunHeader& header,
                                                        const std::string& run_file,
                                                        std::string& note) {
  try {
    const DerivedLimit d =
        study::Study::of_stored_job(header.job_text, header.job_canonical, run_file,
                                    header.job_directory).limit(0);
    if (!d.law) {
      note = d.reason;
      return std::nullopt;
    }
    const Support s = d.law->support();
    note = "support of the limit law " + d.law->describe();
    return std::make_pair(s.lo, s.hi);
  } catch (const Stopped&) {
    throw;  // a stop request ends the command, it is not a reason
  } catch (const Error& e) {
    note = e.what();
    return std::nullopt;
  }
}

// Percentile interval of bootstrap replicates (NaN-free), at `level`.
std::pair<double, double> percentile(std::vector<double> values, double level) {
  values.erase(std::remove_if(values.begin(), values.end(), [](double v) { return !std::isfinite(v); }),
               values.end());
  if (values.empty()) return {kNaN, kNaN};
  std::sort(values.begin(), values.end());
  const auto at = [&](double p) {
    const double pos = p * static_cast<double>(values.size() - 1);
    const auto i = static_cast<std::size_t>(std::floor(pos));
    const double f = pos - static_cast<double>(i);
    return i + 1 < values.size() ? values[i] * (1 - f) + values[i + 1] * f : values[i];
  };
  return {at((1 - level) / 2), at((1 + level) / 2)};
}

struct Stats {
  double mean = kNaN, bias = kNaN, sd = kNaN, rmse = kNaN, rmse_se = kNaN;
};

Stats stats_of(const std::vector<double>& x, double truth, bool known) {
  Stats s;
  const std::size_t t = x.size();
  if (t == 0) return s;
  observe::CompensatedSum sum;
  for (const double v : x) sum.add(v);
  s.mean = sum.value() / static_cast<double>(t);
  if (t > 1) {
    observe::CompensatedSum sq;
    for (const double v : x) sq.add((v - s.mean) * (v - s.mean));
    s.sd = std::sqrt(sq.value() / static_cast<double>(t - 1));
  }
  if (known) {
    s.bias = s.mean - truth;
    observe::CompensatedSum e2;
    for (const double v : x) e2.add((v - truth) * (v - truth));
    const double mse = e2.value() / static_cast<double>(t);
    s.rmse = std::sqrt(mse);
    if (t > 1 && s.rmse > 0) {
      observe::CompensatedSum d;
      for (const double v : x) {
        const double e = (v - truth) * (v - truth) - mse;
        d.add(e * e);
      }
      const double sd_sq = std::sqrt(d.value() / static_cast<double>(t - 1));
      s.rmse_se = sd_sq / (2.0 * s.rmse * std::sqrt(static_cast<double>(t)));
    }
  }
  return s;
}

// A CSV cell: %.17g (text.hpp), empty when unknown.
std::string number(double x) { return std::isfinite(x) ? text::exact(x) : ""; }

std::string csv_field(const std::string& s) {
  if (s.find_first_of(",\"\n") == std::string::npos) return s;
  std::string out = "\"";
  for (const char c : s) {
    if (c == '"') out += '"';
    out += c;
  }
  return out + "\"";
}

}  // namespace

TruthValue resolve_truth(const std::string& truth, const store::RunHeader& header,
                         const ScoreOptions& options) {
  TruthValue t;
  t.text = truth;
  double x = 0.0;
  const auto parsed = std::from_chars(truth.data(), truth.data() + truth.size(), x);
  if (parsed.ec == std::errc() && parsed.ptr == truth.data() + truth.size()) {
    t.known = std::isfinite(x);
    t.value = x;
    t.note = "constant from the job file";
    return t;
  }
  if (truth == "none") {
    t.note = "no truth declared: spread only";
    return t;
  }
  try {
    // The model as the report derives it: a file the job names (an eigenvalue file) is looked
    // for beside the run file, then in the current directory, and only with the numbers the run
    // used (study::Study::of_stored_job); a truth never reads another file of the same name.
    const study::Study stored =
        study::Study::of_stored_job(header.job_text, header.job_canonical, options.run_file,
                                    header.job_directory);
    const expr::Expression& e = stored.expression();
    const auto parts = split(truth, ':');
    const auto& head = parts[0];
    if (head == "limit_moment" && parts.size() == 2) {
      const int k = std::stoi(parts[1]);
      const auto m = limit_moments(e, k);
      t.known = true;
      t.value = m.at(static_cast<std::size_t>(k)).value;
      t.note = "exact limit moment " + m.at(static_cast<std::size_t>(k)).text;
      return t;
    }
    if (head == "limit_edge" || head == "limit_norm") {
      std::optional<std::pair<double, double>> edges = options.limit_edges;
      std::string note = "support edges given by the caller";
      if (!edges) edges = limit_edges_of(header, options.run_file, note);
      if (!edges) {
        t.note = note;
        return t;
      }
      t.known = true;
      if (head == "limit_norm") {
        t.value = std::max(std::abs(edges->first), std::abs(edges->second));
      } else {
        t.value = parts.size() == 2 && parts[1] == "lower" ? edges->first : edges->second;
      }
      t.note = note;
      return t;
    }
    if ((head == "matrix_moment" && parts.size() == 3) ||
        (head == "matrix_ratio" && parts.size() == 2)) {
      const auto& declared = e.declared();
      const auto it = std::find_if(declared.begin(), declared.end(),
                                   [&](const auto& m) { return m.name == parts[1]; });
      if (it == declared.end()) {
        t.note = "the job declares no matrix '" + parts[1] + "'";
        return t;
      }
      if (head == "matrix_ratio") {
        t.known = true;
        t.value = it->kind == declarations::Kind::diagonal ? it->diagonal.ratio : it->ratio;
        t.note = "ratio of matrix " + it->name;
        return t;
      }
      const int k = std::stoi(parts[2]);
      const Rational m = free_variable_for(*it).moment(k);
      t.known = true;
      t.value = m.to_double();
      t.note = "moment " + std::to_string(k) + " of the law of " + it->name + " = " + m.to_string();
      return t;
    }
    t.note = "unknown truth form";
  } catch (const std::exception& e) {
    t.known = false;
    t.note = std::string("cannot compute: ") + e.what();
  }
  return t;
}

namespace {

// Where one estimate's column sits in the stored rows of a size.
struct EstimateColumn {
  std::size_t columns = 0;  // estimates per trial
  std::size_t c = 0;        // this estimate's column
  std::size_t p = 0;        // estimators per trial
  std::size_t owner = 0;    // this estimate's estimator
};

// The column's finite values at one size; the trials without one are counted as failed, with
// their reasons.
std::vector<double> values_of_column(const store::EstimateRows& r, const EstimateColumn& col,
                                     EstimateSizeScore& s,
                                     std::map<std::string, std::int64_t>& reasons) {
  std::vector<double> x;
  for (std::size_t t = 0; t < r.trials.size(); ++t) {
    const double v = r.values[t * col.columns + col.c];
    const std::string& why = r.failures[t * col.p + col.owner];
    if (!why.empty() || !std::isfinite(v)) {
      ++s.failed;
      ++reasons[why.empty() ? "non-finite value" : why];
      continue;
    }
    x.push_back(v);
  }
  return x;
}

// Bootstrap replicates of the bias, sd and RMSE of one estimate at one size.
struct Replicates {
  std::vector<double> bias, sd, rmse;
};

Replicates bootstrap_over_trials(const std::vector<double>& x, const EstimateScore& score,
                                 const EstimateSizeScore& s, const ScoreOptions& options) {
  const bool known = score.truth.known;
  const double theta = score.truth.value;
  // Percentile bootstrap over trials, one stream per (estimate, size).
  std::vector<double> bb, bs, br;
  if (x.size() > 1 && options.bootstrap_replicates > 0) {
    rng::Stream stream(rng::StreamKey{options.seed, "estimates:" + score.estimator + "." +
                                                        score.estimate,
                                      static_cast<std::uint64_t>(s.n) & 0xffffffffULL, 0});
    std::vector<double> resample(x.size());
    for (int b = 0; b < options.bootstrap_replicates; ++b) {
      for (auto& v : resample) {
        const auto j = std::min<std::size_t>(
            x.size() - 1, static_cast<std::size_t>(stream.uniform() * static_cast<double>(x.size())));
        v = x[j];
      }
      const Stats rs = stats_of(resample, theta, known);
      bb.push_back(rs.bias);
      bs.push_back(rs.sd);
      br.push_back(rs.rmse);
    }
  }
  return {std::move(bb), std::move(bs), std::move(br)};
}

// One estimate at one size: its statistics over trials with their bootstrap intervals.
EstimateSizeScore score_size(const store::EstimateRows& r, std::int64_t n,
                             const EstimateColumn& col, const EstimateScore& score,
                             const ScoreOptions& options,
                             std::map<std::string, std::int64_t>& reasons) {
  const bool known = score.truth.known;
  const double theta = score.truth.value;
  EstimateSizeScore s;
  s.n = n;
  const std::vector<double> x = values_of_column(r, col, s, reasons);
  s.trials = static_cast<std::int64_t>(x.size());
  const Stats st = stats_of(x, theta, known);
  s.mean = st.mean;
  s.bias = st.bias;
  s.sd = st.sd;
  s.rmse = st.rmse;
  s.rmse_se = st.rmse_se;
  s.bias_se = x.size() > 1 ? st.sd / std::sqrt(static_cast<double>(x.size())) : kNaN;
  const Replicates reps = bootstrap_over_trials(x, score, s, options);
  std::tie(s.sd_low, s.sd_high) = percentile(reps.sd, options.level);
  if (known) {
    std::tie(s.bias_low, s.bias_high) = percentile(reps.bias, options.level);
    std::tie(s.rmse_low, s.rmse_high) = percentile(reps.rmse, options.level);
  } else {
    s.bias_low = s.bias_high = s.rmse_low = s.rmse_high = kNaN;
  }
  return s;
}

// One estimate over every size: the sizes' scores, the rates of |bias| and RMSE when its truth
// is known, and its estimator's most frequent failure reasons.
EstimateScore score_column(const store::RunHeader& header,
                           const std::vector<store::EstimateRows>& rows, const EstimateColumn& col,
                           const ScoreOptions& options, const ScoreOptions& located) {
  const std::size_t c = col.c;
  EstimateScore score;
  score.estimator = header.estimates[c].estimator;
  score.estimate = header.estimates[c].estimate;
  score.truth = resolve_truth(header.estimates[c].truth, header, located);
  const bool known = score.truth.known;
  std::map<std::string, std::int64_t> reasons;
  std::vector<ErrorPoint> bias_points, rmse_points;
  for (std::size_t i = 0; i < header.sizes.size(); ++i) {
    const EstimateSizeScore s =
        score_size(rows[i], header.sizes[i].n, col, score, options, reasons);
    if (known) {
      ErrorPoint bp{static_cast<double>(s.n), std::abs(s.bias), s.bias_se,
                    std::abs(s.bias) > 2.0 * s.bias_se};
      ErrorPoint rp{static_cast<double>(s.n), s.rmse, s.rmse_se, s.trials > 1};
      bias_points.push_back(bp);
      rmse_points.push_back(rp);
    }
    score.sizes.push_back(s);
  }
  FitOptions fit;
  fit.level = options.level;
  if (known) {
    score.bias_rate = fit_power_law(bias_points, fit);
    score.rmse_rate = fit_power_law(rmse_points, fit);
  }
  std::vector<std::pair<std::string, std::int64_t>> sorted(reasons.begin(), reasons.end());
  std::stable_sort(sorted.begin(), sorted.end(),
                   [](const auto& a, const auto& b) { return a.second > b.second; });
  if (sorted.size() > 5) sorted.resize(5);
  score.failure_reasons = std::move(sorted);
  return score;
}

}  // namespace

std::vector<EstimateScore> score_estimators(const store::RunFile& file,
                                            const ScoreOptions& options) {
  const store::RunHeader& header = file.header();
  ScoreOptions located = options;
  if (located.run_file.empty()) located.run_file = file.path();
  std::vector<EstimateScore> scores;
  const std::size_t columns = header.estimates.size();
  if (columns == 0) return scores;
  const auto estimators = header.estimators();
  const std::size_t p = estimators.size();
  std::vector<std::size_t> owner(columns);
  for (std::size_t c = 0; c < columns; ++c) {
    owner[c] = static_cast<std::size_t>(
        std::find(estimators.begin(), estimators.end(), header.estimates[c].estimator) -
        estimators.begin());
  }
  std::vector<store::EstimateRows> rows;
  for (std::size_t i = 0; i < header.sizes.size(); ++i) rows.push_back(file.read_estimates(i));

  for (std::size_t c = 0; c < columns; ++c) {
    scores.push_back(score_column(header, rows, EstimateColumn{columns, c, p, owner[c]}, options,
                                  located));
  }
  return scores;
}

std::vector<EstimateScore> score_estimators(const std::string& path, const ScoreOptions& options) {
  const store::RunFile file = store::RunFile::open_read(path);
  return score_estimators(file, options);
}

std::string estimator_scores_markdown(const std::vector<EstimateScore>& scores) {
  std::string out = "## Estimators\n\n";
  if (scores.empty()) return out + "The run declares no estimators.\n";
  out += "Bias = mean − truth, with its standard error over trials; sd = standard deviation of "
         "the estimates; RMSE = √(mean of (estimate − truth)²). Intervals: percentile bootstrap "
         "over trials. Rates: weighted fit of |bias| (points within 2 SE of 0 left out) and RMSE "
         "≈ C·N^(−α).\n\n";
  // Group by truth text: estimators of the same truth side by side.
  std::vector<std::string> truths;
  for (const auto& s : scores) {
    if (std::find(truths.begin(), truths.end(), s.truth.text) == truths.end()) {
      truths.push_back(s.truth.text);
    }
  }
  for (const auto& truth : truths) {
    std::vector<const EstimateScore*> group;
    for (const auto& s : scores) {
      if (s.truth.text == truth) group.push_back(&s);
    }
    const TruthValue& tv = group.front()->truth;
    out += "### Truth `" + truth + "`";
    out += tv.known ? " = " + fmt("%.10g", tv.value) : std::string(" (unknown)");
    out += "\n\n" + tv.note + "\n\n";
    out += "| N | estimate | trials | failed | mean | bias ± SE | bias CI | sd | sd CI | RMSE | "
           "RMSE CI |\n|---|---|---|---|---|---|---|---|---|---|---|\n";
    std::vector<std::int64_t> ns;
    for (const auto* s : group) {
      for (const auto& z : s->sizes) {
        if (std::find(ns.begin(), ns.end(), z.n) == ns.end()) ns.push_back(z.n);
      }
    }
    std::sort(ns.begin(), ns.end());
    const auto g = [](double x) { return std::isfinite(x) ? fmt("%.4g", x) : std::string("–"); };
    for (const auto n : ns) {
      for (const auto* s : group) {
        for (const auto& z : s->sizes) {
          if (z.n != n) continue;
          out += "| " + std::to_string(n) + " | " + s->estimator + "." + s->estimate + " | " +
                 std::to_string(z.trials) + " | " + std::to_string(z.failed) + " | " + g(z.mean) +
                 " | " + g(z.bias) + " ± " + g(z.bias_se) + " | [" + g(z.bias_low) + ", " +
                 g(z.bias_high) + "] | " + g(z.sd) + " | [" + g(z.sd_low) + ", " + g(z.sd_high) +
                 "] | " + g(z.rmse) + " | [" + g(z.rmse_low) + ", " + g(z.rmse_high) + "] |\n";
        }
      }
    }
    out += "\n";
    for (const auto* s : group) {
      if (!tv.known) continue;
      out += "- `" + s->estimator + "." + s->estimate + "` |bias|: " +
             describe_fit(s->bias_rate, std::nullopt) + "\n";
      out += "- `" + s->estimator + "." + s->estimate + "` RMSE: " +
             describe_fit(s->rmse_rate, std::nullopt) + "\n";
    }
    for (const auto* s : group) {
      for (const auto& [why, count] : s->failure_reasons) {
        out += "- `" + s->estimator + "." + s->estimate + "` failed " + std::to_string(count) +
               "×: " + why + "\n";
      }
    }
    out += "\n";
  }
  return out;
}

std::string estimator_scores_csv(const std::vector<EstimateScore>& scores) {
  std::string out =
      "estimator,estimate,truth,truth_value,n,trials,failed,mean,bias,bias_se,bias_low,bias_high,"
      "sd,sd_low,sd_high,rmse,rmse_se,rmse_low,rmse_high,bias_alpha,bias_alpha_se,rmse_alpha,"
      "rmse_alpha_se\n";
  for (const auto& s : scores) {
    for (const auto& z : s.sizes) {
      const std::vector<std::string> fields = {
          csv_field(s.estimator), csv_field(s.estimate), csv_field(s.truth.text),
          s.truth.known ? number(s.truth.value) : "", std::to_string(z.n),
          std::to_string(z.trials), std::to_string(z.failed), number(z.mean), number(z.bias),
          number(z.bias_se), number(z.bias_low), number(z.bias_high), number(z.sd),
          number(z.sd_low), number(z.sd_high), number(z.rmse), number(z.rmse_se),
          number(z.rmse_low), number(z.rmse_high),
          s.bias_rate.ok ? number(s.bias_rate.alpha) : "",
          s.bias_rate.ok ? number(s.bias_rate.alpha_standard_error) : "",
          s.rmse_rate.ok ? number(s.rmse_rate.alpha) : "",
          s.rmse_rate.ok ? number(s.rmse_rate.alpha_standard_error) : ""};
      for (std::size_t i = 0; i < fields.size(); ++i) out += (i ? "," : "") + fields[i];
      out += "\n";
    }
  }
  return out;
}

void write_estimator_scores_csv(const std::string& path, const std::vector<EstimateScore>& scores) {
  std::ofstream f(path, std::ios::binary | std::ios::trunc);
  if (!f) throw Error("cannot write '" + path + "'");
  f << estimator_scores_csv(scores);
  if (!f.flush()) throw Error("cannot write '" + path + "'");
}

}  // namespace freegap::analysis
