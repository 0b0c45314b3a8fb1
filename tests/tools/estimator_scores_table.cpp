// Scores the estimators of a run file: writes the CSV (for analysis/plot_estimators.py) and
// prints the Markdown section. Usage: estimator_scores_table RUN.h5 OUT.csv
#include <cstdio>
#include <exception>

#include "freegap/analysis/reporting/estimator_scores.hpp"

int main(int argc, char** argv) {
  if (argc != 3) {
    std::fprintf(stderr, "usage: estimator_scores_table RUN.h5 OUT.csv\n");
    return 2;
  }
  try {
    const auto scores = freegap::analysis::score_estimators(argv[1]);
    freegap::analysis::write_estimator_scores_csv(argv[2], scores);
    std::fputs(freegap::analysis::estimator_scores_markdown(scores).c_str(), stdout);
  } catch (const std::exception& e) {
    std::fprintf(stderr, "estimator_scores_table: %s\n", e.what());
    return 1;
  }
  return 0;
}
