// The run file: round trip, order independence, resume, crash safety and refusals.
//
// The data of every unit comes from tests/support/store_sample.hpp, a deterministic function of
// (size, unit), so any process can recompute what a writer wrote.
#include <fcntl.h>
#include <gtest/gtest.h>
#include <hdf5.h>
#include <signal.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <functional>
#include <iterator>
#include <random>
#include <string>
#include <thread>
#include <vector>

#include "../../src/store/contained.hpp"
#include "freegap/errors.hpp"
#include "freegap/store.hpp"
#include "freegap/version.hpp"
#include "store_sample.hpp"

namespace {

namespace fs = std::filesystem;
using freegap::Error;
using freegap::InputError;
using freegap::observe::Observations;
using freegap::store::RunFile;
using freegap::store::RunHeader;

// A fresh directory per test, removed afterwards.
class TempDir {
 public:
  TempDir() {
    std::string pattern = (fs::temp_directory_path() / "freegap-store-XXXXXX").string();
    if (::mkdtemp(pattern.data()) == nullptr) throw std::runtime_error("mkdtemp failed");
    path_ = pattern;
  }
  ~TempDir() {
    std::error_code ignored;
    fs::permissions(path_, fs::perms::owner_all, fs::perm_options::add, ignored);
    for (const auto& entry : fs::directory_iterator(path_, ignored)) {
      fs::permissions(entry.path(), fs::perms::owner_all, fs::perm_options::add, ignored);
    }
    fs::remove_all(path_, ignored);
  }
  std::string file(const std::string& name) const { return (path_ / name).string(); }
  std::vector<std::string> entries() const {
    std::vector<std::string> names;
    for (const auto& entry : fs::directory_iterator(path_)) {
      names.push_back(entry.path().filename().string());
    }
    std::sort(names.begin(), names.end());
    return names;
  }

 private:
  fs::path path_;
};

bool same_bits(const std::vector<double>& a, const std::vector<double>& b) {
  return a.size() == b.size() &&
         (a.empty() || std::memcmp(a.data(), b.data(), a.size() * sizeof(double)) == 0);
}
bool same_bits(double a, double b) { return std::memcmp(&a, &b, sizeof a) == 0; }

// Bit-for-bit equality of observations (NaN extremes of failed trials included).
void expect_identical(const Observations& got, const Observations& want) {
  EXPECT_TRUE(got.config == want.config);
  EXPECT_TRUE(got.histogram == want.histogram);
  ASSERT_EQ(got.trials.size(), want.trials.size());
  for (std::size_t i = 0; i < got.trials.size(); ++i) {
    const auto& g = got.trials[i];
    const auto& w = want.trials[i];
    SCOPED_TRACE("row " + std::to_string(i) + ", trial " + std::to_string(w.trial));
    EXPECT_EQ(g.trial, w.trial);
    EXPECT_EQ(g.failed, w.failed);
    EXPECT_EQ(g.reason, w.reason);
    EXPECT_TRUE(same_bits(g.moments, w.moments));
    EXPECT_TRUE(same_bits(g.min, w.min));
    EXPECT_TRUE(same_bits(g.max, w.max));
    EXPECT_TRUE(same_bits(g.norm, w.norm));
    EXPECT_TRUE(same_bits(g.spectrum, w.spectrum));
  }
}

// Merges the sample units `units` of a size in the given order, as a runner would in memory.
Observations merged(const RunHeader& h, std::size_t size, const std::vector<std::int64_t>& units) {
  auto obs = freegap::observe::start_observations(h.sizes[size].observe);
  for (const auto u : units) freegap::observe::merge_into(obs, store_sample::unit(h, size, u).obs);
  return obs;
}

std::vector<std::int64_t> all_units(const RunHeader& h, std::size_t size) {
  std::vector<std::int64_t> units(static_cast<std::size_t>(h.sizes[size].units()));
  for (std::size_t i = 0; i < units.size(); ++i) units[i] = static_cast<std::int64_t>(i);
  return units;
}

// Every (size, unit) of a header, shuffled by a fixed seed.
std::vector<std::pair<std::size_t, std::int64_t>> shuffled_units(const RunHeader& h,
                                                                 std::uint64_t seed) {
  std::vector<std::pair<std::size_t, std::int64_t>> order;
  for (std::size_t s = 0; s < h.sizes.size(); ++s) {
    for (std::int64_t u = 0; u < h.sizes[s].units(); ++u) order.emplace_back(s, u);
  }
  std::mt19937_64 generator(seed);
  std::shuffle(order.begin(), order.end(), generator);
  return order;
}

void write_units(RunFile& file, const std::vector<std::pair<std::size_t, std::int64_t>>& order,
                 int rank = 0) {
  for (const auto& [s, u] : order) {
    file.write_unit(store_sample::unit(file.header(), s, u),
                    {rank, "node" + std::to_string(rank), 0.5 + static_cast<double>(u)});
  }
}

void write_whole_run(const std::string& path, std::uint64_t seed, std::int64_t scale = 1) {
  auto file = RunFile::create(path, store_sample::header(scale));
  file.begin_session(2, {"node0", "node1"});
  write_units(file, shuffled_units(file.header(), seed));
  file.end_session("finished");
}

template <typename E>
std::string message_of_type(const std::function<void()>& action) {
  try {
    action();
  } catch (const E& e) {
    return e.what();
  } catch (const std::exception& e) {
    return std::string("(wrong exception type) ") + e.what();
  }
  return "(no exception)";
}

std::string read_bytes(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  return {std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>()};
}

void write_bytes(const std::string& path, const std::string& bytes) {
  std::ofstream out(path, std::ios::binary | std::ios::trunc);
  out << bytes;
}

// Content and modification time, to prove a refused file was not touched.
struct Snapshot {
  std::string bytes;
  std::int64_t mtime_ns = 0;
  static Snapshot of(const std::string& path) {
    struct stat info {};
    ::stat(path.c_str(), &info);
    return {read_bytes(path),
            static_cast<std::int64_t>(info.st_mtim.tv_sec) * 1'000'000'000 + info.st_mtim.tv_nsec};
  }
  bool operator==(const Snapshot&) const = default;
};

int run_status(const std::string& command) {
  const int status = std::system(command.c_str());
  return WIFEXITED(status) ? WEXITSTATUS(status) : -1;
}

int h5diff(const std::string& a, const std::string& b, bool exclude_provenance) {
  return run_status(std::string("h5diff -q ") +
                    (exclude_provenance ? "--exclude-path /provenance " : "") + "'" + a + "' '" +
                    b + "'");
}

// ---------------------------------------------------------------------------------------------

TEST(Store, RoundTripOutOfOrderIsBitIdentical) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  write_whole_run(path, 11);
  const auto header = store_sample::header();

  auto file = RunFile::open_read(path);
  EXPECT_TRUE(file.complete());
  const RunHeader& read = file.header();
  EXPECT_EQ(read.job_text, header.job_text);
  EXPECT_EQ(read.job_canonical, header.job_canonical);
  EXPECT_EQ(read.job_hash, header.job_hash);
  EXPECT_EQ(read.expression, "A + B");
  EXPECT_EQ(read.spectrum, freegap::observe::SpectrumKind::eigenvalues);
  EXPECT_TRUE(read.self_adjoint);
  EXPECT_EQ(read.metadata, header.metadata);
  EXPECT_EQ(read.tool_version, freegap::tool_version);
  EXPECT_EQ(read.git_revision, freegap::git_revision);
  ASSERT_EQ(read.sizes.size(), 2u);
  EXPECT_TRUE(read.sizes[0] == header.sizes[0]);
  EXPECT_TRUE(read.sizes[1] == header.sizes[1]);
  EXPECT_EQ(read.sizes[0].units(), 6);
  EXPECT_EQ(read.sizes[0].keep_count(), 5);

