// Job file tests: parsing into Job, each validation message (exact; docs/building.md habit 10),
// the canonical hash, SHA-256 against published vectors, and the example jobs in jobs/.
#include <gtest/gtest.h>
#include <unistd.h>

#include <filesystem>
#include <fstream>
#include <set>
#include <string>

#include "freegap/errors.hpp"
#include "freegap/job.hpp"

namespace {

namespace fs = std::filesystem;
using freegap::InputError;
using freegap::job::Job;
using freegap::job::load_job;
using freegap::job::parse_job;
using freegap::job::sha256_hex;

// A fresh directory per test binary run, removed at the end of each test that uses it.
class TempDir {
 public:
  TempDir() {
    path_ = fs::temp_directory_path() /
            ("freegap_test_job_" + std::to_string(::getpid()) + "_" + std::to_string(counter_++));
    fs::create_directories(path_);
  }
  ~TempDir() {
    std::error_code ignored;
    fs::remove_all(path_, ignored);
  }
  TempDir(const TempDir&) = delete;
  TempDir& operator=(const TempDir&) = delete;

  std::string write(const std::string& name, const std::string& text) const {
    const fs::path file = path_ / name;
    std::ofstream(file, std::ios::binary) << text;
    return file.string();
  }
  const fs::path& path() const { return path_; }

 private:
  static inline int counter_ = 0;
  fs::path path_;
};

// The message of the InputError that parsing `text` as "study.toml" throws ("" if none).
std::string error_of(const std::string& text, const std::string& path = "study.toml") {
  try {
    (void)parse_job(text, path);
  } catch (const InputError& e) {
    return e.what();
  }
  return "";
}

// ---- SHA-256 ----------------------------------------------------------------------------------

TEST(Sha256, FipsExampleVectors) {
  // Source: FIPS 180-4 / NIST "Example algorithm" pages for SHA-256 (one-block "abc", two-block
  // 448-bit message); the empty string from the same NIST example set (from memory); all four also
  // checked with GNU coreutils sha256sum when this test was written.
  EXPECT_EQ(sha256_hex("abc"), "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
  EXPECT_EQ(sha256_hex(""), "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
  EXPECT_EQ(sha256_hex("abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq"),
            "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1");
  EXPECT_EQ(sha256_hex("abcdefghbcdefghicdefghijdefghijkefghijklfghijklmghijklmnhijklmnoijklmnopj"
                       "klmnopqklmnopqrlmnopqrsmnopqrstnopqrstu"),
            "cf5b16a778af8380036ce59e7b0492370b249b11e8f07a51afac45037afee9d1");
}

TEST(Sha256, MillionAs) {
  // Source: NIST SHA-256 example, one million repetitions of 'a' (from memory; checked with GNU
  // coreutils sha256sum).
  EXPECT_EQ(sha256_hex(std::string(1'000'000, 'a')),
            "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0");
}

TEST(Sha256, PaddingBoundaries) {
  // Lengths around the one/two-block padding boundary (55/56 bytes) and the block size (63, 64,
  // 65). Source: GNU coreutils sha256sum on strings of 'x' of these lengths.
  const std::pair<std::size_t, const char*> cases[] = {
      {55, "d5e285683cd4efc02d021a5c62014694958901005d6f71e89e0989fac77e4072"},
      {56, "04c26261370ee7541549d16dee320c723e3fd14671e66a099afe0a377c16888e"},
      {63, "75220b47218278e656f2013bb8f0c455a25eaf01e86c64924e9d48d89776d6f2"},
      {64, "7ce100971f64e7001e8fe5a51973ecdfe1ced42befe7ee8d5fd6219506b5393c"},
      {65, "9537c5fdf120482f7d58d25e9ed583f52c02b4e304ea814db1633ad565aed7e9"},
      {119, "000b48d4edf0fa7bee3c6236ecd2785baa5db4eeb8bb54341b029e0d9fa5fb0c"},
      {120, "13f05a0b594787f5ecd315edc96141bd3243203d1b7d4f0836f37308b276ba98"},
  };
  for (const auto& [length, digest] : cases) {
    EXPECT_EQ(sha256_hex(std::string(length, 'x')), digest) << "length " << length;
  }
}

// ---- a full valid job -------------------------------------------------------------------------

const char* const kFullJob = R"(# every key given
name = "full study"
seed = 2026
sizes = [100, 200, 400]
trials = [40, 20, 10]
expression = "B + U B U^*"

[matrices.U]
ensemble = "haar_unitary"
method = "polar"

[matrices.B]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [-1.0, 0.5]]

[matrices.W]
ensemble = "wishart_real"
ratio = 0.25

[matrices.S]
ensemble = "diagonal"
law = "semicircle"
variance = 2

[observe]
bins = 50
range = [-3.0, 3.5]
max_moment = 12
keep_spectra = 2
spectrum = "singular_values"

[run]
trials_per_unit = 4
memory_per_rank = "1.5 GiB"
output = "out/full.h5"
force_dense = true
)";

TEST(ParseJob, FullJobFillsEveryField) {
  const Job job = parse_job(kFullJob, "studies/full.toml");
  EXPECT_EQ(job.path, "studies/full.toml");
  EXPECT_EQ(job.text, kFullJob);
  EXPECT_EQ(job.name, "full study");
  EXPECT_EQ(job.seed, 2026u);
  EXPECT_EQ(job.sizes, (std::vector<std::int64_t>{100, 200, 400}));
  EXPECT_EQ(job.trials, (std::vector<std::int64_t>{40, 20, 10}));
  EXPECT_EQ(job.trials_per_unit, 4);
  EXPECT_EQ(job.expression, "B + U B U^*");
  EXPECT_EQ(job.output, "studies/out/full.h5");
  EXPECT_EQ(job.memory_per_rank_bytes, 1610612736);  // 1.5 · 2^30
  EXPECT_TRUE(job.force_dense);

  EXPECT_EQ(job.observe.bins, 50);
  EXPECT_FALSE(job.observe.auto_range);
  EXPECT_EQ(job.observe.low, -3.0);
  EXPECT_EQ(job.observe.high, 3.5);
  EXPECT_EQ(job.observe.margin, 0.1);  // the default, unused with a fixed range
  EXPECT_EQ(job.observe.max_moment, 12);
  EXPECT_EQ(job.observe.keep_spectra, 2);
  EXPECT_TRUE(job.observe.singular_values);

  using freegap::declarations::DiagonalLawKind;
  using freegap::declarations::HaarMethod;
  using freegap::declarations::Kind;
  ASSERT_EQ(job.matrices.size(), 4u);  // sorted by name
  EXPECT_EQ(job.matrices[0].name, "B");
  EXPECT_EQ(job.matrices[0].kind, Kind::diagonal);
  EXPECT_EQ(job.matrices[0].diagonal.kind, DiagonalLawKind::atoms);
  ASSERT_EQ(job.matrices[0].diagonal.atoms.size(), 2u);
  EXPECT_EQ(job.matrices[0].diagonal.atoms[0].value, 1.0);
  EXPECT_EQ(job.matrices[0].diagonal.atoms[0].weight, 0.5);
  EXPECT_EQ(job.matrices[0].diagonal.atoms[1].value, -1.0);
  EXPECT_EQ(job.matrices[0].diagonal.atoms[1].weight, 0.5);
  EXPECT_EQ(job.matrices[1].name, "S");
  EXPECT_EQ(job.matrices[1].diagonal.kind, DiagonalLawKind::semicircle_quantiles);
  EXPECT_EQ(job.matrices[1].diagonal.variance, 2.0);
  EXPECT_EQ(job.matrices[2].name, "U");
  EXPECT_EQ(job.matrices[2].kind, Kind::haar_unitary);
  EXPECT_EQ(job.matrices[2].haar, HaarMethod::polar);
  EXPECT_EQ(job.matrices[3].name, "W");
  EXPECT_EQ(job.matrices[3].kind, Kind::wishart_real);
  EXPECT_EQ(job.matrices[3].ratio, 0.25);
  EXPECT_EQ(job.file_digests, (std::vector<std::string>{"", "", "", ""}));

  EXPECT_EQ(job.line_of("seed"), 3);
  EXPECT_EQ(job.line_of("expression"), 6);
  EXPECT_EQ(job.line_of("matrices.U"), 8);
  EXPECT_EQ(job.line_of("matrices.W.ratio"), 18);
  EXPECT_EQ(job.line_of("observe.bins"), 26);
  EXPECT_EQ(job.line_of("run.output"), 35);
  EXPECT_EQ(job.line_of("observe.margin"), 0);
  EXPECT_EQ(job.line_of("nothing"), 0);
  EXPECT_EQ(job.where("expression"), "studies/full.toml:6: expression: ");
  EXPECT_EQ(job.where("observe.margin"), "studies/full.toml: observe.margin: ");
}

TEST(ParseJob, DefaultsAndScalarTrials) {
  const Job job = parse_job(R"(seed = 0
sizes = [10, 20]
trials = 3
expression = "X"
[matrices.X]
ensemble = "gue"
)",
                            "dir/minimal.toml");
  EXPECT_EQ(job.name, "minimal");           // the file's stem
  EXPECT_EQ(job.output, "dir/minimal.h5");  // next to the job file
  EXPECT_EQ(job.trials, (std::vector<std::int64_t>{3, 3}));
  EXPECT_EQ(job.trials_per_unit, freegap::job::kDefaultTrialsPerUnit);
  EXPECT_EQ(job.trials_per_unit, 8);
  EXPECT_EQ(job.memory_per_rank_bytes, 0);
  EXPECT_FALSE(job.force_dense);
  EXPECT_EQ(job.observe.bins, 200);
  EXPECT_TRUE(job.observe.auto_range);
  EXPECT_EQ(job.observe.margin, 0.1);
  EXPECT_EQ(job.observe.max_moment, 8);
  // keep_spectra = "auto": 2 sizes × 3 trials are far within the budget, so every trial keeps
  // its spectrum.
  EXPECT_EQ(job.observe.keep_spectra_rule, "auto");
  EXPECT_EQ(job.observe.keep_spectra, 3);
  EXPECT_FALSE(job.observe.singular_values);
  ASSERT_EQ(job.matrices.size(), 1u);
  EXPECT_EQ(job.matrices[0].kind, freegap::declarations::Kind::gue);
}

