// Is the path the runner chooses the fastest of those that apply? For every example job in jobs/
// and every size of its ladder up to N = 2000 (the dense path is O(N³); the larger sizes of the
// large-N example leave no choice), one trial's CPU time on each path that applies — dense and,
// where they apply, the O(N) path and the Krylov path — against the path `path = "auto"` picks
// (model::predicted_trial_seconds, predicted_krylov_seconds; docs/performance.md §5b, §5c). Prints a table; asserts nothing.
//
//   OPENBLAS_NUM_THREADS=1 build/tests/benchmarks/bench_path_choice [JOB.toml ...]
#include <algorithm>
#include <cstdio>
#include <ctime>
#include <filesystem>
#include <string>
#include <vector>

#include "freegap/job.hpp"
#include "freegap/model.hpp"
#include "freegap/observe.hpp"
#include "freegap/study.hpp"

namespace {

using namespace freegap;

double cpu_seconds() {
  timespec t;
  clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &t);
  return static_cast<double>(t.tv_sec) + 1e-9 * static_cast<double>(t.tv_nsec);
}

// CPU seconds of one trial: the mean over at least 3 trials and 0.3 s.
double trial_seconds(const model::SizeRunner& runner, const job::Job& job) {
  observe::ObserveConfig c;
  c.kind = runner.spectrum_kind();
  if (job.observe.extremes_only) {
    c.extremes_only = true;
    c.max_moment = 0;
  } else {
    const auto [lo, hi] = runner.pilot_range(job.seed, 0);
    c.bin_edges = observe::uniform_edges(lo - 0.1 * (hi - lo) - 1e-9,
                                         hi + 0.1 * (hi - lo) + 1e-9, job.observe.bins);
    c.max_moment = job.observe.max_moment;
  }
  auto obs = observe::start_observations(c);
  runner.observe_trial(obs, job.seed, 1);  // untimed: first touch
  std::uint64_t trial = 2;
  const double t0 = cpu_seconds();
  while (trial < 5 || cpu_seconds() - t0 < 0.3) runner.observe_trial(obs, job.seed, trial++);
  return (cpu_seconds() - t0) / static_cast<double>(trial - 2);
}

void compare(const std::string& path) {
  const job::Job job = job::load_job(path);
  for (const auto n : job.sizes) {
    if (n > 2000) continue;
    model::Model m = study::model_of(job);
    m.path = model::PathRequest::automatic;
    m.force_dense = !job.estimators.empty();
    const model::SizeRunner chosen(m, n);
    std::vector<std::pair<model::Path, double>> times;
    for (const auto request : {model::PathRequest::dense, model::PathRequest::tridiagonal,
                               model::PathRequest::two_projection, model::PathRequest::krylov}) {
      m.path = request;
      try {
        const model::SizeRunner r(m, n);
        // A job with estimators runs dense whatever it asks for: time each path once.
        const bool timed = std::any_of(times.begin(), times.end(),
                                       [&](const auto& t) { return t.first == r.path(); });
        if (!timed) times.emplace_back(r.path(), trial_seconds(r, job));
      } catch (const InputError&) {
        // this path does not apply to the job
      }
    }
    std::size_t best = 0;
    for (std::size_t i = 1; i < times.size(); ++i) {
      if (times[i].second < times[best].second) best = i;
    }
    std::printf("| %s | %lld | %s |", std::filesystem::path(path).filename().c_str(),
                static_cast<long long>(n), model::path_name(chosen.path()));
    for (const auto& [p, s] : times) std::printf(" %s %.3g ms;", model::path_name(p), 1e3 * s);
    std::printf(" | %s |\n", times[best].first == chosen.path() ? "yes" : "**no**");
  }
}

}  // namespace

int main(int argc, char** argv) {
  std::vector<std::string> jobs;
  for (int i = 1; i < argc; ++i) jobs.emplace_back(argv[i]);
  if (jobs.empty()) {
    for (const auto& e : std::filesystem::directory_iterator(FREEGAP_SOURCE_DIR "/jobs")) {
      if (e.path().extension() == ".toml") jobs.push_back(e.path().string());
    }
    std::sort(jobs.begin(), jobs.end());
  }
  std::printf("| job | N | chosen | measured CPU per trial | chosen is fastest |\n|---|---|---|---|---|\n");
  for (const auto& j : jobs) compare(j);
  return 0;
}