  for (std::size_t s = 0; s < 2; ++s) {
    SCOPED_TRACE("size " + std::to_string(s));
    auto units = all_units(header, s);
    std::reverse(units.begin(), units.end());  // merge order must not matter either
    const auto want = merged(header, s, units);
    const auto got = file.read_observations(s);
    expect_identical(got, want);
    // The sample has failures of both kinds and kept spectra; make sure they were exercised.
    if (s == 0) {
      EXPECT_TRUE(got.trials[3].failed);  // NaN in the spectrum, kept
      EXPECT_EQ(got.trials[3].spectrum.size(), 6u);
      EXPECT_EQ(got.trials[5].reason, "solver stopped after 30 sweeps");
      EXPECT_TRUE(got.trials[5].spectrum.empty());
      EXPECT_EQ(got.trials[22].spectrum.size(), 6u);
      EXPECT_GT(got.histogram.above, 0);
    }
  }
}

TEST(Store, ReadsOnlyCommittedUnits) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  const auto header = store_sample::header();
  {
    auto file = RunFile::create(path, header);
    file.begin_session(1, {"node0"});
    write_units(file, {{0, 4}, {0, 1}, {1, 2}});
    file.end_session("interrupted");
  }
  auto file = RunFile::open_read(path);
  EXPECT_FALSE(file.complete());
  EXPECT_EQ(file.committed(0), (std::vector<bool>{false, true, false, false, true, false}));
  EXPECT_EQ(file.committed(1), (std::vector<bool>{false, false, true, false}));
  expect_identical(file.read_observations(0), merged(header, 0, {1, 4}));
  expect_identical(file.read_observations(1), merged(header, 1, {2}));
}

TEST(Store, FileDoesNotDependOnOrderOrSessions) {
  TempDir dir;
  const auto a = dir.file("a.h5");
  const auto b = dir.file("b.h5");
  write_whole_run(a, 1);
  {
    // b: another order, split over two sessions with different rank counts.
    const auto order = shuffled_units(store_sample::header(), 2);
    const auto half = static_cast<std::ptrdiff_t>(order.size() / 2);
    {
      auto file = RunFile::create(b, store_sample::header());
      file.begin_session(3, {"x", "y", "z"});
      write_units(file, {order.begin(), order.begin() + half}, 2);
    }  // closing with the session open records it as interrupted
    auto file = RunFile::open_for_resume(b, store_sample::header());
    file.begin_session(1, {"w"});
    write_units(file, {order.begin() + half, order.end()}, 0);
    file.end_session("finished");
  }
  EXPECT_EQ(h5diff(a, b, true), 0);
  EXPECT_EQ(h5diff(a, b, false), 1);  // the provenance differs

  // h5diff does see a difference outside /provenance: a file missing one unit.
  const auto c = dir.file("c.h5");
  {
    auto file = RunFile::create(c, store_sample::header());
    file.begin_session(1, {"node0"});
    auto order = shuffled_units(file.header(), 1);
    order.pop_back();
    write_units(file, order);
    file.end_session("finished");
  }
  EXPECT_EQ(h5diff(a, c, true), 1);

  const auto provenance = RunFile::open_read(b).read_provenance();
  ASSERT_EQ(provenance.sessions.size(), 2u);
  EXPECT_EQ(provenance.sessions[0].status, "interrupted");
  EXPECT_EQ(provenance.sessions[0].ranks, 3);
  EXPECT_EQ(provenance.sessions[0].hosts, (std::vector<std::string>{"x", "y", "z"}));
  EXPECT_FALSE(provenance.sessions[0].ended.empty());
  EXPECT_EQ(provenance.sessions[1].status, "finished");
  EXPECT_EQ(provenance.sessions[1].tool_version, freegap::tool_version);
  EXPECT_EQ(provenance.units.size(), 10u);
  EXPECT_EQ(provenance.units[0].session, 0);
  EXPECT_EQ(provenance.units[0].rank, 2);
  EXPECT_EQ(provenance.units[0].host, "node2");
  EXPECT_EQ(provenance.units.back().session, 1);
  EXPECT_FALSE(provenance.created.empty());
}

// Writes junk into the rows of an uncommitted unit, as a torn write could leave them.
void scribble_on_unit(const std::string& path, std::int64_t first_trial, std::int64_t rows) {
  const hid_t file = H5Fopen(path.c_str(), H5F_ACC_RDWR, H5P_DEFAULT);
  ASSERT_GE(file, 0);
  for (const char* name : {"sizes/0/min", "sizes/0/max", "sizes/0/norm"}) {
    const hid_t dataset = H5Dopen2(file, name, H5P_DEFAULT);
    const hid_t space = H5Dget_space(dataset);
    const hsize_t start[1] = {static_cast<hsize_t>(first_trial)};
    const hsize_t count[1] = {static_cast<hsize_t>(rows)};
    H5Sselect_hyperslab(space, H5S_SELECT_SET, start, nullptr, count, nullptr);
    const hid_t memory = H5Screate_simple(1, count, nullptr);
    const std::vector<double> junk(static_cast<std::size_t>(rows), 999.0);
    EXPECT_GE(H5Dwrite(dataset, H5T_NATIVE_DOUBLE, memory, space, H5P_DEFAULT, junk.data()), 0);
    H5Sclose(memory);
    H5Sclose(space);
    H5Dclose(dataset);
  }
  H5Fclose(file);
}

TEST(Store, ResumeIgnoresUncommittedRowsAndCompletes) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  const auto header = store_sample::header();
  {
    auto file = RunFile::create(path, header);
    file.begin_session(1, {"node0"});
    write_units(file, {{0, 0}, {0, 2}, {1, 3}});
  }
  scribble_on_unit(path, 4, 4);  // unit 1 of size 0: rows written, never committed
  {
    auto file = RunFile::open_for_resume(path, header);
    EXPECT_EQ(file.committed(0), (std::vector<bool>{true, false, true, false, false, false}));
    EXPECT_EQ(file.committed(1), (std::vector<bool>{false, false, false, true}));
    expect_identical(file.read_observations(0), merged(header, 0, {0, 2}));
    file.begin_session(1, {"node0"});
    EXPECT_EQ(message_of_type<Error>([&] {
                file.write_unit(store_sample::unit(header, 0, 2), {0, "node0", 1.0});
              }),
              "cannot write unit 2 of size 0 to run file '" + path + "': it is already committed");
    for (std::size_t s = 0; s < 2; ++s) {
      const auto flags = file.committed(s);
      for (std::size_t u = 0; u < flags.size(); ++u) {
        if (!flags[u]) {
          file.write_unit(store_sample::unit(header, s, static_cast<std::int64_t>(u)),
                          {0, "node0", 1.0});
        }
      }
    }
    EXPECT_TRUE(file.complete());
    file.end_session("finished");
  }
  auto file = RunFile::open_read(path);
  EXPECT_TRUE(file.complete());
  for (std::size_t s = 0; s < 2; ++s) {
    expect_identical(file.read_observations(s), merged(header, s, all_units(header, s)));
  }
  // Identical to a run that never stopped.
  const auto clean = dir.file("clean.h5");
  write_whole_run(clean, 5);
  EXPECT_EQ(h5diff(clean, path, true), 0);
}