TEST(ParseJob, SingleSizeAndOtherLawsAndDefaults) {
  const Job job = parse_job(R"(seed = 5
sizes = 50
trials = [7]
expression = "D + P + G G^* + O"
[matrices.D]
ensemble = "diagonal"
law = "uniform"
low = -1
high = 2.5
[matrices.P]
ensemble = "diagonal"
law = "marchenko_pastur"
[matrices.G]
ensemble = "ginibre_complex"
[matrices.O]
ensemble = "haar_orthogonal"
[observe]
range = "auto"
margin = 0.25
spectrum = "auto"
[run]
memory_per_rank = 1000
)",
                            "<text>");
  EXPECT_EQ(job.sizes, (std::vector<std::int64_t>{50}));
  EXPECT_EQ(job.trials, (std::vector<std::int64_t>{7}));
  ASSERT_EQ(job.matrices.size(), 4u);
  EXPECT_EQ(job.matrices[0].name, "D");
  EXPECT_EQ(job.matrices[0].diagonal.low, -1.0);
  EXPECT_EQ(job.matrices[0].diagonal.high, 2.5);
  EXPECT_EQ(job.matrices[1].name, "G");
  EXPECT_EQ(job.matrices[1].ratio, 1.0);  // square by default
  EXPECT_EQ(job.matrices[2].name, "O");
  EXPECT_EQ(job.matrices[2].haar, freegap::declarations::HaarMethod::qr);
  EXPECT_EQ(job.matrices[3].name, "P");
  EXPECT_EQ(job.matrices[3].diagonal.ratio, 1.0);
  EXPECT_TRUE(job.observe.auto_range);
  EXPECT_EQ(job.observe.margin, 0.25);
  EXPECT_EQ(job.memory_per_rank_bytes, 1000);
  EXPECT_EQ(job.name, "<text>");
}

TEST(ParseJob, EigenvalueFileRelativeToJobFile) {
  TempDir dir;
  dir.write("eigs.txt", "# three numbers\n3 1\n2  # and a comment\n");
  const std::string path = dir.write("study.toml", R"(seed = 1
sizes = [3]
trials = 1
expression = "E"
[matrices.E]
ensemble = "diagonal"
law = "file"
path = "eigs.txt"
)");
  const Job job = load_job(path);
  ASSERT_EQ(job.matrices.size(), 1u);
  EXPECT_EQ(job.matrices[0].diagonal.path, (dir.path() / "eigs.txt").string());
  // Count, then SHA-256 of the sorted values as %.17g lines ("1\n2\n3\n"), checked with GNU
  // coreutils: printf '1\n2\n3\n' | sha256sum.
  EXPECT_EQ(job.file_digests[0],
            "3 14c5e74c4b96ccef41cd94db73a9ec3348038ac094feca4fd897cecffa07cdae");
  EXPECT_EQ(job.output, (dir.path() / "study.h5").string());
}

TEST(ParseJob, MemoryAmounts) {
  using freegap::job::parse_memory;
  EXPECT_EQ(parse_memory("4 GiB"), 4LL << 30);
  EXPECT_EQ(parse_memory("4GiB"), 4LL << 30);
  EXPECT_EQ(parse_memory("512 mib"), 512LL << 20);
  EXPECT_EQ(parse_memory("2 GB"), 2'000'000'000LL);
  EXPECT_EQ(parse_memory("1.5 kB"), 1500);
  EXPECT_EQ(parse_memory("100 B"), 100);
  EXPECT_EQ(parse_memory("1 TiB"), 1LL << 40);
}

// ---- bad jobs: every message, exactly ----------------------------------------------------------

// A valid job to break one line at a time.
const char* const kGoodHead = R"(seed = 1
sizes = [100, 200]
trials = 4
expression = "X + Y"
)";

TEST(JobErrors, TomlSyntax) {
  // The descriptions are toml++ 3.3's own; line and column are where it stopped.
  EXPECT_EQ(error_of("seed = 1\nsizes = [100, 200\ntrials = 3\n"),
            "study.toml:3:1: TOML syntax: Error while parsing array: expected comma or closing "
            "']', saw 't'");
  EXPECT_EQ(error_of("seed = 1\nseed = 2\n"),
            "study.toml:2:8: TOML syntax: Error while parsing key-value pair: cannot redefine "
            "existing integer 'seed'");
}

TEST(JobErrors, UnknownTopLevelKey) {
  EXPECT_EQ(error_of("seed = 1\nsead = 2\n"),
            "study.toml:2: sead: unknown key 'sead' (did you mean 'seed'?); known keys at the top "
            "level: name, seed, sizes, trials, expression, matrices, observe, run, estimator");
  EXPECT_EQ(error_of("seed = 1\nplot = true\n"),
            "study.toml:2: plot: unknown key 'plot'; known keys at the top level: name, seed, "
            "sizes, trials, expression, matrices, observe, run, estimator");
}

TEST(JobErrors, UnknownKeyInObserve) {
  EXPECT_EQ(error_of(std::string(kGoodHead) +
                     "[matrices.X]\nensemble = \"gue\"\n[matrices.Y]\nensemble = \"goe\"\n"
                     "[observe]\nbin = 100\n"),
            "study.toml:10: observe.bin: unknown key 'bin' (did you mean 'bins'?); known keys: "
            "bins, range, margin, max_moment, keep_spectra, spectrum, extremes_only, "
            "extremes_tolerance, extremes_max_steps");
}

TEST(JobErrors, UnknownKeyInRun) {
  EXPECT_EQ(error_of(std::string(kGoodHead) +
                     "[matrices.X]\nensemble = \"gue\"\n[matrices.Y]\nensemble = \"goe\"\n"
                     "[run]\nranks = 4\n"),
            "study.toml:10: run.ranks: unknown key 'ranks'; known keys: trials_per_unit, "
            "memory_per_rank, output, force_dense, path");
}

