// Built-in estimators: freegap's own examples of the estimator interface, selected in a job file
// by `builtin = "NAME"`. They double as documentation of what an estimator sees and returns, and
// as the reference cases of the rate tests (tests/reporting/test_estimator_scores.cpp).
#include <algorithm>
#include <charconv>
#include <cmath>
#include <limits>

#include "freegap/errors.hpp"
#include "freegap/estimate.hpp"

namespace freegap::estimate {

namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

std::string where(const job::Job& job, const job::EstimatorSpec& spec, const std::string& key) {
  return job.where("estimator." + spec.name + (key.empty() ? "" : "." + key));
}

const std::string* parameter(const job::EstimatorSpec& spec, std::string_view key) {
  for (const auto& [k, v] : spec.parameters) {
    if (k == key) return &v;
  }
  return nullptr;
}

void check_parameters(const job::Job& job, const job::EstimatorSpec& spec,
                      const std::vector<std::string_view>& known) {
  for (const auto& [k, v] : spec.parameters) {
    if (std::find(known.begin(), known.end(), k) == known.end()) {
      std::string list;
      for (const auto name : known) list += (list.empty() ? "" : ", ") + std::string(name);
      throw InputError(where(job, spec, "parameters." + k) + "the built-in '" + spec.builtin +
                       "' takes no parameter '" + k + "'; its parameters: " +
                       (list.empty() ? "none" : list));
    }
  }
}

void check_estimates(const job::Job& job, const job::EstimatorSpec& spec,
                     const std::vector<std::string_view>& returns) {
  std::vector<std::string> sorted(returns.begin(), returns.end());
  std::sort(sorted.begin(), sorted.end());
  if (sorted != spec.estimates) {
    std::string a, b;
    for (const auto& n : spec.estimates) a += (a.empty() ? "" : ", ") + n;
    for (const auto& n : sorted) b += (b.empty() ? "" : ", ") + n;
    throw InputError(where(job, spec, "truth") + "names " + a + ", but the built-in '" +
                     spec.builtin + "' returns " + b +
                     "; name the truth of each estimate it returns, and no other");
  }
}

Outcome values_or_failure(std::vector<double> values, const job::EstimatorSpec& spec) {
  Outcome o;
  for (std::size_t i = 0; i < values.size(); ++i) {
    if (!std::isfinite(values[i])) {
      o.failed = true;
      o.reason = "built-in gave a non-finite value for '" + spec.estimates[i] + "'";
      o.values.assign(values.size(), kNaN);
      return o;
    }
  }
  o.values = std::move(values);
  return o;
}

// population_second_moment: σ₂ of the population from a sample covariance (see estimate.hpp).
class PopulationSecondMoment final : public Estimator {
 public:
  PopulationSecondMoment(const job::Job& job, const job::EstimatorSpec& spec) : spec_(spec) {
    check_parameters(job, spec, {"entries", "ratio"});
    check_estimates(job, spec, {"second_moment", "second_moment_unbiased"});
    const std::string* ratio = parameter(spec, "ratio");
    const std::string how = "give ratio = c, the N/M of the Wishart matrix in the expression";
    if (ratio == nullptr) {
      const bool table = job.line_of("estimator." + spec.name + ".parameters") > 0;
      throw InputError(where(job, spec, table ? "parameters" : "") + "the built-in '" + spec.builtin +
                       "' needs the parameter ratio; " + how);
    }
    const auto r = std::from_chars(ratio->data(), ratio->data() + ratio->size(), ratio_);
    if (r.ec != std::errc() || r.ptr != ratio->data() + ratio->size() || !(ratio_ > 0) ||
        !std::isfinite(ratio_)) {
      throw InputError(where(job, spec, "parameters.ratio") + "must be a positive number (got \"" +
                       *ratio + "\"); " + how);
    }
    if (const std::string* entries = parameter(spec, "entries")) {
      if (*entries != "complex" && *entries != "real") {
        throw InputError(where(job, spec, "parameters.entries") +
                         "must be \"complex\" or \"real\" (got \"" + *entries +
                         "\"): the Wishart matrix's entries");
      }
      real_ = *entries == "real";
    }
  }

