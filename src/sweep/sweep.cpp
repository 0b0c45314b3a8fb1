// Parameter sweeps (see include/freegap/sweep.hpp).
#include "freegap/sweep.hpp"

#include <toml++/toml.h>

#include <algorithm>
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

namespace {

// One varied key: its dotted path, its parts, and its values (in the sweep file's order).
struct Axis {
  std::string key;
  std::vector<std::string> parts;
  const toml::array* values = nullptr;
  const toml::node* node = nullptr;  // for messages
};

// The axes of a sweep file: `vary = "KEY"` with `values = [...]`, or a [vary] table whose leaves
// are the value lists (dotted keys and nested tables alike), in the order they are written.
std::vector<Axis> read_axes(const std::string& path, const toml::table& t) {
  std::vector<Axis> axes;
  const toml::node* vary = t.get("vary");
  if (vary == nullptr) {
    throw InputError(where(path, nullptr, "vary") +
                     "required: the dotted job key to vary with values = [...], e.g. vary = "
                     "\"matrices.W.ratio\", or a [vary] table of keys and value lists");
  }
  if (const auto* key = vary->as_string()) {
    const auto* values = t["values"].as_array();
    if (!values || values->empty()) {
      throw InputError(where(path, t.get("values"), "values") +
                       "required: a non-empty list of values, e.g. values = [0.25, 0.5, 1.0]");
    }
    axes.push_back({key->get(), split_key(key->get()), values, vary});
  } else if (const auto* table = vary->as_table()) {
    if (t.get("values") != nullptr) {
      throw InputError(where(path, t.get("values"), "values") +
                       "goes with vary = \"KEY\"; with a [vary] table each key has its own list");
    }
    std::vector<std::pair<std::string, const toml::node*>> pending;
    const auto walk = [&](const auto& self, const toml::table& tb, const std::string& prefix) -> void {
      for (const auto& [k, v] : tb) {
        const std::string key = prefix + std::string(k.str());
        if (const auto* sub = v.as_table()) {
          self(self, *sub, key + ".");
        } else {
          pending.emplace_back(key, &v);
        }
      }
    };
    walk(walk, *table, "");
    std::stable_sort(pending.begin(), pending.end(), [](const auto& a, const auto& b) {
      const auto& x = a.second->source().begin;
      const auto& y = b.second->source().begin;
      return x.line != y.line ? x.line < y.line : x.column < y.column;
    });
    for (const auto& [key, node] : pending) {
      const auto* values = node->as_array();
      if (!values || values->empty()) {
        throw InputError(where(path, node, "vary." + key) +
                         "must be a non-empty list of values, e.g. " + key + " = [1, 2, 3]");
      }
      axes.push_back({key, split_key(key), values, node});
    }
    if (axes.empty()) {
      throw InputError(where(path, vary, "vary") + "names no key; add KEY = [values] under [vary]");
    }
  } else {
    throw InputError(where(path, vary, "vary") +
                     "must be a dotted job key in quotes or a [vary] table of keys and value lists");
  }
  for (const auto& a : axes) {
    for (const auto& p : a.parts) {
      if (p.empty()) {
        throw InputError(where(path, a.node, "vary") + "empty part in '" + a.key + "'");
      }
    }
    if (a.key == "name" || a.key == "output" || a.key == "run.output") {
      throw InputError(where(path, a.node, "vary") + "'" + a.key +
                       "' is set per task by the sweep; vary a key that changes the numbers");
    }
  }
  return axes;
}

// The points of the sweep: every combination (grid; the last key varies fastest) or the i-th
// values of every key together (zip). Each point is one value index per axis.
std::vector<std::vector<std::size_t>> points_of(const std::string& path, const toml::table& t,
                                                const std::vector<Axis>& axes) {
  std::string combine = "grid";
  if (const toml::node* c = t.get("combine")) {
    const auto* text = c->as_string();
    if (!text || (text->get() != "grid" && text->get() != "zip")) {
      throw InputError(where(path, c, "combine") +
                       "must be \"grid\" (every combination) or \"zip\" (the i-th values of "
                       "every key together)");
    }
    combine = text->get();
  }
  std::vector<std::vector<std::size_t>> points;
  if (combine == "zip") {
    const std::size_t n = axes.front().values->size();
    for (const auto& a : axes) {
      if (a.values->size() != n) {
        throw InputError(where(path, a.node, "vary." + a.key) + "has " +
                         std::to_string(a.values->size()) + " values and " + axes.front().key +
                         " has " + std::to_string(n) +
                         "; combine = \"zip\" needs lists of one length (or use \"grid\")");
      }
    }
    for (std::size_t i = 0; i < n; ++i) points.emplace_back(axes.size(), i);
    return points;
  }
  std::size_t total = 1;
  for (const auto& a : axes) {
    total *= a.values->size();
    if (total > kMaxTasks) {
      throw InputError(where(path, a.node, "vary") + "the grid has more than " +
                       std::to_string(kMaxTasks) + " points; split the sweep");
    }
  }
  for (std::size_t i = 0; i < total; ++i) {
    std::vector<std::size_t> point(axes.size());
    std::size_t rest = i;
    for (std::size_t k = axes.size(); k-- > 0;) {
      point[k] = rest % axes[k].values->size();
      rest /= axes[k].values->size();
    }
    points.push_back(std::move(point));
  }
  return points;
}

// Sets `parts` (a dotted key) in `job` to `value`, creating tables the base job lacks.
void set_key(toml::table& job, const Axis& axis, const toml::node& value, const std::string& path) {
  toml::table* parent = &job;
  for (std::size_t k = 0; k + 1 < axis.parts.size(); ++k) {
    auto* child = parent->get(axis.parts[k]);
    if (!child) {
      parent->insert(axis.parts[k], toml::table{});
      child = parent->get(axis.parts[k]);
    }
    if (!child->is_table()) {
      throw InputError(where(path, axis.node, "vary") + "'" + axis.parts[k] +
                       "' in the base job is not a table");
    }
    parent = child->as_table();
  }
  value.visit([&](const auto& v) { parent->insert_or_assign(axis.parts.back(), v); });
}

// Paths in the job are relative to the base job's folder; the task files live elsewhere, so
// every relative path a job names (a diagonal's eigenvalue file, a plug-in library, a command
// given with a '/') is made absolute.
void anchor_paths(toml::table& job, const fs::path& base_dir) {
  const auto anchored = [&](const std::string& p) {
    return (base_dir / p).lexically_normal().string();
  };
  if (auto* matrices = job["matrices"].as_table()) {
    for (auto& [name, m] : *matrices) {
      if (auto* mt = m.as_table()) {
        if (auto p = (*mt)["path"].value<std::string>(); p && !fs::path(*p).is_absolute()) {
          mt->insert_or_assign("path", anchored(*p));
        }
      }
    }
  }
  if (auto* estimators = job["estimator"].as_array()) {
    for (auto& e : *estimators) {
      auto* et = e.as_table();
      if (!et) continue;
      if (auto p = (*et)["library"].value<std::string>(); p && !fs::path(*p).is_absolute()) {
        et->insert_or_assign("library", anchored(*p));
      }
      if (auto* command = (*et)["command"].as_array(); command && !command->empty()) {
        if (auto p = (*command)[0].value<std::string>();
            p && p->find('/') != std::string::npos && !fs::path(*p).is_absolute()) {
          command->replace(command->begin(), anchored(*p));
        }
      }
    }
  }
}

// Parses the sweep file, refusing a key a sweep file does not have.
toml::table parse_sweep_file(const std::string& sweep_path) {
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
    if (key != "base" && key != "vary" && key != "values" && key != "directory" &&
        key != "combine") {
      throw InputError(where(sweep_path, &v, key) +
                       "unknown key; a sweep file has base, vary, values, combine and directory");
    }
  }
  return t;
}

}  // namespace