TEST(JobErrors, RunPathNamesAPathAndAgreesWithForceDense) {
  const std::string head = std::string(kGoodHead) +
                           "[matrices.X]\nensemble = \"gue\"\n[matrices.Y]\nensemble = \"goe\"\n";
  EXPECT_EQ(error_of(head + "[run]\npath = \"fast\"\n"),
            "study.toml:10: run.path: must be \"auto\", \"dense\", \"tridiagonal\", "
            "\"two_projection\" or \"krylov\" (got \"fast\")");
  EXPECT_EQ(parse_job(head + "[run]\npath = \"krylov\"\n", "study.toml").run_path, "krylov");
  EXPECT_EQ(error_of(head + "[run]\nforce_dense = true\npath = \"tridiagonal\"\n"),
            "study.toml:11: run.path: asks for the tridiagonal path while force_dense = true asks "
            "for the dense one; keep one of the two keys");
  EXPECT_EQ(error_of(head + "[run]\npath = 2\n").rfind("study.toml:10: run.path: ", 0), 0u);
  const Job forced = parse_job(head + "[run]\npath = \"dense\"\n", "study.toml");
  EXPECT_EQ(forced.run_path, "dense");
  EXPECT_EQ(parse_job(head, "study.toml").run_path, "auto");
}

TEST(JobErrors, ExtremesOnlyRefusesWhatNeedsTheWholeSpectrum) {
  const std::string head = std::string(kGoodHead) + "[matrices.X]\nensemble = \"gue\"\n";
  for (const char* key : {"bins = 10", "range = [-1, 1]", "max_moment = 2", "keep_spectra = 1"}) {
    const std::string name = std::string(key).substr(0, std::string(key).find(' '));
    EXPECT_EQ(error_of(head + "[observe]\nextremes_only = true\n" + key + "\n"),
              "study.toml:9: observe." + name + ": needs the whole spectrum, which extremes_only = "
              "true does not observe; remove " + name + " or set extremes_only = false")
        << key;
  }
  EXPECT_EQ(error_of(head + "[observe]\nextremes_only = 1\n").rfind(
                "study.toml:8: observe.extremes_only: ", 0),
            0u);
  const Job job = parse_job(head + "[observe]\nextremes_only = true\n", "study.toml");
  EXPECT_TRUE(job.observe.extremes_only);
  EXPECT_EQ(job.observe.max_moment, 0);
  EXPECT_EQ(job.observe.keep_spectra, 0);
  // false is the default and leaves the other keys free.
  EXPECT_FALSE(parse_job(head + "[observe]\nextremes_only = false\nbins = 10\n", "study.toml")
                   .observe.extremes_only);
}

// The krylov path's accuracy: only with extremes_only, within its bounds, and in the canonical
// text (so in the hash) only when given.
TEST(JobErrors, ExtremesAccuracyKeysNeedExtremesOnlyAndStayInTheirBounds) {
  const std::string head = std::string(kGoodHead) + "[matrices.X]\nensemble = \"gue\"\n";
  const std::string extremes = head + "[observe]\nextremes_only = true\n";
  EXPECT_EQ(error_of(head + "[observe]\nextremes_tolerance = 1e-8\n"),
            "study.toml:8: observe.extremes_tolerance: applies only when only the extremes are "
            "observed; set extremes_only = true or remove extremes_tolerance");
  EXPECT_EQ(error_of(head + "[observe]\nextremes_max_steps = 50\n"),
            "study.toml:8: observe.extremes_max_steps: applies only when only the extremes are "
            "observed; set extremes_only = true or remove extremes_max_steps");
  EXPECT_EQ(error_of(extremes + "extremes_tolerance = 1e-16\n"),
            "study.toml:9: observe.extremes_tolerance: must be between 1e-14 and 0.001 (got "
            "1e-16): the relative error estimate at which the Lanczos iteration stops");
  EXPECT_EQ(error_of(extremes + "extremes_tolerance = 0.5\n").rfind(
                "study.toml:9: observe.extremes_tolerance: must be between", 0),
            0u);
  EXPECT_EQ(error_of(extremes + "extremes_tolerance = nan\n").rfind(
                "study.toml:9: observe.extremes_tolerance: must be between", 0),
            0u);
  EXPECT_EQ(error_of(extremes + "extremes_max_steps = 1\n"),
            "study.toml:9: observe.extremes_max_steps: must be between 2 and 100000 (got 1)");
  EXPECT_EQ(error_of(extremes + "extremes_max_steps = 2.5\n").rfind(
                "study.toml:9: observe.extremes_max_steps: must be an integer", 0),
            0u);
  const Job plain = parse_job(extremes, "study.toml");
  EXPECT_EQ(plain.observe.extremes_tolerance, 0.0);
  EXPECT_EQ(plain.observe.extremes_max_steps, 0);
  EXPECT_EQ(plain.canonical().find("extremes_tolerance"), std::string::npos);
  const Job tuned =
      parse_job(extremes + "extremes_tolerance = 1e-9\nextremes_max_steps = 300\n", "study.toml");
  EXPECT_EQ(tuned.observe.extremes_tolerance, 1e-9);
  EXPECT_EQ(tuned.observe.extremes_max_steps, 300);
  EXPECT_NE(tuned.canonical().find("observe: extremes_tolerance = "), std::string::npos);
  EXPECT_NE(tuned.canonical().find("observe: extremes_max_steps = 300\n"), std::string::npos);
  EXPECT_NE(tuned.canonical(), plain.canonical());
}

TEST(JobErrors, UnknownKeyInMatrix) {
  EXPECT_EQ(
      error_of(std::string(kGoodHead) + "[matrices.X]\nensemble = \"wishart_real\"\nratoi = 0.5\n"),
      "study.toml:7: matrices.X.ratoi: unknown key 'ratoi' (did you mean 'ratio'?); known "
      "keys for ensemble wishart_real: ensemble, ratio");
}

TEST(JobErrors, KeyThatDoesNotApply) {
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.X]\nensemble = \"gue\"\nratio = 0.5\n"),
            "study.toml:7: matrices.X.ratio: does not apply to ensemble gue (its keys: "
            "ensemble); remove it");
  EXPECT_EQ(error_of(std::string(kGoodHead) +
                     "[matrices.X]\nensemble = \"diagonal\"\nlaw = \"uniform\"\nlow = 0\n"
                     "high = 1\nvariance = 2\n"),
            "study.toml:10: matrices.X.variance: does not apply to law \"uniform\" (its keys: "
            "ensemble, law, low, high); remove it");
}

TEST(JobErrors, WrongTypes) {
  EXPECT_EQ(error_of("seed = \"2026\"\n"),
            "study.toml:1: seed: must be an integer ≥ 0 (got string \"2026\"); write the number "
            "without quotes");
  EXPECT_EQ(error_of("seed = 1\nsizes = [100, 200.5]\n"),
            "study.toml:2: sizes: must be a list of integers, e.g. [100, 200, 400] (got float "
            "200.5)");
  EXPECT_EQ(error_of(std::string(kGoodHead) +
                     "[matrices.X]\nensemble = \"gue\"\n"
                     "[matrices.Y]\nensemble = \"goe\"\n[run]\nforce_dense = \"yes\"\n"),
            "study.toml:10: run.force_dense: must be true or false (got string \"yes\")");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "matrices = 3\n"),
            "study.toml:5: matrices: must be a table (got integer 3); declare each matrix as "
            "[matrices.NAME] with ensemble = \"...\"");
}

