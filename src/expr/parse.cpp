// Parsing and checking of polynomial expressions: tokens, syntax tree, symbolic shapes and the
// symbolic self-adjointness test (see include/freegap/expr.hpp for the syntax).
#include <algorithm>
#include <cctype>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <map>
#include <set>
#include <string>

#include "freegap/stop.hpp"
#include "internal.hpp"

namespace freegap::expr {

ExprError::ExprError(const std::string& message, int column)
    : InputError(message), column_(column) {}

namespace detail {
namespace {

[[noreturn]] void fail(const std::string& what, int column) {
  throw ExprError(what + " at column " + std::to_string(column), column);
}

struct Token {
  enum class Kind { name, number, plus, minus, star, slash, caret, open, close, end };
  Kind kind = Kind::end;
  std::string text;
  int column = 1;
};

bool is_continuation_byte(char c) { return (static_cast<unsigned char>(c) & 0xC0) == 0x80; }

// The length of the name starting at text[i] (a letter, then letters, digits and '_').
std::size_t name_length(const std::string& text, std::size_t i) {
  std::size_t length = 1;
  while (i + length < text.size() &&
         (std::isalnum(static_cast<unsigned char>(text[i + length])) || text[i + length] == '_')) {
    ++length;
  }
  return length;
}

// The length of the number starting at text[i] (digits, a fraction, an exponent).
std::size_t number_length(const std::string& text, std::size_t i) {
  std::size_t length = 1;
  auto digits = [&] {
    while (i + length < text.size() && std::isdigit(static_cast<unsigned char>(text[i + length])))
      ++length;
  };
  digits();
  if (i + length < text.size() && text[i + length] == '.') {
    ++length;
    digits();
  }
  if (i + length < text.size() && (text[i + length] == 'e' || text[i + length] == 'E')) {
    std::size_t save = length;
    ++length;
    if (i + length < text.size() && (text[i + length] == '+' || text[i + length] == '-'))
      ++length;
    const std::size_t before = length;
    digits();
    if (length == before) length = save;  // "2e" is 2 followed by a name
  }
  return length;
}

// The kind of the one-byte symbol text[i]; anything else is refused, at `column`.
Token::Kind symbol_kind(const std::string& text, std::size_t i, int column) {
  const char c = text[i];
  switch (c) {
    case '+':
      return Token::Kind::plus;
    case '-':
      return Token::Kind::minus;
    case '*':
      return Token::Kind::star;
    case '/':
      return Token::Kind::slash;
    case '^':
      return Token::Kind::caret;
    case '(':
      return Token::Kind::open;
    case ')':
      return Token::Kind::close;
    default: {
      const auto byte = static_cast<unsigned char>(c);
      if (byte < 0x20 || byte == 0x7f || is_continuation_byte(c) || byte >= 0xf8) {
        // A control character (a NUL would cut the message short where it is printed) or a
        // byte that cannot start a UTF-8 character: named by its value.
        char hex[8];
        std::snprintf(hex, sizeof hex, "0x%02X", byte);
        fail(std::string("unexpected byte ") + hex, column);
      }
      std::size_t length = 1;
      while (i + length < text.size() && is_continuation_byte(text[i + length])) ++length;
      fail("unexpected character '" + text.substr(i, length) + "'", column);
    }
  }
}

std::vector<Token> tokenize(const std::string& text) {
  std::vector<Token> tokens;
  std::size_t i = 0;
  int column = 1;
  auto advance = [&](std::size_t count) {
    for (std::size_t k = 0; k < count && i < text.size(); ++k, ++i) {
      if (!is_continuation_byte(text[i])) ++column;
    }
  };
  while (i < text.size()) {
    const char c = text[i];
    if (std::isspace(static_cast<unsigned char>(c))) {
      advance(1);
      continue;
    }
    Token token;
    token.column = column;
    std::size_t length = 1;
    if (std::isalpha(static_cast<unsigned char>(c))) {
      length = name_length(text, i);
      token.kind = Token::Kind::name;
    } else if (std::isdigit(static_cast<unsigned char>(c))) {
      length = number_length(text, i);
      token.kind = Token::Kind::number;
    } else {
      token.kind = symbol_kind(text, i, column);
    }
    token.text = text.substr(i, length);
    advance(length);
    tokens.push_back(std::move(token));
  }
  Token end;
  end.column = column;
  tokens.push_back(end);
  return tokens;
}

class Parser {
 public:
  explicit Parser(ExpressionData& data) : data_(data), tokens_(tokenize(data.text)) {}