Sweep expand(const std::string& sweep_path) {
  const toml::table t = parse_sweep_file(sweep_path);
  const auto base_rel = t["base"].value<std::string>();
  if (!base_rel || base_rel->empty()) {
    throw InputError(where(sweep_path, t.get("base"), "base") +
                     "required: the job file every task starts from, e.g. base = \"study.toml\"");
  }
  const std::vector<Axis> axes = read_axes(sweep_path, t);
  const auto points = points_of(sweep_path, t, axes);
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
  for (std::size_t i = 0; i < points.size(); ++i) {
    toml::table job = base;
    Task task;
    std::string described;
    for (std::size_t k = 0; k < axes.size(); ++k) {
      const toml::node& value = *axes[k].values->get(points[i][k]);
      set_key(job, axes[k], value, sweep_path);
      task.point.emplace_back(axes[k].key, toml_text(value));
      described += (k ? ", " : "") + axes[k].key + " = " + task.point.back().second;
    }
    job.insert_or_assign("name", base_name + " (" + described + ")");
    const std::string task_stem = stem + "-" + std::to_string(i);
    if (!job["run"]) job.insert("run", toml::table{});
    if (auto* run = job["run"].as_table()) run->insert_or_assign("output", task_stem + ".h5");
    anchor_paths(job, base_path.parent_path());
    std::ostringstream text;
    text << "# Task " << i << " of the sweep " << sweep_file.string() << ": " << described
         << ".\n# " << kTaskMark << base_path.string()
         << "; edit the sweep or the base job, not this file.\n";
    // One line per varied key, for `freegap report`'s collation (sweep.hpp, kPointPrefix).
    for (const auto& [key, value] : task.point) text << kPointPrefix << key << " = " << value << "\n";
    text << job << "\n";
    task.job_path = (dir / (task_stem + ".toml")).string();
    task.text = text.str();
    task.value = described;
    try {
      job::parse_job(task.text, task.job_path);
    } catch (const InputError& e) {
      if (t["vary"].is_string()) {  // one key: name the value where it is written
        throw InputError(where(sweep_path, axes[0].values->get(points[i][0]), "values") +
                         "value " + task.point[0].second + " makes an invalid job: " + e.what());
      }
      throw InputError(where(sweep_path, axes.front().node, "vary") + "point " + described +
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

std::vector<std::pair<std::string, std::string>> point_of_job_text(const std::string& job_text) {
  std::vector<std::pair<std::string, std::string>> point;
  std::istringstream lines(job_text);
  std::string line;
  while (std::getline(lines, line) && line.rfind("#", 0) == 0) {
    if (line.rfind(kPointPrefix, 0) != 0) continue;
    const std::string rest = line.substr(std::string(kPointPrefix).size());
    const auto eq = rest.find(" = ");
    if (eq != std::string::npos) point.emplace_back(rest.substr(0, eq), rest.substr(eq + 3));
  }
  return point;
}

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