TEST(JobErrors, Sizes) {
  EXPECT_EQ(
      error_of("seed = 1\nsizes = [100, 800, 400]\n"),
      "study.toml:2: sizes: must be strictly increasing (got 400 after 800); sort the ladder");
  EXPECT_EQ(error_of("seed = 1\nsizes = [100, 100]\n"),
            "study.toml:2: sizes: must be strictly increasing (got 100 twice); remove the "
            "repeated size");
  EXPECT_EQ(error_of("seed = 1\nsizes = [0, 100]\n"),
            "study.toml:2: sizes: every size must be at least 1 (got 0)");
  EXPECT_EQ(error_of("seed = 1\nsizes = [100, 2147483648]\n"),
            "study.toml:2: sizes: every size must be below 2^31 = 2147483648 (got 2147483648)");
  EXPECT_EQ(error_of("seed = 1\nsizes = []\n"),
            "study.toml:2: sizes: is empty; give at least one size, e.g. sizes = [100, 200, 400]");
  // An element of a list written over several lines is reported at its own line.
  EXPECT_EQ(error_of("seed = 1\nsizes = [\n  100,\n  50,\n]\n"),
            "study.toml:4: sizes: must be strictly increasing (got 50 after 100); sort the ladder");
}

TEST(JobErrors, Trials) {
  EXPECT_EQ(error_of("seed = 1\nsizes = [100, 200, 400]\ntrials = [10, 5]\n"),
            "study.toml:3: trials: has 2 entries but sizes has 3; give one per size or a single "
            "number");
  EXPECT_EQ(error_of("seed = 1\nsizes = [100]\ntrials = 0\n"),
            "study.toml:3: trials: must be at least 1 (got 0)");
  EXPECT_EQ(error_of("seed = 1\nsizes = [100, 200]\ntrials = [3, -1]\n"),
            "study.toml:3: trials: every entry must be at least 1 (got -1 for N = 200)");
}

TEST(JobErrors, Seed) {
  EXPECT_EQ(error_of("seed = -3\n"), "study.toml:1: seed: must be an integer ≥ 0 (got -3)");
}

TEST(JobErrors, MissingRequiredKeys) {
  EXPECT_EQ(error_of("sizes = [1]\ntrials = 1\n"),
            "study.toml: seed: missing; add seed = <integer ≥ 0>, e.g. seed = 1");
  EXPECT_EQ(error_of("seed = 1\n"),
            "study.toml: sizes: missing; add the ladder of sizes, e.g. sizes = [100, 200, 400]");
  EXPECT_EQ(error_of("seed = 1\nsizes = [1]\n"),
            "study.toml: trials: missing; add the number of trials per size, e.g. trials = 40");
  EXPECT_EQ(error_of("seed = 1\nsizes = [10]\ntrials = 2\n[matrices.X]\nensemble = \"gue\"\n"),
            "study.toml: expression: missing; add the expression to study, e.g. expression = "
            "\"X + Y\"");
  EXPECT_EQ(error_of(kGoodHead),
            "study.toml: matrices: missing; declare each matrix as [matrices.NAME] with ensemble "
            "= \"...\"");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices]\n"),
            "study.toml:5: matrices: declares no matrix; declare each matrix as [matrices.NAME] "
            "with ensemble = \"...\"");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.X]\nratio = 2\n"),
            "study.toml:5: matrices.X.ensemble: missing; add ensemble = \"...\" (known: gue, goe, "
            "wigner_rademacher, wishart_complex, wishart_real, ginibre_complex, ginibre_real, "
            "haar_unitary, haar_orthogonal, diagonal, beta_hermite, beta_laguerre, toeplitz, file, jacobi)");
  EXPECT_EQ(error_of("seed = 1\nsizes = [10]\ntrials = 2\nexpression = \"  \"\n"),
            "study.toml:4: expression: is empty; write the expression to study, e.g. expression "
            "= \"X + Y\"");
}

TEST(JobErrors, UnknownEnsemble) {
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.X]\nensemble = \"gaussian\"\n"),
            "study.toml:6: matrices.X.ensemble: unknown ensemble 'gaussian' (known: gue, goe, "
            "wigner_rademacher, wishart_complex, wishart_real, ginibre_complex, ginibre_real, "
            "haar_unitary, haar_orthogonal, diagonal, beta_hermite, beta_laguerre, toeplitz, file, jacobi)");
}

TEST(JobErrors, BadMatrixParameters) {
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.W]\nensemble = \"wishart_complex\"\n"
                                              "ratio = -0.5\n"),
            "study.toml:7: matrices.W.ratio: must be a positive number (got -0.5)");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.U]\nensemble = \"haar_unitary\"\n"
                                              "method = \"QR\"\n"),
            "study.toml:7: matrices.U.method: must be \"qr\" or \"polar\" (got \"QR\")");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.D]\nensemble = \"diagonal\"\n"
                                              "law = \"gauss\"\n"),
            "study.toml:7: matrices.D.law: must be one of \"atoms\", \"uniform\", \"semicircle\", "
            "\"marchenko_pastur\", \"file\", \"spiked\" (got \"gauss\")");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.D]\nensemble = \"diagonal\"\n"
                                              "law = \"uniform\"\nlow = 2\nhigh = 1\n"),
            "study.toml:9: matrices.D.high: must be greater than low (got low = 2, high = 1)");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.D]\nensemble = \"diagonal\"\n"
                                              "law = \"uniform\"\nlow = 2\n"),
            "study.toml:5: matrices.D.high: missing; law \"uniform\" needs both low and high, "
            "e.g. low = 0 and high = 1");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.D]\nensemble = \"diagonal\"\n"),
            "study.toml:5: matrices.D: a diagonal needs atoms = [[value, weight], ...] or a law = "
            "\"...\" (uniform, semicircle, marchenko_pastur, file, spiked); add one");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.D]\nensemble = \"diagonal\"\n"
                                              "atoms = [[1.0, 0.5, 3]]\n"),
            "study.toml:7: matrices.D.atoms: every atom must be a [value, weight] pair, e.g. "
            "atoms = [[1.0, 0.5], [-1.0, 0.5]] (got a list of 3)");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.D]\nensemble = \"diagonal\"\n"
                                              "atoms = [[1.0, 0.5], [2.0, -0.1]]\n"),
            "study.toml:7: matrices.D.atoms: every weight must be a finite number ≥ 0 (got -0.1 "
            "for value 2)");
}

TEST(ParseJob, SpikedLawReadsItsValuesAndBase) {
  const Job job = parse_job(std::string(kGoodHead) +
                                "[matrices.X]\nensemble = \"gue\"\n[matrices.Y]\n"
                                "ensemble = \"diagonal\"\nlaw = \"spiked\"\nspikes = [3, -1.5]\n"
                                "base = 0.25\n",
                            "study.toml");
  const auto& y = job.matrices[1];
  ASSERT_EQ(y.name, "Y");
  EXPECT_EQ(y.diagonal.kind, freegap::declarations::DiagonalLawKind::spiked);
  EXPECT_EQ(y.diagonal.spikes, (std::vector<double>{3.0, -1.5}));
  EXPECT_EQ(y.diagonal.base, 0.25);
  // The sampler's entries: the spikes in order, then the base.
  EXPECT_EQ(freegap::declarations::planned_entries(y, 4),
            (std::vector<double>{3.0, -1.5, 0.25, 0.25}));
}

TEST(JobErrors, SpikedLaw) {
  const std::string head = std::string(kGoodHead) + "[matrices.X]\nensemble = \"gue\"\n" +
                           "[matrices.Y]\nensemble = \"diagonal\"\nlaw = \"spiked\"\n";
  EXPECT_EQ(error_of(head),
            "study.toml:7: matrices.Y.spikes: missing; law \"spiked\" needs its values, e.g. "
            "spikes = [3.0] for one spike of value 3");
  EXPECT_EQ(error_of(head + "spikes = []\n"),
            "study.toml:10: matrices.Y.spikes: must hold 1 to 64 values (a finite rank; got 0); a "
            "share of N is a law: use law = \"atoms\"");
  std::string many = "spikes = [1";
  for (int i = 0; i < 64; ++i) many += ", 1";
  EXPECT_NE(error_of(head + many + "]\n").find("got 65"), std::string::npos);
  EXPECT_NE(error_of(head + "spikes = 3\n").find("matrices.Y.spikes: must be a list of numbers"),
            std::string::npos);
  EXPECT_NE(error_of(head + "spikes = [\"a\"]\n").find("matrices.Y.spikes"), std::string::npos);
  EXPECT_NE(error_of(head + "spikes = [1]\nbase = nan\n").find("matrices.Y.base"),
            std::string::npos);
  EXPECT_EQ(error_of(head + "spikes = [1]\natoms = [[1.0, 1.0]]\n"),
            "study.toml:11: matrices.Y.atoms: does not apply to law \"spiked\" (its keys: "
            "ensemble, law, spikes, base); remove it");
  // A rank above the smallest size.
  std::string ladder = head + "spikes = [1, 2, 3]\n";
  ladder.replace(ladder.find("[100, 200]"), 10, "[2, 200]");
  EXPECT_EQ(error_of(ladder),
            "study.toml:10: matrices.Y.spikes: has 3 values but the smallest size is N = 2; start "
            "the sizes at N ≥ the number of spikes");
}