  void run() {
    if (tokens_.front().kind == Token::Kind::end) {
      throw ExprError("the expression is empty", 0);
    }
    data_.root = parse_sum();
    const Token& t = peek();
    if (t.kind == Token::Kind::close) fail("unmatched ')'", t.column);
    if (t.kind != Token::Kind::end) fail("unexpected '" + t.text + "'", t.column);
  }

 private:
  const Token& peek() const { return tokens_[pos_]; }
  const Token& take() { return tokens_[pos_++]; }

  bool starts_operand() const {
    const auto k = peek().kind;
    return k == Token::Kind::name || k == Token::Kind::number || k == Token::Kind::open;
  }

  [[noreturn]] void expected_operand() const {
    const Token& t = peek();
    if (pos_ == 0) fail("expected a matrix name, a number or '('", t.column);
    fail("expected a matrix name, a number or '(' after '" + tokens_[pos_ - 1].text + "'",
         t.column);
  }

  int add(AstNode node) {
    data_.nodes.push_back(std::move(node));
    return static_cast<int>(data_.nodes.size()) - 1;
  }

  // sum := ['+'|'-'] term { ('+'|'-') term }
  int parse_sum() {
    AstNode sum;
    sum.kind = AstNode::Kind::sum;
    sum.column = peek().column;
    int sign = 1;
    int op_column = peek().column;
    if (peek().kind == Token::Kind::plus || peek().kind == Token::Kind::minus) {
      sign = take().kind == Token::Kind::minus ? -1 : 1;
    }
    if (!starts_operand()) expected_operand();
    sum.children.push_back(parse_term());
    sum.signs.push_back(sign);
    sum.op_columns.push_back(op_column);
    while (peek().kind == Token::Kind::plus || peek().kind == Token::Kind::minus) {
      check_stop();
      const Token& op = take();
      if (!starts_operand()) expected_operand();
      sum.children.push_back(parse_term());
      sum.signs.push_back(op.kind == Token::Kind::minus ? -1 : 1);
      sum.op_columns.push_back(op.column);
    }
    if (sum.children.size() == 1 && sign == 1) return sum.children.front();
    return add(std::move(sum));
  }

  // term := factor { ['*'] factor | '/' number-factor }
  int parse_term() {
    AstNode product;
    product.kind = AstNode::Kind::product;
    product.column = peek().column;
    product.children.push_back(parse_factor());
    product.op_columns.push_back(product.column);
    for (;;) {
      check_stop();
      const Token& t = peek();
      if (t.kind == Token::Kind::star) {
        take();
        if (!starts_operand()) expected_operand();
        product.op_columns.push_back(peek().column);
        product.children.push_back(parse_factor());
      } else if (t.kind == Token::Kind::slash) {
        take();
        const Token& divisor = peek();
        if (divisor.kind == Token::Kind::name && divisor.text == "i") {
          fail("division is only by a real number; write \"-i X\" for X/i", divisor.column);
        }
        if (divisor.kind == Token::Kind::name || divisor.kind == Token::Kind::open) {
          fail("division is only by a number", divisor.column);
        }
        if (divisor.kind != Token::Kind::number) expected_operand();
        const int factor = parse_factor();
        const double value = scalar_value(factor);
        if (value == 0.0) fail("division by zero", divisor.column);
        AstNode inverse;
        inverse.kind = AstNode::Kind::number;
        inverse.column = divisor.column;
        inverse.value = 1.0 / value;
        product.op_columns.push_back(divisor.column);
        product.children.push_back(add(std::move(inverse)));
      } else if (starts_operand()) {
        if (t.kind == Token::Kind::number)
          fail("a number cannot follow a factor without '*'", t.column);
        product.op_columns.push_back(t.column);
        product.children.push_back(parse_factor());
      } else {
        break;
      }
    }
    if (product.children.size() == 1) return product.children.front();
    return add(std::move(product));
  }

  // The value of a factor made of numbers only (after '/').
  double scalar_value(int index) const {
    const AstNode& node = data_.nodes[index];
    switch (node.kind) {
      case AstNode::Kind::number:
        return node.value.real();  // a number token: real
      case AstNode::Kind::power:
        return std::pow(scalar_value(node.children[0]), node.exponent);
      case AstNode::Kind::adjoint:
        return scalar_value(node.children[0]);
      default:
        return 0.0;  // unreachable: '/' is followed by a number token
    }
  }

