// The report of one or more run files: how far each size is from the limit, and how fast the gap
// closes. `freegap report` drives it.
//
// For every run file: the limit (limit.hpp), then per size N the metrics of metrics.hpp (pooled
// and per-trial distances, moment errors, extremes and norm, each with its standard error and
// resolution verdict), then power-law fits of each error against N (fit.hpp) with a 95% interval
// and a percentile-bootstrap interval, beside the published exponent where the table knows one.
// Incomplete sizes (a killed or running job) are analysed from their committed units and named as
// incomplete; a size without any committed unit is listed as having no data.
//
// Output directory (all or nothing: written into a temporary sibling and renamed into place):
//   report.md        the tables and fits in Markdown
//   sizes.csv, moments.csv, extremes.csv, fits.csv, runs.csv
//                    the same numbers, one row per (run, size[, k]) / fit / run
//   histograms.csv, limit_density.csv, limit_atoms.csv
//                    what the figures draw (bin counts as densities, the limit density on a grid)
//   estimators_run<r>.csv
//                    the scores of run r's plug-in estimators, when it has any
//   report.h5        every table as an HDF5 group of column datasets (/tables/<name>/<column>)
//   figures/*.png, figures/*.svg
//                    drawn by analysis/plot_report.py with Debian's python3-matplotlib
#pragma once

#include <cstdint>
#include <string>
#include <utility>
#include <variant>
#include <vector>

namespace freegap::analysis {

struct ReportOptions {
  std::string output_dir;          ///< empty: "<first run file's stem>-report" beside it
  bool figures = true;             ///< draw figures (needs python3 with matplotlib)
  int bootstrap_replicates = 200;  ///< per-size bootstrap of pooled distances
  int fit_bootstrap_replicates = 400;
  std::string python = "/usr/bin/python3";
  std::string plot_script;  ///< empty: plot_report.py installed beside freegap (install_paths.hpp)
  int max_moment_fitted = 8;
};

/// A table of the report: named columns, each cell a number or a text.
struct Table {
  using Cell = std::variant<double, std::string>;
  std::string name;
  std::vector<std::string> columns;
  std::vector<std::vector<Cell>> rows;
};

struct Report {
  std::string markdown;       ///< report.md
  std::vector<Table> tables;  ///< every CSV (and HDF5 group) by name
  std::vector<std::string> incomplete;  ///< "file: N = n (u of U units)" per incomplete size
  /// "file: N = n, unit u: why; left out" per damaged unit (report.md also names them).
  std::vector<std::string> integrity;
  /// Further files by name: estimators_run<r>.csv, the scores of a run's plug-in estimators
  /// (estimator_scores.hpp), drawn as figures/estimators_run<r> by analysis/plot_estimators.py.
  std::vector<std::pair<std::string, std::string>> files;
};

/// Analyses the run files (in order) and returns the report without writing anything.
/// Throws InputError for a path that is not a readable run file (naming it).
Report build_report(const std::vector<std::string>& run_files, const ReportOptions& options);

/// build_report, then writes the output directory (see the header comment) and draws the
/// figures. Returns the directory written. Throws InputError when the directory exists and is not
/// a freegap report directory, Error when writing or drawing fails (nothing is left half-way).
/// When `built` is given it receives the report that was written.
std::string write_report(const std::vector<std::string>& run_files, const ReportOptions& options,
                         Report* built = nullptr);

/// Writes a table as CSV text (numbers with 17 significant digits, texts quoted when needed).
std::string to_csv(const Table& table);

}  // namespace freegap::analysis
