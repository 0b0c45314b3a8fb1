// Matrix Market files, read from memory (Boisvert, Pozo & Remington 1996, "The Matrix Market
// Exchange Formats: Initial Design", NIST): a banner line
//   %%MatrixMarket matrix <coordinate|array> <real|integer|pattern|complex> <symmetry>
// ('%' comment lines may follow), a size line, then the entries, one per line. Coordinate files
// list "row column [value]" with 1-based indices; array files list the values column by column
// (for a symmetric, hermitian or skew-symmetric matrix only its lower triangle). Every message
// names the line; numbers are read exactly (std::from_chars rounds correctly).
#include <algorithm>
#include <cctype>
#include <charconv>
#include <cmath>
#include <complex>
#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/matrix_file.hpp"

namespace freegap::matrix_file {
namespace {

enum class Field { real, integer, pattern, complex };
enum class Symmetry { general, symmetric, hermitian, skew };

struct Banner {
  bool coordinate = true;
  Field field = Field::real;
  Symmetry symmetry = Symmetry::general;
};

constexpr const char* kBannerExample = "'%%MatrixMarket matrix coordinate real general'";

// Text of the file quoted in a message: printable, and short.
std::string shown(std::string_view text) {
  constexpr std::size_t kMost = 40;
  std::string out;
  for (const char c : text.substr(0, kMost)) out += (c >= 0x20 && c < 0x7f) ? c : '?';
  if (text.size() > kMost) out += "...";
  return out;
}

std::string lower(std::string_view word) {
  std::string out(word);
  for (char& c : out) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return out;
}

// The whitespace-separated words of a line (spaces, tabs; a '\r' of a CRLF file too).
std::vector<std::string_view> words(std::string_view line) {
  std::vector<std::string_view> out;
  std::size_t k = 0;
  const auto space = [](char c) { return c == ' ' || c == '\t' || c == '\r' || c == '\f' || c == '\v'; };
  while (k < line.size()) {
    while (k < line.size() && space(line[k])) ++k;
    const std::size_t start = k;
    while (k < line.size() && !space(line[k])) ++k;
    if (k > start) out.push_back(line.substr(start, k - start));
  }
  return out;
}

// Reads the text line by line and says where it is.
class Parser {
 public:
  Parser(std::string_view text, const std::string& name, const Limits& limits)
      : text_(text), name_(name), limits_(limits) {}

  Matrix parse() {
    banner_ = read_banner();
    read_size();
    if (banner_.coordinate) {
      read_coordinates();
    } else {
      read_array();
    }
    return std::move(out_);
  }

 private:
  [[noreturn]] void refuse(const std::string& what) const {
    throw InputError("matrix file '" + name_ + "': " + what);
  }
  [[noreturn]] void refuse_here(const std::string& what) const {
    refuse("line " + std::to_string(line_number_) + ": " + what);
  }

  // The next line; false at the end of the text.
  bool next_line(std::string_view& line) {
    if (pos_ >= text_.size()) return false;
    const std::size_t end = std::min(text_.find('\n', pos_), text_.size());
    line = text_.substr(pos_, end - pos_);
    pos_ = end + 1;
    ++line_number_;
    return true;
  }
  // The words of the next line that is neither blank nor a '%' comment; false at the end.
  bool next_data(std::vector<std::string_view>& out) {
    std::string_view line;
    while (next_line(line)) {
      out = words(line);
      if (!out.empty() && out[0][0] != '%') return true;
    }
    return false;
  }

  Banner read_banner();
  void read_size();
  void read_coordinates();
  void read_array();
  std::int64_t whole(std::string_view word, const char* what);
  std::int64_t index(std::string_view word, const char* what, std::int64_t bound);
  double number(std::string_view word);
  std::size_t value_width() const;
  void expect_words(const std::vector<std::string_view>& w, std::size_t first);
  std::complex<double> entry_value(const std::vector<std::string_view>& w, std::size_t first);
  void check_place(std::int64_t i, std::int64_t j, std::complex<double> v);
  void add(Eigen::Index i, Eigen::Index j, std::complex<double> v, bool once);

