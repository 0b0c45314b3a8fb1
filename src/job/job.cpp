// Parsing and validating the TOML job file (include/freegap/job.hpp). Every message names the
// file, line and dotted key, the rule and the fix (docs/building.md habits 10–11), so a user with
// a typo on line 40 of a long study does not have to guess.
#include "freegap/job.hpp"
#include "freegap/text.hpp"

#include <toml++/toml.h>

#include <algorithm>
#include <cctype>
#include <cerrno>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <functional>
#include <fstream>
#include <initializer_list>
#include <limits>
#include <memory>
#include <optional>
#include <sstream>
#include <utility>

#include "freegap/errors.hpp"
#include "freegap/observe.hpp"

namespace freegap::job {

namespace {

using declarations::DiagonalLawKind;
using declarations::Kind;

// Shortest text that reads back as the same double ("0.9", not "0.90000000000000002").
using text::shortest;

// What a node holds, for "(got ...)": the type and, for scalars, the value.
std::string describe(const toml::node& node) {
  switch (node.type()) {
    case toml::node_type::string:
      return "string \"" + std::string(node.as_string()->get()) + "\"";
    case toml::node_type::integer:
      return "integer " + std::to_string(node.as_integer()->get());
    case toml::node_type::floating_point:
      return "float " + shortest(node.as_floating_point()->get());
    case toml::node_type::boolean:
      return node.as_boolean()->get() ? "boolean true" : "boolean false";
    case toml::node_type::array:
      return "a list";
    case toml::node_type::table:
      return "a table";
    case toml::node_type::date:
    case toml::node_type::time:
    case toml::node_type::date_time:
      return "a date or time";
    case toml::node_type::none:
      break;
  }
  return "nothing";
}

std::string join(const std::vector<std::string_view>& words) {
  std::string out;
  for (const auto word : words) {
    if (!out.empty()) out += ", ";
    out += word;
  }
  return out;
}

// Levenshtein distance, to suggest the key a typo meant.
std::size_t edit_distance(std::string_view a, std::string_view b) {
  std::vector<std::size_t> row(b.size() + 1);
  for (std::size_t j = 0; j <= b.size(); ++j) row[j] = j;
  for (std::size_t i = 1; i <= a.size(); ++i) {
    std::size_t diagonal = row[0];
    row[0] = i;
    for (std::size_t j = 1; j <= b.size(); ++j) {
      const std::size_t up = row[j];
      row[j] = std::min({row[j] + 1, row[j - 1] + 1, diagonal + (a[i - 1] == b[j - 1] ? 0 : 1)});
      diagonal = up;
    }
  }
  return row[b.size()];
}

bool is_identifier(std::string_view name) {
  if (name.empty() || !std::isalpha(static_cast<unsigned char>(name[0]))) return false;
  return std::all_of(name.begin(), name.end(), [](char c) {
    return std::isalnum(static_cast<unsigned char>(c)) || c == '_';
  });
}

std::string join_path(std::string_view prefix, std::string_view key) {
  return prefix.empty() ? std::string(key) : std::string(prefix) + "." + std::string(key);
}

// Walks a parsed document, validating one table at a time. Holds the file name and the key lines
// so every check can say where it failed.
class Reader {
 public:
  Reader(std::string path, std::map<std::string, int, std::less<>>& lines)
      : path_(std::move(path)), lines_(lines) {}

  void record_lines(const toml::table& table, std::string_view prefix) {
    for (auto&& [key, node] : table) {
      const std::string dotted = join_path(prefix, key.str());
      lines_.emplace(dotted, static_cast<int>(key.source().begin.line));
      if (const auto* sub = node.as_table()) record_lines(*sub, dotted);
    }
  }

  int line(std::string_view key) const {
    const auto it = lines_.find(key);
    return it == lines_.end() ? 0 : it->second;
  }

  [[noreturn]] void fail_at(int line, std::string_view key, const std::string& what) const {
    std::string out = path_;
    if (line > 0) out += ":" + std::to_string(line);
    out += ": ";
    out += key;
    out += ": ";
    out += what;
    throw InputError(out);
  }
  [[noreturn]] void fail(std::string_view key, const std::string& what) const {
    fail_at(line(key), key, what);
  }
  // A message about one element of a list, at the element's own line.
  [[noreturn]] void fail_node(const toml::node& node, std::string_view key,
                              const std::string& what) const {
    const int at = static_cast<int>(node.source().begin.line);
    fail_at(at > 0 ? at : line(key), key, what);
  }

  // Unknown keys are errors: a misspelt key silently ignored would run a different study than the
  // one written. The earliest offending key in the file is reported.
  void check_keys(const toml::table& table, std::string_view prefix,
                  const std::vector<std::string_view>& known, std::string_view label) const {
    const toml::key* first = nullptr;
    for (auto&& [key, node] : table) {
      if (std::find(known.begin(), known.end(), key.str()) != known.end()) continue;
      if (first == nullptr || key.source().begin.line < first->source().begin.line) first = &key;
    }
    if (first != nullptr) fail_unknown(prefix, first->str(), known, label);
  }

  [[noreturn]] void fail_unknown(std::string_view prefix, std::string_view name,
                                 const std::vector<std::string_view>& known,
                                 std::string_view label) const {
    std::string what = "unknown key '" + std::string(name) + "'";
    std::string_view closest;
    std::size_t best = 3;  // suggest only close misspellings (at most two edits)
    for (const auto candidate : known) {
      const std::size_t d = edit_distance(name, candidate);
      if (d < best) {
        best = d;
        closest = candidate;
      }
    }
    if (!closest.empty()) what += " (did you mean '" + std::string(closest) + "'?)";
    what += "; known keys";
    what += label;
    what += ": " + join(known);
    fail(join_path(prefix, name), what);
  }

  std::int64_t integer(const toml::node& node, std::string_view key,
                       const std::string& rule) const {
    if (const auto* v = node.as_integer()) return v->get();
    std::string what = "must be " + rule + " (got " + describe(node) + ")";
    if (node.is_string()) what += "; write the number without quotes";
    fail_node(node, key, what);
  }

  double number(const toml::node& node, std::string_view key, const std::string& rule) const {
    if (const auto* v = node.as_integer()) return static_cast<double>(v->get());
    if (const auto* v = node.as_floating_point()) return v->get();
    std::string what = "must be " + rule + " (got " + describe(node) + ")";
    if (node.is_string()) what += "; write the number without quotes";
    fail_node(node, key, what);
  }

  double finite_number(const toml::node& node, std::string_view key) const {
    const double v = number(node, key, "a finite number");
    if (!std::isfinite(v))
      fail_node(node, key, "must be a finite number (got " + shortest(v) + ")");
    return v;
  }

  double positive_number(const toml::node& node, std::string_view key) const {
    const double v = number(node, key, "a positive number");
    if (!(std::isfinite(v) && v > 0)) {
      fail_node(node, key, "must be a positive number (got " + shortest(v) + ")");
    }
    return v;
  }

  std::string string(const toml::node& node, std::string_view key, const std::string& rule) const {
    if (const auto* v = node.as_string()) return v->get();
    fail_node(node, key, "must be " + rule + " (got " + describe(node) + ")");
  }

  bool boolean(const toml::node& node, std::string_view key) const {
    if (const auto* v = node.as_boolean()) return v->get();
    fail_node(node, key, "must be true or false (got " + describe(node) + ")");
  }

  const toml::table& table(const toml::node& node, std::string_view key,
                           const std::string& example) const {
    if (const auto* t = node.as_table()) return *t;
    fail_node(node, key, "must be a table (got " + describe(node) + "); " + example);
  }

  const std::string& path() const { return path_; }

  // With Paths::confined, the job file's directory (symbolic links resolved): every path the job
  // names must lie inside it.
  void confine_to(const std::filesystem::path& base) {
    const std::filesystem::path dir = base.empty() ? std::filesystem::path(".") : base;
    std::error_code ec;
    confine_dir_ = std::filesystem::weakly_canonical(std::filesystem::absolute(dir, ec), ec);
    if (ec) fail_at(0, "job file", "cannot resolve its directory: " + ec.message());
  }