TEST(Store, KilledAndTornSessionRowsReadAsKilled) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  {
    auto file = RunFile::create(path, store_sample::header());
    file.begin_session(1, {"node0"});
    write_units(file, {{0, 0}});
    file.end_session("finished");
    file.begin_session(2, {"node0", "node1"});
    write_units(file, {{0, 1}});
  }
  {
    // A writer killed with its session open leaves the row "running"; one killed while
    // appending its row leaves a row of fill values. Make both.
    const hid_t file = H5Fopen(path.c_str(), H5F_ACC_RDWR, H5P_DEFAULT);
    const hid_t sessions = H5Dopen2(file, "provenance/sessions", H5P_DEFAULT);
    const hsize_t three[1] = {3};
    ASSERT_GE(H5Dset_extent(sessions, three), 0);
    const hid_t status_type = H5Tcreate(H5T_COMPOUND, sizeof(char*));
    const hid_t string = H5Tcopy(H5T_C_S1);
    H5Tset_size(string, H5T_VARIABLE);
    H5Tset_cset(string, H5T_CSET_UTF8);
    H5Tinsert(status_type, "status", 0, string);
    const hid_t space = H5Dget_space(sessions);
    const hsize_t row[1] = {1};
    const hsize_t one[1] = {1};
    H5Sselect_hyperslab(space, H5S_SELECT_SET, row, nullptr, one, nullptr);
    const hid_t memory = H5Screate_simple(1, one, nullptr);
    const char* running = "running";
    ASSERT_GE(H5Dwrite(sessions, status_type, memory, space, H5P_DEFAULT, &running), 0);
    H5Sclose(memory);
    H5Sclose(space);
    H5Tclose(string);
    H5Tclose(status_type);
    H5Dclose(sessions);
    H5Fclose(file);
  }
  const auto read = RunFile::open_read(path).read_provenance().sessions;
  ASSERT_EQ(read.size(), 3u);
  EXPECT_EQ(read[0].status, "finished");
  EXPECT_EQ(read[1].status, "killed");  // stored "running", a later row follows
  EXPECT_EQ(read[1].ranks, 2);
  EXPECT_EQ(read[1].hosts, (std::vector<std::string>{"node0", "node1"}));
  EXPECT_EQ(read[2].status, "killed");  // torn: no status
  {
    auto file = RunFile::open_for_resume(path, store_sample::header());
    file.begin_session(1, {"node9"});
    // The open session is the last row and reads "running".
    EXPECT_EQ(file.read_provenance().sessions.back().status, "running");
    file.end_session("finished");
  }
  const auto after = RunFile::open_read(path).read_provenance().sessions;
  ASSERT_EQ(after.size(), 4u);
  EXPECT_EQ(after[1].status, "killed");
  EXPECT_EQ(after[2].status, "killed");
  EXPECT_EQ(after[3].status, "finished");
  EXPECT_EQ(after[3].hosts, std::vector<std::string>{"node9"});
}

TEST(Store, WriteUnitRefusesRowsThatDoNotFit) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  const auto header = store_sample::header();
  auto file = RunFile::create(path, header);
  EXPECT_EQ(message_of_type<Error>([&] {
              file.write_unit(store_sample::unit(header, 0, 0), {0, "n", 1.0});
            }),
            "cannot write unit 0 of size 0 to run file '" + path +
                "': no session is open (call begin_session first)");
  file.begin_session(1, {"n"});
  auto wrong = store_sample::unit(header, 0, 1);
  wrong.unit = 2;  // unit 1's rows under unit 2's index
  EXPECT_EQ(
      message_of_type<Error>([&] {
        file.write_unit(wrong, {0, "n", 1.0});
      }),
      "cannot write unit 2 of size 0 to run file '" + path + "': row 0 holds trial 4, expected 8");
  auto other = store_sample::unit(header, 1, 0);
  other.size_index = 0;
  EXPECT_EQ(message_of_type<Error>([&] {
              file.write_unit(other, {0, "n", 1.0});
            }),
            "cannot write unit 0 of size 0 to run file '" + path +
                "': its observe configuration differs from the file's");
  EXPECT_EQ(file.committed(0), std::vector<bool>(6, false));
}

// ---------------------------------------------------------------------------------------------
// Crash safety: SIGKILL a writer at seeded random moments; after every kill the file opens and
// every committed unit holds exactly what the writer wrote; a final resume completes it and the
// result equals an uninterrupted run outside /provenance.

TEST(Store, SurvivesKillsAtRandomMoments) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  // 1380 + 600 trials in 345 + 200 units; if the writer finishes before 20 kills, fewer kills.
  constexpr std::int64_t kScale = 60;
  const auto header = store_sample::header(kScale);

  // What each unit holds, computed once.
  std::vector<std::vector<Observations>> expected(header.sizes.size());
  for (std::size_t s = 0; s < header.sizes.size(); ++s) {
    for (std::int64_t u = 0; u < header.sizes[s].units(); ++u) {
      expected[s].push_back(store_sample::unit(header, s, u).obs);
    }
  }

  // Created here, so that every kill lands in a resume: opening, the session record or units.
  // (Creation is all-or-nothing: the file appears by rename only when complete.)
  RunFile::create(path, header);

  std::mt19937_64 delays(20260131);
  std::uniform_int_distribution<int> delay_us(2'000, 100'000);
  constexpr int kKills = 20;
  int killed_while_running = 0;
  int rounds = 0;
  for (int round = 0; round < kKills; ++round) {
    ++rounds;
    const pid_t child = ::fork();
    ASSERT_GE(child, 0);
    if (child == 0) {
      int code = 0;
      try {
        auto file = RunFile::open_for_resume(path, header);
        file.begin_session(1, {"child"});
        for (const auto& [s, u] : shuffled_units(header, 100 + static_cast<std::uint64_t>(round))) {
          if (file.committed(s)[static_cast<std::size_t>(u)]) continue;
          file.write_unit(store_sample::unit(header, s, u), {0, "child", 0.0});
        }
        file.end_session("finished");
      } catch (const std::exception& e) {
        std::fprintf(stderr, "child: %s\n", e.what());
        code = 3;
      }
      ::_exit(code);
    }
    std::this_thread::sleep_for(std::chrono::microseconds(delay_us(delays)));
    ::kill(child, SIGKILL);
    int status = 0;
    ::waitpid(child, &status, 0);
    if (WIFSIGNALED(status)) {
      ++killed_while_running;
    } else {
      ASSERT_EQ(WEXITSTATUS(status), 0) << "the writer failed in round " << round;
    }

    SCOPED_TRACE("after kill " + std::to_string(round));
    auto file = RunFile::open_read(path);
    for (std::size_t s = 0; s < header.sizes.size(); ++s) {
      const auto flags = file.committed(s);
      auto want = freegap::observe::start_observations(header.sizes[s].observe);
      for (std::size_t u = 0; u < flags.size(); ++u) {
        if (flags[u]) freegap::observe::merge_into(want, expected[s][u]);
      }
      expect_identical(file.read_observations(s), want);
    }
    if (file.complete()) break;
  }
  std::printf("writer killed while running in %d of %d rounds\n", killed_while_running, rounds);

  {
    auto file = RunFile::open_for_resume(path, header);
    file.begin_session(1, {"parent"});
    for (std::size_t s = 0; s < header.sizes.size(); ++s) {
      const auto flags = file.committed(s);
      for (std::size_t u = 0; u < flags.size(); ++u) {
        if (!flags[u]) {
          file.write_unit(store_sample::unit(header, s, static_cast<std::int64_t>(u)),
                          {0, "parent", 0.0});
        }
      }
    }
    file.end_session("finished");
  }
  auto file = RunFile::open_read(path);
  ASSERT_TRUE(file.complete());
  const auto sessions = file.read_provenance().sessions;
  ASSERT_FALSE(sessions.empty());
  EXPECT_EQ(sessions.back().status, "finished");
  for (std::size_t i = 0; i + 1 < sessions.size(); ++i) {
    EXPECT_TRUE(sessions[i].status == "killed" || sessions[i].status == "finished")
        << "session " << i << " is " << sessions[i].status;
  }
  const auto clean = dir.file("clean.h5");
  write_whole_run(clean, 9, kScale);
  EXPECT_EQ(h5diff(clean, path, true), 0);
}