TEST(ParseJob, ToeplitzReadsCoefficientsAndWrap) {
  const Job job = parse_job(std::string(kGoodHead) +
                                "[matrices.X]\nensemble = \"gue\"\n[matrices.Y]\n"
                                "ensemble = \"toeplitz\"\ncoefficients = [0, 1, 0.25]\n"
                                "circulant = true\n",
                            "study.toml");
  const auto& y = job.matrices[1];
  EXPECT_EQ(y.kind, freegap::declarations::Kind::toeplitz);
  EXPECT_EQ(y.coefficients, (std::vector<double>{0.0, 1.0, 0.25}));
  EXPECT_TRUE(y.circulant);
}

TEST(JobErrors, Toeplitz) {
  const std::string head = std::string(kGoodHead) + "[matrices.X]\nensemble = \"gue\"\n" +
                           "[matrices.Y]\nensemble = \"toeplitz\"\n";
  EXPECT_EQ(error_of(head),
            "study.toml:7: matrices.Y.coefficients: missing; a Toeplitz matrix needs c_0, c_1, …, "
            "e.g. coefficients = [0.0, 1.0] for the symbol 2 cos θ (ones beside the diagonal)");
  EXPECT_EQ(error_of(head + "coefficients = []\n"),
            "study.toml:9: matrices.Y.coefficients: must hold 1 to 17 numbers c_0 … c_k (got 0)");
  EXPECT_NE(error_of(head + "coefficients = [1]\ncirculant = 1\n").find("matrices.Y.circulant"),
            std::string::npos);
  EXPECT_NE(error_of(head + "coefficients = [1, \"x\"]\n").find("matrices.Y.coefficients"),
            std::string::npos);
  EXPECT_EQ(error_of(head + "coefficients = [1]\nratio = 2\n"),
            "study.toml:10: matrices.Y.ratio: does not apply to ensemble toeplitz (its keys: "
            "ensemble, coefficients, circulant); remove it");
}

TEST(JobErrors, WeightsNotSummingToOne) {
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.B]\nensemble = \"diagonal\"\n"
                                              "atoms = [[1.0, 0.5], [-1.0, 0.4]]\n"),
            "study.toml:7: matrices.B.atoms: weights must sum to 1 (got 0.9); rescale them");
}

TEST(JobErrors, MatrixNameNotAnIdentifier) {
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.2X]\nensemble = \"gue\"\n"),
            "study.toml:5: matrices.2X: matrix name '2X' must be a letter followed by letters, "
            "digits or '_'; rename the table");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices.my-matrix]\nensemble = \"gue\"\n"),
            "study.toml:5: matrices.my-matrix: matrix name 'my-matrix' must be a letter followed "
            "by letters, digits or '_'; rename the table");
}

std::string with_observe(const std::string& observe) {
  return std::string(kGoodHead) +
         "[matrices.X]\nensemble = \"gue\"\n[matrices.Y]\nensemble = \"goe\"\n[observe]\n" +
         observe;
}

TEST(JobErrors, ObserveSettings) {
  EXPECT_EQ(error_of(with_observe("range = [2.0, 1.0]\n")),
            "study.toml:10: observe.range: low must be less than high (got [2, 1]); write [low, "
            "high] with low < high");
  EXPECT_EQ(error_of(with_observe("range = [1, 1]\n")),
            "study.toml:10: observe.range: low must be less than high (got [1, 1]); write [low, "
            "high] with low < high");
  EXPECT_EQ(error_of(with_observe("range = \"full\"\n")),
            "study.toml:10: observe.range: must be \"auto\" or a list [low, high] (got \"full\")");
  // The histogram's own rule, from observe::uniform_edges, placed at the key.
  EXPECT_EQ(error_of(with_observe("range = [-1e308, 1e308]\n")),
            "study.toml:10: observe.range: histogram range is too wide for double (high - low "
            "overflows)");
  EXPECT_EQ(error_of(with_observe("bins = 0\n")),
            "study.toml:10: observe.bins: must be at least 1 (got 0)");
  EXPECT_EQ(error_of(with_observe("max_moment = 65\n")),
            "study.toml:10: observe.max_moment: must be between 0 and 64 (got 65)");
  EXPECT_EQ(error_of(with_observe("keep_spectra = -1\n")),
            "study.toml:10: observe.keep_spectra: must be at least 0 (got -1)");
  EXPECT_EQ(error_of(with_observe("keep_spectra = \"some\"\n")),
            "study.toml:10: observe.keep_spectra: must be \"auto\", \"all\", \"none\" or a "
            "number of trials ≥ 0 (got \"some\")");
  EXPECT_EQ(error_of(with_observe("keep_spectra = 1.5\n")),
            "study.toml:10: observe.keep_spectra: must be \"auto\", \"all\", \"none\" or an "
            "integer ≥ 0 (got float 1.5)");
  EXPECT_EQ(error_of(with_observe("spectrum = \"eigen\"\n")),
            "study.toml:10: observe.spectrum: must be \"auto\" or \"singular_values\" (got "
            "\"eigen\")");
  EXPECT_EQ(error_of(with_observe("range = [0, 1]\nmargin = 0.2\n")),
            "study.toml:11: observe.margin: applies only to range = \"auto\"; remove it or set "
            "range = \"auto\"");
  EXPECT_EQ(error_of(with_observe("margin = -0.2\n")),
            "study.toml:10: observe.margin: must be a finite number ≥ 0 (got -0.2)");
}

TEST(JobErrors, RunSettings) {
  const std::string head = std::string(kGoodHead) +
                           "[matrices.X]\nensemble = \"gue\"\n[matrices.Y]\nensemble = \"goe\"\n"
                           "[run]\n";
  EXPECT_EQ(error_of(head + "memory_per_rank = \"4 gigs\"\n"),
            "study.toml:10: run.memory_per_rank: cannot read '4 gigs' as an amount of memory; "
            "write a number and a unit, e.g. \"4 GiB\" (units: B, kB, MB, GB, TB, KiB, MiB, GiB, "
            "TiB)");
  EXPECT_EQ(error_of(head + "memory_per_rank = \"lots\"\n"),
            "study.toml:10: run.memory_per_rank: cannot read 'lots' as an amount of memory; "
            "write a number and a unit, e.g. \"4 GiB\" (units: B, kB, MB, GB, TB, KiB, MiB, GiB, "
            "TiB)");
  EXPECT_EQ(error_of(head + "memory_per_rank = \"0 GiB\"\n"),
            "study.toml:10: run.memory_per_rank: must be at least 1 byte (got '0 GiB')");
  EXPECT_EQ(
      error_of(head + "memory_per_rank = \"1e30 GiB\"\n"),
      "study.toml:10: run.memory_per_rank: is too large (got '1e30 GiB'); at most 8 EiB fits");
  EXPECT_EQ(error_of(head + "trials_per_unit = 0\n"),
            "study.toml:10: run.trials_per_unit: must be at least 1 (got 0)");
  EXPECT_EQ(error_of(head + "output = \"\"\n"),
            "study.toml:10: run.output: is empty; give the run file's path or remove the key");
}