  // Refuses, under Paths::confined, a path the job names at `key` that resolves (through symbolic
  // links and "..") outside the job file's directory. Called before the path is opened.
  void check_confined(std::string_view key, const std::string& given,
                      const std::filesystem::path& resolved) const {
    if (!confine_dir_) return;
    std::error_code ec;
    std::filesystem::path at = std::filesystem::absolute(resolved, ec);
    // weakly_canonical stops at the first component that does not exist, so a symbolic link
    // whose target does not exist (yet) is followed by hand first.
    for (int hops = 0; !ec && hops < 40 && std::filesystem::is_symlink(at, ec); ++hops) {
      const auto target = std::filesystem::read_symlink(at, ec);
      at = target.is_absolute() ? target : at.parent_path() / target;
    }
    const auto full = std::filesystem::weakly_canonical(at, ec);
    if (!ec && inside(*confine_dir_, full)) return;
    fail(key, "'" + given + "' lies outside the job file's directory '" + confine_dir_->string() +
                  "', and --confine allows only paths inside it; give a path inside that "
                  "directory, or " +
                  std::string(kTrusted));
  }

  // A command's program without a '/' is looked up on PATH, which --confine does not allow.
  void check_confined_program(std::string_view key, const std::string& program) const {
    if (!confine_dir_ || program.find('/') != std::string::npos) return;
    const std::string where = "outside the job file's directory '" + confine_dir_->string() +
                              "', and --confine allows only paths inside it";
    fail(key, "program '" + program + "' would be looked up on PATH, " + where +
                  "; name a program inside that directory (e.g. \"./estimate.sh\"), or " +
                  std::string(kTrusted));
  }

 private:
  static constexpr std::string_view kTrusted = "run without --confine if you trust this job file";

  // Whether `p` is strictly below `dir` (both absolute and canonical), component by component.
  static bool inside(const std::filesystem::path& dir, const std::filesystem::path& p) {
    auto q = p.begin();
    for (auto d = dir.begin(); d != dir.end(); ++d, ++q) {
      if (d->empty()) continue;  // a trailing separator
      if (q == p.end() || *d != *q) return false;
    }
    return q != p.end();
  }

