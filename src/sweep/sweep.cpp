// Parameter sweeps (see include/freegap/sweep.hpp).
#include "freegap/sweep.hpp"

#include <toml++/toml.h>

#include <filesystem>
#include <fstream>
#include <sstream>

#include "freegap/errors.hpp"
#include "freegap/job.hpp"

namespace freegap::sweep {

namespace fs = std::filesystem;

namespace {

// The second line of every task job file a sweep writes; what proves it may be overwritten.
constexpr const char* kTaskMark = "Written by freegap sweep from ";

std::string where(const std::string& path, const toml::node* node, const std::string& key) {
  std::string s = path + ":";
  if (node && node->source().begin.line > 0) s += std::to_string(node->source().begin.line) + ":";
  return s + " " + key + ": ";
}

std::vector<std::string> split_key(const std::string& key) {
  std::vector<std::string> parts;
  std::size_t start = 0;
  for (;;) {
    const auto dot = key.find('.', start);
    parts.push_back(key.substr(start, dot - start));
    if (dot == std::string::npos) break;
    start = dot + 1;
  }
  return parts;
}

std::string toml_text(const toml::node& node) {
  std::ostringstream s;
  node.visit([&](const auto& v) { s << v; });
  return s.str();
}

}  // namespace

Sweep expand(const std::string& sweep_path) {
  toml::table t;
  try {
    t = toml::parse_file(sweep_path);
  } catch (const toml::parse_error& e) {
    const auto& b = e.source().begin;
    if (!fs::exists(sweep_path)) throw InputError("cannot read sweep file '" + sweep_path + "'");
    throw InputError(sweep_path + ":" + std::to_string(b.line) + ":" + std::to_string(b.column) +
                     ": TOML syntax: " + std::string(e.description()));
  }
  for (const auto& [k, v] : t) {
    const std::string key(k.str());
    if (key != "base" && key != "vary" && key != "values" && key != "directory") {
      throw InputError(where(sweep_path, &v, key) +
                       "unknown key; a sweep file has base, vary, values and directory");
    }
  }
  const auto base_rel = t["base"].value<std::string>();
  if (!base_rel || base_rel->empty()) {
    throw InputError(where(sweep_path, t.get("base"), "base") +
                     "required: the job file every task starts from, e.g. base = \"study.toml\"");
  }
  const auto vary = t["vary"].value<std::string>();
  if (!vary || vary->empty()) {
    throw InputError(where(sweep_path, t.get("vary"), "vary") +
                     "required: the dotted job key to vary, e.g. vary = \"matrices.W.ratio\"");
  }
  const auto parts = split_key(*vary);
  for (const auto& p : parts) {
    if (p.empty())
      throw InputError(where(sweep_path, t.get("vary"), "vary") + "empty part in '" + *vary + "'");
  }
  if (*vary == "name" || *vary == "output") {
    throw InputError(where(sweep_path, t.get("vary"), "vary") + "'" + *vary +
                     "' is set per task by the sweep; vary a key that changes the numbers");
  }
  const auto* values = t["values"].as_array();
  if (!values || values->empty()) {
    throw InputError(where(sweep_path, t.get("values"), "values") +
                     "required: a non-empty list of values, e.g. values = [0.25, 0.5, 1.0]");
  }
  const fs::path sweep_file = fs::absolute(sweep_path);
  const fs::path here = sweep_file.parent_path();
  const std::string stem = sweep_file.stem().string();
  fs::path dir = here / stem;
  if (auto d = t["directory"].value<std::string>()) {
    if (d->empty())
      throw InputError(where(sweep_path, t.get("directory"), "directory") + "must not be empty");
    dir = fs::path(*d).is_absolute() ? fs::path(*d) : here / *d;
  }
  dir = dir.lexically_normal();
  const fs::path base_path =
      fs::path(*base_rel).is_absolute() ? fs::path(*base_rel) : here / *base_rel;
  // Validate the base job as it is (its own messages name its own lines).
  const job::Job base_job = job::load_job(base_path.string());
  toml::table base = toml::parse_file(base_path.string());
  const std::string base_name = base_job.name;

  Sweep s;
  s.directory = dir.string();
  s.list_path = (dir / "jobs.txt").string();
  for (std::size_t i = 0; i < values->size(); ++i) {
    toml::table job = base;
    // Walk to the parent table of the key, creating tables the base job lacks.
    toml::table* parent = &job;
    for (std::size_t k = 0; k + 1 < parts.size(); ++k) {
      auto* child = parent->get(parts[k]);
      if (!child) {
        parent->insert(parts[k], toml::table{});
        child = parent->get(parts[k]);
      }
      if (!child->is_table()) {
        throw InputError(where(sweep_path, t.get("vary"), "vary") + "'" + parts[k] +
                         "' in the base job is not a table");
      }
      parent = child->as_table();
    }
    const toml::node& value = *values->get(i);
    value.visit([&](const auto& v) { parent->insert_or_assign(parts.back(), v); });
    const std::string value_text = toml_text(value);
    job.insert_or_assign("name", base_name + " (" + *vary + " = " + value_text + ")");
    const std::string task_stem = stem + "-" + std::to_string(i);
    if (!job["run"]) job.insert("run", toml::table{});
    if (auto* run = job["run"].as_table()) run->insert_or_assign("output", task_stem + ".h5");
    // A law = "file" diagonal's path is relative to its job file: keep it pointing at the same
    // file.
    if (auto* matrices = job["matrices"].as_table()) {
      for (auto& [name, m] : *matrices) {
        if (auto* mt = m.as_table()) {
          if (auto p = (*mt)["path"].value<std::string>(); p && !fs::path(*p).is_absolute()) {
            mt->insert_or_assign("path",
                                 (base_path.parent_path() / *p).lexically_normal().string());
          }
        }
      }
    }
    std::ostringstream text;
    text << "# Task " << i << " of the sweep " << sweep_file.string() << ": " << *vary << " = "
         << value_text << ".\n# " << kTaskMark << base_path.string()
         << "; edit the sweep or the base job, not this file.\n"
         << job << "\n";
    Task task;
    task.job_path = (dir / (task_stem + ".toml")).string();
    task.text = text.str();
    task.value = value_text;
    try {
      job::parse_job(task.text, task.job_path);
    } catch (const InputError& e) {
      throw InputError(where(sweep_path, values->get(i), "values") + "value " + value_text +
                       " makes an invalid job: " + e.what());
    }
    s.tasks.push_back(std::move(task));
  }
  return s;
}

namespace {

// True when `path` is absent, or is a task job file an earlier `freegap sweep` wrote (its second
// line carries the mark); anything else is not ours to overwrite.
bool task_file_replaceable(const fs::path& path) {
  std::error_code ec;
  if (!fs::exists(fs::symlink_status(path, ec))) return true;
  if (!fs::is_regular_file(fs::symlink_status(path, ec))) return false;
  std::ifstream in(path);
  std::string first, second;
  return std::getline(in, first) && first.rfind("# Task ", 0) == 0 && std::getline(in, second) &&
         second.rfind(std::string("# ") + kTaskMark, 0) == 0;
}

// True when `path` is absent, or is a list an earlier sweep wrote: every line names a task job
// file of ours in the same directory.
bool list_file_replaceable(const fs::path& path) {
  std::error_code ec;
  if (!fs::exists(fs::symlink_status(path, ec))) return true;
  if (!fs::is_regular_file(fs::symlink_status(path, ec))) return false;
  std::ifstream in(path);
  std::string line;
  while (std::getline(in, line)) {
    const fs::path named(line);
    if (named.parent_path() != path.parent_path() || named.extension() != ".toml" ||
        !fs::exists(named, ec) || !task_file_replaceable(named)) {
      return false;
    }
  }
  return true;
}

}  // namespace

void write(const Sweep& sweep) {
  // Nothing is written unless every file it would overwrite is provably an earlier sweep's.
  for (const auto& task : sweep.tasks) {
    if (!task_file_replaceable(task.job_path)) {
      throw InputError("sweep: '" + task.job_path + "' exists and was not written by freegap "
                       "sweep, so it is not overwritten; set directory = \"...\" in the sweep "
                       "file to another folder, or move that file away");
    }
  }
  if (!list_file_replaceable(sweep.list_path)) {
    throw InputError("sweep: '" + sweep.list_path + "' exists and is not a list freegap sweep "
                     "wrote, so it is not overwritten; set directory = \"...\" in the sweep file "
                     "to another folder, or move that file away");
  }
  std::error_code ec;
  fs::create_directories(sweep.directory, ec);
  if (ec) throw Error("cannot create directory '" + sweep.directory + "': " + ec.message());
  std::string list;
  for (const auto& task : sweep.tasks) {
    std::ofstream out(task.job_path);
    out << task.text;
    if (!out) throw Error("cannot write '" + task.job_path + "'");
    list += task.job_path + "\n";
  }
  std::ofstream out(sweep.list_path);
  out << list;
  if (!out) throw Error("cannot write '" + sweep.list_path + "'");
}

}  // namespace freegap::sweep