// ---------------------------------------------------------------------------------------------
// Refusals: exact messages, and the file refused is left as it was.

TEST(Store, ResumeRefusesAnotherJob) {
  TempDir dir;
  const auto path = dir.file("x.h5");
  write_whole_run(path, 3);
  const auto before = Snapshot::of(path);
  auto other = store_sample::header();
  other.job_hash = "9b1c7d00aa11bb22cc33dd44ee55ff6600112233445566778899aabbccddeeff";
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_for_resume(path, other); }),
            "run file '" + path +
                "' was written by another job (job hash 5a3c0f1e9b7d… in the file, "
                "9b1c7d00aa11… for this job); use a new output path or --fresh to start over");
  EXPECT_TRUE(Snapshot::of(path) == before);
  EXPECT_EQ(dir.entries(), std::vector<std::string>{"x.h5"});
}

TEST(Store, ResumeRefusesSameHashWithAnotherLayout) {
  TempDir dir;
  const auto path = dir.file("x.h5");
  write_whole_run(path, 3);
  auto other = store_sample::header();
  other.sizes[1].trials = 12;
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_for_resume(path, other); }),
            "run file '" + path +
                "' does not match this job although the job hash does (sizes[1].trials: 10 in "
                "the file, 12 for this job); use a new output path or --fresh to start over");
}

// Format 1.3: the same job computed on another path (/metadata path; a file without it was
// written by the dense path) is refused, untouched; the same path resumes.
TEST(Store, ResumeRefusesAnotherPath) {
  TempDir dir;
  const auto path = dir.file("x.h5");
  write_whole_run(path, 3);  // the sample header names no path: the dense path's file
  const auto before = Snapshot::of(path);
  auto other = store_sample::header();
  other.metadata["path"] = "two_projection";
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_for_resume(path, other); }),
            "run file '" + path +
                "' holds trials computed on the dense path, and this freegap computes this job "
                "on the two_projection path (the paths draw different random numbers, so their "
                "trials cannot be mixed); use a new output path or --fresh to start over");
  EXPECT_TRUE(Snapshot::of(path) == before);
  auto dense = store_sample::header();
  dense.metadata["path"] = "dense";
  EXPECT_NO_THROW(RunFile::open_for_resume(path, dense));

  const auto fast = dir.file("y.h5");
  {
    auto h = store_sample::header();
    h.metadata["path"] = "two_projection";
    auto file = RunFile::create(fast, h);
  }
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_for_resume(fast, dense); }),
            "run file '" + fast +
                "' holds trials computed on the two_projection path, and this freegap computes "
                "this job on the dense path (the paths draw different random numbers, so their "
                "trials cannot be mixed); use a new output path or --fresh to start over");
}

TEST(Store, ResumeRefusesTrialsOfAnotherSampler) {
  // /metadata sampler_changes (format 1.4): a file written before it (no attribute) holds the
  // trials of format 1.3's samplers; a job whose samplers changed since must not resume it, a
  // job whose samplers did not (empty value) must.
  TempDir dir;
  const auto path = dir.file("x.h5");
  write_whole_run(path, 3);  // the sample header has no sampler_changes: a 1.3 writer's file
  const auto before = Snapshot::of(path);
  auto changed = store_sample::header();
  changed.metadata["sampler_changes"] = "U: columns only";
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_for_resume(path, changed); }),
            "run file '" + path +
                "' holds trials drawn by the samplers of freegap's run-file format 1.3, and this "
                "freegap draws this job's trials by the samplers 'U: columns only' (they give "
                "different numbers, so their trials cannot be mixed); use a new output path or "
                "--fresh to start over");
  EXPECT_TRUE(Snapshot::of(path) == before);
  auto same = store_sample::header();
  same.metadata["sampler_changes"] = "";
  EXPECT_NO_THROW(RunFile::open_for_resume(path, same));

  const auto newer = dir.file("y.h5");
  { auto file = RunFile::create(newer, changed); }
  EXPECT_NO_THROW(RunFile::open_for_resume(newer, changed));
  auto other = store_sample::header();
  other.metadata["sampler_changes"] = "U: polar by Newton";
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_for_resume(newer, other); }),
            "run file '" + newer +
                "' holds trials drawn by the samplers 'U: columns only', and this freegap draws "
                "this job's trials by the samplers 'U: polar by Newton' (they give different "
                "numbers, so their trials cannot be mixed); use a new output path or --fresh to "
                "start over");
}

TEST(Store, RefusesAnHdf5FileOfAnotherKind) {
  TempDir dir;
  const auto path = dir.file("x.h5");
  {
    const hid_t file = H5Fcreate(path.c_str(), H5F_ACC_EXCL, H5P_DEFAULT, H5P_DEFAULT);
    ASSERT_GE(file, 0);
    const hsize_t dims[1] = {3};
    const hid_t space = H5Screate_simple(1, dims, nullptr);
    const hid_t dataset =
        H5Dcreate2(file, "values", H5T_IEEE_F64LE, space, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    const double values[3] = {1, 2, 3};
    H5Dwrite(dataset, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, values);
    H5Dclose(dataset);
    H5Sclose(space);
    H5Fclose(file);
  }
  const auto before = Snapshot::of(path);
  EXPECT_EQ(
      message_of_type<InputError>([&] { RunFile::open_for_resume(path, store_sample::header()); }),
      "'" + path +
          "' is not a freegap run file (file_kind is missing); choose another "
          "output path");
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_read(path); }),
            "'" + path + "' is not a freegap run file (file_kind is missing); check the path");
  EXPECT_TRUE(Snapshot::of(path) == before);

  // A file_kind of another program is named.
  {
    const hid_t file = H5Fopen(path.c_str(), H5F_ACC_RDWR, H5P_DEFAULT);
    const hid_t type = H5Tcopy(H5T_C_S1);
    H5Tset_size(type, 12);
    const hid_t space = H5Screate(H5S_SCALAR);
    const hid_t attribute = H5Acreate2(file, "file_kind", type, space, H5P_DEFAULT, H5P_DEFAULT);
    H5Awrite(attribute, type, "other thing\0");
    H5Aclose(attribute);
    H5Sclose(space);
    H5Tclose(type);
    H5Fclose(file);
  }
  EXPECT_EQ(
      message_of_type<InputError>([&] { RunFile::open_read(path); }),
      "'" + path + "' is not a freegap run file (file_kind is \"other thing\"); check the path");
}

