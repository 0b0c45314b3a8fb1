// Writing a report directory: CSV tables, the HDF5 copy of the tables, the figures, all or nothing.
#include <spawn.h>
#include <sys/wait.h>

#include <cerrno>
#include <cstring>
#include <filesystem>
#include <fstream>

#include "freegap/analysis/reporting/report.hpp"
#include "freegap/errors.hpp"
#include "freegap/install_paths.hpp"
#include "freegap/output_dir.hpp"
#include "freegap/stop.hpp"
#include "freegap/store.hpp"
#include "freegap/version.hpp"

extern char** environ;

namespace freegap::analysis {

namespace fs = std::filesystem;

namespace {

void write_text(const fs::path& path, const std::string& text) {
  std::ofstream out(path, std::ios::binary);
  out << text;
  out.close();
  if (!out) throw Error("report: cannot write '" + path.string() + "': " + std::strerror(errno));
}

// The HDF5 copy of the tables, through the store: /tables/<name>/<column>, numbers as float64,
// text as UTF-8 strings; the attributes say what wrote the file.
void write_hdf5(const fs::path& path, const std::vector<Table>& tables) {
  std::vector<store::TableData> data;
  for (const Table& t : tables) {
    store::TableData d{t.name, {}};
    for (std::size_t c = 0; c < t.columns.size(); ++c) {
      store::TableColumn column;
      column.name = t.columns[c];
      column.text = !t.rows.empty() && std::holds_alternative<std::string>(t.rows.front()[c]);
      for (const auto& row : t.rows) {
        if (column.text) {
          column.texts.push_back(std::get<std::string>(row[c]));
        } else {
          column.numbers.push_back(std::get<double>(row[c]));
        }
      }
      d.columns.push_back(std::move(column));
    }
    data.push_back(std::move(d));
  }
  try {
    store::write_tables(path.string(),
                        {{"kind", "freegap report"},
                         {"tool_version", tool_version},
                         {"git_revision", git_revision}},
                        data);
  } catch (const Error& e) {
    throw Error(std::string("report: ") + e.what());
  }
}

// Runs argv, waits; returns its exit status, or throws when it cannot start.
int run_program(const std::vector<std::string>& argv) {
  std::vector<char*> args;
  for (const auto& a : argv) args.push_back(const_cast<char*>(a.c_str()));
  args.push_back(nullptr);
  pid_t pid = 0;
  const int rc = posix_spawnp(&pid, args[0], nullptr, nullptr, args.data(), environ);
  if (rc != 0) throw Error("report: cannot start '" + argv[0] + "': " + std::strerror(rc));
  int status = 0;
  while (waitpid(pid, &status, 0) < 0) {
    if (errno != EINTR) throw Error("report: waiting for '" + argv[0] + "' failed");
  }
  return WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
}

// The figures (figures/*.png, *.svg) of a report whose tables are already in `tmp`.
void draw_figures(const fs::path& tmp, const Report& report, const ReportOptions& options) {
  std::error_code ec;
  fs::create_directories(tmp / "figures", ec);
  if (ec) throw Error("report: cannot create '" + (tmp / "figures").string() + "': " + ec.message());
  const std::string script = options.plot_script.empty()
                                 ? install_paths::analysis_script("plot_report.py")
                                 : options.plot_script;
  if (!fs::exists(script, ec)) {
    throw Error("report: the figure script '" + script + "' is missing; use --no-figures");
  }
  const int rc = run_program({options.python, script, tmp.string()});
  if (rc != 0) {
    throw Error("report: drawing the figures failed (" + options.python + " " + script +
                " exited with " + std::to_string(rc) +
                "); it needs Debian's python3-matplotlib, or use --no-figures");
  }
  const std::string estimators = fs::path(script).parent_path() / "plot_estimators.py";
  for (const auto& [name, text] : report.files) {
    if (name.rfind("estimators_run", 0) != 0) continue;
    const std::string stem = (tmp / "figures" / fs::path(name).stem()).string();
    const int erc = run_program({options.python, estimators, (tmp / name).string(), stem});
    if (erc != 0) {
      throw Error("report: drawing the estimator figure failed (" + estimators +
                  " exited with " + std::to_string(erc) + "); use --no-figures");
    }
  }
}

fs::path default_dir(const std::string& first) {
  const fs::path p(first);
  return p.parent_path() / (p.stem().string() + "-report");
}

}  // namespace

std::string write_report(const std::vector<std::string>& run_files, const ReportOptions& options,
                         Report* built) {
  const fs::path dir =
      options.output_dir.empty() ? default_dir(run_files.at(0)) : fs::path(options.output_dir);
  // Refused before any work when the directory holds anything freegap did not write there.
  output_dir::check_replaceable(dir, "report", "-o");
  const Report report = build_report(run_files, options);

  // Everything goes into a staging sibling first; it replaces `dir` only when complete.
  output_dir::Staged staged(dir, "report", "-o");
  const fs::path& tmp = staged.path();
  write_text(tmp / "report.md", report.markdown);
  for (const Table& t : report.tables) write_text(tmp / (t.name + ".csv"), to_csv(t));
  for (const auto& [name, text] : report.files) write_text(tmp / name, text);
  write_hdf5(tmp / "report.h5", report.tables);
  if (options.figures) draw_figures(tmp, report, options);
  check_stop();  // a stop request while the figures were drawn: nothing is put in place
  staged.commit();
  if (built) *built = report;
  return dir.string();
}

}  // namespace freegap::analysis