  // factor := primary { '^' (integer | '*') }
  int parse_factor() {
    int result = parse_primary();
    int chain = 0;
    while (peek().kind == Token::Kind::caret) {
      const Token& caret = take();
      if (++chain > kMaxPowerChain) {
        fail("more than " + std::to_string(kMaxPowerChain) +
                 " '^' in a row; combine them (\"X^2^3\" is X^6, \"X^*^*\" is X)",
             caret.column);
      }
      AstNode node;
      node.column = data_.nodes[result].column;
      node.op_columns.push_back(caret.column);
      node.children.push_back(result);
      const Token& t = peek();
      if (t.kind == Token::Kind::star) {
        take();
        node.kind = AstNode::Kind::adjoint;
      } else if (t.kind == Token::Kind::number &&
                 std::all_of(t.text.begin(), t.text.end(),
                             [](char c) { return std::isdigit(static_cast<unsigned char>(c)); })) {
        if (t.text.size() > 4 || std::stoi(t.text) > 1000) {
          fail("power must be at most 1000", t.column);
        }
        node.kind = AstNode::Kind::power;
        node.exponent = std::stoi(take().text);
      } else {
        fail("power must be a non-negative integer", t.column);
      }
      result = add(std::move(node));
    }
    return result;
  }

  // primary := name | number | '(' sum ')'
  int parse_primary() {
    const Token& t = peek();
    AstNode node;
    node.column = t.column;
    switch (t.kind) {
      case Token::Kind::name: {
        if (t.text == "i") {
          // The imaginary unit (no matrix may be called i): a number like 2 or 0.5.
          take();
          node.kind = AstNode::Kind::number;
          node.value = std::complex<double>(0.0, 1.0);
          data_.has_imaginary = true;
          return add(std::move(node));
        }
        const auto& ops = data_.operands;
        const auto it = std::find_if(ops.begin(), ops.end(),
                                     [&](const Operand& o) { return o.name == t.text; });
        if (it == ops.end()) {
          std::string names;
          for (const auto& o : ops) names += (names.empty() ? "" : ", ") + o.name;
          throw ExprError("unknown matrix '" + t.text + "' at column " + std::to_string(t.column) +
                              " (declared: " + (names.empty() ? "none" : names) + ")",
                          t.column);
        }
        take();
        node.kind = AstNode::Kind::name;
        node.matrix = static_cast<int>(it - ops.begin());
        return add(std::move(node));
      }
      case Token::Kind::number: {
        char* end = nullptr;
        const double value = std::strtod(t.text.c_str(), &end);
        if (!std::isfinite(value)) fail("number out of range", t.column);
        take();
        node.kind = AstNode::Kind::number;
        node.value = value;
        return add(std::move(node));
      }
      case Token::Kind::open: {
        const int open_column = take().column;
        // Every walk of the tree recurses through the groups: their depth is bounded here,
        // before the parser itself recurses into one more.
        if (++depth_ > kMaxNesting) {
          fail("parentheses nested more than " + std::to_string(kMaxNesting) +
                   " deep; expand or split the expression",
               open_column);
        }
        const int inner = parse_sum();
        --depth_;
        if (peek().kind != Token::Kind::close) {
          fail("unbalanced parenthesis opened", open_column);
        }
        take();
        return inner;
      }
      default:
        expected_operand();
    }
  }