TEST(Store, RefusesADamagedRunFile) {
  TempDir dir;
  const auto path = dir.file("x.h5");
  {
    // The right kind and version, and nothing else.
    const hid_t file = H5Fcreate(path.c_str(), H5F_ACC_EXCL, H5P_DEFAULT, H5P_DEFAULT);
    ASSERT_GE(file, 0);
    const hid_t type = H5Tcopy(H5T_C_S1);
    H5Tset_size(type, H5T_VARIABLE);
    const hid_t scalar = H5Screate(H5S_SCALAR);
    const hid_t kind = H5Acreate2(file, "file_kind", type, scalar, H5P_DEFAULT, H5P_DEFAULT);
    const char* text = freegap::store::kFileKind;
    H5Awrite(kind, type, &text);
    const hsize_t two[1] = {2};
    const hid_t pair = H5Screate_simple(1, two, nullptr);
    const hid_t version =
        H5Acreate2(file, "format_version", H5T_STD_I32LE, pair, H5P_DEFAULT, H5P_DEFAULT);
    const int numbers[2] = {1, 0};
    H5Awrite(version, H5T_NATIVE_INT, numbers);
    H5Aclose(version);
    H5Aclose(kind);
    H5Sclose(pair);
    H5Sclose(scalar);
    H5Tclose(type);
    H5Fclose(file);
  }
  const auto message = message_of_type<InputError>([&] { RunFile::open_read(path); });
  const std::string head =
      "run file '" + path + "' is damaged (cannot read attribute 'tool_version' (HDF5: ";
  const std::string tail = ")); restore a good copy";
  EXPECT_EQ(message.substr(0, head.size()), head) << message;
  ASSERT_GE(message.size(), tail.size());
  EXPECT_EQ(message.substr(message.size() - tail.size()), tail) << message;
}

// Two inputs of the run-file fuzz campaign (tests/fuzz/regressions/run_file/), each a copy of a
// two-rank run file with a few bytes changed.
std::string fuzz_regression(const char* name) {
  return std::string(FREEGAP_SOURCE_DIR) + "/tests/fuzz/regressions/run_file/" + name;
}

TEST(Store, ADamagedTypeIsRefusedBeforeHdf5SizesABufferByIt) {
  // The stored type of /sizes/0/kept_trials claims 1.4 GB per element: HDF5 allocated and filled
  // that much (4 s) before it found the data past the end of the file. Now the type is compared
  // with the one freegap writes first.
  const auto path = fuzz_regression("type-of-an-element-1.4-GB-wide");
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_read(path); }),
            "run file '" + path +
                "' is damaged (dataset 'kept_trials' has the wrong type); restore a good copy");
}

TEST(Store, AReadHdf5NeverFinishesIsARefusalAfterTheStallLimit) {
  // Reading the header's strings from this file's damaged global heap loops inside HDF5 for
  // ever; the checking child is killed when it reports nothing for the stall limit.
  const auto path = fuzz_regression("string-heap-read-never-ends");
  const char* before = std::getenv("FREEGAP_CHECK_STALL_SECONDS");
  const std::string saved = before ? before : "";
  ::setenv("FREEGAP_CHECK_STALL_SECONDS", "1", 1);
  const auto message = message_of_type<InputError>([&] { RunFile::open_read(path); });
  if (before) {
    ::setenv("FREEGAP_CHECK_STALL_SECONDS", saved.c_str(), 1);
  } else {
    ::unsetenv("FREEGAP_CHECK_STALL_SECONDS");
  }
  EXPECT_EQ(message, "run file '" + path +
                         "' is damaged where HDF5 cannot read it (reading it made no progress "
                         "for 1 s); restore a good copy");
}

TEST(Store, RefusesATextFileNamedH5) {
  TempDir dir;
  const auto path = dir.file("x.h5");
  write_bytes(path, "seed = 7\nthis is not HDF5\n");
  const auto before = Snapshot::of(path);
  EXPECT_EQ(
      message_of_type<InputError>([&] { RunFile::open_for_resume(path, store_sample::header()); }),
      "'" + path +
          "' is not a freegap run file (not an HDF5 file); choose another output "
          "path");
  EXPECT_TRUE(Snapshot::of(path) == before);
  EXPECT_EQ(dir.entries(), std::vector<std::string>{"x.h5"});
}

TEST(Store, RefusesATruncatedCopy) {
  TempDir dir;
  const auto good = dir.file("good.h5");
  write_whole_run(good, 3);
  const auto path = dir.file("x.h5");
  const auto bytes = read_bytes(good);
  write_bytes(path, bytes.substr(0, bytes.size() / 2));
  const auto before = Snapshot::of(path);
  EXPECT_EQ(
      message_of_type<InputError>([&] { RunFile::open_for_resume(path, store_sample::header()); }),
      "run file '" + path +
          "' is truncated (it ends before the data HDF5 recorded); restore a good copy, or "
          "start over with --fresh");
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_read(path); }),
            "run file '" + path +
                "' is truncated (it ends before the data HDF5 recorded); restore a good copy");
  EXPECT_TRUE(Snapshot::of(path) == before);
}

void set_format_version(const std::string& path, int major, int minor) {
  const hid_t file = H5Fopen(path.c_str(), H5F_ACC_RDWR, H5P_DEFAULT);
  ASSERT_GE(file, 0);
  const hid_t attribute = H5Aopen(file, "format_version", H5P_DEFAULT);
  const int version[2] = {major, minor};
  EXPECT_GE(H5Awrite(attribute, H5T_NATIVE_INT, version), 0);
  H5Aclose(attribute);
  H5Fclose(file);
}

TEST(Store, RefusesAnotherMajorVersionAcceptsAnotherMinor) {
  TempDir dir;
  const auto path = dir.file("x.h5");
  write_whole_run(path, 3);
  set_format_version(path, 2, 0);
  const auto before = Snapshot::of(path);
  EXPECT_EQ(
      message_of_type<InputError>([&] { RunFile::open_for_resume(path, store_sample::header()); }),
      "run file '" + path +
          "' has format version 2.0; this freegap reads 1.x; use a freegap that reads 2.x, "
          "or a new output path");
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_read(path); }),
            "run file '" + path +
                "' has format version 2.0; this freegap reads 1.x; use a freegap that reads 2.x");
  EXPECT_TRUE(Snapshot::of(path) == before);

  set_format_version(path, 1, 7);  // a newer minor only adds things: still readable
  EXPECT_TRUE(RunFile::open_read(path).complete());
}

TEST(Store, CreateRefusesAnExistingPath) {
  TempDir dir;
  const auto path = dir.file("x.h5");
  write_bytes(path, "precious");
  const auto before = Snapshot::of(path);
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::create(path, store_sample::header()); }),
            "cannot create run file '" + path +
                "': it already exists; resume it with the same job, use a new output path, or "
                "--fresh to start over");
  EXPECT_TRUE(Snapshot::of(path) == before);
  EXPECT_EQ(dir.entries(), std::vector<std::string>{"x.h5"});
}

TEST(Store, CreateRefusesAMissingDirectory) {
  TempDir dir;
  const auto path = dir.file("nowhere/x.h5");
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::create(path, store_sample::header()); }),
            "cannot create run file '" + path +
                "' (No such file or directory); choose an output path in a directory you can "
                "write to");
  EXPECT_TRUE(dir.entries().empty());
}