  std::string path_;
  std::map<std::string, int, std::less<>>& lines_;
  std::optional<std::filesystem::path> confine_dir_;
};

// ---- top level ---------------------------------------------------------------------------------

std::vector<std::int64_t> read_sizes(const Reader& r, const toml::node& node) {
  std::vector<std::int64_t> sizes;
  std::vector<const toml::node*> items;
  if (const auto* list = node.as_array()) {
    for (const auto& item : *list) items.push_back(&item);
    if (items.empty())
      r.fail("sizes", "is empty; give at least one size, e.g. sizes = [100, 200, 400]");
  } else if (node.is_integer()) {
    items.push_back(&node);
  } else {
    r.fail("sizes",
           "must be a list of integers, e.g. sizes = [100, 200, 400] (got " + describe(node) + ")");
  }
  for (const auto* item : items) {
    const std::int64_t n = r.integer(*item, "sizes", "a list of integers, e.g. [100, 200, 400]");
    if (n < 1)
      r.fail_node(*item, "sizes", "every size must be at least 1 (got " + std::to_string(n) + ")");
    if (n >= kSizeLimit) {
      r.fail_node(*item, "sizes",
                  "every size must be below 2^31 = 2147483648 (got " + std::to_string(n) + ")");
    }
    if (!sizes.empty() && n == sizes.back()) {
      r.fail_node(*item, "sizes",
                  "must be strictly increasing (got " + std::to_string(n) +
                      " twice); remove the repeated size");
    }
    if (!sizes.empty() && n < sizes.back()) {
      r.fail_node(*item, "sizes",
                  "must be strictly increasing (got " + std::to_string(n) + " after " +
                      std::to_string(sizes.back()) + "); sort the ladder");
    }
    sizes.push_back(n);
  }
  return sizes;
}

std::vector<std::int64_t> read_trials(const Reader& r, const toml::node& node,
                                      const std::vector<std::int64_t>& sizes) {
  if (node.is_integer()) {
    const std::int64_t t = node.as_integer()->get();
    if (t < 1) r.fail("trials", "must be at least 1 (got " + std::to_string(t) + ")");
    return std::vector<std::int64_t>(sizes.size(), t);
  }
  const auto* list = node.as_array();
  if (list == nullptr) {
    r.fail("trials",
           "must be an integer or a list with one integer per size (got " + describe(node) + ")");
  }
  if (list->size() != sizes.size()) {
    r.fail("trials", "has " + std::to_string(list->size()) + " entries but sizes has " +
                         std::to_string(sizes.size()) + "; give one per size or a single number");
  }
  std::vector<std::int64_t> trials;
  for (std::size_t i = 0; i < list->size(); ++i) {
    const auto& item = (*list)[i];
    const std::int64_t t = r.integer(item, "trials", "a list of integers, one per size");
    if (t < 1) {
      r.fail_node(item, "trials",
                  "every entry must be at least 1 (got " + std::to_string(t) +
                      " for N = " + std::to_string(sizes[i]) + ")");
    }
    trials.push_back(t);
  }
  return trials;
}

// ---- matrices ----------------------------------------------------------------------------------

struct LawName {
  DiagonalLawKind kind;
  std::string_view name;
};
constexpr LawName kLaws[] = {
    {DiagonalLawKind::atoms, "atoms"},
    {DiagonalLawKind::uniform, "uniform"},
    {DiagonalLawKind::semicircle_quantiles, "semicircle"},
    {DiagonalLawKind::marchenko_pastur_quantiles, "marchenko_pastur"},
    {DiagonalLawKind::file, "file"},
    {DiagonalLawKind::spiked, "spiked"},
};

const std::vector<std::string_view> kAllMatrixKeys = {
    "ensemble", "ratio", "method", "law",    "atoms",        "low",      "high",
    "variance", "path",  "beta",   "spikes", "base", "coefficients", "circulant", "dataset",
    "diagonal", "off_diagonal"};

bool has_ratio(Kind k) {
  return k == Kind::wishart_complex || k == Kind::wishart_real || k == Kind::ginibre_complex ||
         k == Kind::ginibre_real;
}

std::vector<std::string_view> matrix_keys(Kind kind, DiagonalLawKind law) {
  if (kind == Kind::beta_hermite) return {"ensemble", "beta"};
  if (kind == Kind::beta_laguerre) return {"ensemble", "beta", "ratio"};
  if (has_ratio(kind)) return {"ensemble", "ratio"};
  if (declarations::is_unitary(kind)) return {"ensemble", "method"};
  if (kind == Kind::toeplitz) return {"ensemble", "coefficients", "circulant"};
  if (kind == Kind::file_matrix) return {"ensemble", "path", "dataset"};
  if (kind == Kind::jacobi) return {"ensemble", "diagonal", "off_diagonal"};
  if (kind != Kind::diagonal) return {"ensemble"};
  switch (law) {
    case DiagonalLawKind::atoms:
      return {"ensemble", "law", "atoms"};
    case DiagonalLawKind::uniform:
      return {"ensemble", "law", "low", "high"};
    case DiagonalLawKind::semicircle_quantiles:
      return {"ensemble", "law", "variance"};
    case DiagonalLawKind::marchenko_pastur_quantiles:
      return {"ensemble", "law", "ratio"};
    case DiagonalLawKind::file:
      return {"ensemble", "law", "path"};
    case DiagonalLawKind::spiked:
      return {"ensemble", "law", "spikes", "base"};
  }
  return {"ensemble"};
}

std::string_view law_name(DiagonalLawKind kind) {
  for (const auto& law : kLaws) {
    if (law.kind == kind) return law.name;
  }
  return "?";
}

std::vector<declarations::Atom> read_atoms(const Reader& r, const toml::node& node,
                                        const std::string& key) {
  const std::string example = "e.g. atoms = [[1.0, 0.5], [-1.0, 0.5]]";
  const auto* list = node.as_array();
  if (list == nullptr) {
    r.fail(key,
           "must be a list of [value, weight] pairs, " + example + " (got " + describe(node) + ")");
  }
  if (list->empty()) r.fail(key, "is empty; give at least one [value, weight] pair, " + example);
  std::vector<declarations::Atom> atoms;
  double total = 0.0;
  for (const auto& item : *list) {
    const auto* pair = item.as_array();
    if (pair == nullptr || pair->size() != 2) {
      r.fail_node(item, key,
                  "every atom must be a [value, weight] pair, " + example + " (got " +
                      (pair ? "a list of " + std::to_string(pair->size()) : describe(item)) + ")");
    }
    const double value = r.finite_number((*pair)[0], key);
    const double weight = r.number((*pair)[1], key, "a number");
    if (!(std::isfinite(weight) && weight >= 0)) {
      r.fail_node(item, key,
                  "every weight must be a finite number ≥ 0 (got " + shortest(weight) +
                      " for value " + shortest(value) + ")");
    }
    total += weight;
    atoms.push_back({value, weight});
  }
  // The samplers' tolerance (declarations.cpp): a sum that is 1 up to rounding of the decimals.
  if (std::abs(total - 1.0) > 1e-12) {
    r.fail(key, "weights must sum to 1 (got " + shortest(total) + "); rescale them");
  }
  return atoms;
}

// "<K> <sha256 of the sorted values as %.17g lines>": the numbers the sampler will use, so that
// editing the file changes the job hash while moving it does not.
std::string file_digest(const declarations::MatrixSpec& spec) {
  // A file of K numbers at size K gives exactly its sorted numbers (declarations.hpp, DiagonalLaw).
  const std::vector<double> values = declarations::file_values(spec);
  std::string text;
  for (const double v : values) {
    text += text::exact(v);  // %.17g, independent of the locale (as in canonical.cpp)
    text += '\n';
  }
  return std::to_string(values.size()) + " " + sha256_hex(text);
}

// Reads matrix `prefix`'s ensemble into spec.kind; returns the ensemble's name as written.
std::string read_ensemble(const Reader& r, const toml::table& t, const std::string& prefix,
                          declarations::MatrixSpec& spec) {
  const std::string ensemble_key = prefix + ".ensemble";
  const toml::node* ensemble = t.get("ensemble");
  if (ensemble == nullptr) {
    r.fail_at(r.line(prefix), ensemble_key,
              "missing; add ensemble = \"...\" (known: " + declarations::known_kinds() + ")");
  }
  const std::string kind_text =
      r.string(*ensemble, ensemble_key, "the name of an ensemble in quotes");
  try {
    spec.kind = declarations::parse_kind(kind_text);
  } catch (const InputError& e) {
    r.fail(ensemble_key, e.what());
  }
  return kind_text;
}

// Reads a diagonal's law name into spec.diagonal.kind; returns whether law was given.
bool read_law_name(const Reader& r, const toml::table& t, const std::string& prefix,
                   declarations::MatrixSpec& spec) {
  const std::string law_key = prefix + ".law";
  bool law_given = false;
  if (spec.kind == Kind::diagonal) {
    if (const toml::node* law = t.get("law")) {
      law_given = true;
      const std::string text = r.string(*law, law_key, "a law name in quotes");
      const auto it = std::find_if(std::begin(kLaws), std::end(kLaws),
                                   [&](const LawName& l) { return l.name == text; });
      if (it == std::end(kLaws)) {
        r.fail(law_key,
               "must be one of \"atoms\", \"uniform\", \"semicircle\", "
               "\"marchenko_pastur\", \"file\", \"spiked\" (got \"" +
                   text + "\")");
      }
      spec.diagonal.kind = it->kind;
    }
  }
  return law_given;
}

// Refuses the earliest key of the matrix table that does not apply to its ensemble (or law).
void check_matrix_keys(const Reader& r, const toml::table& t, const std::string& prefix,
                       const declarations::MatrixSpec& spec, const std::string& kind_text) {
  // A key that does not apply here: a word of the matrix vocabulary gets its own message (the
  // user wrote a meaningful key in the wrong place), anything else is unknown. The earliest such
  // key in the file is reported.
  const auto keys = matrix_keys(spec.kind, spec.diagonal.kind);
  const std::string owner = spec.kind == Kind::diagonal
                                ? "law \"" + std::string(law_name(spec.diagonal.kind)) + "\""
                                : "ensemble " + kind_text;
  const toml::key* first = nullptr;
  for (auto&& [key, value] : t) {
    if (std::find(keys.begin(), keys.end(), key.str()) != keys.end()) continue;
    if (first == nullptr || key.source().begin.line < first->source().begin.line) first = &key;
  }
  if (first != nullptr) {
    const std::string_view offending = first->str();
    if (std::find(kAllMatrixKeys.begin(), kAllMatrixKeys.end(), offending) ==
        kAllMatrixKeys.end()) {
      r.fail_unknown(prefix, offending, keys, " for " + owner);
    }
    r.fail(prefix + "." + std::string(offending),
           "does not apply to " + owner + " (its keys: " + join(keys) + "); remove it");
  }
}

// Reads key `path` of a matrix's table, resolved against the job file's directory: `missing`
// says what it needs when absent, `what` names the file when it is empty.
std::filesystem::path read_path(const Reader& r, const toml::table& t, const std::string& prefix,
                                const std::filesystem::path& base, const std::string& missing,
                                const std::string& what) {
  const std::string key = prefix + ".path";
  const toml::node* v = t.get("path");
  if (v == nullptr) r.fail_at(r.line(prefix), key, "missing; " + missing);
  const std::string given = r.string(*v, key, "a file path in quotes");
  if (given.empty()) r.fail(key, "is empty; give the " + what + "'s path");
  const std::filesystem::path resolved = base / std::filesystem::path(given);
  r.check_confined(key, given, resolved);
  return resolved;
}

// Reads law "file"'s path and, with `read_files`, checks that the file can be read.
void read_law_file(const Reader& r, const toml::table& t, const std::string& prefix,
                   const std::filesystem::path& base, bool read_files,
                   declarations::DiagonalLaw& law) {
  const std::string key = prefix + ".path";
  const std::filesystem::path resolved =
      read_path(r, t, prefix, base,
                "law \"file\" needs path = \"...\" (a text file of numbers, relative to the job "
                "file's directory)",
                "eigenvalue file");
  law.path = resolved.string();
  if (!read_files) return;
  // Checked here, with the system's reason, before the sampler's more general message.
  std::FILE* f = std::fopen(law.path.c_str(), "r");
  if (f == nullptr) {
    r.fail(key, "cannot read eigenvalue file '" + law.path + "': " + std::strerror(errno) +
                    "; a relative path is relative to the job file's directory");
  }
  std::fclose(f);
  std::error_code ignored;
  if (std::filesystem::is_directory(resolved, ignored)) {
    r.fail(key, "'" + law.path + "' is a directory; give the eigenvalue file's path");
  }
}

// How a list of numbers is described in its messages: what needs it (when missing), an example,
// and the end of the count message ("must hold 1 to K" + count_rule(got)).
struct NumberListWords {
  std::string needs;
  std::string example;
  std::function<std::string(std::size_t)> count_rule;
};

// Reads `name`, a list of 1 to `most` finite numbers, from matrix `prefix`'s table.
std::vector<double> read_number_list(const Reader& r, const toml::table& t,
                                     const std::string& prefix, const std::string& name,
                                     std::size_t most, const NumberListWords& words) {
  const std::string key = prefix + "." + name;
  const toml::node* v = t.get(name);
  if (v == nullptr) r.fail_at(r.line(prefix), key, "missing; " + words.needs + words.example);
  const auto* list = v->as_array();
  if (list == nullptr) {
    r.fail(key, "must be a list of numbers, " + words.example + " (got " + describe(*v) + ")");
  }
  if (list->empty() || list->size() > most) {
    r.fail(key, "must hold 1 to " + std::to_string(most) + words.count_rule(list->size()));
  }
  std::vector<double> out;
  for (const auto& item : *list) out.push_back(r.finite_number(item, key));
  return out;
}

// Reads law "spiked"'s values and base: r = 1 … kMostSpikes finite numbers, a count that does
// not grow with N.
void read_spikes(const Reader& r, const toml::table& t, const std::string& prefix,
                 declarations::DiagonalLaw& law) {
  law.spikes = read_number_list(
      r, t, prefix, "spikes", declarations::kMostSpikes,
      {"law \"spiked\" needs its values, ", "e.g. spikes = [3.0] for one spike of value 3",
       [](std::size_t got) {
         return " values (a finite rank; got " + std::to_string(got) +
                "); a share of N is a law: use law = \"atoms\"";
       }});
  if (const toml::node* b = t.get("base")) law.base = r.finite_number(*b, prefix + ".base");
}

// Reads the parameters of a diagonal's law (law.kind already read).
void read_diagonal_law(const Reader& r, const toml::table& t, const std::string& prefix,
                       bool law_given, const std::filesystem::path& base, bool read_files,
                       declarations::DiagonalLaw& law) {
  switch (law.kind) {
    case DiagonalLawKind::atoms: {
      const toml::node* v = t.get("atoms");
      if (v == nullptr) {
        if (law_given) {
          r.fail_at(r.line(prefix), prefix + ".atoms",
                    "missing; add atoms = [[value, weight], ...] with weights summing to 1");
        }
        r.fail(prefix,
               "a diagonal needs atoms = [[value, weight], ...] or a law = \"...\" "
               "(uniform, semicircle, marchenko_pastur, file, spiked); add one");
      }
      law.atoms = read_atoms(r, *v, prefix + ".atoms");
      break;
    }
    case DiagonalLawKind::uniform: {
      const toml::node* low = t.get("low");
      const toml::node* high = t.get("high");
      if (low == nullptr || high == nullptr) {
        r.fail_at(r.line(prefix), prefix + (low == nullptr ? ".low" : ".high"),
                  "missing; law \"uniform\" needs both low and high, e.g. low = 0 and high = 1");
      }
      law.low = r.finite_number(*low, prefix + ".low");
      law.high = r.finite_number(*high, prefix + ".high");
      if (!(law.low < law.high)) {
        r.fail(prefix + ".high", "must be greater than low (got low = " + shortest(law.low) +
                                     ", high = " + shortest(law.high) + ")");
      }
      break;
    }
    case DiagonalLawKind::semicircle_quantiles:
      if (const toml::node* v = t.get("variance")) {
        law.variance = r.positive_number(*v, prefix + ".variance");
      }
      break;
    case DiagonalLawKind::marchenko_pastur_quantiles:
      if (const toml::node* v = t.get("ratio"))
        law.ratio = r.positive_number(*v, prefix + ".ratio");
      break;
    case DiagonalLawKind::file:
      read_law_file(r, t, prefix, base, read_files, law);
      break;
    case DiagonalLawKind::spiked:
      read_spikes(r, t, prefix, law);
      break;
  }
}

// Reads a Toeplitz matrix's coefficients c_0 … c_k and whether it wraps around (circulant).
void read_toeplitz(const Reader& r, const toml::table& t, const std::string& prefix,
                   declarations::MatrixSpec& spec) {
  spec.coefficients = read_number_list(
      r, t, prefix, "coefficients", declarations::kMostToeplitzCoefficients,
      {"a Toeplitz matrix needs c_0, c_1, …, ",
       "e.g. coefficients = [0.0, 1.0] for the symbol 2 cos θ (ones beside the diagonal)",
       [](std::size_t got) { return " numbers c_0 … c_k (got " + std::to_string(got) + ")"; }});
  if (const toml::node* c = t.get("circulant")) spec.circulant = r.boolean(*c, prefix + ".circulant");
}

// Reads a periodic Jacobi matrix's coefficients: the period's diagonal a_k and off-diagonal b_k.
void read_jacobi(const Reader& r, const toml::table& t, const std::string& prefix,
                 declarations::MatrixSpec& spec) {
  const auto count = [](std::size_t got) {
    return " numbers, one per site of the period (got " + std::to_string(got) + ")";
  };
  spec.jacobi_diagonal = read_number_list(
      r, t, prefix, "diagonal", declarations::kMostJacobiPeriod,
      {"a Jacobi matrix needs its diagonal a_0, …, a_{p-1}, ", "e.g. diagonal = [0.0, 0.5]", count});
  spec.jacobi_off_diagonal = read_number_list(
      r, t, prefix, "off_diagonal", declarations::kMostJacobiPeriod,
      {"a Jacobi matrix needs its off-diagonal b_0, …, b_{p-1}, ", "e.g. off_diagonal = [1.0, 0.6]",
       count});
  if (spec.jacobi_off_diagonal.size() != spec.jacobi_diagonal.size()) {
    r.fail(prefix + ".off_diagonal",
           "has " + std::to_string(spec.jacobi_off_diagonal.size()) + " numbers and diagonal " +
               std::to_string(spec.jacobi_diagonal.size()) + "; give both one number per site of "
               "the period (b_k joins site k to site k + 1)");
  }
}

// Reads a matrix file's path (with {N} for one file per size) and HDF5 dataset. The files are
// read, checked and digested once the sizes are known (check_file_matrix).
void read_file_matrix(const Reader& r, const toml::table& t, const std::string& prefix,
                      const std::filesystem::path& base, declarations::MatrixSpec& spec) {
  const std::string key = prefix + ".path";
  // Confined here as written ({N} and all); each size's file is confined again when read.
  spec.file.path = read_path(r, t, prefix, base,
                             "ensemble \"file\" needs path = \"...\" (an .h5, .npy or .mtx file, "
                             "relative to the job file's directory; {N} in it stands for the size)",
                             "matrix file")
                       .string();
  try {
    (void)matrix_file::format_of(spec.file.path);
  } catch (const InputError& e) {
    r.fail(key, e.what());
  }
  if (const toml::node* d = t.get("dataset")) {
    const std::string dkey = prefix + ".dataset";
    spec.file.dataset = r.string(*d, dkey, "an HDF5 dataset's name in quotes, e.g. \"/covariance\"");
    if (spec.file.dataset.empty()) r.fail(dkey, "is empty; name the dataset or remove the key");
    if (matrix_file::format_of(spec.file.path) != matrix_file::Format::hdf5) {
      r.fail(dkey, "applies to HDF5 files only (.h5, .hdf5); remove it");
    }
  }
}

declarations::MatrixSpec read_matrix(const Reader& r, std::string_view name, const toml::node& node,
                                  const std::filesystem::path& base, bool read_files) {
  const std::string prefix = "matrices." + std::string(name);
  if (!is_identifier(name)) {
    r.fail(prefix, "matrix name '" + std::string(name) +
                       "' must be a letter followed by letters, digits or '_'; rename the table");
  }
  if (name == "i") {
    r.fail(prefix, "'i' is the imaginary unit in expressions, not a matrix name; rename the "
                   "table (for example [matrices.I1])");
  }
  const toml::table& t = r.table(
      node, prefix,
      "declare it as [matrices." + std::string(name) + "] with ensemble = \"...\" under it");
  declarations::MatrixSpec spec;
  spec.name = std::string(name);

  const std::string kind_text = read_ensemble(r, t, prefix, spec);
  const bool law_given = read_law_name(r, t, prefix, spec);
  check_matrix_keys(r, t, prefix, spec, kind_text);

  if (spec.kind == Kind::beta_hermite || spec.kind == Kind::beta_laguerre) {
    if (const toml::node* v = t.get("beta")) spec.beta = r.positive_number(*v, prefix + ".beta");
    if (spec.kind == Kind::beta_laguerre) {
      if (const toml::node* v = t.get("ratio")) spec.ratio = r.positive_number(*v, prefix + ".ratio");
    }
  } else if (has_ratio(spec.kind)) {
    if (const toml::node* v = t.get("ratio")) spec.ratio = r.positive_number(*v, prefix + ".ratio");
  } else if (declarations::is_unitary(spec.kind)) {
    if (const toml::node* v = t.get("method")) {
      const std::string key = prefix + ".method";
      const std::string text = r.string(*v, key, "\"qr\" or \"polar\"");
      if (text == "qr") {
        spec.haar = declarations::HaarMethod::qr;
      } else if (text == "polar") {
        spec.haar = declarations::HaarMethod::polar;
      } else {
        r.fail(key, "must be \"qr\" or \"polar\" (got \"" + text + "\")");
      }
    }
  } else if (spec.kind == Kind::diagonal) {
    read_diagonal_law(r, t, prefix, law_given, base, read_files, spec.diagonal);
  } else if (spec.kind == Kind::toeplitz) {
    read_toeplitz(r, t, prefix, spec);
  } else if (spec.kind == Kind::file_matrix) {
    read_file_matrix(r, t, prefix, base, spec);
  } else if (spec.kind == Kind::jacobi) {
    read_jacobi(r, t, prefix, spec);
  }
  return spec;
}

// ---- observe and run ---------------------------------------------------------------------------

// Reads observe.range ("auto" or [low, high]) into `s`; s.bins is already read.
void read_observe_range(const Reader& r, const toml::node& v, ObserveSettings& s) {
  const std::string rule = "\"auto\" or a list [low, high]";
  if (const auto* text = v.as_string()) {
    if (text->get() != "auto") {
      r.fail("observe.range", "must be " + rule + " (got \"" + text->get() + "\")");
    }
  } else if (const auto* list = v.as_array()) {
    if (list->size() != 2) {
      r.fail("observe.range",
             "must be " + rule + " (got a list of " + std::to_string(list->size()) + ")");
    }
    s.auto_range = false;
    s.low = r.finite_number((*list)[0], "observe.range");
    s.high = r.finite_number((*list)[1], "observe.range");
    if (!(s.low < s.high)) {
      r.fail("observe.range", "low must be less than high (got [" + shortest(s.low) + ", " +
                                  shortest(s.high) + "]); write [low, high] with low < high");
    }
    // The histogram's own rule (edges finite and strictly increasing after rounding).
    try {
      (void)observe::uniform_edges(s.low, s.high, s.bins);
    } catch (const InputError& e) {
      std::string what = e.what();
      if (what.rfind("observe: ", 0) == 0) what.erase(0, 9);  // the key names the place already
      r.fail("observe.range", what);
    }
  } else {
    r.fail("observe.range", "must be " + rule + " (got " + describe(v) + ")");
  }
}

// Reads observe.keep_spectra (a rule word or a number of trials) into `s`.
void read_keep_spectra(const Reader& r, const toml::node& v, ObserveSettings& s) {
  if (const auto* text = v.as_string()) {
    const std::string word = text->get();
    if (word != "auto" && word != "all" && word != "none") {
      r.fail_node(
          v, "observe.keep_spectra",
          "must be \"auto\", \"all\", \"none\" or a number of trials ≥ 0 (got \"" + word + "\")");
    }
    s.keep_spectra_rule = word;
  } else {
    s.keep_spectra =
        r.integer(v, "observe.keep_spectra", "\"auto\", \"all\", \"none\" or an integer ≥ 0");
    if (s.keep_spectra < 0) {
      r.fail("observe.keep_spectra",
             "must be at least 0 (got " + std::to_string(s.keep_spectra) + ")");
    }
    s.keep_spectra_rule = "first k";
  }
}

// observe.extremes_tolerance and observe.extremes_max_steps: how far the krylov path iterates.
// They mean something only when only the extremes are observed.
void read_extremes_accuracy(const Reader& r, const toml::table& t, ObserveSettings& s) {
  for (const char* key : {"extremes_tolerance", "extremes_max_steps"}) {
    if (t.get(key) != nullptr && !s.extremes_only) {
      r.fail(std::string("observe.") + key,
             "applies only when only the extremes are observed; set extremes_only = true or "
             "remove " + std::string(key));
    }
  }
  if (const toml::node* v = t.get("extremes_tolerance")) {
    const double tol = r.number(*v, "observe.extremes_tolerance", "a number");
    if (!(tol >= kMinExtremesTolerance && tol <= kMaxExtremesTolerance)) {
      r.fail("observe.extremes_tolerance",
             "must be between " + shortest(kMinExtremesTolerance) + " and " +
                 shortest(kMaxExtremesTolerance) + " (got " + shortest(tol) +
                 "): the relative error estimate at which the Lanczos iteration stops");
    }
    s.extremes_tolerance = tol;
  }
  if (const toml::node* v = t.get("extremes_max_steps")) {
    const std::int64_t steps = r.integer(*v, "observe.extremes_max_steps", "an integer");
    if (steps < 2 || steps > kMaxExtremesSteps) {
      r.fail("observe.extremes_max_steps",
             "must be between 2 and " + std::to_string(kMaxExtremesSteps) + " (got " +
                 std::to_string(steps) + ")");
    }
    s.extremes_max_steps = steps;
  }
}

ObserveSettings read_observe(const Reader& r, const toml::table& t) {
  r.check_keys(t, "observe",
               {"bins", "range", "margin", "max_moment", "keep_spectra", "spectrum",
                "extremes_only", "extremes_tolerance", "extremes_max_steps"},
               "");
  ObserveSettings s;
  if (const toml::node* v = t.get("extremes_only")) {
    s.extremes_only = r.boolean(*v, "observe.extremes_only");
    for (const char* key : {"bins", "range", "margin", "max_moment", "keep_spectra"}) {
      if (s.extremes_only && t.get(key) != nullptr) {
        r.fail(std::string("observe.") + key,
               "needs the whole spectrum, which extremes_only = true does not observe; remove " +
                   std::string(key) + " or set extremes_only = false");
      }
    }
    if (s.extremes_only) {
      s.max_moment = 0;
      s.keep_spectra_rule = "none";
    }
  }
  read_extremes_accuracy(r, t, s);
  if (const toml::node* v = t.get("bins")) {
    s.bins = r.integer(*v, "observe.bins", "an integer");
    if (s.bins < 1)
      r.fail("observe.bins", "must be at least 1 (got " + std::to_string(s.bins) + ")");
    if (s.bins > observe::kMaxBins) {
      r.fail("observe.bins", "must be at most " + std::to_string(observe::kMaxBins) + " (got " +
                                 std::to_string(s.bins) + ")");
    }
  }
  if (const toml::node* v = t.get("range")) read_observe_range(r, *v, s);
  if (const toml::node* v = t.get("margin")) {
    if (!s.auto_range) {
      r.fail("observe.margin",
             "applies only to range = \"auto\"; remove it or set range = \"auto\"");
    }
    s.margin = r.number(*v, "observe.margin", "a number ≥ 0");
    if (!(std::isfinite(s.margin) && s.margin >= 0)) {
      r.fail("observe.margin", "must be a finite number ≥ 0 (got " + shortest(s.margin) + ")");
    }
  }
  if (const toml::node* v = t.get("max_moment")) {
    const std::int64_t k = r.integer(*v, "observe.max_moment", "an integer from 0 to 64");
    if (k < 0 || k > observe::kMaxMomentLimit) {
      r.fail("observe.max_moment", "must be between 0 and " +
                                       std::to_string(observe::kMaxMomentLimit) + " (got " +
                                       std::to_string(k) + ")");
    }
    s.max_moment = static_cast<int>(k);
  }
  if (const toml::node* v = t.get("keep_spectra")) read_keep_spectra(r, *v, s);
  if (const toml::node* v = t.get("spectrum")) {
    const std::string text = r.string(*v, "observe.spectrum", "\"auto\" or \"singular_values\"");
    if (text == "singular_values") {
      s.singular_values = true;
    } else if (text != "auto") {
      r.fail("observe.spectrum", "must be \"auto\" or \"singular_values\" (got \"" + text + "\")");
    }
  }
  return s;
}

void read_run(const Reader& r, const toml::table& t, const std::filesystem::path& base, Job& job) {
  r.check_keys(t, "run", {"trials_per_unit", "memory_per_rank", "output", "force_dense", "path"},
               "");
  if (const toml::node* v = t.get("trials_per_unit")) {
    job.trials_per_unit = r.integer(*v, "run.trials_per_unit", "an integer ≥ 1");
    if (job.trials_per_unit < 1) {
      r.fail("run.trials_per_unit",
             "must be at least 1 (got " + std::to_string(job.trials_per_unit) + ")");
    }
  }
  if (const toml::node* v = t.get("memory_per_rank")) {
    if (const auto* bytes = v->as_integer()) {
      job.memory_per_rank_bytes = bytes->get();
      if (job.memory_per_rank_bytes < 1) {
        r.fail("run.memory_per_rank",
               "must be at least 1 byte (got " + std::to_string(job.memory_per_rank_bytes) + ")");
      }
    } else if (const auto* text = v->as_string()) {
      try {
        job.memory_per_rank_bytes = parse_memory(text->get());
      } catch (const InputError& e) {
        r.fail("run.memory_per_rank", e.what());
      }
    } else {
      r.fail("run.memory_per_rank",
             "must be an amount such as \"8 GiB\" (got " + describe(*v) + ")");
    }
  }
  if (const toml::node* v = t.get("output")) {
    const std::string given = r.string(*v, "run.output", "a file path in quotes");
    if (given.empty()) r.fail("run.output", "is empty; give the run file's path or remove the key");
    r.check_confined("run.output", given, base / std::filesystem::path(given));
    job.output = (base / std::filesystem::path(given)).string();
  }
  if (const toml::node* v = t.get("force_dense"))
    job.force_dense = r.boolean(*v, "run.force_dense");
  if (const toml::node* v = t.get("path")) {
    const std::string p = r.string(*v, "run.path", "\"auto\", \"dense\", \"tridiagonal\", "
                                   "\"two_projection\" or \"krylov\"");
    if (p != "auto" && p != "dense" && p != "tridiagonal" && p != "two_projection" &&
        p != "krylov") {
      r.fail("run.path", "must be \"auto\", \"dense\", \"tridiagonal\", \"two_projection\" or "
                         "\"krylov\" (got \"" + p + "\")");
    }
    if (job.force_dense && p != "auto" && p != "dense") {
      r.fail("run.path", "asks for the " + p + " path while force_dense = true asks for the dense "
                         "one; keep one of the two keys");
    }
    job.run_path = p;
  }
}

// ---- estimators ----------------------------------------------------------------------------------

// Checks a truth written as text; returns it unchanged or fails at the node.
std::string read_truth_text(const Reader& r, const toml::node& node, std::string_view key,
                            const std::vector<declarations::MatrixSpec>& matrices) {
  const std::string forms =
      "a number, \"none\", \"limit_moment:K\", \"limit_edge:lower\", \"limit_edge:upper\", "
      "\"limit_norm\", \"matrix_moment:NAME:K\" or \"matrix_ratio:NAME\"";
  const std::string text = r.string(node, key, forms);
  std::vector<std::string> parts;
  std::size_t start = 0;
  for (;;) {
    const std::size_t colon = text.find(':', start);
    parts.push_back(text.substr(start, colon == std::string::npos ? std::string::npos : colon - start));
    if (colon == std::string::npos) break;
    start = colon + 1;
  }
  const auto order = [&](const std::string& digits) {
    std::int64_t k = -1;
    const auto result = std::from_chars(digits.data(), digits.data() + digits.size(), k);
    if (result.ec != std::errc() || result.ptr != digits.data() + digits.size() || k < 1 ||
        k > observe::kMaxMomentLimit) {
      r.fail_node(node, key, "moment order '" + digits + "' must be an integer 1.." +
                                 std::to_string(observe::kMaxMomentLimit));
    }
  };
  const auto matrix = [&](const std::string& name) {
    const bool declared = std::any_of(matrices.begin(), matrices.end(),
                                      [&](const auto& m) { return m.name == name; });
    if (!declared) {
      r.fail_node(node, key, "names matrix '" + name + "', which the job does not declare");
    }
  };
  const std::string& head = parts[0];
  if (parts.size() == 1 && (head == "none" || head == "limit_norm")) return text;
  if (head == "limit_moment" && parts.size() == 2) {
    order(parts[1]);
    return text;
  }
  if (head == "limit_edge" && parts.size() == 2 && (parts[1] == "lower" || parts[1] == "upper")) {
    return text;
  }
  if (head == "matrix_moment" && parts.size() == 3) {
    matrix(parts[1]);
    order(parts[2]);
    return text;
  }
  if (head == "matrix_ratio" && parts.size() == 2) {
    matrix(parts[1]);
    return text;
  }
  r.fail_node(node, key, "must be " + forms + " (got \"" + text + "\")");
}

// Records the line of every key of `table`, under the dotted prefix `at`.
void note_lines(std::map<std::string, int, std::less<>>& lines, const toml::table& table,
                const std::string& at) {
  for (auto&& [key, node] : table) {
    lines.emplace(at + "." + std::string(key.str()), static_cast<int>(key.source().begin.line));
  }
}

// Reads and checks the name of the index-th [[estimator]], which starts on `table_line`.
std::string read_estimator_name(const Reader& r, const toml::table& t, std::size_t index,
                                int table_line) {
  const std::string prefix = "estimator[" + std::to_string(index) + "]";
  const toml::node* name = t.get("name");
  if (name == nullptr) {
    r.fail_at(table_line, prefix, "has no name; add name = \"...\" (letters, digits, '_')");
  }
  std::string text = r.string(*name, prefix + ".name", "a name in quotes");
  if (!is_identifier(text) || text.size() > 64) {
    r.fail_node(*name, prefix + ".name",
                "must start with a letter and hold only letters, digits and '_', at most 64 "
                "characters (got \"" + text + "\")");
  }
  return text;
}

// Reads an estimator's library path and, with `read_library`, the digest of its bytes.
void read_estimator_library(const Reader& r, const toml::table& t, const std::string& prefix,
                            const std::filesystem::path& base, bool read_library,
                            EstimatorSpec& e) {
  if (const toml::node* v = t.get("library")) {
    e.source = EstimatorSpec::Source::library;
    const std::string given = r.string(*v, prefix + ".library", "a file path in quotes");
    if (given.empty()) r.fail(prefix + ".library", "is empty; give the shared library's path");
    r.check_confined(prefix + ".library", given, base / std::filesystem::path(given));
    e.library = (base / std::filesystem::path(given)).string();
  }
  if (t.get("library") != nullptr && read_library) {
    errno = 0;
    std::ifstream in(e.library, std::ios::binary);
    std::error_code ec;
    if (!in || std::filesystem::is_directory(e.library, ec)) {
      r.fail(prefix + ".library", "cannot read '" + e.library + "'" +
                                      (errno != 0 ? std::string(": ") + std::strerror(errno) : "") +
                                      "; give the path of the plug-in's shared library (relative "
                                      "to the job file)");
    }
    std::ostringstream bytes;
    bytes << in.rdbuf();
    e.library_digest = sha256_hex(bytes.str());
  }
}

// Reads an estimator's command (program and arguments); a program path with a '/' is made
// relative to the job file's directory.
void read_estimator_command(const Reader& r, const toml::node& v, const std::string& prefix,
                            const std::filesystem::path& base, EstimatorSpec& e) {
  e.source = EstimatorSpec::Source::command;
  const auto* list = v.as_array();
  const std::string rule = "a list of strings: the program and its arguments, e.g. "
                           "[\"python3\", \"estimate.py\"]";
  if (list == nullptr || list->empty()) {
    r.fail_node(v, prefix + ".command", "must be " + rule);
  }
  for (const auto& item : *list) e.command.push_back(r.string(item, prefix + ".command", rule));
  if (e.command[0].empty()) r.fail_node(v, prefix + ".command", "names an empty program");
  r.check_confined_program(prefix + ".command", e.command[0]);
  if (e.command[0].find('/') != std::string::npos) {
    r.check_confined(prefix + ".command", e.command[0], base / std::filesystem::path(e.command[0]));
  }
  if (e.command[0].find('/') != std::string::npos && e.command[0][0] != '/') {
    e.command[0] = (base / std::filesystem::path(e.command[0])).string();
  }
}

// Reads an estimator's [estimator.parameters] table, every value as text.
void read_estimator_parameters(const Reader& r, const toml::node& v, const std::string& prefix,
                               std::map<std::string, int, std::less<>>& lines, EstimatorSpec& e) {
  const auto& params =
      r.table(v, prefix + ".parameters", "write [estimator.parameters] and key = value under it");
  note_lines(lines, params, prefix + ".parameters");
  for (auto&& [key, node] : params) {
    const std::string at = prefix + ".parameters." + std::string(key.str());
    std::string value;
    if (const auto* s = node.as_string()) {
      value = s->get();
    } else if (const auto* i = node.as_integer()) {
      value = std::to_string(i->get());
    } else if (const auto* f = node.as_floating_point()) {
      value = shortest(f->get());
    } else if (const auto* b = node.as_boolean()) {
      value = b->get() ? "true" : "false";
    } else {
      r.fail_node(node, at, "must be a string, a number or a boolean (got " + describe(node) + ")");
    }
    e.parameters.emplace_back(std::string(key.str()), value);
  }
}

// Reads an estimator's [estimator.truth] table: its estimates' names and their truths.
void read_estimator_truths(const Reader& r, const toml::table& t, const std::string& prefix,
                           const std::vector<declarations::MatrixSpec>& matrices,
                           std::map<std::string, int, std::less<>>& lines, EstimatorSpec& e) {
  const toml::node* truth = t.get("truth");
  if (truth == nullptr) {
    r.fail(prefix, "has no [estimator.truth]; name each estimate's truth, e.g. "
                   "second_moment = \"matrix_moment:T:4\" or a number");
  }
  const auto& truths =
      r.table(*truth, prefix + ".truth", "write [estimator.truth] and estimate = truth under it");
  note_lines(lines, truths, prefix + ".truth");
  if (truths.empty()) r.fail(prefix + ".truth", "names no estimate; add estimate = truth");
  for (auto&& [key, node] : truths) {
    const std::string at = prefix + ".truth." + std::string(key.str());
    if (!is_identifier(key.str()) || key.str().size() > 64) {
      r.fail_node(node, at, "estimate names start with a letter and hold only letters, digits "
                            "and '_', at most 64 characters");
    }
    std::string text;
    if (node.is_integer() || node.is_floating_point()) {
      text = text::exact(r.finite_number(node, at));
    } else {
      text = read_truth_text(r, node, at, matrices);
    }
    e.estimates.emplace_back(key.str());
    e.truths.push_back(text);
  }
}

EstimatorSpec read_estimator(const Reader& r, const toml::table& t, std::size_t index,
                             const std::filesystem::path& base,
                             const std::vector<declarations::MatrixSpec>& matrices,
                             std::map<std::string, int, std::less<>>& lines, bool read_library) {
  EstimatorSpec e;
  const int table_line = static_cast<int>(t.source().begin.line);
  e.name = read_estimator_name(r, t, index, table_line);
  const std::string prefix = "estimator." + e.name;
  note_lines(lines, t, prefix);
  lines.emplace(prefix, table_line);
  r.check_keys(t, prefix, {"name", "builtin", "library", "command", "timeout", "parameters", "truth"},
               " in an [[estimator]]");
  const int sources = (t.get("builtin") ? 1 : 0) + (t.get("library") ? 1 : 0) +
                      (t.get("command") ? 1 : 0);
  if (sources != 1) {
    r.fail(prefix, sources == 0 ? "says nowhere to get estimates from; add builtin = \"...\", "
                                  "library = \"path.so\" or command = [\"program\", ...]"
                                : "gives more than one of builtin, library and command; keep one");
  }
  if (const toml::node* v = t.get("builtin")) {
    e.source = EstimatorSpec::Source::builtin;
    e.builtin = r.string(*v, prefix + ".builtin", "the name of a built-in estimator in quotes");
  }
  read_estimator_library(r, t, prefix, base, read_library, e);
  if (const toml::node* v = t.get("command")) read_estimator_command(r, *v, prefix, base, e);
  if (const toml::node* v = t.get("timeout")) {
    e.timeout = r.positive_number(*v, prefix + ".timeout");
  }
  if (const toml::node* v = t.get("parameters")) {
    read_estimator_parameters(r, *v, prefix, lines, e);
  }
  read_estimator_truths(r, t, prefix, matrices, lines, e);
  return e;
}

// Parses the job's TOML text; a syntax error is reported at its line and column.
toml::table parse_document(std::string_view text, const std::string& path) {
  toml::table doc;
  try {
    doc = toml::parse(text, std::string_view(path));
  } catch (const toml::parse_error& e) {
    throw InputError(path + ":" + std::to_string(e.source().begin.line) + ":" +
                     std::to_string(e.source().begin.column) +
                     ": TOML syntax: " + std::string(e.description()));
  }
  return doc;
}

// Reads the required seed (an integer ≥ 0).
std::uint64_t read_seed(const Reader& r, const toml::table& doc) {
  const toml::node* seed = doc.get("seed");
  if (seed == nullptr) r.fail_at(0, "seed", "missing; add seed = <integer ≥ 0>, e.g. seed = 1");
  const std::int64_t seed_value = r.integer(*seed, "seed", "an integer ≥ 0");
  if (seed_value < 0) {
    r.fail("seed", "must be an integer ≥ 0 (got " + std::to_string(seed_value) + ")");
  }
  return static_cast<std::uint64_t>(seed_value);
}

// Reads the required expression (not blank).
std::string read_expression(const Reader& r, const toml::table& doc) {
  const toml::node* expression = doc.get("expression");
  if (expression == nullptr) {
    r.fail_at(0, "expression", "missing; add the expression to study, e.g. expression = \"X + Y\"");
  }
  std::string text = r.string(*expression, "expression", "a string in quotes, e.g. \"X + Y\"");
  if (text.find_first_not_of(" \t\r\n") == std::string::npos) {
    r.fail("expression", "is empty; write the expression to study, e.g. expression = \"X + Y\"");
  }
  return text;
}

// Reads the [matrices.NAME] tables into job.matrices, sorted by name.
void read_matrices(const Reader& r, const toml::table& doc, const std::filesystem::path& base,
                   bool read_files, Job& job) {
  const std::string matrices_example =
      "declare each matrix as [matrices.NAME] with ensemble = \"...\"";
  const toml::node* matrices = doc.get("matrices");
  if (matrices == nullptr) r.fail_at(0, "matrices", "missing; " + matrices_example);
  const toml::table& matrix_table = r.table(*matrices, "matrices", matrices_example);
  if (matrix_table.empty()) r.fail("matrices", "declares no matrix; " + matrices_example);
  // toml::table keeps its keys sorted, so this is already the canonical (sorted by name) order.
  for (auto&& [key, node] : matrix_table) {
    job.matrices.push_back(read_matrix(r, key.str(), node, base, read_files));
  }
  std::sort(job.matrices.begin(), job.matrices.end(),
            [](const auto& a, const auto& b) { return a.name < b.name; });
}

// The digest of a matrix as read: "<rows>x<cols> real|complex <sha256 of its entries' bytes,
// column-major>", the same for one matrix in any of the three formats.
std::string matrix_digest(const matrix_file::Matrix& m) {
  const char* data = m.complex ? reinterpret_cast<const char*>(m.values.data())
                               : reinterpret_cast<const char*>(m.real.data());
  const std::size_t bytes = static_cast<std::size_t>(m.rows * m.cols) * (m.complex ? 16 : 8);
  return std::to_string(m.rows) + "x" + std::to_string(m.cols) + (m.complex ? " complex " : " real ") +
         sha256_hex(std::string_view(data, bytes));
}

// A matrix file (ensemble "file") at every size of the job: its path confined (with --confine),
// the file read and checked (square, self-adjoint, a size that fits: declarations::file_matrix_at)
// and digested, so that editing a file changes the job hash while moving it does not. The limit
// law is the eigenvalue law of the largest size's matrix (reference_size).
std::string check_file_matrix(const Reader& r, const std::vector<std::int64_t>& sizes,
                              bool read_files, declarations::MatrixSpec& spec) {
  const std::string key = "matrices." + spec.name + ".path";
  if (sizes.empty()) return {};
  spec.file.reference_size = sizes.back();
  const bool per_size = declarations::file_matrix_per_size(spec);
  std::string digest;
  for (auto it = sizes.rbegin(); it != sizes.rend(); ++it) {
    const std::string path = declarations::file_matrix_path(spec, *it);
    r.check_confined(key, path, path);
    if (!read_files) continue;
    try {
      if (it == sizes.rbegin()) {
        const auto first = matrix_file::read_shared(path, spec.file.dataset);
        spec.file.complex = first->complex;
        spec.file.file_size = first->rows;
      }
      const auto m = declarations::file_matrix_at(spec, *it);
      if (per_size || it == sizes.rbegin()) {
        digest += (digest.empty() ? "" : ", ") + std::string(per_size ? "N = " + std::to_string(*it) + ": " : "") +
                  matrix_digest(*m);
      }
    } catch (const InputError& e) {
      std::string what = e.what();
      const std::string redundant = "matrix '" + spec.name + "': ";
      if (what.rfind(redundant, 0) == 0) what.erase(0, redundant.size());
      r.fail(key, what);
    }
  }
  return digest;
}

// Validates every matrix of the job and reads the digests of eigenvalue files (with
// `read_files`) into job.file_digests.
void validate_matrices(const Reader& r, bool read_files, Job& job) {
  // declarations::validate is the authority on a spec (the samplers run the same check), and
  // an eigenvalue file is read here once; its message gets the place in the job file.
  for (auto& spec : job.matrices) {
    const std::string key = "matrices." + spec.name;
    std::string digest;
    if (spec.kind == Kind::file_matrix) {
      job.file_digests.push_back(check_file_matrix(r, job.sizes, read_files, spec));
      continue;
    }
    if (!read_files && spec.kind == Kind::diagonal && spec.diagonal.kind == DiagonalLawKind::file) {
      job.file_digests.push_back(digest);  // the file is not read here
      continue;
    }
    try {
      declarations::validate(spec);
      if (spec.kind == Kind::diagonal && spec.diagonal.kind == DiagonalLawKind::file) {
        digest = file_digest(spec);
      }
    } catch (const InputError& e) {
      std::string what = e.what();
      const std::string redundant = "matrix '" + spec.name + "': ";
      if (what.rfind(redundant, 0) == 0) what.erase(0, redundant.size());
      const bool about_file =
          spec.kind == Kind::diagonal && spec.diagonal.kind == DiagonalLawKind::file;
      r.fail(about_file ? key + ".path" : key, what);
    }
    const bool spiked = spec.kind == Kind::diagonal && spec.diagonal.kind == DiagonalLawKind::spiked;
    if (spiked && !job.sizes.empty() &&
        static_cast<std::size_t>(job.sizes.front()) < spec.diagonal.spikes.size()) {
      r.fail(key + ".spikes", "has " + std::to_string(spec.diagonal.spikes.size()) +
                                  " values but the smallest size is N = " +
                                  std::to_string(job.sizes.front()) +
                                  "; start the sizes at N ≥ the number of spikes");
    }
    job.file_digests.push_back(std::move(digest));
  }
}

// Reads the [[estimator]] tables into job.estimators, refusing a name given twice.
void read_estimators(const Reader& r, const toml::node& v, const std::filesystem::path& base,
                     bool read_libraries, Job& job) {
  const auto* list = v.as_array();
  if (list == nullptr || !list->is_array_of_tables()) {
    r.fail_node(v, "estimator", "must be a list of tables; write each as [[estimator]]");
  }
  for (std::size_t i = 0; i < list->size(); ++i) {
    auto spec = read_estimator(r, *list->get(i)->as_table(), i, base, job.matrices, job.key_lines,
                               read_libraries);
    for (const auto& other : job.estimators) {
      if (other.name == spec.name) {
        r.fail_node(*list->get(i)->as_table()->get("name"), "estimator." + spec.name + ".name",
                    "\"" + spec.name + "\" names two estimators; give each a name of its own");
      }
    }
    job.estimators.push_back(std::move(spec));
  }
}

}  // namespace

// keep_spectra's rule into the number of trials kept per size (job.hpp: kKeptSpectraBudget).
void resolve_keep_spectra(Job& job) {
  auto& o = job.observe;
  const std::int64_t most = job.trials.empty() ? 0 : *std::max_element(job.trials.begin(), job.trials.end());
  if (o.keep_spectra_rule == "all") o.keep_spectra = most;
  if (o.keep_spectra_rule == "none") o.keep_spectra = 0;
  if (o.keep_spectra_rule != "auto") return;
  if (!job.sizes.empty() && *std::max_element(job.sizes.begin(), job.sizes.end()) > kKeptSpectraMaxN) {
    o.keep_spectra = 0;
    return;
  }
  const auto bytes = [&](std::int64_t k) {
    double b = 0.0;
    for (std::size_t i = 0; i < job.sizes.size() && i < job.trials.size(); ++i) {
      b += 8.0 * static_cast<double>(std::min(k, job.trials[i])) * static_cast<double>(job.sizes[i]);
    }
    return b;
  };
  if (bytes(most) <= kKeptSpectraBudget) {
    o.keep_spectra = most;
    return;
  }
  std::int64_t lo = 1, hi = most;  // bytes(lo) may exceed the budget: at least one is kept
  while (hi - lo > 1) {
    const std::int64_t mid = lo + (hi - lo) / 2;
    (bytes(mid) <= kKeptSpectraBudget ? lo : hi) = mid;
  }
  o.keep_spectra = lo;
}


// ---- public ------------------------------------------------------------------------------------

std::int64_t parse_memory(std::string_view text) {
  const std::string quoted = "'" + std::string(text) + "'";
  const std::string how =
      "; write a number and a unit, e.g. \"4 GiB\" (units: B, kB, MB, GB, TB, KiB, MiB, GiB, TiB)";
  std::size_t i = 0;
  while (i < text.size() && text[i] == ' ') ++i;
  double amount = 0.0;
  const auto parsed = std::from_chars(text.data() + i, text.data() + text.size(), amount);
  if (parsed.ec != std::errc() || parsed.ptr == text.data() + i) {
    throw InputError("cannot read " + quoted + " as an amount of memory" + how);
  }
  std::string unit(parsed.ptr, text.data() + text.size());
  unit.erase(0, unit.find_first_not_of(' '));
  unit.erase(unit.find_last_not_of(' ') + 1);
  std::transform(unit.begin(), unit.end(), unit.begin(),
                 [](unsigned char c) { return static_cast<char>(std::tolower(c)); });
  static const std::pair<std::string_view, double> kUnits[] = {
      {"b", 1.0},         {"kb", 1e3},           {"mb", 1e6},
      {"gb", 1e9},        {"tb", 1e12},          {"kib", 1024.0},
      {"mib", 1048576.0}, {"gib", 1073741824.0}, {"tib", 1099511627776.0},
  };
  const auto* it = std::find_if(std::begin(kUnits), std::end(kUnits),
                                [&](const auto& u) { return u.first == unit; });
  if (it == std::end(kUnits)) {
    throw InputError("cannot read " + quoted + " as an amount of memory" + how);
  }
  const double bytes = std::floor(amount * it->second);
  if (!(bytes >= 1)) throw InputError("must be at least 1 byte (got " + quoted + ")");
  // 2^63 is exactly representable; anything at or above it does not fit.
  if (!(bytes < 9223372036854775808.0)) {
    throw InputError("is too large (got " + quoted + "); at most 8 EiB fits");
  }
  return static_cast<std::int64_t>(bytes);
}

int Job::line_of(std::string_view key) const {
  const auto it = key_lines.find(key);
  return it == key_lines.end() ? 0 : it->second;
}

std::string Job::where(std::string_view key) const {
  const int line = line_of(key);
  return path + (line > 0 ? ":" + std::to_string(line) : std::string()) + ": " + std::string(key) +
         ": ";
}

Job parse_job(std::string_view text, const std::string& path, bool read_estimator_libraries,
              Paths paths, bool read_files) {
  Job job;
  job.path = path;
  job.text = std::string(text);
  Reader r(path, job.key_lines);

  const toml::table doc = parse_document(text, path);
  r.record_lines(doc, "");

  r.check_keys(doc, "",
               {"name", "seed", "sizes", "trials", "expression", "matrices", "observe", "run",
                "estimator"},
               " at the top level");

  const std::filesystem::path file(path);
  const std::filesystem::path base = file.parent_path();
  if (paths == Paths::confined) r.confine_to(base);
  job.name = file.stem().string();
  job.output = (base / (file.stem().string() + ".h5")).string();

  if (const toml::node* v = doc.get("name")) {
    job.name = r.string(*v, "name", "a string in quotes");
    if (job.name.empty()) r.fail("name", "is empty; name the study or remove the key");
  }

  job.seed = read_seed(r, doc);

  const toml::node* sizes = doc.get("sizes");
  if (sizes == nullptr) {
    r.fail_at(0, "sizes", "missing; add the ladder of sizes, e.g. sizes = [100, 200, 400]");
  }
  job.sizes = read_sizes(r, *sizes);

  const toml::node* trials = doc.get("trials");
  if (trials == nullptr) {
    r.fail_at(0, "trials", "missing; add the number of trials per size, e.g. trials = 40");
  }
  job.trials = read_trials(r, *trials, job.sizes);

  job.expression = read_expression(r, doc);

  read_matrices(r, doc, base, read_files, job);
  validate_matrices(r, read_files, job);

  if (const toml::node* v = doc.get("observe")) {
    job.observe = read_observe(r, r.table(*v, "observe", "write [observe] and its keys under it"));
  }
  resolve_keep_spectra(job);
  if (const toml::node* v = doc.get("run")) {
    read_run(r, r.table(*v, "run", "write [run] and its keys under it"), base, job);
  }
  if (const toml::node* v = doc.get("estimator")) {
    read_estimators(r, *v, base, read_estimator_libraries && read_files, job);
  }
  return job;
}

Job load_job(const std::string& path, Paths paths) {
  std::FILE* f = std::fopen(path.c_str(), "rb");
  if (f == nullptr) {
    throw InputError("cannot read job file '" + path + "': " + std::strerror(errno));
  }
  std::unique_ptr<std::FILE, int (*)(std::FILE*)> owner(f, &std::fclose);
  std::string text;
  char buf[65536];
  std::size_t got = 0;
  while ((got = std::fread(buf, 1, sizeof buf, f)) > 0) text.append(buf, got);
  if (std::ferror(f)) {
    throw InputError("cannot read job file '" + path + "': " + std::strerror(errno));
  }
  return parse_job(text, path, true, paths);
}

}  // namespace freegap::job