  Outcome estimate(const TrialInput& input) override {
    if (input.kind != observe::SpectrumKind::eigenvalues || input.spectrum.empty()) {
      Outcome o;
      o.failed = true;
      o.reason = "needs the eigenvalues of a sample covariance";
      o.values.assign(2, kNaN);
      return o;
    }
    // M as the sampler makes it (ensembles::companion_size): M = max(1, round(N/c)).
    const auto m = std::max<std::int64_t>(
        1, std::llround(static_cast<double>(input.n) / ratio_));
    const auto [plain, unbiased] = population_second_moment(input.spectrum, m, real_);
    // Sorted estimate order: second_moment, second_moment_unbiased.
    return values_or_failure({plain, unbiased}, spec_);
  }

 private:
  job::EstimatorSpec spec_;
  double ratio_ = 1.0;
  bool real_ = false;
};

// operator_norm: the largest |value| of the spectrum, the plain estimator of the limit's
// operator norm (the support edge farthest from 0).
class OperatorNorm final : public Estimator {
 public:
  OperatorNorm(const job::Job& job, const job::EstimatorSpec& spec) : spec_(spec) {
    check_parameters(job, spec, {});
    check_estimates(job, spec, {"norm"});
  }
  Outcome estimate(const TrialInput& input) override {
    double norm = 0.0;
    for (const double x : input.spectrum) norm = std::max(norm, std::abs(x));
    if (input.spectrum.empty()) norm = kNaN;
    return values_or_failure({norm}, spec_);
  }

 private:
  job::EstimatorSpec spec_;
};

}  // namespace

std::pair<double, double> population_second_moment(std::span<const double> eigenvalues,
                                                   std::int64_t m, bool real_entries) {
  const auto moments = observe::spectral_moments(eigenvalues, 2);
  const double n = static_cast<double>(eigenvalues.size());
  const double md = static_cast<double>(m);
  const double c = n / md;
  // E m₂ = σ₂(1 + [real]/M) + c σ₁², E m₁² = σ₁² + (1 + [real]) σ₂/(N M) for Gaussian entries
  // (E[X X^* A X X^*] = M² A + M tr(A) I complex; M(M+1) A + M tr(A) I real, A symmetric:
  // Muirhead 1982, Aspects of Multivariate Statistical Theory, §3.2, from memory), so
  // E[m₂ − c m₁²] = σ₂(1 − 1/M²) (complex) or σ₂(M − 1)(M + 2)/M² (real; Srivastava 2005,
  // J. Japan Statist. Soc. 35, the same correction).
  const double plain = moments[2] - c * moments[1] * moments[1];
  const double factor = real_entries ? (md - 1.0) * (md + 2.0) / (md * md) : 1.0 - 1.0 / (md * md);
  return {plain, factor > 0 ? plain / factor : kNaN};
}

std::vector<BuiltinInfo> builtins() {
  return {
      {"operator_norm", {"norm"}, "largest |value| of the spectrum"},
      {"population_second_moment",
       {"second_moment", "second_moment_unbiased"},
       "second moment of the population spectrum from sample-covariance eigenvalues "
       "(parameters: ratio = N/M, entries = \"complex\" or \"real\")"},
  };
}

std::unique_ptr<Estimator> make_builtin(const job::Job& job, const job::EstimatorSpec& spec) {
  if (spec.builtin == "population_second_moment") {
    return std::make_unique<PopulationSecondMoment>(job, spec);
  }
  if (spec.builtin == "operator_norm") return std::make_unique<OperatorNorm>(job, spec);
  std::string known;
  for (const auto& b : builtins()) known += (known.empty() ? "" : ", ") + std::string(b.name);
  throw InputError(where(job, spec, "builtin") + "no built-in estimator is called '" +
                   spec.builtin + "'; built-ins: " + known);
}

}  // namespace freegap::estimate
