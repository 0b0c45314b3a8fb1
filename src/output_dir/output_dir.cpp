// Output directories written as a whole, with a manifest of what freegap wrote (output_dir.hpp).
#include "freegap/output_dir.hpp"

#include <unistd.h>

#include <algorithm>
#include <fstream>
#include <map>
#include <sstream>
#include <vector>

#include "freegap/errors.hpp"

namespace freegap::output_dir {

namespace fs = std::filesystem;

namespace {

constexpr const char* kManifestHeader = "freegap output directory, format 1";

// An entry of a directory tree: its path relative to the top, and 'd' (directory), 'f' (regular
// file) or 'o' (anything else: a link, a socket, ...).
using Listing = std::map<std::string, char>;

// Built by append, not "'" + s: GCC 12 warns falsely (-Wrestrict) on that operator+ inlined.
std::string quoted(const fs::path& p) {
  std::string out(1, '\'');
  out.append(p.string()).push_back('\'');
  return out;
}

char kind_of(const fs::directory_entry& e) {
  std::error_code ec;
  const fs::file_status s = e.symlink_status(ec);
  if (fs::is_directory(s)) return 'd';
  if (fs::is_regular_file(s)) return 'f';
  return 'o';
}

// Every entry below `top` (links are listed, never followed).
Listing list_tree(const fs::path& top, const std::string& what) {
  Listing out;
  std::error_code ec;
  fs::recursive_directory_iterator it(top, fs::directory_options::none, ec);
  for (; !ec && it != fs::recursive_directory_iterator(); it.increment(ec)) {
    out[it->path().lexically_relative(top).generic_string()] = kind_of(*it);
  }
  if (ec) throw InputError(what + ": cannot list " + quoted(top) + " (" + ec.message() + ")");
  return out;
}

// The manifest's listing and kind; false when there is no readable manifest of this format.
bool read_manifest(const fs::path& dir, std::string* kind, Listing* listed) {
  std::ifstream in(dir / kManifestName);
  std::string line;
  if (!in || !std::getline(in, line) || line != kManifestHeader) return false;
  if (!std::getline(in, line) || line.rfind("kind ", 0) != 0) return false;
  *kind = line.substr(5);
  while (std::getline(in, line)) {
    if (line.size() < 3 || line[1] != ' ' || (line[0] != 'd' && line[0] != 'f')) return false;
    (*listed)[line.substr(2)] = line[0];
  }
  return true;
}

void write_manifest(const fs::path& dir, const std::string& kind, const std::string& what) {
  const Listing entries = list_tree(dir, what);
  std::ostringstream text;
  text << kManifestHeader << "\nkind " << kind << "\n";
  for (const auto& [name, type] : entries) {
    if (type == 'o') throw Error(what + ": " + name + " in the output is neither file nor folder");
    if (name.find('\n') != std::string::npos) throw Error(what + ": a file name holds a newline");
    text << type << ' ' << name << "\n";
  }
  const fs::path path = dir / kManifestName;
  std::ofstream out(path, std::ios::binary);
  out << text.str();
  out.close();
  if (!out) throw Error(what + ": cannot write " + quoted(path));
}

// `dir` made absolute and lexically normal, without a trailing separator ("." → the cwd).
fs::path normal_absolute(const fs::path& dir, const std::string& what) {
  std::error_code ec;
  fs::path p = fs::absolute(dir, ec);
  if (ec) throw InputError(what + ": cannot resolve " + quoted(dir) + " (" + ec.message() + ")");
  p = p.lexically_normal();
  if (p.has_filename() == false && p.has_parent_path() && p != p.root_path()) p = p.parent_path();
  return p;
}

// True when the current directory is `dir` or lies inside it: then `dir` itself cannot be
// renamed away (the shell that ran freegap would be left in a deleted directory).
bool holds_current_directory(const fs::path& dir) {
  std::error_code ec;
  const fs::path cwd = fs::current_path(ec);
  if (ec) return false;
  const fs::path rel = cwd.lexically_normal().lexically_relative(dir);
  return !rel.empty() && *rel.begin() != "..";
}

fs::path hidden_sibling(const fs::path& dir, const char* what) {
  std::string name(1, '.');
  name.append(dir.filename().string()).append(what).append(std::to_string(::getpid()));
  return dir.parent_path() / name;
}

void rename_or_throw(const fs::path& from, const fs::path& to, const std::string& what) {
  std::error_code ec;
  fs::rename(from, to, ec);
  if (ec) {
    throw Error(what + ": cannot move " + quoted(from) + " to " + quoted(to) + " (" + ec.message() +
                ")");
  }
}

}  // namespace

void check_replaceable(const fs::path& dir, const std::string& kind, const std::string& option) {
  const std::string what = option + " " + dir.string();
  std::error_code ec;
  const fs::file_status status = fs::symlink_status(dir, ec);
  if (ec && status.type() != fs::file_type::not_found) {
    throw InputError(what + ": cannot look at it (" + ec.message() + "); choose another " + option);
  }
  if (!fs::exists(status)) return;
  if (!fs::is_directory(status)) {
    throw InputError(what + ": exists and is not a directory; choose another " + option);
  }
  const Listing present = list_tree(dir, what);
  if (present.empty()) return;
  std::string found_kind;
  Listing listed;
  if (!read_manifest(dir, &found_kind, &listed)) {
    throw InputError(what + ": the directory is not empty and holds no list of files freegap wrote "
                     "there (" + std::string(kManifestName) + "), so it is not replaced; choose "
                     "another " + option + " or an empty directory (an older freegap " + kind +
                     " without that list is removed by hand)");
  }
  if (found_kind != kind) {
    throw InputError(what + ": the directory holds a freegap " + found_kind + ", not a " + kind +
                     "; choose another " + option);
  }
  for (const auto& [name, type] : present) {
    if (name == kManifestName) continue;
    const auto it = listed.find(name);
    if (it == listed.end() || it->second != type) {
      throw InputError(what + ": the directory holds '" + name + "', which freegap did not write "
                       "there; freegap replaces only a directory holding nothing but its own " +
                       kind + ", so choose another " + option + " or move that entry away");
    }
  }
}

Staged::Staged(const fs::path& dir, std::string kind, std::string option)
    : target_(dir), kind_(std::move(kind)), option_(std::move(option)) {
  const std::string what = option_ + " " + target_.string();
  if (target_.empty()) throw InputError(option_ + ": the output directory name is empty");
  absolute_ = normal_absolute(target_, what);
  if (absolute_ == absolute_.root_path()) {
    throw InputError(what + ": the root directory cannot be an output; choose another " + option_);
  }
  check_replaceable(target_, kind_, option_);
  staging_ = hidden_sibling(absolute_, ".writing.");
  std::error_code ec;
  fs::remove_all(staging_, ec);  // a leftover of a killed process with our pid: ours
  fs::create_directories(staging_, ec);
  if (ec) {
    throw InputError(what + ": cannot create " + quoted(staging_) + " (" + ec.message() +
                     "); choose a writable " + option_);
  }
}

Staged::~Staged() {
  if (committed_) return;
  std::error_code ec;
  fs::remove_all(staging_, ec);
}

void Staged::commit() {
  const std::string what = option_ + " " + target_.string();
  try {
    swap_into_place(what);
  } catch (const fs::filesystem_error& e) {
    throw Error(what + ": cannot put the output in place (" + e.code().message() + ")");
  }
  committed_ = true;
}

void Staged::swap_into_place(const std::string& what) {
  write_manifest(staging_, kind_, what);
  check_replaceable(target_, kind_, option_);  // again: it may have changed while we worked
  std::error_code ec;
  if (!fs::exists(fs::symlink_status(absolute_, ec))) {
    rename_or_throw(staging_, absolute_, what);
  } else if (!holds_current_directory(absolute_)) {
    // Whole-directory swap: the old output is moved aside, then deleted (it held only our files).
    const fs::path old = hidden_sibling(absolute_, ".old.");
    fs::remove_all(old, ec);
    rename_or_throw(absolute_, old, what);
    rename_or_throw(staging_, absolute_, what);
    fs::remove_all(old, ec);
  } else {
    // The directory is (or holds) the current directory: swap its contents instead, the manifest
    // last, so an interrupted swap leaves a directory that is refused rather than half-trusted.
    const fs::path old = hidden_sibling(absolute_, ".old.");
    fs::remove_all(old, ec);
    fs::create_directory(old, ec);
    if (ec) throw Error(what + ": cannot create " + quoted(old) + " (" + ec.message() + ")");
    std::vector<fs::path> current, fresh;
    for (const auto& e : fs::directory_iterator(absolute_, ec)) current.push_back(e.path());
    for (const auto& e : fs::directory_iterator(staging_, ec)) fresh.push_back(e.path());
    if (ec) throw Error(what + ": cannot list the output (" + ec.message() + ")");
    std::stable_partition(current.begin(), current.end(),
                          [](const fs::path& p) { return p.filename() == kManifestName; });
    std::stable_partition(fresh.begin(), fresh.end(),
                          [](const fs::path& p) { return p.filename() != kManifestName; });
    for (const auto& p : current) rename_or_throw(p, old / p.filename(), what);
    for (const auto& p : fresh) rename_or_throw(p, absolute_ / p.filename(), what);
    fs::remove(staging_, ec);
    fs::remove_all(old, ec);
  }
}

}  // namespace freegap::output_dir