TEST(Store, CreateRefusesAnUnwritableDirectory) {
  TempDir dir;
  const std::string locked = dir.file("locked");
  fs::create_directory(locked);
  fs::permissions(locked, fs::perms::owner_read | fs::perms::owner_exec | fs::perms::group_read |
                              fs::perms::group_exec | fs::perms::others_read |
                              fs::perms::others_exec);
  const auto path = locked + "/x.h5";
  // Root ignores directory permissions, so the attempt runs in a child that drops to an
  // unprivileged user first; the message comes back through a pipe.
  int channel[2];
  ASSERT_EQ(::pipe(channel), 0);
  const pid_t child = ::fork();
  ASSERT_GE(child, 0);
  if (child == 0) {
    ::close(channel[0]);
    std::string message = "(no exception)";
    if (::geteuid() == 0 && (::setgid(65534) != 0 || ::setuid(65534) != 0)) {
      message = "(could not drop privileges)";
    } else {
      try {
        RunFile::create(path, store_sample::header());
      } catch (const InputError& e) {
        message = e.what();
      } catch (const std::exception& e) {
        message = std::string("(wrong exception type) ") + e.what();
      }
    }
    const ssize_t ignored = ::write(channel[1], message.data(), message.size());
    (void)ignored;
    ::_exit(0);
  }
  ::close(channel[1]);
  std::string message;
  char buffer[512];
  for (ssize_t got; (got = ::read(channel[0], buffer, sizeof buffer)) > 0;) {
    message.append(buffer, static_cast<std::size_t>(got));
  }
  ::close(channel[0]);
  ::waitpid(child, nullptr, 0);
  EXPECT_EQ(message, "cannot create run file '" + path +
                         "' (Permission denied); choose an output path in a directory you can "
                         "write to");
  EXPECT_TRUE(fs::is_empty(locked));
}

TEST(Store, RefusesAFileAnotherProcessIsWriting) {
  TempDir dir;
  const auto path = dir.file("x.h5");
  int ready[2];
  ASSERT_EQ(::pipe(ready), 0);
  const pid_t child = ::fork();
  ASSERT_GE(child, 0);
  if (child == 0) {
    ::close(ready[0]);
    auto file = RunFile::create(path, store_sample::header());
    const ssize_t ignored = ::write(ready[1], "r", 1);
    (void)ignored;
    ::pause();  // holds the file (and its lock) until killed
    ::_exit(0);
  }
  ::close(ready[1]);
  char byte = 0;
  ASSERT_EQ(::read(ready[0], &byte, 1), 1);
  ::close(ready[0]);
  const auto read_message = message_of_type<InputError>([&] { RunFile::open_read(path); });
  const auto resume_message =
      message_of_type<InputError>([&] { RunFile::open_for_resume(path, store_sample::header()); });
  ::kill(child, SIGKILL);
  ::waitpid(child, nullptr, 0);
  EXPECT_EQ(read_message, "run file '" + path +
                              "' is open in another process (HDF5 could not lock it); wait for "
                              "that run to finish, or set HDF5_USE_FILE_LOCKING=FALSE to read it "
                              "while it is written");
  EXPECT_EQ(resume_message, "run file '" + path +
                                "' is open in another process (HDF5 could not lock it); wait for "
                                "that run to finish or use another output path");
  EXPECT_TRUE(RunFile::open_read(path).committed(0) == std::vector<bool>(6, false));
}

TEST(Store, RefusesAMissingFile) {
  TempDir dir;
  const auto path = dir.file("x.h5");
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_read(path); }),
            "run file '" + path + "' does not exist; check the path");
}

TEST(Store, HeaderIsValidatedBeforeAnythingIsWritten) {
  TempDir dir;
  auto header = store_sample::header();
  header.sizes[0].observe.keep_spectrum_trials = {0, 23};
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::create(dir.file("x.h5"), header); }),
            "run header: sizes[0].observe.keep_spectrum_trials must be < trials (got 23)");
  EXPECT_TRUE(dir.entries().empty());
}

}  // namespace

// ---------------------------------------------------------------------------------------------
// Checksums (format 1.2) and the check in a child process

namespace {

namespace contained = freegap::store::contained;

// The file offset of the chunk of `dataset` that starts at `start`.
haddr_t chunk_address(const std::string& path, const char* dataset,
                      const std::vector<hsize_t>& start) {
  const hid_t file = H5Fopen(path.c_str(), H5F_ACC_RDONLY, H5P_DEFAULT);
  const hid_t data = H5Dopen2(file, dataset, H5P_DEFAULT);
  haddr_t address = HADDR_UNDEF;
  unsigned mask = 0;
  hsize_t size = 0;
  H5Dget_chunk_info_by_coord(data, start.data(), &mask, &address, &size);
  H5Dclose(data);
  H5Fclose(file);
  return address;
}

// Writes `values` into rows [first, first + count) of a 1-D float64 dataset through HDF5, so
// every chunk checksum stays right and only the content changes.
void rewrite_rows(const std::string& path, const char* name, hsize_t first,
                  const std::vector<double>& values) {
  const hid_t file = H5Fopen(path.c_str(), H5F_ACC_RDWR, H5P_DEFAULT);
  ASSERT_GE(file, 0);
  const hid_t dataset = H5Dopen2(file, name, H5P_DEFAULT);
  const hid_t space = H5Dget_space(dataset);
  const hsize_t start[1] = {first};
  const hsize_t count[1] = {values.size()};
  H5Sselect_hyperslab(space, H5S_SELECT_SET, start, nullptr, count, nullptr);
  const hid_t memory = H5Screate_simple(1, count, nullptr);
  EXPECT_GE(H5Dwrite(dataset, H5T_NATIVE_DOUBLE, memory, space, H5P_DEFAULT, values.data()), 0);
  H5Sclose(memory);
  H5Sclose(space);
  H5Dclose(dataset);
  H5Fclose(file);
}

// Format 1.5: a size that observes only the extremes has no bins, and each trial a certificate
// row (the Krylov path's), covered by the unit's SHA-256 like every other row.
RunHeader extremes_header() {
  RunHeader h = store_sample::header();
  h.sizes.resize(1);
  auto& o = h.sizes[0].observe;
  o.bin_edges.clear();
  o.max_moment = 0;
  o.keep_spectrum_trials.clear();
  o.extremes_only = true;
  return h;
}

freegap::store::UnitResult extremes_unit(const RunHeader& h, std::int64_t u) {
  const auto& s = h.sizes[0];
  auto obs = freegap::observe::start_observations(s.observe);
  for (auto t = static_cast<std::uint64_t>(s.unit_begin(u)); t < static_cast<std::uint64_t>(s.unit_end(u)); ++t) {
    const double x[2] = {-1.0 - 0.01 * static_cast<double>(t), 2.0 + 0.001 * static_cast<double>(t)};
    freegap::observe::record_trial(obs, t, x);
    obs.trials.back().certificate = {40.0 + static_cast<double>(t), 1e-7, 2e-7, 1e-13, 3e-13};
  }
  return {0, u, std::move(obs), {}, {}};
}

TEST(Store, ExtremesOnlySizesKeepCertificatesAndNoHistogram) {
  TempDir dir;
  const auto path = dir.file("extremes.h5");
  const RunHeader h = extremes_header();
  {
    auto file = RunFile::create(path, h);
    file.begin_session(1, {"node0"});
    for (std::int64_t u = 0; u < h.sizes[0].units(); ++u) {
      file.write_unit(extremes_unit(h, u), {0, "node0", 0.1});
    }
    file.end_session("finished");
  }
  {
    auto file = RunFile::open_read(path);
    EXPECT_TRUE(file.header().sizes[0].observe.extremes_only);
    const Observations obs = file.read_observations(0);
    EXPECT_TRUE(obs.histogram.counts.empty());
    ASSERT_EQ(obs.trials.size(), 23u);
    for (const auto& row : obs.trials) {
      EXPECT_EQ(row.certificate.iterations, 40.0 + static_cast<double>(row.trial));
      EXPECT_EQ(row.certificate.residual_max, 2e-7);
      EXPECT_EQ(row.certificate.estimate_max, 3e-13);
      EXPECT_EQ(row.max, 2.0 + 0.001 * static_cast<double>(row.trial));
      EXPECT_EQ(row.moments, std::vector<double>{1.0});
    }
  }
  // A resume by a job that observes more is refused, naming the difference.
  RunHeader more = h;
  more.sizes[0] = store_sample::header().sizes[0];
  const std::string refused = message_of_type<InputError>([&] { RunFile::open_for_resume(path, more); });
  EXPECT_NE(refused.find("sizes[0].extremes_only"), std::string::npos) << refused;
  // A changed certificate (checksums rewritten by HDF5) breaks the unit's SHA-256.
  {
    const hid_t file = H5Fopen(path.c_str(), H5F_ACC_RDWR, H5P_DEFAULT);
    ASSERT_GE(file, 0);
    const hid_t dataset = H5Dopen2(file, "sizes/0/certificate", H5P_DEFAULT);
    const hid_t space = H5Dget_space(dataset);
    const hsize_t start[2] = {9, 1}, count[2] = {1, 1};
    H5Sselect_hyperslab(space, H5S_SELECT_SET, start, nullptr, count, nullptr);
    const hid_t memory = H5Screate_simple(2, count, nullptr);
    const double changed = 5e-7;
    EXPECT_GE(H5Dwrite(dataset, H5T_NATIVE_DOUBLE, memory, space, H5P_DEFAULT, &changed), 0);
    H5Sclose(memory);
    H5Sclose(space);
    H5Dclose(dataset);
    H5Fclose(file);
  }
  const auto integrity = freegap::store::verify(path);
  ASSERT_EQ(integrity.damaged.size(), 1u);
  EXPECT_EQ(integrity.damaged[0].unit, 2);  // trials 8..11
  EXPECT_EQ(integrity.damaged[0].reason, "its content does not match its SHA-256");
}

TEST(Store, ChangedBytesInAChunkNameTheUnitWhichAResumeComputesAgain) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  const auto header = store_sample::header();
  write_whole_run(path, 3);
  // Unit 2 of size 0 holds trials 8..11 (B = 4): flip bytes inside its chunk of `moments`.
  const haddr_t at = chunk_address(path, "sizes/0/moments", {8, 0});
  ASSERT_NE(at, HADDR_UNDEF);
  std::string bytes = read_bytes(path);
  for (int i = 0; i < 8; ++i) bytes[at + 16 + i] = static_cast<char>(bytes[at + 16 + i] ^ 0x5a);
  write_bytes(path, bytes);