TEST(JobErrors, EigenvalueFiles) {
  TempDir dir;
  const std::string head =
      std::string(kGoodHead) + "[matrices.E]\nensemble = \"diagonal\"\nlaw = \"file\"\n";
  const std::string missing = dir.write("missing.toml", head + "path = \"nowhere.txt\"\n");
  const std::string where = (dir.path() / "nowhere.txt").string();
  try {
    (void)load_job(missing);
    ADD_FAILURE() << "no error";
  } catch (const InputError& e) {
    EXPECT_EQ(std::string(e.what()),
              missing + ":8: matrices.E.path: cannot read eigenvalue file '" + where +
                  "': No such file or directory; a relative path is relative to the job file's "
                  "directory");
  }
  // A file that exists but holds something else: the sampler's message, placed in the job file.
  dir.write("bad.txt", "1.0 2.0\nthree\n");
  const std::string bad = dir.write("bad.toml", head + "path = \"bad.txt\"\n");
  const std::string bad_txt = (dir.path() / "bad.txt").string();
  try {
    (void)load_job(bad);
    ADD_FAILURE() << "no error";
  } catch (const InputError& e) {
    EXPECT_EQ(std::string(e.what()), bad + ":8: matrices.E.path: eigenvalue file '" + bad_txt +
                                         "' line 2: 'three' is not a finite number");
  }
  const std::string folder = dir.write("folder.toml", head + "path = \".\"\n");
  try {
    (void)load_job(folder);
    ADD_FAILURE() << "no error";
  } catch (const InputError& e) {
    EXPECT_EQ(std::string(e.what()), folder + ":8: matrices.E.path: '" +
                                         (dir.path() / ".").string() +
                                         "' is a directory; give the eigenvalue file's path");
  }
  EXPECT_EQ(error_of(head),
            "study.toml:5: matrices.E.path: missing; law \"file\" needs path = \"...\" (a text "
            "file of numbers, relative to the job file's directory)");
}

TEST(JobErrors, MissingJobFile) {
  TempDir dir;
  const std::string path = (dir.path() / "x.toml").string();
  try {
    (void)load_job(path);
    ADD_FAILURE() << "no error";
  } catch (const InputError& e) {
    EXPECT_EQ(std::string(e.what()),
              "cannot read job file '" + path + "': No such file or directory");
  }
}

TEST(JobErrors, NonTableSections) {
  EXPECT_EQ(error_of(std::string(kGoodHead) + "observe = 3\n[matrices.X]\nensemble = \"gue\"\n"),
            "study.toml:5: observe: must be a table (got integer 3); write [observe] and its keys "
            "under it");
  EXPECT_EQ(error_of(std::string(kGoodHead) + "[matrices]\nX = \"gue\"\n"),
            "study.toml:6: matrices.X: must be a table (got string \"gue\"); declare it as "
            "[matrices.X] with ensemble = \"...\" under it");
}

// ---- the hash -----------------------------------------------------------------------------------

const char* const kHashBase = R"(name = "base"
seed = 7
sizes = [100, 200]
trials = 10
expression = "B + U B U^*"

[matrices.B]
ensemble = "diagonal"
atoms = [[1.0, 0.5], [-1.0, 0.5]]

[matrices.U]
ensemble = "haar_unitary"

[observe]
bins = 100
max_moment = 6

[run]
output = "base.h5"
memory_per_rank = "1 GiB"
)";

std::string hash_of(const std::string& text) { return parse_job(text, "base.toml").hash(); }

std::string replaced(std::string text, const std::string& from, const std::string& to) {
  const auto at = text.find(from);
  EXPECT_NE(at, std::string::npos) << from;
  if (at != std::string::npos) text.replace(at, from.size(), to);
  return text;
}

TEST(JobHash, RunPathEntersOnlyWhenGiven) {
  // A job without [run] path keeps the hash it had before the key existed (its run files still
  // resume); "auto" is the same job; a forced path is another job.
  const std::string base = hash_of(kHashBase);
  const std::string with_auto = replaced(kHashBase, "memory_per_rank", "path = \"auto\"\nmemory_per_rank");
  const std::string with_dense = replaced(kHashBase, "memory_per_rank", "path = \"dense\"\nmemory_per_rank");
  EXPECT_EQ(hash_of(with_auto), base);
  EXPECT_NE(hash_of(with_dense), base);
  EXPECT_EQ(parse_job(kHashBase, "base.toml").canonical().find("path ="), std::string::npos);
  EXPECT_NE(parse_job(with_dense, "base.toml").canonical().find("path = dense\n"),
            std::string::npos);
}

TEST(JobHash, ExtremesOnlyEntersOnlyWhenSet) {
  // Other jobs keep their hash; an extremes-only job is another job, whose canonical text names
  // nothing it does not observe.
  const std::string base = hash_of(kHashBase);
  const std::string with_false = replaced(kHashBase, "[observe]", "[observe]\nextremes_only = false");
  EXPECT_EQ(hash_of(with_false), base);
  std::string only = kHashBase;
  only = only.substr(0, only.find("[observe]")) + "[observe]\nextremes_only = true\n" +
         only.substr(only.find("[run]"));
  const std::string canonical = parse_job(only, "base.toml").canonical();
  EXPECT_NE(canonical.find("observe: extremes_only = true; spectrum = auto\n"), std::string::npos)
      << canonical;
  EXPECT_EQ(canonical.find("bins ="), std::string::npos);
  EXPECT_NE(hash_of(only), base);
}

TEST(JobHash, IsSha256OfCanonicalText) {
  const Job job = parse_job(kHashBase, "base.toml");
  EXPECT_EQ(job.hash(), sha256_hex(job.canonical()));
  EXPECT_EQ(job.hash().size(), 64u);
  // The canonical text itself, so a change of format is a deliberate decision (every run file
  // made before would stop resuming).
  EXPECT_EQ(job.canonical(),
            "freegap job canonical 1\n"
            "seed = 7\n"
            "sizes = 100 200\n"
            "trials = 10 10\n"
            "trials_per_unit = 8\n"
            "matrix B: ensemble = diagonal; law = atoms; atoms = 1@0.5 -1@0.5\n"
            "matrix U: ensemble = haar_unitary; method = qr\n"
            "expression = 11:B + U B U^*\n"
            "observe: bins = 100; range = auto; margin = 0.10000000000000001; max_moment = 6; "
            "keep_spectra = 10; spectrum = auto\n"
            "force_dense = false\n");
}

TEST(JobHash, UnchangedByFormattingNameOutputAndMemory) {
  const std::string base = hash_of(kHashBase);
  // Everything reordered and reformatted: tables and keys in another order, comments, inline
  // tables, a trials list equal to the scalar, defaults written out.
  const std::string reformatted = R"(# a comment
[observe]
max_moment   =   6     # moments
bins = 100
range = "auto"
margin = 0.1
keep_spectra = "auto"

[matrices]
U = { ensemble = "haar_unitary", method = "qr" }

[matrices.B]
atoms = [
  [ 1.0, 0.5 ],
  [ -1, 5e-1 ],
]
ensemble = "diagonal"
law = "atoms"
)";
  const std::string top = R"(expression = "B + U B U^*"
trials = [10, 10]
sizes = [ 100,
          200 ]
seed = 7
[run]
trials_per_unit = 8
force_dense = false
)";
  EXPECT_EQ(hash_of(top + reformatted), base);
  EXPECT_EQ(hash_of(replaced(kHashBase, "name = \"base\"", "name = \"renamed study\"")), base);
  EXPECT_EQ(hash_of(replaced(kHashBase, "output = \"base.h5\"", "output = \"other/run.h5\"")),
            base);
  EXPECT_EQ(hash_of(replaced(kHashBase, "memory_per_rank = \"1 GiB\"", "")), base);
  EXPECT_EQ(hash_of(replaced(kHashBase, "\"1 GiB\"", "\"64 GiB\"")), base);
  EXPECT_EQ(parse_job(kHashBase, "elsewhere/other.toml").hash(), base);
}

