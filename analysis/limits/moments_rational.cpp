// Exact integers and rationals for the limit moments (see moments.hpp).
#include <algorithm>
#include <bit>
#include <cmath>
#include <cstdint>
#include <limits>
#include <stdexcept>
#include <string>
#include <vector>

#include "freegap/analysis/limits/moments.hpp"
#include "freegap/errors.hpp"

namespace freegap::analysis {
namespace {

using Limbs = std::vector<std::uint32_t>;
constexpr std::uint64_t kBase = std::uint64_t{1} << 32;

void trim_limbs(Limbs& a) {
  while (!a.empty() && a.back() == 0) a.pop_back();
}

int compare_magnitudes(const Limbs& a, const Limbs& b) {
  if (a.size() != b.size()) return a.size() < b.size() ? -1 : 1;
  for (std::size_t i = a.size(); i-- > 0;) {
    if (a[i] != b[i]) return a[i] < b[i] ? -1 : 1;
  }
  return 0;
}

Limbs add_magnitudes(const Limbs& a, const Limbs& b) {
  const Limbs& longer = a.size() >= b.size() ? a : b;
  const Limbs& shorter = a.size() >= b.size() ? b : a;
  Limbs out(longer.size() + 1, 0);
  std::uint64_t carry = 0;
  for (std::size_t i = 0; i < longer.size(); ++i) {
    const std::uint64_t sum =
        std::uint64_t{longer[i]} + (i < shorter.size() ? shorter[i] : 0) + carry;
    out[i] = static_cast<std::uint32_t>(sum);
    carry = sum >> 32;
  }
  out[longer.size()] = static_cast<std::uint32_t>(carry);
  trim_limbs(out);
  return out;
}

// |a| − |b| for |a| ≥ |b|.
Limbs subtract_magnitudes(const Limbs& a, const Limbs& b) {
  Limbs out(a.size(), 0);
  std::int64_t borrow = 0;
  for (std::size_t i = 0; i < a.size(); ++i) {
    std::int64_t diff = static_cast<std::int64_t>(a[i]) - (i < b.size() ? b[i] : 0) - borrow;
    borrow = diff < 0 ? 1 : 0;
    if (diff < 0) diff += static_cast<std::int64_t>(kBase);
    out[i] = static_cast<std::uint32_t>(diff);
  }
  trim_limbs(out);
  return out;
}

Limbs multiply_magnitudes(const Limbs& a, const Limbs& b) {
  if (a.empty() || b.empty()) return {};
  Limbs out(a.size() + b.size(), 0);
  for (std::size_t i = 0; i < a.size(); ++i) {
    std::uint64_t carry = 0;
    for (std::size_t j = 0; j < b.size(); ++j) {
      const std::uint64_t t = std::uint64_t{a[i]} * b[j] + out[i + j] + carry;
      out[i + j] = static_cast<std::uint32_t>(t);
      carry = t >> 32;
    }
    std::size_t k = i + b.size();
    while (carry != 0) {
      const std::uint64_t t = std::uint64_t{out[k]} + carry;
      out[k] = static_cast<std::uint32_t>(t);
      carry = t >> 32;
      ++k;
    }
  }
  trim_limbs(out);
  return out;
}

Limbs shift_left_limbs(const Limbs& a, std::size_t bits) {
  if (a.empty()) return {};
  const std::size_t whole = bits / 32;
  const unsigned part = static_cast<unsigned>(bits % 32);
  Limbs out(a.size() + whole + 1, 0);
  for (std::size_t i = 0; i < a.size(); ++i) {
    const std::uint64_t v = std::uint64_t{a[i]} << part;
    out[i + whole] |= static_cast<std::uint32_t>(v);
    out[i + whole + 1] |= static_cast<std::uint32_t>(v >> 32);
  }
  trim_limbs(out);
  return out;
}

Limbs shift_right_limbs(const Limbs& a, std::size_t bits) {
  const std::size_t whole = bits / 32;
  if (whole >= a.size()) return {};
  const unsigned part = static_cast<unsigned>(bits % 32);
  Limbs out(a.size() - whole, 0);
  for (std::size_t i = 0; i < out.size(); ++i) {
    std::uint64_t v = a[i + whole] >> part;
    if (part != 0 && i + whole + 1 < a.size()) {
      v |= (std::uint64_t{a[i + whole + 1]} << (32 - part)) & 0xffffffffULL;
    }
    out[i] = static_cast<std::uint32_t>(v);
  }
  trim_limbs(out);
  return out;
}

// Knuth (1997), The Art of Computer Programming vol. 2, §4.3.1 Algorithm D: long division with
// the quotient digit estimated from the top two limbs after normalising the divisor so that its
// top bit is set; the estimate is at most 2 too large and is corrected before the
// multiply-and-subtract step, with an add-back in the rare remaining case.
void divide_limbs(const Limbs& a, const Limbs& b, Limbs& q, Limbs& r) {
  if (b.empty()) throw std::domain_error("BigInt: division by zero");
  if (compare_magnitudes(a, b) < 0) {
    q.clear();
    r = a;
    return;
  }
  if (b.size() == 1) {
    q.assign(a.size(), 0);
    std::uint64_t rem = 0;
    for (std::size_t i = a.size(); i-- > 0;) {
      const std::uint64_t cur = (rem << 32) | a[i];
      q[i] = static_cast<std::uint32_t>(cur / b[0]);
      rem = cur % b[0];
    }
    trim_limbs(q);
    r.clear();
    if (rem != 0) r.push_back(static_cast<std::uint32_t>(rem));
    return;
  }
  const unsigned s = static_cast<unsigned>(std::countl_zero(b.back()));
  Limbs v = shift_left_limbs(b, s);
  Limbs u = shift_left_limbs(a, s);
  const std::size_t n = v.size();
  u.resize(a.size() + 1, 0);  // one extra top limb (possibly zero)
  const std::size_t m = u.size() - n;
  q.assign(m, 0);
  for (std::size_t j = m; j-- > 0;) {
    const std::uint64_t top = (std::uint64_t{u[j + n]} << 32) | u[j + n - 1];
    std::uint64_t qhat = top / v[n - 1];
    std::uint64_t rhat = top % v[n - 1];
    while (qhat >= kBase || qhat * v[n - 2] > ((rhat << 32) | u[j + n - 2])) {
      --qhat;
      rhat += v[n - 1];
      if (rhat >= kBase) break;
    }
    std::int64_t borrow = 0;
    std::uint64_t carry = 0;
    for (std::size_t i = 0; i < n; ++i) {
      const std::uint64_t p = qhat * v[i] + carry;
      carry = p >> 32;
      const std::int64_t t = static_cast<std::int64_t>(u[i + j]) - borrow -
                             static_cast<std::int64_t>(p & 0xffffffffULL);
      u[i + j] = static_cast<std::uint32_t>(t);
      borrow = t < 0 ? 1 : 0;
    }
    const std::int64_t t =
        static_cast<std::int64_t>(u[j + n]) - borrow - static_cast<std::int64_t>(carry);
    u[j + n] = static_cast<std::uint32_t>(t);
    if (t < 0) {  // estimate was one too large: add the divisor back
      --qhat;
      std::uint64_t c = 0;
      for (std::size_t i = 0; i < n; ++i) {
        const std::uint64_t sum = std::uint64_t{u[i + j]} + v[i] + c;
        u[i + j] = static_cast<std::uint32_t>(sum);
        c = sum >> 32;
      }
      u[j + n] = static_cast<std::uint32_t>(std::uint64_t{u[j + n]} + c);
    }
    q[j] = static_cast<std::uint32_t>(qhat);
  }
  trim_limbs(q);
  u.resize(n);
  trim_limbs(u);
  r = shift_right_limbs(u, s);
}

}  // namespace

BigInt::BigInt(std::int64_t value) {
  negative_ = value < 0;
  // Magnitude without overflow for INT64_MIN.
  std::uint64_t mag =
      negative_ ? ~static_cast<std::uint64_t>(value) + 1 : static_cast<std::uint64_t>(value);
  while (mag != 0) {
    limbs_.push_back(static_cast<std::uint32_t>(mag));
    mag >>= 32;
  }
}

void BigInt::trim() {
  trim_limbs(limbs_);
  if (limbs_.empty()) negative_ = false;
}

BigInt BigInt::parse(std::string_view text) {
  std::size_t pos = 0;
  bool negative = false;
  if (pos < text.size() && (text[pos] == '+' || text[pos] == '-')) {
    negative = text[pos] == '-';
    ++pos;
  }
  if (pos == text.size()) throw InputError("not an integer: '" + std::string(text) + "'");
  BigInt out;
  const BigInt ten(10);
  for (; pos < text.size(); ++pos) {
    const char c = text[pos];
    if (c < '0' || c > '9') throw InputError("not an integer: '" + std::string(text) + "'");
    out = out * ten + BigInt(c - '0');
  }
  if (negative) out = -out;
  return out;
}

std::size_t BigInt::bit_length() const {
  if (limbs_.empty()) return 0;
  return 32 * (limbs_.size() - 1) +
         (32 - static_cast<std::size_t>(std::countl_zero(limbs_.back())));
}

std::string BigInt::to_string() const {
  if (is_zero()) return "0";
  // Peel off base-10^9 chunks with the single-limb division.
  Limbs mag = limbs_;
  std::vector<std::uint32_t> chunks;
  const Limbs billion{1000000000u};
  while (!mag.empty()) {
    Limbs q, r;
    divide_limbs(mag, billion, q, r);
    chunks.push_back(r.empty() ? 0 : r[0]);
    mag = std::move(q);
  }
  std::string out = negative_ ? "-" : "";
  out += std::to_string(chunks.back());
  for (std::size_t i = chunks.size() - 1; i-- > 0;) {
    std::string part = std::to_string(chunks[i]);
    out += std::string(9 - part.size(), '0') + part;
  }
  return out;
}

double BigInt::to_double() const {
  if (is_zero()) return 0.0;
  const std::size_t bits = bit_length();
  double magnitude = 0.0;
  if (bits <= 64) {
    std::uint64_t v = 0;
    for (std::size_t i = limbs_.size(); i-- > 0;) v = (v << 32) | limbs_[i];
    magnitude = static_cast<double>(v);
  } else {
    // Top 64 bits plus a sticky bit for everything below, so the one rounding to 53 bits is
    // correct (64 ≥ 53 + 2).
    const std::size_t drop = bits - 64;
    const Limbs top = shift_right_limbs(limbs_, drop);
    std::uint64_t v = 0;
    for (std::size_t i = top.size(); i-- > 0;) v = (v << 32) | top[i];
    const Limbs back = shift_left_limbs(top, drop);
    if (compare_magnitudes(back, limbs_) != 0) v |= 1;
    if (drop > 2000) return negative_ ? -HUGE_VAL : HUGE_VAL;
    magnitude = std::ldexp(static_cast<double>(v), static_cast<int>(drop));
  }
  return negative_ ? -magnitude : magnitude;
}

BigInt BigInt::abs() const {
  BigInt out = *this;
  out.negative_ = false;
  return out;
}

BigInt BigInt::operator<<(std::size_t bits) const {
  BigInt out;
  out.limbs_ = shift_left_limbs(limbs_, bits);
  out.negative_ = negative_;
  out.trim();
  return out;
}

BigInt BigInt::operator>>(std::size_t bits) const {
  BigInt out;
  out.limbs_ = shift_right_limbs(limbs_, bits);
  out.negative_ = negative_;
  out.trim();
  return out;
}

BigInt BigInt::operator-() const {
  BigInt out = *this;
  if (!out.is_zero()) out.negative_ = !negative_;
  return out;
}

BigInt operator+(const BigInt& a, const BigInt& b) {
  BigInt out;
  if (a.negative_ == b.negative_) {
    out.limbs_ = add_magnitudes(a.limbs_, b.limbs_);
    out.negative_ = a.negative_;
  } else if (compare_magnitudes(a.limbs_, b.limbs_) >= 0) {
    out.limbs_ = subtract_magnitudes(a.limbs_, b.limbs_);
    out.negative_ = a.negative_;
  } else {
    out.limbs_ = subtract_magnitudes(b.limbs_, a.limbs_);
    out.negative_ = b.negative_;
  }
  out.trim();
  return out;
}

BigInt operator-(const BigInt& a, const BigInt& b) { return a + (-b); }

BigInt operator*(const BigInt& a, const BigInt& b) {
  BigInt out;
  out.limbs_ = multiply_magnitudes(a.limbs_, b.limbs_);
  out.negative_ = a.negative_ != b.negative_;
  out.trim();
  return out;
}

void divide_magnitudes(const BigInt& a, const BigInt& b, BigInt& quotient, BigInt& remainder) {
  quotient = BigInt();
  remainder = BigInt();
  divide_limbs(a.limbs_, b.limbs_, quotient.limbs_, remainder.limbs_);
}

BigInt operator/(const BigInt& a, const BigInt& b) {
  BigInt q, r;
  divide_magnitudes(a, b, q, r);
  q.negative_ = a.negative_ != b.negative_;
  q.trim();
  return q;
}

BigInt operator%(const BigInt& a, const BigInt& b) {
  BigInt q, r;
  divide_magnitudes(a, b, q, r);
  r.negative_ = a.negative_;  // sign of the dividend, as for built-in integers
  r.trim();
  return r;
}

int compare(const BigInt& a, const BigInt& b) {
  if (a.negative_ != b.negative_) return a.negative_ ? -1 : 1;
  const int c = compare_magnitudes(a.limbs_, b.limbs_);
  return a.negative_ ? -c : c;
}

BigInt gcd(BigInt a, BigInt b) {
  a = a.abs();
  b = b.abs();
  while (!b.is_zero()) {  // Euclid
    BigInt r = a % b;
    a = std::move(b);
    b = std::move(r);
  }
  return a;
}

BigInt binomial(int n, int k) {
  if (k < 0 || k > n) return BigInt(0);
  k = std::min(k, n - k);
  BigInt out(1);
  // C(n, i) = C(n, i − 1)·(n − i + 1)/i, exact at every step.
  for (int i = 1; i <= k; ++i) out = out * BigInt(n - i + 1) / BigInt(i);
  return out;
}

BigInt catalan(int n) { return binomial(2 * n, n) / BigInt(n + 1); }

// ---------------------------------------------------------------------------------------------

Rational::Rational(std::int64_t value) : numerator_(value), denominator_(1) {}
Rational::Rational(BigInt numerator) : numerator_(std::move(numerator)), denominator_(1) {}

Rational::Rational(BigInt numerator, BigInt denominator) {
  if (denominator.is_zero()) throw std::domain_error("Rational: zero denominator");
  if (denominator.is_negative()) {
    numerator = -numerator;
    denominator = -denominator;
  }
  const BigInt g = gcd(numerator, denominator);
  if (!(g == BigInt(1)) && !g.is_zero()) {
    numerator = numerator / g;
    denominator = denominator / g;
  }
  numerator_ = std::move(numerator);
  denominator_ = std::move(denominator);
}

Rational Rational::parse(std::string_view text) {
  const std::string whole(text);
  const auto bad = [&] { return InputError("not a rational number: '" + whole + "'"); };
  if (text.empty()) throw bad();
  const std::size_t slash = text.find('/');
  if (slash != std::string_view::npos) {
    const BigInt p = BigInt::parse(text.substr(0, slash));
    const BigInt q = BigInt::parse(text.substr(slash + 1));
    if (q.is_zero()) throw bad();
    return Rational(p, q);
  }
  // Decimal with optional fraction and exponent, read exactly: digits · 10^(exponent − decimals).
  std::size_t pos = 0;
  bool negative = false;
  if (text[pos] == '+' || text[pos] == '-') negative = text[pos++] == '-';
  BigInt digits;
  int decimals = 0;
  bool seen_digit = false, seen_point = false;
  for (; pos < text.size(); ++pos) {
    const char c = text[pos];
    if (c >= '0' && c <= '9') {
      digits = digits * BigInt(10) + BigInt(c - '0');
      if (seen_point) ++decimals;
      seen_digit = true;
    } else if (c == '.' && !seen_point) {
      seen_point = true;
    } else {
      break;
    }
  }
  if (!seen_digit) throw bad();
  int exponent = 0;
  if (pos < text.size()) {
    if (text[pos] != 'e' && text[pos] != 'E') throw bad();
    const std::string exp_text(text.substr(pos + 1));
    if (exp_text.empty() || exp_text.size() > 5) throw bad();
    std::size_t used = 0;
    try {
      exponent = std::stoi(exp_text, &used);
    } catch (const std::exception&) {
      throw bad();
    }
    if (used != exp_text.size()) throw bad();
  }
  const int power = exponent - decimals;
  Rational out(negative ? -digits : digits);
  return out * Rational(10).pow(power);
}

Rational Rational::from_double(double value) {
  if (!std::isfinite(value)) throw InputError("not a finite number");
  if (value == 0.0) return Rational(0);
  // Continued-fraction convergents p/q of |value| (the best approximations, Khinchin 1964).
  const double x = std::fabs(value);
  std::int64_t p0 = 0, q0 = 1, p1 = 1, q1 = 0;
  double rest = x;
  for (int step = 0; step < 64; ++step) {
    const double a_real = std::floor(rest);
    if (a_real > 1e12) break;
    const auto a = static_cast<std::int64_t>(a_real);
    const std::int64_t p2 = a * p1 + p0, q2 = a * q1 + q0;
    if (q2 > 1000000) break;
    p0 = p1, q0 = q1, p1 = p2, q1 = q2;
    if (std::fabs(static_cast<double>(p1) / static_cast<double>(q1) - x) <= 1e-12 * x) {
      return Rational(BigInt(value < 0 ? -p1 : p1), BigInt(q1));
    }
    const double frac = rest - a_real;
    if (frac <= 0.0) break;
    rest = 1.0 / frac;
  }
  // The exact binary value m · 2^e of the double.
  int e = 0;
  const double m = std::frexp(value, &e);
  const auto mantissa = static_cast<std::int64_t>(std::ldexp(m, 53));
  return Rational(mantissa) * Rational(2).pow(e - 53);
}

std::string Rational::to_string() const {
  if (is_integer()) return numerator_.to_string();
  return numerator_.to_string() + "/" + denominator_.to_string();
}

double Rational::to_double() const {
  if (numerator_.is_zero()) return 0.0;
  // Scale so that the integer quotient has 65–66 bits, then round once with a sticky bit.
  const long shift = static_cast<long>(denominator_.bit_length()) -
                     static_cast<long>(numerator_.bit_length()) + 65;
  BigInt num = numerator_.abs(), den = denominator_;
  if (shift > 0) {
    num = num << static_cast<std::size_t>(shift);
  } else {
    den = den << static_cast<std::size_t>(-shift);
  }
  BigInt q, r;
  divide_magnitudes(num, den, q, r);
  // Append one bit below the quotient that is set iff the remainder is not zero (a sticky bit):
  // BigInt::to_double then rounds the 66–67-bit integer to 53 bits exactly once.
  const BigInt sticky = (q << 1) + BigInt(r.is_zero() ? 0 : 1);
  const double magnitude = std::ldexp(sticky.to_double(), static_cast<int>(-shift - 1));
  return numerator_.is_negative() ? -magnitude : magnitude;
}

Rational Rational::pow(int k) const {
  if (k < 0) {
    if (is_zero()) throw std::domain_error("Rational: zero to a negative power");
    return Rational(1) / pow(-k);
  }
  Rational result(1), base = *this;
  unsigned e = static_cast<unsigned>(k);
  while (e != 0) {  // square and multiply
    if (e & 1u) result = result * base;
    base = base * base;
    e >>= 1;
  }
  return result;
}

Rational operator+(const Rational& a, const Rational& b) {
  if (a.denominator_ == b.denominator_)
    return Rational(a.numerator_ + b.numerator_, a.denominator_);
  return Rational(a.numerator_ * b.denominator_ + b.numerator_ * a.denominator_,
                  a.denominator_ * b.denominator_);
}

Rational operator-(const Rational& a, const Rational& b) { return a + (-b); }

Rational operator*(const Rational& a, const Rational& b) {
  if (a.is_zero() || b.is_zero()) return Rational(0);
  if (a.is_integer() && b.is_integer()) return Rational(a.numerator_ * b.numerator_);
  return Rational(a.numerator_ * b.numerator_, a.denominator_ * b.denominator_);
}

Rational operator/(const Rational& a, const Rational& b) {
  if (b.is_zero()) throw std::domain_error("Rational: division by zero");
  return Rational(a.numerator_ * b.denominator_, a.denominator_ * b.numerator_);
}

Rational Rational::operator-() const {
  Rational out = *this;
  out.numerator_ = -out.numerator_;
  return out;
}

bool operator<(const Rational& a, const Rational& b) {
  return a.numerator_ * b.denominator_ < b.numerator_ * a.denominator_;
}

}  // namespace freegap::analysis
