// Bounded inputs (issue 20, items 4 and 5): expressions that used to overflow the stack or run
// without bound are refused right after parsing with the bound, the column and the fix; a stop
// request ends validation; the job parser can validate without touching the file system.
#include <gtest/gtest.h>

#include <csignal>
#include <string>
#include <vector>

#include "freegap/ensembles.hpp"
#include "freegap/expr.hpp"
#include "freegap/job.hpp"
#include "freegap/stop.hpp"

namespace fe = freegap::expr;
namespace en = freegap::ensembles;

namespace {

en::MatrixSpec spec(const std::string& name, en::Kind kind) {
  en::MatrixSpec s;
  s.name = name;
  s.kind = kind;
  if (kind == en::Kind::diagonal) s.diagonal.atoms = {{-1.0, 0.5}, {1.0, 0.5}};
  return s;
}

const std::vector<en::MatrixSpec>& declared() {
  static const std::vector<en::MatrixSpec> specs = {
      spec("X", en::Kind::gue), spec("Y", en::Kind::gue), spec("B", en::Kind::diagonal),
      spec("U", en::Kind::haar_unitary)};
  return specs;
}

std::string repeat(const std::string& s, int times) {
  std::string out;
  for (int i = 0; i < times; ++i) out += s;
  return out;
}

// The message of the ExprError `text` raises; "" (a test failure) if it is accepted.
std::string refusal(const std::string& text) {
  try {
    fe::Expression e(text, declared());
  } catch (const fe::ExprError& e) {
    return e.what();
  }
  ADD_FAILURE() << "accepted: " << text.substr(0, 60);
  return "";
}

// Resets the stop flag whatever a test does, so the tests after it run normally.
struct StopFlag {
  explicit StopFlag(int signal) { freegap::g_stop_signal = signal; }
  ~StopFlag() { freegap::g_stop_signal = 0; }
};

}  // namespace

// Issue item 4: these overflowed the stack (exit 139) in run, sample and limit.
TEST(InputBounds, DeepNestingIsRefusedAtItsColumn) {
  const std::string nested =
      "parentheses nested more than 100 deep; expand or split the expression";
  // 7,000 nested parentheses: the 101st '(' is at column 101.
  EXPECT_EQ(refusal(repeat("(", 7000) + "X" + repeat(")", 7000)), nested + " at column 101");
  // 100,000 × "(-": the 101st '(' is at column 201.
  EXPECT_EQ(refusal(repeat("(-", 100000) + "X" + repeat(")", 100000)), nested + " at column 201");
  // A name followed by 100,000 × "^*": the 17th '^' is at column 2 + 2·16 = 34.
  EXPECT_EQ(refusal("X" + repeat("^*", 100000)),
            "more than 16 '^' in a row; combine them (\"X^2^3\" is X^6, \"X^*^*\" is X) at "
            "column 34");
  // Unbalanced: the bound comes first, before the parser looks for the ')'.
  EXPECT_EQ(refusal(repeat("(", 50000)), nested + " at column 101");
}

TEST(InputBounds, NestingAndChainsUpToTheBoundsAreAccepted) {
  const fe::Expression deep(repeat("(", 100) + "X" + repeat(")", 100), declared());
  EXPECT_TRUE(deep.self_adjoint());
  const fe::Expression chain("U" + repeat("^*", 16), declared());  // 16 adjoints: U again
  EXPECT_EQ(chain.expansion().size(), 1u);
  EXPECT_EQ(chain.expansion()[0].letters, (std::vector<std::pair<int, bool>>{{3, false}}));
}

// Issue item 5: B^1000^1000^1000 reached 10 GB in 600 s; a 10^5-factor product took > 90 s.
TEST(InputBounds, DegreeIsBoundedBeforeAnyExpansion) {
  const std::string degree =
      "degree above 1000: a word of the expanded expression would have more than 1000 matrix "
      "factors; lower the powers or split the product";
  // (B^1000)^1000 passes the bound at the second '^', column 7.
  EXPECT_EQ(refusal("B^1000^1000^1000"), degree + " at column 7");
  // 100,000 factors "X X X ...": the 1001st factor starts at column 2·1000 + 1.
  std::string product = "X";
  for (int i = 1; i < 100000; ++i) product += " X";
  EXPECT_EQ(refusal(product), degree + " at column 2001");
  EXPECT_EQ(refusal("(X Y)^500 X"), degree + " at column 11");
  EXPECT_EQ(refusal("X^1000 X"), degree + " at column 8");
  // The bound itself is accepted: a single power of 1000, and 1000 factors.
  EXPECT_TRUE(fe::Expression("U^1000 + (U^*)^1000", declared()).self_adjoint());
  std::string thousand = "X";
  for (int i = 1; i < 1000; ++i) thousand += " X";
  EXPECT_TRUE(fe::Expression(thousand, declared()).self_adjoint());
  // Sums take the largest degree, not the total: 40 terms of degree ≤ 40 pass.
  std::string sum;
  for (int k = 1; k <= 40; ++k) sum += (k > 1 ? " + X^" : "X^") + std::to_string(k);
  EXPECT_NO_THROW(fe::Expression(sum, declared()));
}