  std::string_view text_;
  const std::string& name_;
  Limits limits_;
  std::size_t pos_ = 0;
  std::size_t line_number_ = 0;
  Banner banner_;
  std::int64_t declared_ = 0;  // the entries the size line declares (coordinate)
  Matrix out_;
};

Banner Parser::read_banner() {
  std::string_view line;
  const bool any = next_line(line);
  const auto w = words(line);
  if (!any || w.empty() || lower(w[0]) != "%%matrixmarket") {
    refuse("has no Matrix Market banner on line 1 (expected a line such as " +
           std::string(kBannerExample) + ")");
  }
  if (w.size() != 5) {
    refuse_here("the banner must have five words, such as " + std::string(kBannerExample) +
                " (found " + std::to_string(w.size()) + ")");
  }
  if (lower(w[1]) != "matrix") {
    refuse_here("the banner describes a '" + shown(w[1]) + "', not a 'matrix'");
  }
  Banner b;
  const std::string format = lower(w[2]), field = lower(w[3]), symmetry = lower(w[4]);
  if (format != "coordinate" && format != "array") {
    refuse_here("unknown storage '" + shown(w[2]) + "' (known: coordinate, array)");
  }
  b.coordinate = format == "coordinate";
  static const std::vector<std::pair<std::string, Field>> kFields = {
      {"real", Field::real}, {"double", Field::real}, {"integer", Field::integer},
      {"pattern", Field::pattern}, {"complex", Field::complex}};
  static const std::vector<std::pair<std::string, Symmetry>> kSymmetries = {
      {"general", Symmetry::general}, {"symmetric", Symmetry::symmetric},
      {"hermitian", Symmetry::hermitian}, {"skew-symmetric", Symmetry::skew}};
  const auto f = std::find_if(kFields.begin(), kFields.end(),
                              [&](const auto& p) { return p.first == field; });
  if (f == kFields.end()) {
    refuse_here("unknown field '" + shown(w[3]) + "' (known: real, integer, pattern, complex)");
  }
  const auto s = std::find_if(kSymmetries.begin(), kSymmetries.end(),
                              [&](const auto& p) { return p.first == symmetry; });
  if (s == kSymmetries.end()) {
    refuse_here("unknown symmetry '" + shown(w[4]) +
                "' (known: general, symmetric, hermitian, skew-symmetric)");
  }
  b.field = f->second;
  b.symmetry = s->second;
  if (b.field == Field::pattern && !b.coordinate) {
    refuse_here("a pattern matrix must be stored as coordinate, not array (the format allows "
                "pattern only with coordinate storage)");
  }
  // A pattern entry is 1: its mirror in a hermitian or skew-symmetric matrix would be undefined.
  if (b.field == Field::pattern && b.symmetry != Symmetry::general &&
      b.symmetry != Symmetry::symmetric) {
    refuse_here("a pattern matrix can be general or symmetric only");
  }
  return b;
}

std::int64_t Parser::whole(std::string_view word, const char* what) {
  std::int64_t v = -1;
  const auto [end, error] = std::from_chars(word.data(), word.data() + word.size(), v);
  if (error != std::errc() || end != word.data() + word.size() || v < 0) {
    refuse_here(std::string(what) + " '" + shown(word) + "' is not a whole number");
  }
  return v;
}

void Parser::read_size() {
  std::vector<std::string_view> w;
  const std::size_t expected = banner_.coordinate ? 3 : 2;
  const char* layout = banner_.coordinate ? "ROWS COLUMNS ENTRIES" : "ROWS COLUMNS";
  if (!next_data(w)) refuse("truncated: ends before its size line (" + std::string(layout) + ")");
  if (w.size() != expected) {
    refuse_here("the size line must hold " + std::string(layout) + " (" +
                std::to_string(expected) + " numbers; found " + std::to_string(w.size()) + ")");
  }
  const std::int64_t rows = whole(w[0], "the row count");
  const std::int64_t cols = whole(w[1], "the column count");
  if (banner_.coordinate) declared_ = whole(w[2], "the entry count");
  const std::string size = std::to_string(rows) + " × " + std::to_string(cols);
  if (rows == 0 || cols == 0) {
    refuse_here("declares a " + size + " matrix; a matrix needs at least one row and one column");
  }
  if (rows > limits_.max_dimension || cols > limits_.max_dimension) {
    refuse_here("declares a " + size + " matrix; rows and columns may be at most " +
                std::to_string(limits_.max_dimension) + " each");
  }
  if (rows * cols > limits_.max_entries) {
    refuse_here("declares a " + size + " matrix, more than the " +
                std::to_string(limits_.max_entries) + " entries a matrix may have");
  }
  if (banner_.symmetry != Symmetry::general && rows != cols) {
    refuse_here("declares a " + size + " matrix, but a symmetric, hermitian or skew-symmetric "
                "matrix must be square");
  }
  out_.rows = rows;
  out_.cols = cols;
  out_.complex = banner_.field == Field::complex;
  if (out_.complex) {
    resize_for_filling(out_.values, rows, cols);
    out_.values.setZero();
  } else {
    resize_for_filling(out_.real, rows, cols);
    out_.real.setZero();
  }
}

std::int64_t Parser::index(std::string_view word, const char* what, std::int64_t bound) {
  std::int64_t v = 0;
  const auto [end, error] = std::from_chars(word.data(), word.data() + word.size(), v);
  if (error != std::errc() || end != word.data() + word.size()) {
    refuse_here(std::string(what) + " index '" + shown(word) + "' is not a whole number");
  }
  if (v < 1 || v > bound) {
    refuse_here(std::string(what) + " index " + std::to_string(v) + " is out of range 1.." +
                std::to_string(bound));
  }
  return v;
}

// A value, exactly: std::from_chars rounds correctly. A leading '+' is allowed; "inf" and "nan"
// read but are refused as not finite; an integer file's values must be whole numbers.
double Parser::number(std::string_view word) {
  std::string_view digits = word;
  if (digits.size() > 1 && digits[0] == '+' && digits[1] != '-') digits.remove_prefix(1);
  if (banner_.field == Field::integer) {
    const std::size_t sign = (digits[0] == '-') ? 1 : 0;
    if (digits.size() == sign ||
        !std::all_of(digits.begin() + sign, digits.end(), [](char c) { return c >= '0' && c <= '9'; })) {
      refuse_here("'" + shown(word) + "' is not an integer (the banner declares integer values)");
    }
  }
  double v = 0.0;
  const auto [end, error] = std::from_chars(digits.data(), digits.data() + digits.size(), v);
  if (end != digits.data() + digits.size() || (error != std::errc() &&
                                               error != std::errc::result_out_of_range)) {
    refuse_here("'" + shown(word) + "' is not a number");
  }
  if (error == std::errc::result_out_of_range) {
    refuse_here("the value '" + shown(word) + "' is out of the range of a double");
  }
  if (!std::isfinite(v)) refuse_here("the value '" + shown(word) + "' is not finite");
  return v;
}

// How many numbers a value takes: none for a pattern, two for a complex number, else one.
std::size_t Parser::value_width() const {
  return banner_.field == Field::pattern ? 0 : banner_.field == Field::complex ? 2 : 1;
}

// Refuses a line that does not hold `first` indices and then one value.
void Parser::expect_words(const std::vector<std::string_view>& w, std::size_t first) {
  const std::size_t count = value_width();
  if (w.size() != first + count) {
    const char* layout = first == 0 ? (count == 2 ? "REAL IMAGINARY" : "VALUE")
                         : count == 0 ? "ROW COLUMN"
                         : count == 2 ? "ROW COLUMN REAL IMAGINARY"
                                      : "ROW COLUMN VALUE";
    refuse_here("expects " + std::to_string(first + count) + " numbers (" + layout + "), found " +
                std::to_string(w.size()));
  }
}

// The value of an entry whose numbers start at word `first` (a pattern entry is 1).
std::complex<double> Parser::entry_value(const std::vector<std::string_view>& w,
                                         std::size_t first) {
  expect_words(w, first);
  const std::size_t count = value_width();
  if (count == 0) return 1.0;
  const double re = number(w[first]);
  return {re, count == 2 ? number(w[first + 1]) : 0.0};
}

// Where a symmetric file may place an entry: on or below the diagonal (strictly below for a
// skew-symmetric one, whose diagonal is zero); a hermitian diagonal is real.
void Parser::check_place(std::int64_t i, std::int64_t j, std::complex<double> v) {
  if (banner_.symmetry == Symmetry::general) return;
  std::string at = "(";  // built in steps: GCC 12 warns falsely on "(" + std::string (-Wrestrict)
  at += std::to_string(i) + ", " + std::to_string(j) + ")";
  if (i < j) {
    refuse_here("the entry " + at + " lies above the diagonal; a " +
                (banner_.symmetry == Symmetry::skew ? std::string("skew-symmetric")
                 : banner_.symmetry == Symmetry::hermitian ? std::string("hermitian")
                                                           : std::string("symmetric")) +
                " file stores only the lower triangle (row ≥ column)");
  }
  if (banner_.symmetry == Symmetry::skew && i == j) {
    refuse_here("the diagonal entry " + at +
                " in a skew-symmetric file (its diagonal is zero and is not stored)");
  }
  if (banner_.symmetry == Symmetry::hermitian && i == j && v.imag() != 0.0) {
    refuse_here("the diagonal entry " + at + " of a hermitian matrix must be real (its "
                "imaginary part is not 0)");
  }
}

// Adds an entry and, for the symmetric kinds, its mirror image (the diagonal once). Entries
// given twice in a coordinate file are summed, the common practice (the format does not say);
// an array file gives each entry once, and it is stored as given (so -0.0 stays -0.0).
void Parser::add(Eigen::Index i, Eigen::Index j, std::complex<double> v, bool once) {
  std::complex<double> mirror = v;
  if (banner_.symmetry == Symmetry::hermitian) mirror = std::conj(v);
  if (banner_.symmetry == Symmetry::skew) mirror = -v;
  const bool mirrored = banner_.symmetry != Symmetry::general && i != j;
  if (out_.complex) {
    auto& m = out_.values;
    m(i, j) = once ? v : m(i, j) + v;
    if (mirrored) m(j, i) = once ? mirror : m(j, i) + mirror;
  } else {
    auto& m = out_.real;
    m(i, j) = once ? v.real() : m(i, j) + v.real();
    if (mirrored) m(j, i) = once ? mirror.real() : m(j, i) + mirror.real();
  }
}

void Parser::read_coordinates() {
  std::vector<std::string_view> w;
  std::int64_t found = 0;
  while (next_data(w)) {
    if (found == declared_) {
      refuse_here("more entries than the " + std::to_string(declared_) +
                  " the size line declares");
    }
    expect_words(w, 2);
    const std::int64_t i = index(w[0], "row", out_.rows);
    const std::int64_t j = index(w[1], "column", out_.cols);
    const std::complex<double> v = entry_value(w, 2);
    check_place(i, j, v);
    add(i - 1, j - 1, v, /*once=*/false);
    ++found;
  }
  if (found < declared_) {
    refuse("truncated: declares " + std::to_string(declared_) + " entries, found " +
           std::to_string(found) + " (the file ends at line " + std::to_string(line_number_) +
           ")");
  }
}

// Array storage: the values column by column; for the symmetric kinds only the lower triangle
// (from the diagonal down; below it for skew-symmetric), each column in turn.
void Parser::read_array() {
  const Eigen::Index n = out_.rows;
  const bool lower_only = banner_.symmetry != Symmetry::general;
  const Eigen::Index skip = banner_.symmetry == Symmetry::skew ? 1 : 0;
  std::int64_t expected = n * out_.cols;
  if (lower_only) expected = skip == 1 ? n * (n - 1) / 2 : n * (n + 1) / 2;
  Eigen::Index i = lower_only ? skip : 0;
  Eigen::Index j = 0;
  std::int64_t found = 0;
  std::vector<std::string_view> w;
  while (next_data(w)) {
    if (found == expected) {
      refuse_here("more entries than the " + std::to_string(expected) + " a " +
                  std::to_string(n) + " × " + std::to_string(out_.cols) + " array of this " +
                  "symmetry holds");
    }
    const std::complex<double> v = entry_value(w, 0);
    check_place(i + 1, j + 1, v);
    add(i, j, v, /*once=*/true);
    ++found;
    if (++i == n) {
      ++j;
      i = lower_only ? j + skip : 0;
    }
  }
  if (found < expected) {
    refuse("truncated: declares " + std::to_string(expected) + " entries, found " +
           std::to_string(found) + " (the file ends at line " + std::to_string(line_number_) +
           ")");
  }
}

}  // namespace

Matrix parse_matrix_market(std::string_view text, const std::string& name) {
  return parse_matrix_market(text, name, Limits{});
}

Matrix parse_matrix_market(std::string_view text, const std::string& name, const Limits& limits) {
  return Parser(text, name, limits).parse();
}

}  // namespace freegap::matrix_file