TEST(JobHash, ChangedByEverythingThatDefinesTheNumbers) {
  const std::string base = hash_of(kHashBase);
  const std::pair<const char*, const char*> edits[] = {
      {"seed = 7", "seed = 8"},
      {"sizes = [100, 200]", "sizes = [100, 201]"},
      {"trials = 10", "trials = 11"},
      {"trials = 10", "trials = [10, 11]"},
      {"[-1.0, 0.5]", "[-1.5, 0.5]"},
      {"[[1.0, 0.5], [-1.0, 0.5]]", "[[1.0, 0.25], [-1.0, 0.75]]"},
      {"ensemble = \"haar_unitary\"", "ensemble = \"haar_orthogonal\""},
      {"ensemble = \"haar_unitary\"", "ensemble = \"haar_unitary\"\nmethod = \"polar\""},
      {"B + U B U^*", "B + U B U^* "},
      {"B + U B U^*", "B + U^* B U"},
      {"bins = 100", "bins = 101"},
      {"max_moment = 6", "max_moment = 7"},
      {"max_moment = 6", "max_moment = 6\nkeep_spectra = 1"},
      {"max_moment = 6", "max_moment = 6\nmargin = 0.2"},
      {"max_moment = 6", "max_moment = 6\nrange = [-3, 3]"},
      {"max_moment = 6", "max_moment = 6\nspectrum = \"singular_values\""},
      {"memory_per_rank", "trials_per_unit = 4\nmemory_per_rank"},
      {"memory_per_rank", "force_dense = true\nmemory_per_rank"},
  };
  std::set<std::string> seen = {base};
  for (const auto& [from, to] : edits) {
    const std::string h = hash_of(replaced(kHashBase, from, to));
    EXPECT_NE(h, base) << from << " -> " << to;
    EXPECT_TRUE(seen.insert(h).second) << "two edits gave the same hash: " << to;
  }
}

TEST(JobHash, FollowsSpikeValuesAndBase) {
  const std::string spiked = std::string(kGoodHead) + "[matrices.X]\nensemble = \"gue\"\n" +
                             "[matrices.Y]\nensemble = \"diagonal\"\nlaw = \"spiked\"\n" +
                             "spikes = [3.0]\n";
  const std::string base = hash_of(spiked);
  std::set<std::string> seen = {base};
  for (const auto& [from, to] : std::vector<std::pair<std::string, std::string>>{
           {"[3.0]", "[3.5]"}, {"[3.0]", "[3.0, 1.0]"}, {"[3.0]", "[3.0]\nbase = 1"}}) {
    const std::string h = hash_of(replaced(spiked, from, to));
    EXPECT_TRUE(seen.insert(h).second) << to;
  }
  EXPECT_EQ(hash_of(replaced(spiked, "[3.0]", "[3.0]\nbase = 0")), base);  // the default, given
}

TEST(JobHash, FollowsToeplitzCoefficientsAndWrap) {
  const std::string toeplitz = std::string(kGoodHead) + "[matrices.X]\nensemble = \"gue\"\n" +
                               "[matrices.Y]\nensemble = \"toeplitz\"\ncoefficients = [0, 1]\n";
  const std::string base = hash_of(toeplitz);
  std::set<std::string> seen = {base};
  for (const auto& [from, to] : std::vector<std::pair<std::string, std::string>>{
           {"[0, 1]", "[0, 1.5]"}, {"[0, 1]", "[0, 1, 0.5]"}, {"[0, 1]", "[0, 1]\ncirculant = true"}}) {
    EXPECT_TRUE(seen.insert(hash_of(replaced(toeplitz, from, to))).second) << to;
  }
  // The same matrix written otherwise: the default given, a trailing zero coefficient.
  EXPECT_EQ(hash_of(replaced(toeplitz, "[0, 1]", "[0, 1]\ncirculant = false")), base);
  EXPECT_EQ(hash_of(replaced(toeplitz, "[0, 1]", "[0, 1, 0]")), base);
}

TEST(JobHash, FollowsEigenvalueFileContent) {
  TempDir dir;
  const std::string job_text = R"(seed = 1
sizes = [4]
trials = 1
expression = "E"
[matrices.E]
ensemble = "diagonal"
law = "file"
path = "eigs.txt"
)";
  const std::string path = dir.write("study.toml", job_text);
  dir.write("eigs.txt", "1 2 3 4\n");
  const std::string first = load_job(path).hash();
  // The same numbers in another order, spacing and with comments: the sampler sorts them, so the
  // numbers the study uses are the same and so is the hash.
  dir.write("eigs.txt", "# same numbers\n4\n3\n2 1  # shuffled\n");
  EXPECT_EQ(load_job(path).hash(), first);
  dir.write("eigs.txt", "1 2 3 4.5\n");
  const std::string edited = load_job(path).hash();
  EXPECT_NE(edited, first);
  dir.write("eigs.txt", "1 2 3 4 4\n");
  EXPECT_NE(load_job(path).hash(), first);
  EXPECT_NE(load_job(path).hash(), edited);
}

// ---- matrices from files -----------------------------------------------------------------------

// A 3 × 3 symmetric matrix in Matrix Market's coordinate form (lower triangle) and array form
// (every entry, column by column): the same matrix.
constexpr const char* kCoordinate = R"(%%MatrixMarket matrix coordinate real symmetric
% a comment
3 3 5
1 1 2
2 1 0.5
2 2 1
3 2 -1
3 3 3
)";
constexpr const char* kArray = R"(%%MatrixMarket matrix array real general
3 3
2
0.5
0
0.5
1
-1
0
-1
3
)";

std::string file_job(const std::string& sizes, const std::string& matrix_lines) {
  return "seed = 1\nsizes = " + sizes + "\ntrials = 1\nexpression = \"F\"\n[matrices.F]\n"
         "ensemble = \"file\"\n" + matrix_lines;
}

TEST(ParseJob, MatrixFile) {
  TempDir dir;
  dir.write("m.mtx", kCoordinate);
  const Job job = load_job(dir.write("study.toml", file_job("[3, 6]", "path = \"m.mtx\"\n")));
  ASSERT_EQ(job.matrices.size(), 1u);
  const auto& f = job.matrices[0].file;
  EXPECT_EQ(f.path, (dir.path() / "m.mtx").string());
  EXPECT_FALSE(f.complex);
  EXPECT_EQ(f.file_size, 3);
  EXPECT_EQ(f.reference_size, 6);
  // The SHA-256 of the entries as little-endian doubles, column by column, computed with numpy
  // and hashlib: hashlib.sha256(np.asfortranarray(A).tobytes(order='F')).hexdigest().
  EXPECT_EQ(job.file_digests[0],
            "3x3 real 84ee86394cb4d3a53dda85d44155ebbb078a393a93ed1c7ca84dd6371463e83e");
  EXPECT_NE(job.canonical().find("matrix F: ensemble = file; one file; values = 3x3 real 84ee"),
            std::string::npos)
      << job.canonical();
}

TEST(JobHash, FollowsMatrixFileContentNotItsForm) {
  TempDir dir;
  dir.write("a.mtx", kCoordinate);
  dir.write("b.mtx", kArray);
  const std::string first = load_job(dir.write("a.toml", file_job("[3]", "path = \"a.mtx\"\n"))).hash();
  EXPECT_EQ(load_job(dir.write("b.toml", file_job("[3]", "path = \"b.mtx\"\n"))).hash(), first);
  std::string edited = kCoordinate;
  edited.replace(edited.find("3 3 3\n"), 6, "3 3 4\n");
  dir.write("a.mtx", edited);
  EXPECT_NE(load_job(dir.path() / "a.toml").hash(), first);
  // One file for every size and one file per size are different studies.
  dir.write("c_3.mtx", kCoordinate);
  EXPECT_NE(load_job(dir.write("c.toml", file_job("[3]", "path = \"c_{N}.mtx\"\n"))).hash(), first);
}