  ExpressionData& data_;
  std::vector<Token> tokens_;
  std::size_t pos_ = 0;
  int depth_ = 0;  // parentheses open around the current token
};

std::string shape_text(const ExpressionData& data, const SymShape& s) {
  return data.dim_names[s.rows] + "×" + data.dim_names[s.cols];
}

SymShape shape_of(ExpressionData& data, int index) {
  const AstNode& node = data.nodes[index];
  SymShape result;
  switch (node.kind) {
    case AstNode::Kind::name: {
      const Operand& o = data.operands[node.matrix];
      result = {false, o.rows, o.cols};
      break;
    }
    case AstNode::Kind::number:
      break;
    case AstNode::Kind::sum: {
      for (std::size_t i = 0; i < node.children.size(); ++i) {
        const SymShape s = shape_of(data, node.children[i]);
        if (i == 0) {
          result = s;
          continue;
        }
        const int column = node.op_columns[i];
        if (result.scalar && s.scalar) continue;
        if (result.scalar || s.scalar) {
          const SymShape& m = result.scalar ? s : result;
          if (m.rows != m.cols) {
            fail("cannot add a number to an " + shape_text(data, m) + " matrix", column);
          }
          result = m;
          continue;
        }
        if (result.rows != s.rows || result.cols != s.cols) {
          fail("cannot add " + shape_text(data, result) + " and " + shape_text(data, s), column);
        }
      }
      break;
    }
    case AstNode::Kind::product: {
      for (std::size_t i = 0; i < node.children.size(); ++i) {
        const SymShape s = shape_of(data, node.children[i]);
        if (s.scalar) continue;
        if (result.scalar) {
          result = s;
          continue;
        }
        if (result.cols != s.rows) {
          fail("cannot multiply " + shape_text(data, result) + " by " + shape_text(data, s) +
                   " (inner sizes " + data.dim_names[result.cols] + " and " +
                   data.dim_names[s.rows] + " differ)",
               node.op_columns[i]);
        }
        result.cols = s.cols;
      }
      break;
    }
    case AstNode::Kind::power: {
      result = shape_of(data, node.children[0]);
      if (!result.scalar && node.exponent != 1 && result.rows != result.cols) {
        fail("power of a non-square " + shape_text(data, result) + " matrix", node.op_columns[0]);
      }
      break;
    }
    case AstNode::Kind::adjoint: {
      result = shape_of(data, node.children[0]);
      std::swap(result.rows, result.cols);
      break;
    }
  }
  data.shapes[index] = result;
  return result;
}

// ---- symbolic self-adjointness -----------------------------------------------------------------

// A word is a product of letters; letter 2·i + a is operand i, adjointed when a = 1.
using Word = std::vector<int>;
using Poly = std::map<Word, std::complex<double>>;

// Thrown when an expansion passes a bound; `what` completes "the expansion ...".
struct CapReached {
  std::string what;
};

class Algebra {
 public:
  Algebra(const ExpressionData& data, std::size_t cap) : data_(data), cap_(cap) {}

  int letter(int operand, bool adjoint) const {
    return 2 * operand + (adjoint && !data_.operands[operand].self_adjoint ? 1 : 0);
  }

  // Normal form: adjacent U U^* and U^* U of a unitary letter cancel (a stack pass), then each
  // maximal run of diagonal letters is sorted (real diagonal matrices commute).
  Word normal(const Word& w) const {
    Word out;
    for (const int l : w) {
      if (!out.empty() && (out.back() ^ 1) == l && data_.operands[l / 2].unitary) {
        out.pop_back();
      } else {
        out.push_back(l);
      }
    }
    auto diagonal = [&](int l) { return data_.operands[l / 2].diagonal; };
    for (auto it = out.begin(); it != out.end();) {
      if (!diagonal(*it)) {
        ++it;
        continue;
      }
      auto end = std::find_if_not(it, out.end(), diagonal);
      std::sort(it, end);
      it = end;
    }
    return out;
  }

  Poly multiply(const Poly& a, const Poly& b) const {
    Poly out;
    std::size_t letters = 0;
    for (const auto& [wa, ca] : a) {
      for (const auto& [wb, cb] : b) {
        // Budgets (expr.hpp): products formed, and letters stored, besides the monomial cap.
        if (++products_ > data_.max_products) {
          throw CapReached{"needs more than " + std::to_string(data_.max_products) +
                           " word products"};
        }
        if ((products_ & 1023) == 0) check_stop();
        Word w = wa;
        w.insert(w.end(), wb.begin(), wb.end());
        const auto [it, inserted] = out.try_emplace(normal(w), 0.0);
        it->second += ca * cb;
        if (inserted) letters += it->first.size();
        if (out.size() > cap_) throw monomial_cap();
        if (letters > data_.max_letters) {
          throw CapReached{"exceeds " + std::to_string(data_.max_letters) + " letters"};
        }
      }
    }
    return out;
  }

  CapReached monomial_cap() const {
    return CapReached{"exceeds " + std::to_string(cap_) + " monomials"};
  }

  Poly adjoint(const Poly& p) const {
    Poly out;
    for (const auto& [w, c] : p) {
      Word r;
      for (auto it = w.rbegin(); it != w.rend(); ++it) r.push_back(letter(*it / 2, !(*it & 1)));
      out[normal(r)] += std::conj(c);
    }
    return out;
  }

  Poly expand(int index) const {
    const AstNode& node = data_.nodes[index];
    switch (node.kind) {
      case AstNode::Kind::name:
        return Poly{{Word{letter(node.matrix, false)}, 1.0}};
      case AstNode::Kind::number:
        return Poly{{Word{}, node.value}};
      case AstNode::Kind::sum: {
        Poly out;
        for (std::size_t i = 0; i < node.children.size(); ++i) {
          const double sign = node.signs[i];
          for (const auto& [w, c] : expand(node.children[i])) out[w] += sign * c;
          if (out.size() > cap_) throw monomial_cap();
        }
        return out;
      }
      case AstNode::Kind::product: {
        Poly out{{Word{}, 1.0}};
        for (const int child : node.children) out = multiply(out, expand(child));
        return out;
      }
      case AstNode::Kind::power: {
        // Repeated squaring keeps the number of (capped) multiplications logarithmic.
        Poly base = expand(node.children[0]);
        Poly out{{Word{}, 1.0}};
        for (int k = node.exponent; k > 0; k >>= 1) {
          if (k & 1) out = multiply(out, base);
          if (k > 1) base = multiply(base, base);
        }
        return out;
      }
      case AstNode::Kind::adjoint:
        return adjoint(expand(node.children[0]));
    }
    return {};
  }