  const auto integrity = freegap::store::verify(path);
  EXPECT_TRUE(integrity.checksummed);
  ASSERT_EQ(integrity.damaged.size(), 1u);
  EXPECT_EQ(integrity.damaged[0].size_index, 0u);
  EXPECT_EQ(integrity.damaged[0].n, header.sizes[0].n);
  EXPECT_EQ(integrity.damaged[0].unit, 2);
  EXPECT_EQ(integrity.damaged[0].reason,
            "cannot read its rows (HDF5: data error detected by Fletcher32 checksum)");
  EXPECT_TRUE(integrity.damaged[0].rewritable);
  {
    // Readers leave the unit out and use the rest.
    auto file = RunFile::open_read(path);
    EXPECT_EQ(file.integrity().damaged.size(), 1u);
    EXPECT_EQ(file.committed(0), (std::vector<bool>{true, true, false, true, true, true}));
    expect_identical(file.read_observations(0), merged(header, 0, {0, 1, 3, 4, 5}));
    expect_identical(file.read_observations(1), merged(header, 1, all_units(header, 1)));
  }
  {
    auto file = RunFile::open_for_resume(path, header);
    EXPECT_FALSE(file.complete());
    file.begin_session(1, {"node0"});
    file.write_unit(store_sample::unit(header, 0, 2), {0, "node0", 1.0});
    file.end_session("finished");
  }
  EXPECT_TRUE(freegap::store::verify(path).damaged.empty());
  auto file = RunFile::open_read(path);
  EXPECT_TRUE(file.complete());
  expect_identical(file.read_observations(0), merged(header, 0, all_units(header, 0)));
  const auto clean = dir.file("clean.h5");
  write_whole_run(clean, 5);
  EXPECT_EQ(h5diff(clean, path, true), 0);
}

TEST(Store, ContentThatDiffersFromItsDigestNamesTheUnit) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  const auto header = store_sample::header();
  write_whole_run(path, 3);
  // Through HDF5, so the chunk checksum is right: only the unit's SHA-256 can tell.
  rewrite_rows(path, "sizes/1/norm", 0, {123.0});
  const auto integrity = freegap::store::verify(path);
  ASSERT_EQ(integrity.damaged.size(), 1u);
  EXPECT_EQ(integrity.damaged[0].size_index, 1u);
  EXPECT_EQ(integrity.damaged[0].unit, 0);
  EXPECT_EQ(integrity.damaged[0].reason, "its content does not match its SHA-256");
  auto file = RunFile::open_read(path);
  EXPECT_FALSE(file.committed(1)[0]);
  for (const auto& trial : file.read_observations(1).trials) EXPECT_NE(trial.norm, 123.0);
}

TEST(Store, AChangedHeaderIsRefused) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  write_whole_run(path, 3);
  {
    const hid_t file = H5Fopen(path.c_str(), H5F_ACC_RDWR, H5P_DEFAULT);
    ASSERT_GE(file, 0);
    H5Adelete(file, "expression");
    const hid_t type = H5Tcopy(H5T_C_S1);
    H5Tset_size(type, H5T_VARIABLE);
    const hid_t scalar = H5Screate(H5S_SCALAR);
    const hid_t attribute = H5Acreate2(file, "expression", type, scalar, H5P_DEFAULT, H5P_DEFAULT);
    const char* text = "X - Y";
    H5Awrite(attribute, type, &text);
    H5Aclose(attribute);
    H5Sclose(scalar);
    H5Tclose(type);
    H5Fclose(file);
  }
  EXPECT_EQ(message_of_type<InputError>([&] { RunFile::open_read(path); }),
            "run file '" + path +
                "' is damaged (its header does not match the checksum written with it); "
                "restore a good copy");
  EXPECT_EQ(
      message_of_type<InputError>([&] { RunFile::open_for_resume(path, store_sample::header()); }),
      "run file '" + path +
          "' is damaged (its header does not match the checksum written with it); restore a "
          "good copy, or start over with --fresh");
}

TEST(Store, AFileWrittenBeforeChecksumsReadsAsUnverified) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  const auto header = store_sample::header();
  write_whole_run(path, 3);
  {
    // What a 1.1 writer left: no header digest, no unit digests.
    const hid_t file = H5Fopen(path.c_str(), H5F_ACC_RDWR, H5P_DEFAULT);
    ASSERT_GE(file, 0);
    EXPECT_GE(H5Adelete(file, "header_sha256"), 0);
    EXPECT_GE(H5Ldelete(file, "sizes/0/unit_sha256", H5P_DEFAULT), 0);
    EXPECT_GE(H5Ldelete(file, "sizes/1/unit_sha256", H5P_DEFAULT), 0);
    H5Fclose(file);
  }
  set_format_version(path, 1, 1);
  const auto integrity = freegap::store::verify(path);
  EXPECT_FALSE(integrity.checksummed);
  EXPECT_TRUE(integrity.damaged.empty());
  {
    auto file = RunFile::open_for_resume(path, header);
    EXPECT_TRUE(file.complete());
    EXPECT_FALSE(file.integrity().checksummed);
  }
  auto file = RunFile::open_read(path);
  expect_identical(file.read_observations(0), merged(header, 0, all_units(header, 0)));
}