TEST(InputBounds, ExpansionStopsAtItsLetterBudget) {
  // (X + Y)^16 has 65,536 words of 16 letters; times X^400 each word has 416 letters, 2.7·10^7
  // in all: past the 10^7 letters of kMaxExpansionLetters, though under 10^5 monomials.
  const fe::Expression big("(X + Y)^16 X^400", declared());
  EXPECT_FALSE(big.self_adjoint());
  EXPECT_EQ(big.note(),
            "self-adjointness not decided: the expansion exceeds 10000000 letters; singular "
            "values are computed");
  try {
    (void)big.expansion();
    ADD_FAILURE() << "expansion accepted";
  } catch (const fe::ExprError& e) {
    EXPECT_STREQ(e.what(), "the expansion exceeds 10000000 letters");
  }
}

// Found by the expression fuzz target (tests/fuzz/regressions/expression/nul-character): a NUL
// in the text was copied into the message, which then ended at it where it was printed.
TEST(InputBounds, ControlCharactersAreNamedByTheirValue) {
  const std::string nul("u^2^* B\0\0\0\x32", 11);  // the fuzz target's input, byte for byte
  EXPECT_EQ(refusal(nul), "unexpected byte 0x00 at column 8");
  EXPECT_EQ(refusal("X\t+ Y\x01"), "unexpected byte 0x01 at column 6");
  EXPECT_EQ(refusal("X + \xff"), "unexpected byte 0xFF at column 5");
  EXPECT_EQ(refusal("X + \x80"), "unexpected byte 0x80 at column 5");
  EXPECT_EQ(refusal("X + \xc3\xa9"), "unexpected character '\xc3\xa9' at column 5");  // é
}

TEST(InputBounds, StopRequestEndsValidation) {
  // A signal handler sets the flag (freegap/stop.hpp); parsing, expansion and planning poll it.
  const StopFlag stop(SIGTERM);
  try {
    fe::Expression e("X Y + Y X", declared());
    ADD_FAILURE() << "validation ignored the stop request";
  } catch (const freegap::Stopped& e) {
    EXPECT_EQ(e.signal(), SIGTERM);
    EXPECT_STREQ(e.what(), "stopped by signal 15; nothing was written");
  }
}

TEST(InputBounds, StopRequestEndsPlanning) {
  const fe::Expression e("X Y + Y X + B U B U^*", declared());
  const StopFlag stop(SIGINT);
  EXPECT_THROW(fe::Evaluation(e, 8), freegap::Stopped);
}

TEST(InputBounds, JobValidationWithoutFiles) {
  // Absolute paths that would hang a reader (/dev/zero) or do not exist: with read_files false
  // nothing is opened and the job validates; with the default the missing file is refused.
  const std::string text =
      "seed = 1\nsizes = [8]\ntrials = 2\nexpression = \"D + X\"\n"
      "[matrices.D]\nensemble = \"diagonal\"\nlaw = \"file\"\npath = \"/nonexistent/eig.txt\"\n"
      "[matrices.X]\nensemble = \"gue\"\n"
      "[[estimator]]\nname = \"p\"\nlibrary = \"/dev/zero\"\n[estimator.truth]\ntop = \"none\"\n";
  const auto job = freegap::job::parse_job(text, "/nowhere/job.toml", true,
                                           freegap::job::Paths::anywhere, false);
  ASSERT_EQ(job.matrices.size(), 2u);
  EXPECT_EQ(job.matrices[0].diagonal.path, "/nonexistent/eig.txt");
  EXPECT_EQ(job.file_digests, (std::vector<std::string>{"", ""}));
  EXPECT_TRUE(job.estimators.at(0).library_digest.empty());
  EXPECT_THROW(freegap::job::parse_job(text, "/nowhere/job.toml"), freegap::InputError);
}
