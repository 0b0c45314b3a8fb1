// NumPy .npy arrays, read from memory (NEP 1, "A Simple File Format for NumPy Arrays"): the magic
// string "\x93NUMPY", a version byte pair, the header's length (2 bytes in version 1.0, 4 in 2.0
// and 3.0, little-endian), the header — a Python dict literal with the keys 'descr',
// 'fortran_order' and 'shape', padded with spaces and ended by a newline — then the raw elements.
// Every byte is accounted for: a header or data that disagrees with the shape is refused.
#include <algorithm>
#include <bit>
#include <cmath>
#include <complex>
#include <cstdint>
#include <cstring>
#include <map>
#include <string>
#include <string_view>
#include <vector>

#include "freegap/errors.hpp"
#include "freegap/matrix_file.hpp"

namespace freegap::matrix_file {
namespace {

static_assert(std::endian::native == std::endian::little || std::endian::native == std::endian::big,
              "a mixed-endian machine cannot read .npy files");

[[noreturn]] void refuse(const std::string& name, const std::string& what) {
  throw InputError("matrix file '" + name + "': " + what);
}

// Text of the file quoted in a message: printable, and short.
std::string shown(std::string_view text) {
  constexpr std::size_t kMost = 40;
  std::string out;
  for (const char c : text.substr(0, kMost)) {
    out += (c >= 0x20 && c < 0x7f) ? c : '?';
  }
  if (text.size() > kMost) out += "...";
  return out;
}

// A value of the header's dict literal: the few Python literals a .npy header holds (strings,
// whole numbers, True/False, tuples, and the lists of a structured dtype).
struct Value {
  enum class Kind { text, integer, boolean, tuple, list };
  Kind kind = Kind::text;
  std::string text;
  std::uint64_t integer = 0;  // its magnitude; `negative` gives the sign
  bool negative = false;
  bool too_large = false;  // more than 2^64 − 1
  bool boolean = false;
  std::vector<Value> items;
};

// Reads the dict literal: any key order, spaces anywhere between tokens, a trailing comma, and
// the padding after the closing brace.
class HeaderReader {
 public:
  HeaderReader(std::string_view text, const std::string& name) : s_(text), name_(name) {}

  std::map<std::string, Value> dict() {
    std::map<std::string, Value> out;
    skip_space();
    expect('{');
    while (true) {
      skip_space();
      if (peek() == '}') break;
      if (peek() != '\'' && peek() != '"') bad("a quoted key");
      std::string key = quoted();
      skip_space();
      expect(':');
      Value v = value(0);
      if (!out.emplace(key, std::move(v)).second) {
        refuse(name_, "the .npy header names the key '" + shown(key) + "' twice");
      }
      skip_space();
      if (peek() == ',') {
        ++pos_;
        continue;
      }
      if (peek() != '}') bad("',' or '}'");
    }
    ++pos_;
    // The padding: spaces, then a newline (NEP 1); tabs and extra newlines are let pass.
    for (; pos_ < s_.size(); ++pos_) {
      if (s_[pos_] != ' ' && s_[pos_] != '\n' && s_[pos_] != '\t' && s_[pos_] != '\r') {
        bad("the end of the header");
      }
    }
    return out;
  }

 private:
  static constexpr int kMaxDepth = 16;

  char peek() const { return pos_ < s_.size() ? s_[pos_] : '\0'; }
  void skip_space() {
    while (pos_ < s_.size() && (s_[pos_] == ' ' || s_[pos_] == '\t' || s_[pos_] == '\n' ||
                                s_[pos_] == '\r')) {
      ++pos_;
    }
  }
  void expect(char c) {
    if (peek() != c) bad(std::string("'") + c + "'");
    ++pos_;
  }
  [[noreturn]] void bad(const std::string& expected) const {
    refuse(name_, "the .npy header is not a dict literal: expected " + expected + " at byte " +
                      std::to_string(pos_) + " of the header (found '" +
                      shown(s_.substr(std::min(pos_, s_.size()))) + "')");
  }

  std::string quoted() {
    const char quote = s_[pos_++];
    std::string out;
    while (pos_ < s_.size() && s_[pos_] != quote) {
      if (s_[pos_] == '\\' && pos_ + 1 < s_.size()) ++pos_;  // an escaped character, as is
      out += s_[pos_++];
    }
    if (pos_ >= s_.size()) bad("the closing quote of a string");
    ++pos_;
    return out;
  }

  Value integer() {
    Value v;
    v.kind = Value::Kind::integer;
    if (peek() == '-' || peek() == '+') v.negative = s_[pos_++] == '-';
    if (peek() < '0' || peek() > '9') bad("a digit");
    while (peek() >= '0' && peek() <= '9') {
      const auto digit = static_cast<std::uint64_t>(s_[pos_++] - '0');
      if (v.integer > (UINT64_MAX - digit) / 10) v.too_large = true;
      v.integer = v.too_large ? UINT64_MAX : v.integer * 10 + digit;
    }
    if (peek() == 'L' || peek() == 'l') ++pos_;  // Python 2 long integers, as old numpy wrote
    return v;
  }