// What a resume says when it may not write the file: run in a child that drops root, because
// root ignores file modes.
std::string resume_message_as_nobody(const std::string& path) {
  int channel[2];
  if (::pipe(channel) != 0) return "(pipe failed)";
  const pid_t child = ::fork();
  if (child < 0) return "(fork failed)";
  if (child == 0) {
    ::close(channel[0]);
    std::string message = "(no exception)";
    if (::geteuid() == 0 && (::setgid(65534) != 0 || ::setuid(65534) != 0)) {
      message = "(could not drop privileges)";
    } else {
      try {
        RunFile::open_for_resume(path, store_sample::header());
      } catch (const InputError& e) {
        message = e.what();
      } catch (const std::exception& e) {
        message = std::string("(wrong exception type) ") + e.what();
      }
    }
    const ssize_t ignored = ::write(channel[1], message.data(), message.size());
    (void)ignored;
    ::_exit(0);
  }
  ::close(channel[1]);
  std::string message;
  char buffer[512];
  for (ssize_t got; (got = ::read(channel[0], buffer, sizeof buffer)) > 0;) {
    message.append(buffer, static_cast<std::size_t>(got));
  }
  ::close(channel[0]);
  ::waitpid(child, nullptr, 0);
  return message;
}

TEST(Store, ResumeOfAReadOnlyFileSaysSoAndKeepsTheFile) {
  TempDir dir;
  const std::string shared = dir.file("shared");
  fs::create_directory(shared);
  fs::permissions(dir.file(""), fs::perms::all, fs::perm_options::add);
  fs::permissions(shared, fs::perms::all, fs::perm_options::add);
  const auto path = shared + "/run.h5";
  write_whole_run(path, 3);
  fs::permissions(path, fs::perms::owner_read | fs::perms::group_read | fs::perms::others_read);
  const auto before = Snapshot::of(path);
  EXPECT_EQ(resume_message_as_nobody(path),
            "cannot resume run file '" + path +
                "': no permission to write it (Permission denied); its committed units are "
                "intact: make it writable, or copy it where you can write and run there, then "
                "run the same command again");
  EXPECT_TRUE(Snapshot::of(path) == before);
}

// Runs `body` in a child whose files may not grow beyond `limit` bytes (RLIMIT_FSIZE: writing
// further fails with EFBIG, for root too) and returns what it sends back.
std::string in_child_with_file_limit(
    std::uint64_t limit, const std::function<std::string(const std::function<void()>&)>& body) {
  int channel[2];
  if (::pipe(channel) != 0) return "(pipe failed)";
  const pid_t child = ::fork();
  if (child < 0) return "(fork failed)";
  if (child == 0) {
    ::close(channel[0]);
    const auto impose = [limit] {
      ::signal(SIGXFSZ, SIG_IGN);
      const rlimit r{limit, limit};
      ::setrlimit(RLIMIT_FSIZE, &r);
    };
    std::string message;
    try {
      message = body(impose);
    } catch (const std::exception& e) {
      message = std::string("(exception) ") + e.what();
    }
    const ssize_t ignored = ::write(channel[1], message.data(), message.size());
    (void)ignored;
    ::_exit(0);
  }
  ::close(channel[1]);
  std::string message;
  char buffer[512];
  for (ssize_t got; (got = ::read(channel[0], buffer, sizeof buffer)) > 0;) {
    message.append(buffer, static_cast<std::size_t>(got));
  }
  ::close(channel[0]);
  ::waitpid(child, nullptr, 0);
  return message;
}

TEST(Store, NoRoomToCreateNamesTheRunFileNotItsTemporaryName) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  const auto message = in_child_with_file_limit(4096, [&](const std::function<void()>& impose) {
    impose();
    try {
      RunFile::create(path, store_sample::header());
    } catch (const InputError& e) {
      return std::string("(input error) ") + e.what();
    } catch (const Error& e) {
      return std::string(e.what());
    }
    return std::string("(no exception)");
  });
  EXPECT_EQ(message, "cannot create run file '" + path +
                         "': there is no room for it (File too large); free space or choose an "
                         "output path on another file system; nothing was left behind");
  EXPECT_TRUE(dir.entries().empty());
}

TEST(Store, NoRoomToWriteAUnitSaysTheFileIsResumable) {
  TempDir dir;
  const auto path = dir.file("run.h5");
  const auto header = store_sample::header(40);  // 230 units: their records need room
  const auto message = in_child_with_file_limit(0, [&](const std::function<void()>&) {
    auto file = RunFile::create(path, header);
    file.begin_session(1, {"node0"});
    write_units(file, {{0, 0}});
    // No byte more: the next units' strings and records need room the file does not have.
    const rlimit r{fs::file_size(path), fs::file_size(path)};
    ::signal(SIGXFSZ, SIG_IGN);
    ::setrlimit(RLIMIT_FSIZE, &r);
    try {
      for (std::int64_t u = 1; u < header.sizes[0].units(); ++u) write_units(file, {{0, u}});
    } catch (const Error& e) {
      return std::string(e.what());
    }
    return std::string("(no exception)");
  });
  const std::string head = "run file '" + path + "': no room to write unit ";
  const std::string tail =
      " (File too large); the committed units are safe and the file is resumable: free space "
      "and run the same command again";
  EXPECT_EQ(message.substr(0, head.size()), head) << message;
  ASSERT_GE(message.size(), tail.size());
  EXPECT_EQ(message.substr(message.size() - tail.size()), tail) << message;
  // And so it is: the committed units read back, and a resume completes the file.
  {
    auto file = RunFile::open_for_resume(path, header);
    EXPECT_TRUE(file.committed(0)[0]);
    EXPECT_TRUE(file.integrity().damaged.empty());
    file.begin_session(1, {"node0"});
    for (std::size_t s = 0; s < 2; ++s) {
      const auto flags = file.committed(s);
      for (std::size_t u = 0; u < flags.size(); ++u) {
        if (!flags[u]) {
          file.write_unit(store_sample::unit(header, s, static_cast<std::int64_t>(u)),
                          {0, "node0", 1.0});
        }
      }
    }
    file.end_session("finished");
  }
  auto file = RunFile::open_read(path);
  EXPECT_TRUE(file.complete());
  expect_identical(file.read_observations(0), merged(header, 0, all_units(header, 0)));
}

TEST(Contained, ACrashInTheChildIsReportedNotSuffered) {
  const auto outcome = contained::run(
      [](const contained::Emit& emit) {
        emit("before");
        ::raise(SIGSEGV);
      },
      5.0);
  EXPECT_EQ(outcome.kind, contained::Outcome::Kind::signalled);
  EXPECT_EQ(outcome.signal, SIGSEGV);
  EXPECT_EQ(contained::signal_text(outcome.signal), "signal 11 (SIGSEGV)");
  EXPECT_EQ(outcome.lines, std::vector<std::string>{"before"});
}

TEST(Contained, AChildThatStopsReportingIsKilled) {
  const auto outcome = contained::run(
      [](const contained::Emit& emit) {
        emit(".");
        ::pause();  // never returns: the parent must give up on it
      },
      0.3);
  EXPECT_EQ(outcome.kind, contained::Outcome::Kind::stalled);
}

TEST(Contained, LinesComeBackInOrderWithNewlinesFlattened) {
  const auto outcome = contained::run(
      [](const contained::Emit& emit) {
        emit("one");
        emit("two\nlines");
      },
      5.0);
  EXPECT_EQ(outcome.kind, contained::Outcome::Kind::finished);
  EXPECT_EQ(outcome.lines, (std::vector<std::string>{"one", "two lines"}));
}

}  // namespace