TEST(JobErrors, MatrixFiles) {
  TempDir dir;
  dir.write("m.mtx", kCoordinate);
  auto error_in = [&](const std::string& sizes, const std::string& lines) {
    const std::string path = dir.write("bad.toml", file_job(sizes, lines));
    try {
      (void)load_job(path);
    } catch (const InputError& e) {
      const std::string what = e.what();
      EXPECT_EQ(what.rfind(path + ":", 0), 0u) << what;
      return what.substr(path.size() + 1);
    }
    return std::string("no error");
  };
  const std::string m = (dir.path() / "m.mtx").string();
  EXPECT_EQ(error_in("[3]", ""),
            "5: matrices.F.path: missing; ensemble \"file\" needs path = \"...\" (an .h5, .npy or "
            ".mtx file, relative to the job file's directory; {N} in it stands for the size)");
  EXPECT_EQ(error_in("[4]", "path = \"m.mtx\"\n"),
            "7: matrices.F.path: matrix file '" + m +
                "': holds 3 × 3; the sizes must be multiples of 3 (got N = 4), or give one file "
                "per size with {N} in the path");
  dir.write("p_4.mtx", kCoordinate);
  EXPECT_EQ(error_in("[4]", "path = \"p_{N}.mtx\"\n"),
            "7: matrices.F.path: matrix file '" + (dir.path() / "p_4.mtx").string() +
                "': holds 3 × 3, but it is the file for size N = 4; write the N × N matrix there");
  std::string skew = kArray;
  skew.replace(skew.find("-1\n0\n"), 5, "-1.5\n0\n");  // A(3,2) = −1.5, A(2,3) = −1
  dir.write("skew.mtx", skew);
  EXPECT_EQ(error_in("[3]", "path = \"skew.mtx\"\n"),
            "7: matrices.F.path: matrix file '" + (dir.path() / "skew.mtx").string() +
                "': is not self-adjoint: entries (3, 2) and (2, 3) differ by 0.5; freegap reads "
                "real symmetric or complex Hermitian matrices (write (A + A^*)/2)");
  EXPECT_EQ(error_in("[3]", "path = \"m.mtx\"\ndataset = \"A\"\n"),
            "8: matrices.F.dataset: applies to HDF5 files only (.h5, .hdf5); remove it");
  const std::string unknown = error_in("[3]", "path = \"m.txt\"\n");
  EXPECT_EQ(unknown.rfind("7: matrices.F.path: matrix file '", 0), 0u) << unknown;
  const std::string missing = error_in("[3]", "path = \"gone.npy\"\n");
  EXPECT_EQ(missing.rfind("7: matrices.F.path: matrix file '" + (dir.path() / "gone.npy").string() +
                              "': ", 0), 0u) << missing;
  EXPECT_NE(missing.find("No such file"), std::string::npos) << missing;
  EXPECT_EQ(error_in("[3]", "path = \"m.mtx\"\ncirculant = true\n").rfind("8: matrices.F.circulant", 0), 0u);
}

TEST(ParseJob, PeriodicJacobi) {
  const std::string head = "seed = 1\nsizes = [6]\ntrials = 1\nexpression = \"J\"\n[matrices.J]\n"
                           "ensemble = \"jacobi\"\n";
  const Job job = parse_job(head + "diagonal = [0, 1.5]\noff_diagonal = [1, 0.4]\n", "study.toml");
  ASSERT_EQ(job.matrices.size(), 1u);
  EXPECT_EQ(job.matrices[0].jacobi_diagonal, (std::vector<double>{0.0, 1.5}));
  EXPECT_EQ(job.matrices[0].jacobi_off_diagonal, (std::vector<double>{1.0, 0.4}));
  EXPECT_NE(job.canonical().find("matrix J: ensemble = jacobi; diagonal = 0 1.5; off_diagonal = 1 0.4"),
            std::string::npos)
      << job.canonical();
  EXPECT_EQ(error_of(head + "diagonal = [0, 1.5]\noff_diagonal = [1]\n"),
            "study.toml:8: matrices.J.off_diagonal: has 1 numbers and diagonal 2; give both one "
            "number per site of the period (b_k joins site k to site k + 1)");
  EXPECT_EQ(error_of(head + "diagonal = [0]\n"),
            "study.toml:5: matrices.J.off_diagonal: missing; a Jacobi matrix needs its off-diagonal "
            "b_0, …, b_{p-1}, e.g. off_diagonal = [1.0, 0.6]");
  EXPECT_EQ(error_of(head + "diagonal = [0]\noff_diagonal = [0]\n"),
            "study.toml:5: matrices.J: off-diagonal coefficient b_0 is 0, which splits the matrix "
            "into blocks; give every b_k a non-zero value");
}

// ---- the examples -------------------------------------------------------------------------------

TEST(JobExamples, EveryExampleLoads) {
  const fs::path jobs = fs::path(FREEGAP_SOURCE_DIR) / "jobs";
  int count = 0;
  for (const auto& entry : fs::directory_iterator(jobs)) {
    if (entry.path().extension() != ".toml") continue;
    ++count;
    SCOPED_TRACE(entry.path().string());
    try {
      const Job job = load_job(entry.path().string());
      EXPECT_FALSE(job.name.empty());
      EXPECT_FALSE(job.expression.empty());
      EXPECT_FALSE(job.matrices.empty());
      EXPECT_EQ(job.trials.size(), job.sizes.size());
      EXPECT_EQ(job.hash().size(), 64u);
      EXPECT_NE(job.text.find('#'), std::string::npos) << "examples are commented";
    } catch (const InputError& e) {
      ADD_FAILURE() << e.what();
    }
  }
  EXPECT_GE(count, 3);
}

}  // namespace

// keep_spectra's rules (job.hpp): "all" and "none" are every trial and no trial; "auto" keeps
// every trial while the job's spectra take at most kKeptSpectraBudget (256 MiB) and otherwise the
// first k trials of each size with the largest k that fits: sizes 8192 and 16384 with 1000
// trials each would take 8·1000·24576 = 197 MB, within; with 20000 trials 3.9 GB, and
// 8·k·24576 ≤ 2^28 gives k = 1365.
TEST(ParseJob, KeepSpectraRules) {
  const auto job_with = [](const std::string& sizes, const std::string& keep) {
    return parse_job("seed = 1\nsizes = " + sizes + "\ntrials = [200, 200]\nexpression = \"X\"\n"
                     "[matrices.X]\nensemble = \"gue\"\n" + keep, "keep.toml");
  };
  EXPECT_EQ(job_with("[100, 200]", "").observe.keep_spectra, 200);
  EXPECT_EQ(job_with("[100, 200]", "[observe]\nkeep_spectra = \"none\"\n").observe.keep_spectra, 0);
  EXPECT_EQ(job_with("[100, 200]", "[observe]\nkeep_spectra = \"all\"\n").observe.keep_spectra, 200);
  const Job first = job_with("[100, 200]", "[observe]\nkeep_spectra = 7\n");
  EXPECT_EQ(first.observe.keep_spectra, 7);
  EXPECT_EQ(first.observe.keep_spectra_rule, "first k");
  // Sizes above kKeptSpectraMaxN = 16384 keep none by default (the tridiagonal path's spectra).
  EXPECT_EQ(job_with("[1000000, 2000000]", "").observe.keep_spectra, 0);
  EXPECT_EQ(job_with("[1000, 16385]", "").observe.keep_spectra, 0);
  EXPECT_EQ(job_with("[1000, 16384]", "").observe.keep_spectra, 200);
  EXPECT_EQ(job_with("[1000000, 2000000]", "[observe]\nkeep_spectra = \"all\"\n").observe.keep_spectra, 200);
  const auto with_trials = [](const std::string& trials) {
    return parse_job("seed = 1\nsizes = [8192, 16384]\ntrials = " + trials +
                     "\nexpression = \"X\"\n[matrices.X]\nensemble = \"gue\"\n", "keep.toml");
  };
  EXPECT_EQ(with_trials("1000").observe.keep_spectra, 1000);
  EXPECT_EQ(with_trials("20000").observe.keep_spectra, 1365);
  // "all" and an explicit count equal to the trials define the same numbers: the same hash.
  EXPECT_EQ(job_with("[100, 200]", "[observe]\nkeep_spectra = \"all\"\n").hash(),
            job_with("[100, 200]", "[observe]\nkeep_spectra = 200\n").hash());
}