  Value sequence(int depth) {
    Value v;
    const char close = peek() == '(' ? ')' : ']';
    v.kind = close == ')' ? Value::Kind::tuple : Value::Kind::list;
    ++pos_;
    while (true) {
      skip_space();
      if (peek() == close) break;
      v.items.push_back(value(depth + 1));
      skip_space();
      if (peek() == ',') {
        ++pos_;
      } else if (peek() != close) {
        bad(std::string("',' or '") + close + "'");
      }
    }
    ++pos_;
    return v;
  }

  Value value(int depth) {
    if (depth > kMaxDepth) bad("a value nested less deeply");
    skip_space();
    const char c = peek();
    if (c == '\'' || c == '"') {
      Value v;
      v.text = quoted();
      return v;
    }
    if (c == '(' || c == '[') return sequence(depth);
    for (const bool b : {true, false}) {
      const std::string_view word = b ? "True" : "False";
      if (s_.substr(pos_, word.size()) == word) {
        pos_ += word.size();
        Value v;
        v.kind = Value::Kind::boolean;
        v.boolean = b;
        return v;
      }
    }
    return integer();
  }

  std::string_view s_;
  std::size_t pos_ = 0;
  const std::string& name_;
};

// The element type of the array: kind 'f', 'c', 'i', 'u' or 'b', its size in bytes, and whether
// its bytes are in the other order than this machine's.
struct Dtype {
  char kind = 'f';
  std::size_t size = 8;
  bool swap = false;
};

Dtype parse_descr(const Value& descr, const std::string& name) {
  if (descr.kind == Value::Kind::list) {
    refuse(name, "holds a structured array (fields of several types); save a plain numeric "
                 "array instead");
  }
  if (descr.kind != Value::Kind::text) refuse(name, "the .npy header's 'descr' is not a string");
  const std::string& d = descr.text;
  if (d.size() >= 2 && d[1] == 'O') {
    refuse(name, "holds Python objects (dtype '" + shown(d) +
                     "'), not numbers; save the array with a numeric dtype such as float64");
  }
  // '<' little-endian, '>' big-endian; '|' (order does not apply) and '=' (the writer's own
  // order, which numpy itself never writes for wider types) are taken as little-endian: the
  // machines that write .npy files today are.
  static const std::vector<std::string_view> kKnown = {"f8", "f4", "c16", "c8", "i8", "i4", "i2",
                                                       "i1", "u8", "u4", "u2", "u1", "b1"};
  const bool ordered = !d.empty() && std::string_view("<>|=").find(d[0]) != std::string_view::npos;
  const std::string_view code = ordered ? std::string_view(d).substr(1) : std::string_view();
  if (!ordered || std::find(kKnown.begin(), kKnown.end(), code) == kKnown.end()) {
    refuse(name, "has the element type '" + shown(d) +
                     "', which is not supported; use float64, float32, complex128, complex64, "
                     "int8 to int64, uint8 to uint64 or bool");
  }
  Dtype out;
  out.kind = code[0];
  out.size = static_cast<std::size_t>(std::stoi(std::string(code.substr(1))));
  const bool big = d[0] == '>';
  out.swap = big != (std::endian::native == std::endian::big);
  return out;
}

// Python's text of a shape: "(3,)", "(2, 3)", "()".
std::string shape_text(const Value& shape) {
  std::string out = "(";
  for (std::size_t k = 0; k < shape.items.size(); ++k) {
    const Value& v = shape.items[k];
    if (k > 0) out += ", ";
    if (v.kind != Value::Kind::integer) {
      out += '?';
      continue;
    }
    if (v.negative) out += '-';
    out += v.too_large ? "huge" : std::to_string(v.integer);
  }
  return out + (shape.items.size() == 1 ? ",)" : ")");
}

// What the header says: the element type, the order and the 2-d shape.
struct Header {
  Dtype dtype;
  bool fortran = false;
  std::uint64_t rows = 0;
  std::uint64_t cols = 0;
};

Header interpret(const std::map<std::string, Value>& dict, const std::string& name) {
  for (const auto& [key, value] : dict) {
    if (key != "descr" && key != "fortran_order" && key != "shape") {
      refuse(name, "the .npy header has the unknown key '" + shown(key) +
                       "' (expected 'descr', 'fortran_order' and 'shape')");
    }
  }
  for (const char* key : {"descr", "fortran_order", "shape"}) {
    if (dict.count(key) == 0) {
      refuse(name, std::string("the .npy header has no '") + key + "' key");
    }
  }
  Header h;
  h.dtype = parse_descr(dict.at("descr"), name);
  const Value& order = dict.at("fortran_order");
  if (order.kind != Value::Kind::boolean) {
    refuse(name, "the .npy header's 'fortran_order' is not True or False");
  }
  h.fortran = order.boolean;
  const Value& shape = dict.at("shape");
  if (shape.kind != Value::Kind::tuple) refuse(name, "the .npy header's 'shape' is not a tuple");
  for (const Value& v : shape.items) {
    if (v.kind != Value::Kind::integer || (v.negative && v.integer != 0) || v.too_large) {
      refuse(name, "the .npy header's shape " + shape_text(shape) +
                       " is not a tuple of whole numbers from 0 to 2^64 − 1");
    }
  }
  if (shape.items.size() != 2) {
    refuse(name, "must be a 2-d array (got shape " + shape_text(shape) +
                     "); save a matrix, e.g. a.reshape(rows, cols)");
  }
  h.rows = shape.items[0].integer;
  h.cols = shape.items[1].integer;
  if (h.rows == 0 || h.cols == 0) {
    refuse(name, "has the shape " + shape_text(shape) +
                     ", with no entries; a matrix needs at least one row and one column");
  }
  return h;
}

// The header's text and where the data starts, after the magic string, version and length.
std::pair<std::string_view, std::size_t> split_header(std::string_view bytes,
                                                      const std::string& name) {
  constexpr std::string_view kMagic("\x93NUMPY", 6);
  if (bytes.substr(0, kMagic.size()) != kMagic) {
    refuse(name, "is not a NumPy .npy file (it does not start with \"\\x93NUMPY\"); write it "
                 "with numpy.save");
  }
  if (bytes.size() < 8) refuse(name, "truncated: ends inside the .npy version");
  const auto major = static_cast<unsigned char>(bytes[6]);
  const auto minor = static_cast<unsigned char>(bytes[7]);
  if ((major < 1 || major > 3) || minor != 0) {
    refuse(name, "has .npy format version " + std::to_string(major) + "." +
                     std::to_string(minor) + ", which is not known (1.0, 2.0 and 3.0 are)");
  }
  const std::size_t width = major == 1 ? 2 : 4;  // bytes of the header length
  if (bytes.size() < 8 + width) refuse(name, "truncated: ends inside the .npy header length");
  std::uint64_t length = 0;
  for (std::size_t k = 0; k < width; ++k) {
    length |= std::uint64_t{static_cast<unsigned char>(bytes[8 + k])} << (8 * k);
  }
  const std::size_t start = 8 + width;
  if (length > bytes.size() - start) {
    refuse(name, "truncated: the .npy header declares " + std::to_string(length) +
                     " bytes, and only " + std::to_string(bytes.size() - start) + " follow");
  }
  return {bytes.substr(start, length), start + length};
}

// One element's bytes as the machine's value of type T (byte-swapped when `swap`).
template <class T>
T load(const char* p, bool swap) {
  char b[sizeof(T)];
  std::memcpy(b, p, sizeof(T));
  if (swap) std::reverse(b, b + sizeof(T));
  T v;
  std::memcpy(&v, b, sizeof(T));
  return v;
}

template <class T>
void decode_real(const char* data, std::size_t count, bool swap, double* out) {
  if constexpr (std::is_same_v<T, double>) {
    if (!swap) {
      std::memcpy(out, data, count * sizeof(double));
      return;
    }
  }
  for (std::size_t k = 0; k < count; ++k) {
    out[k] = static_cast<double>(load<T>(data + k * sizeof(T), swap));
  }
}

template <class T>
void decode_complex(const char* data, std::size_t count, bool swap, std::complex<double>* out) {
  for (std::size_t k = 0; k < count; ++k) {
    const char* p = data + 2 * k * sizeof(T);
    out[k] = {static_cast<double>(load<T>(p, swap)), static_cast<double>(load<T>(p + sizeof(T), swap))};
  }
}

// The elements in file order into `out` (8-byte integers beyond 2^53 round to the nearest
// double, as numpy's astype(float64) does; a bool is 0 or 1).
void decode(const char* data, std::size_t count, const Dtype& t, double* out) {
  const bool s = t.swap;
  if (t.kind == 'f') {
    return t.size == 8 ? decode_real<double>(data, count, s, out)
                       : decode_real<float>(data, count, s, out);
  }
  if (t.kind == 'i' && t.size > 1) {
    if (t.size == 8) return decode_real<std::int64_t>(data, count, s, out);
    if (t.size == 4) return decode_real<std::int32_t>(data, count, s, out);
    return decode_real<std::int16_t>(data, count, s, out);
  }
  if (t.kind == 'u' && t.size > 1) {
    if (t.size == 8) return decode_real<std::uint64_t>(data, count, s, out);
    if (t.size == 4) return decode_real<std::uint32_t>(data, count, s, out);
    return decode_real<std::uint16_t>(data, count, s, out);
  }
  for (std::size_t k = 0; k < count; ++k) {  // one byte: i1, u1, b1
    const auto byte = static_cast<unsigned char>(data[k]);
    if (t.kind == 'b') {
      out[k] = byte != 0 ? 1.0 : 0.0;
    } else {
      out[k] = t.kind == 'i' ? static_cast<double>(static_cast<std::int8_t>(byte)) : byte;
    }
  }
}

// The first entry that is not finite, as "[i, j] is nan" (counting from 0, as numpy does), or "".
template <class M>
std::string first_nonfinite(const M& m) {
  if (m.allFinite()) return "";
  for (Eigen::Index j = 0; j < m.cols(); ++j) {
    for (Eigen::Index i = 0; i < m.rows(); ++i) {
      const double re = std::real(m(i, j));
      const double im = std::imag(m(i, j));
      if (!std::isfinite(re) || !std::isfinite(im)) {
        std::string at = "[";  // in steps: GCC 12 warns falsely on "[" + std::string
        at += std::to_string(i) + ", " + std::to_string(j) + "] is ";
        return at + (std::isnan(re) || std::isnan(im) ? "nan" : "infinite");
      }
    }
  }
  return "";
}

// Elements in file order → the column-major matrix (C order is row-major: filled as the
// transposed matrix, then transposed in tiles).
template <class Scalar, class Fill>
Eigen::Matrix<Scalar, Eigen::Dynamic, Eigen::Dynamic> arrange(const Header& h, Fill fill) {
  using ColMajor = Eigen::Matrix<Scalar, Eigen::Dynamic, Eigen::Dynamic>;
  const auto rows = static_cast<Eigen::Index>(h.rows);
  const auto cols = static_cast<Eigen::Index>(h.cols);
  ColMajor m;
  if (h.fortran) {
    resize_for_filling(m, rows, cols);
    fill(m.data());
    return m;
  }
  resize_for_filling(m, cols, rows);
  fill(m.data());
  return from_row_major(std::move(m));
}

}  // namespace

Matrix parse_npy(std::string_view bytes, const std::string& name) {
  return parse_npy(bytes, name, Limits{});
}

Matrix parse_npy(std::string_view bytes, const std::string& name, const Limits& limits) {
  const auto [header_text, data_start] = split_header(bytes, name);
  const Header h = interpret(HeaderReader(header_text, name).dict(), name);
  // The data's length, checked against what is there before anything is allocated (a hostile
  // shape's product may overflow: then it is more than any file holds).
  const std::size_t item = h.dtype.size;  // a complex item holds both parts ('<c16': 2 × 8)
  const std::size_t have = bytes.size() - data_start;
  std::uint64_t need = 0;
  const bool overflow = __builtin_mul_overflow(h.rows, h.cols, &need) ||
                        __builtin_mul_overflow(need, std::uint64_t{item}, &need);
  if (overflow || need > have) {
    refuse(name, "truncated: expects " +
                     (overflow ? std::string("more than 2^64") : std::to_string(need)) +
                     " bytes of data, has " + std::to_string(have) +
                     "; the file was cut short or its header is wrong: write it again");
  }
  if (need < have) {
    refuse(name, "has " + std::to_string(have - need) + " bytes after the data (" +
                     std::to_string(h.rows) + " × " + std::to_string(h.cols) + " entries of " +
                     std::to_string(item) + " bytes take " + std::to_string(need) +
                     "); write it again with numpy.save");
  }
  if (h.rows * h.cols > static_cast<std::uint64_t>(limits.max_entries)) {
    refuse(name, "has " + std::to_string(h.rows * h.cols) + " entries, more than the " +
                     std::to_string(limits.max_entries) + " a matrix file may have");
  }
  const char* data = bytes.data() + data_start;
  const std::size_t count = h.rows * h.cols;
  Matrix out;
  out.rows = static_cast<Eigen::Index>(h.rows);
  out.cols = static_cast<Eigen::Index>(h.cols);
  out.complex = h.dtype.kind == 'c';
  std::string bad;
  if (out.complex) {
    out.values = arrange<std::complex<double>>(h, [&](std::complex<double>* to) {
      if (h.dtype.size == 16) return decode_complex<double>(data, count, h.dtype.swap, to);
      decode_complex<float>(data, count, h.dtype.swap, to);
    });
    bad = first_nonfinite(out.values);
  } else {
    out.real = arrange<double>(h, [&](double* to) { decode(data, count, h.dtype, to); });
    bad = first_nonfinite(out.real);
  }
  if (!bad.empty()) refuse(name, "entry " + bad + "; a matrix's entries must be finite numbers");
  return out;
}

}  // namespace freegap::matrix_file