 private:
  const ExpressionData& data_;
  std::size_t cap_;
  mutable std::size_t products_ = 0;  // word products formed so far in this expansion
};

}  // namespace

void parse(ExpressionData& data) { Parser(data).run(); }

void check_degree(const ExpressionData& data) {
  // Children precede their parents in `nodes` (the parser adds a node after its operands), so
  // one pass in index order computes every degree without recursion. Degrees saturate just past
  // the bound, so no product of exponents can overflow.
  const long long over = kMaxDegree + 1;
  std::vector<long long> degree(data.nodes.size(), 0);
  auto refuse = [](int column) {
    fail("degree above " + std::to_string(kMaxDegree) +
             ": a word of the expanded expression would have more than " +
             std::to_string(kMaxDegree) + " matrix factors; lower the powers or split the product",
         column);
  };
  for (std::size_t i = 0; i < data.nodes.size(); ++i) {
    const AstNode& node = data.nodes[i];
    long long d = 0;
    switch (node.kind) {
      case AstNode::Kind::name:
        d = 1;
        break;
      case AstNode::Kind::number:
        break;
      case AstNode::Kind::sum:
        for (const int c : node.children) d = std::max(d, degree[c]);
        break;
      case AstNode::Kind::product:
        for (std::size_t k = 0; k < node.children.size(); ++k) {
          d += degree[node.children[k]];
          if (d > kMaxDegree) refuse(node.op_columns[k]);
        }
        break;
      case AstNode::Kind::power:
        d = std::min(over, degree[node.children[0]] * node.exponent);
        if (d > kMaxDegree) refuse(node.op_columns[0]);
        break;
      case AstNode::Kind::adjoint:
        d = degree[node.children[0]];
        break;
    }
    degree[i] = d;
  }
}

void check_shapes(ExpressionData& data) {
  data.shapes.assign(data.nodes.size(), SymShape{});
  const SymShape s = shape_of(data, data.root);
  if (s.scalar) throw ExprError("the expression has no matrix in it", 0);
  if (s.rows != s.cols) {
    throw ExprError("the expression is " + shape_text(data, s) + "; it must be square", 0);
  }
}

bool decide_self_adjoint(ExpressionData& data, std::size_t max_monomials) {
  const Algebra algebra(data, max_monomials);
  try {
    const Poly p = algebra.expand(data.root);
    const Poly q = algebra.adjoint(p);
    double scale = 0.0;
    for (const auto& [w, c] : p) scale = std::max(scale, std::abs(c));
    // Coefficients are sums of products of the same decimal numbers in another order; they agree
    // to rounding when the expression is self-adjoint.
    const double tolerance = 1e-12 * scale;
    auto coefficient = [](const Poly& poly, const Word& w) {
      const auto it = poly.find(w);
      return it == poly.end() ? std::complex<double>() : it->second;
    };
    for (const auto& [w, c] : p) {
      if (std::abs(c - coefficient(q, w)) > tolerance) return false;
    }
    for (const auto& [w, c] : q) {
      if (std::abs(c - coefficient(p, w)) > tolerance) return false;
    }
    return true;
  } catch (const CapReached& cap) {
    data.note = "self-adjointness not decided: the expansion " + cap.what +
                "; singular values are computed";
    return false;
  }
}

std::vector<Monomial> expand_monomials(const ExpressionData& data, std::size_t max_monomials) {
  const Algebra algebra(data, max_monomials);
  Poly p;
  try {
    p = algebra.expand(data.root);
  } catch (const CapReached& cap) {
    throw ExprError("the expansion " + cap.what, 0);
  }
  std::vector<Monomial> out;
  for (const auto& [w, c] : p) {
    if (c == 0.0) continue;
    Monomial m;
    m.coefficient = c;
    for (const int l : w) m.letters.emplace_back(l / 2, (l & 1) != 0);
    out.push_back(std::move(m));
  }
  return out;
}

}  // namespace detail
}  // namespace freegap::expr
