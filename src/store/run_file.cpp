// The run file: create, resume, stream committed units, read back. Layout: docs/run-file.md.
#include <fcntl.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <array>
#include <bit>
#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <ctime>
#include <fstream>
#include <limits>
#include <optional>
#include <utility>
#include <span>
#include <sstream>
#include <string_view>

#include "contained.hpp"
#include "freegap/errors.hpp"
#include "freegap/job.hpp"
#include "freegap/store.hpp"
#include "freegap/text.hpp"
#include "freegap/version.hpp"
#include "h5.hpp"

namespace freegap::store {
namespace {

using h5::Id;
using h5::Where;

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr hsize_t kUnlimited = H5S_UNLIMITED;
constexpr hsize_t kCertificateColumns = observe::Certificate::kColumns;
// Room reserved before a unit is written, beyond its strings: the metadata one unit can add
// (a provenance row and its chunk index, a global heap collection) is a few KiB; its rows go into
// chunks allocated when the file was made. 16 KiB, not more: a reservation larger than what a unit
// adds refused runs whose whole file fits the free space (1 MiB did, in a 256 KiB file system).
constexpr std::uint64_t kRoomPerUnit = 16 << 10;
// The fill value of unit_committed in 1.2 files: a marker that reads it was never written.
constexpr std::int8_t kMarkerLost = 2;

// ---------------------------------------------------------------------------------------------
// Small helpers

using text::utc_now;

// Hashes are 64 hex digits; a 12-digit prefix is enough to tell two jobs apart in a message.
std::string short_hash(const std::string& hash) {
  constexpr std::size_t kShown = 12;
  return hash.size() <= kShown ? hash : hash.substr(0, kShown) + "…";
}

std::string join(const std::vector<std::string>& parts, char separator) {
  std::string out;
  for (std::size_t i = 0; i < parts.size(); ++i) {
    if (i > 0) out += separator;
    out += parts[i];
  }
  return out;
}

std::vector<std::string> split(const std::string& text, char separator) {
  std::vector<std::string> out;
  if (text.empty()) return out;
  std::string::size_type begin = 0;
  while (true) {
    const auto end = text.find(separator, begin);
    out.push_back(text.substr(begin, end - begin));
    if (end == std::string::npos) break;
    begin = end + 1;
  }
  return out;
}

template <typename T>
std::string list_text(const std::vector<T>& values) {
  std::ostringstream out;
  out.precision(17);
  out << '[';
  for (std::size_t i = 0; i < values.size(); ++i) out << (i > 0 ? ", " : "") << values[i];
  out << ']';
  return out.str();
}

observe::SpectrumKind spectrum_from_name(const std::string& name, bool& ok) {
  ok = true;
  if (name == "eigenvalues") return observe::SpectrumKind::eigenvalues;
  if (name == "singular_values") return observe::SpectrumKind::singular_values;
  ok = false;
  return observe::SpectrumKind::eigenvalues;
}

std::string size_group_name(std::size_t index) { return "sizes/" + std::to_string(index); }

hsize_t as_hsize(std::int64_t value) { return static_cast<hsize_t>(value); }

// ---------------------------------------------------------------------------------------------
// Checksums (format 1.2). HDF5's Fletcher-32 filter guards every chunk of a size's datasets; a
// SHA-256 of each unit's committed content (its row in unit_sha256) and of the header (root
// attribute header_sha256) also catches what no chunk checksum covers: the strings of the
// global heap, contiguous datasets, attributes, and a chunk index pointing at another chunk.

static_assert(std::endian::native == std::endian::little, "digests hash little-endian bytes");

constexpr std::size_t kDigestBytes = 32;
using Digest = std::array<std::uint8_t, kDigestBytes>;

// The byte string a digest hashes: every count as 8 bytes before its items, numbers as their
// little-endian bytes, strings as length and bytes, so no two contents give the same bytes.
class DigestInput {
 public:
  void count(std::uint64_t n) { bytes_.append(reinterpret_cast<const char*>(&n), sizeof n); }
  template <typename T>
  void numbers(std::span<const T> values) {
    count(values.size());
    bytes_.append(reinterpret_cast<const char*>(values.data()), values.size_bytes());
  }
  void text(std::string_view s) {
    count(s.size());
    bytes_.append(s);
  }
  Digest digest() const {
    const std::string hex = job::sha256_hex(bytes_);
    Digest out{};
    for (std::size_t i = 0; i < kDigestBytes; ++i) {
      out[i] = static_cast<std::uint8_t>(std::stoi(hex.substr(2 * i, 2), nullptr, 16));
    }
    return out;
  }
  std::string hex() const { return job::sha256_hex(bytes_); }

 private:
  std::string bytes_;
};

// One unit's committed content, as written and as read back.
struct UnitView {
  std::span<const double> moments, mins, maxs, norms;
  std::span<const std::int8_t> failed;
  std::vector<std::string_view> reasons;
  std::span<const std::int64_t> counts;
  std::int64_t below = 0, above = 0;
  std::span<const double> spectra;
  std::span<const std::int64_t> lengths;
  std::span<const double> estimates;
  std::vector<std::string_view> estimate_failures;
  std::span<const double> certificates;  // format 1.5, extremes_only sizes only
};

Digest unit_digest(const UnitView& v) {
  DigestInput in;
  in.text("freegap unit, format 1.2");
  in.numbers(v.moments);
  in.numbers(v.mins);
  in.numbers(v.maxs);
  in.numbers(v.norms);
  in.numbers(v.failed);
  in.count(v.reasons.size());
  for (const auto r : v.reasons) in.text(r);
  in.numbers(v.counts);
  in.count(static_cast<std::uint64_t>(v.below));
  in.count(static_cast<std::uint64_t>(v.above));
  in.numbers(v.spectra);
  in.numbers(v.lengths);
  in.numbers(v.estimates);
  in.count(v.estimate_failures.size());
  for (const auto r : v.estimate_failures) in.text(r);
  // Only where there are any, so the units of files without them keep their digests.
  if (!v.certificates.empty()) in.numbers(v.certificates);
  return in.digest();
}

// The header as read back (RunHeader) and the major format version, so a changed attribute is
// caught. Not the minor version: a later minor version only adds things, and its files must
// still pass this check; later minor versions hash the header as 1.2 does.
std::string header_digest(const RunHeader& h, const std::vector<int>& version) {
  DigestInput in;
  in.text("freegap header, format 1.2");
  in.count(static_cast<std::uint64_t>(version.at(0)));
  for (const std::string* text : {&h.tool_version, &h.git_revision, &h.job_text, &h.job_canonical,
                                  &h.job_hash, &h.expression}) {
    in.text(*text);
  }
  in.text(h.spectrum == observe::SpectrumKind::eigenvalues ? "eigenvalues" : "singular_values");
  in.count(h.self_adjoint ? 1 : 0);
  in.count(h.sizes.size());
  for (const SizeLayout& size : h.sizes) {
    in.count(static_cast<std::uint64_t>(size.n));
    in.count(static_cast<std::uint64_t>(size.trials));
    in.count(static_cast<std::uint64_t>(size.trials_per_unit));
    in.count(static_cast<std::uint64_t>(size.observe.max_moment));
    in.numbers(std::span<const double>(size.observe.bin_edges));
    in.numbers(std::span<const std::uint64_t>(size.observe.keep_spectrum_trials));
    if (size.observe.extremes_only) in.text("extremes only");  // format 1.5
  }
  in.count(h.metadata.size());
  for (const auto& [key, value] : h.metadata) {
    in.text(key);
    in.text(value);
  }
  in.count(h.estimates.size());
  for (const auto& e : h.estimates) {
    in.text(e.estimator);
    in.text(e.estimate);
    in.text(e.truth);
  }
  return in.hex();
}

// ---------------------------------------------------------------------------------------------
// Messages for files the user pointed at (docs/building.md habits 10–11: name the path and the fix)

enum class Purpose { resume, read };

std::string other_path_fix(Purpose purpose) {
  return purpose == Purpose::resume ? "choose another output path" : "check the path";
}

std::string damaged_fix(Purpose purpose) {
  return purpose == Purpose::resume ? "restore a good copy, or start over with --fresh"
                                    : "restore a good copy";
}

[[noreturn]] void refuse_not_run_file(const std::string& path, const std::string& why,
                                      Purpose purpose) {
  throw InputError("'" + path + "' is not a freegap run file (" + why + "); " +
                   other_path_fix(purpose));
}

[[noreturn]] void refuse_damaged(const std::string& path, std::string why, Purpose purpose) {
  // The helpers' messages start with the path, which this message already names.
  const std::string prefix = "run file '" + path + "': ";
  if (why.starts_with(prefix)) why.erase(0, prefix.size());
  throw InputError("run file '" + path + "' is damaged (" + why + "); " + damaged_fix(purpose));
}

// HDF5 files start with this signature at offset 0, 512, 1024, 2048, ... (a user block may
// come first).
bool has_hdf5_signature(std::ifstream& in, std::uint64_t size) {
  static constexpr std::array<char, 8> kSignature = {'\x89', 'H',  'D',    'F',
                                                     '\r',   '\n', '\x1a', '\n'};
  for (std::uint64_t offset = 0; offset + kSignature.size() <= size;
       offset = offset == 0 ? 512 : offset * 2) {
    std::array<char, 8> bytes{};
    in.seekg(static_cast<std::streamoff>(offset));
    if (!in.read(bytes.data(), bytes.size())) return false;
    if (bytes == kSignature) return true;
  }
  return false;
}

// Opens an existing file with `flags`, turning every way it can fail into a message the user
// can act on instead of an HDF5 error stack.
Id open_existing(const std::string& path, Purpose purpose, unsigned flags) {
  h5::quiet();
  struct stat info {};
  if (::stat(path.c_str(), &info) != 0) {
    if (errno == ENOENT) {
      throw InputError("run file '" + path + "' does not exist; check the path");
    }
    throw InputError("cannot open run file '" + path + "' (" + std::strerror(errno) +
                     "); check the path and its permissions");
  }
  if (!S_ISREG(info.st_mode)) refuse_not_run_file(path, "not a regular file", purpose);
  {
    std::ifstream in(path, std::ios::binary);
    if (!in) {
      throw InputError("cannot open run file '" + path + "' (" + std::strerror(errno) +
                       "); check the path and its permissions");
    }
    if (!has_hdf5_signature(in, static_cast<std::uint64_t>(info.st_size))) {
      refuse_not_run_file(path, "not an HDF5 file", purpose);
    }
  }
  if (flags == H5F_ACC_RDWR) {
    // Ask the operating system first: HDF5's refusal would read as damage, and the fix for
    // damage (--fresh) would throw away the committed units of a file that is merely read-only.
    const int fd = ::open(path.c_str(), O_RDWR | O_CLOEXEC);
    if (fd >= 0) {
      ::close(fd);
    } else if (const int error = errno; error == EROFS || error == EACCES || error == EPERM) {
      const std::string why =
          error == EROFS ? "its file system is read-only" : "no permission to write it";
      throw InputError("cannot resume run file '" + path + "': " + why + " (" +
                       std::strerror(error) +
                       "); its committed units are intact: make it writable, or copy it where you "
                       "can write and run there, then run the same command again");
    }
  }
  const hid_t id = H5Fopen(path.c_str(), flags, H5P_DEFAULT);
  if (id >= 0) return Id(id, H5Fclose);
  const auto stack = h5::error_stack();
  H5Eclear2(H5E_DEFAULT);
  const auto mentions = [&](const char* words) {
    return std::any_of(stack.begin(), stack.end(), [&](const std::string& line) {
      return line.find(words) != std::string::npos;
    });
  };
  if (mentions("unable to lock")) {
    throw InputError("run file '" + path +
                     "' is open in another process (HDF5 could not lock it); " +
                     (purpose == Purpose::resume
                          ? "wait for that run to finish or use another output path"
                          : "wait for that run to finish, or set HDF5_USE_FILE_LOCKING=FALSE to "
                            "read it while it is written"));
  }
  if (mentions("truncated file")) {
    throw InputError("run file '" + path +
                     "' is truncated (it ends before the data HDF5 recorded); " +
                     damaged_fix(purpose));
  }
  refuse_damaged(path, "HDF5 cannot open it: " + (stack.empty() ? "unknown" : stack.back()),
                 purpose);
}

// Returns the format version [major, minor].
std::vector<int> check_kind_and_version(hid_t file, const std::string& path, Purpose purpose) {
  const Where where{path};
  if (!h5::has_attribute(file, "file_kind")) {
    refuse_not_run_file(path, "file_kind is missing", purpose);
  }
  std::string kind;
  try {
    kind = h5::read_string_attribute(file, "file_kind", where);
  } catch (const Error&) {
    refuse_not_run_file(path, "file_kind is not a string", purpose);
  }
  if (kind != kFileKind) refuse_not_run_file(path, "file_kind is \"" + kind + "\"", purpose);
  if (!h5::has_attribute(file, "format_version")) {
    refuse_damaged(path, "format_version is missing", purpose);
  }
  std::vector<int> version;
  try {
    version = h5::read_int_array_attribute(file, "format_version", where);
  } catch (const Error&) {
    refuse_damaged(path, "format_version is not two integers", purpose);
  }
  if (version.size() != 2) refuse_damaged(path, "format_version is not two integers", purpose);
  if (version[0] != kFormatMajor) {
    throw InputError("run file '" + path + "' has format version " + std::to_string(version[0]) +
                     "." + std::to_string(version[1]) + "; this freegap reads " +
                     std::to_string(kFormatMajor) + ".x; use a freegap that reads " +
                     std::to_string(version[0]) + ".x" +
                     (purpose == Purpose::resume ? ", or a new output path" : ""));
  }
  return version;
}

// ---------------------------------------------------------------------------------------------
// Provenance rows as HDF5 compound types

struct SessionRow {
  const char* started;
  const char* ended;
  std::int32_t ranks;
  const char* hosts;
  const char* status;
  const char* tool_version;
  const char* git_revision;
};

struct UnitRow {
  std::int64_t size_index;
  std::int64_t unit;
  std::int32_t rank;
  const char* host;
  double seconds;
  std::int64_t session;
  const char* committed_at;
};

Id session_type(hid_t string, Where where) {
  Id type = h5::own(H5Tcreate(H5T_COMPOUND, sizeof(SessionRow)), H5Tclose, where,
                    "make the sessions type");
  const std::string what = "make the sessions type";
  h5::check(H5Tinsert(type.get(), "started", HOFFSET(SessionRow, started), string), where, what);
  h5::check(H5Tinsert(type.get(), "ended", HOFFSET(SessionRow, ended), string), where, what);
  h5::check(H5Tinsert(type.get(), "ranks", HOFFSET(SessionRow, ranks), H5T_NATIVE_INT32), where,
            what);
  h5::check(H5Tinsert(type.get(), "hosts", HOFFSET(SessionRow, hosts), string), where, what);
  h5::check(H5Tinsert(type.get(), "status", HOFFSET(SessionRow, status), string), where, what);
  h5::check(H5Tinsert(type.get(), "tool_version", HOFFSET(SessionRow, tool_version), string), where,
            what);
  h5::check(H5Tinsert(type.get(), "git_revision", HOFFSET(SessionRow, git_revision), string), where,
            what);
  return type;
}

Id unit_type(hid_t string, Where where) {
  const std::string what = "make the unit records type";
  Id type = h5::own(H5Tcreate(H5T_COMPOUND, sizeof(UnitRow)), H5Tclose, where, what);
  h5::check(H5Tinsert(type.get(), "size_index", HOFFSET(UnitRow, size_index), H5T_NATIVE_INT64),
            where, what);
  h5::check(H5Tinsert(type.get(), "unit", HOFFSET(UnitRow, unit), H5T_NATIVE_INT64), where, what);
  h5::check(H5Tinsert(type.get(), "rank", HOFFSET(UnitRow, rank), H5T_NATIVE_INT32), where, what);
  h5::check(H5Tinsert(type.get(), "host", HOFFSET(UnitRow, host), string), where, what);
  h5::check(H5Tinsert(type.get(), "seconds", HOFFSET(UnitRow, seconds), H5T_NATIVE_DOUBLE), where,
            what);
  h5::check(H5Tinsert(type.get(), "session", HOFFSET(UnitRow, session), H5T_NATIVE_INT64), where,
            what);
  h5::check(H5Tinsert(type.get(), "committed_at", HOFFSET(UnitRow, committed_at), string), where,
            what);
  return type;
}

// The same fields without padding, for the file.
Id packed(hid_t type, Where where) {
  Id copy = h5::own(H5Tcopy(type), H5Tclose, where, "pack a compound type");
  h5::check(H5Tpack(copy.get()), where, "pack a compound type");
  return copy;
}

// Reads every row of a 1-D compound dataset and hands each to `convert` (or its index to
// `unreadable`) before HDF5's strings are freed. The provenance tables grow by metadata
// changes, which a kill can tear (docs/run-file.md): a row whose strings cannot be read is reported
// instead of making the whole table, and with it every resume, fail.
template <typename Row, typename Convert, typename Unreadable>
void read_all_rows(hid_t dataset, hid_t type, Where where, const std::string& what, Convert convert,
                   Unreadable unreadable) {
  const auto dims = h5::extent(dataset, where);
  if (dims.size() != 1) h5::fail(where, what);
  for (hsize_t i = 0; i < dims[0]; ++i) {
    Row row{};
    Id file_space = h5::own(H5Dget_space(dataset), H5Sclose, where, what);
    const hsize_t start[1] = {i};
    const hsize_t count[1] = {1};
    h5::check(H5Sselect_hyperslab(file_space.get(), H5S_SELECT_SET, start, nullptr, count, nullptr),
              where, what);
    Id mem_space = h5::own(H5Screate_simple(1, count, nullptr), H5Sclose, where, what);
    if (H5Dread(dataset, type, mem_space.get(), file_space.get(), H5P_DEFAULT, &row) < 0) {
      H5Eclear2(H5E_DEFAULT);
      unreadable(static_cast<std::size_t>(i));
      continue;
    }
    struct Reclaim {
      hid_t type, space;
      void* buffer;
      ~Reclaim() { H5Dvlen_reclaim(type, space, H5P_DEFAULT, buffer); }
    } reclaim{type, mem_space.get(), &row};
    convert(row);
  }
}

std::string text_or_empty(const char* text) { return text == nullptr ? std::string() : text; }

void append_row(hid_t dataset, hid_t type, const void* row, Where where, const std::string& what) {
  auto dims = h5::extent(dataset, where);
  const hsize_t at = dims[0];
  dims[0] = at + 1;
  h5::check(H5Dset_extent(dataset, dims.data()), where, what);
  h5::write_block(dataset, type, {at}, {1}, row, where, what);
}

}  // namespace

// ---------------------------------------------------------------------------------------------
// Plain data

std::string spectrum_name(observe::SpectrumKind kind) {
  return kind == observe::SpectrumKind::eigenvalues ? "eigenvalues" : "singular_values";
}

std::int64_t SizeLayout::units() const {
  return trials_per_unit <= 0 ? 0 : (trials + trials_per_unit - 1) / trials_per_unit;
}
std::int64_t SizeLayout::unit_begin(std::int64_t unit) const { return unit * trials_per_unit; }
std::int64_t SizeLayout::unit_end(std::int64_t unit) const {
  return std::min((unit + 1) * trials_per_unit, trials);
}

void RunHeader::validate() const {
  const auto refuse = [](const std::string& what) { throw InputError("run header: " + what); };
  if (job_hash.empty()) refuse("job_hash must not be empty");
  if (sizes.empty()) refuse("sizes must hold at least one size");
  for (std::size_t i = 0; i < sizes.size(); ++i) {
    const SizeLayout& s = sizes[i];
    const std::string at = "sizes[" + std::to_string(i) + "].";
    if (s.n < 1) refuse(at + "n must be ≥ 1 (got " + std::to_string(s.n) + ")");
    if (s.trials < 1) refuse(at + "trials must be ≥ 1 (got " + std::to_string(s.trials) + ")");
    if (s.trials_per_unit < 1) {
      refuse(at + "trials_per_unit must be ≥ 1 (got " + std::to_string(s.trials_per_unit) + ")");
    }
    try {
      s.observe.validate();
    } catch (const InputError& e) {
      refuse(at + "observe: " + e.what());
    }
    if (s.observe.kind != spectrum) {
      refuse(at + "observe.kind must equal the run's spectrum (" + spectrum_name(spectrum) + ")");
    }
    if (!s.observe.keep_spectrum_trials.empty() &&
        s.observe.keep_spectrum_trials.back() >= static_cast<std::uint64_t>(s.trials)) {
      refuse(at + "observe.keep_spectrum_trials must be < trials (got " +
             std::to_string(s.observe.keep_spectrum_trials.back()) + ")");
    }
  }
  for (const auto& [key, value] : metadata) {
    if (key.empty() || key.find_first_of("/.") != std::string::npos) {
      refuse("metadata key '" + key + "' must be non-empty without '/' or '.'");
    }
  }
  std::vector<std::string> seen;
  for (std::size_t i = 0; i < estimates.size(); ++i) {
    const auto& e = estimates[i];
    if (e.estimator.empty() || e.estimate.empty()) {
      refuse("estimates[" + std::to_string(i) + "] needs an estimator and an estimate name");
    }
    if (i > 0 && estimates[i - 1].estimator != e.estimator &&
        std::find(seen.begin(), seen.end(), e.estimator) != seen.end()) {
      refuse("the columns of estimator '" + e.estimator + "' must be consecutive");
    }
    for (std::size_t j = 0; j < i; ++j) {
      if (estimates[j].estimator == e.estimator && estimates[j].estimate == e.estimate) {
        refuse("estimate '" + e.estimator + "." + e.estimate + "' appears twice");
      }
    }
    if (seen.empty() || seen.back() != e.estimator) seen.push_back(e.estimator);
  }
}

std::vector<std::string> RunHeader::estimators() const {
  std::vector<std::string> names;
  for (const auto& e : estimates) {
    if (names.empty() || names.back() != e.estimator) names.push_back(e.estimator);
  }
  return names;
}

// ---------------------------------------------------------------------------------------------
// The open file

namespace {

struct SizeHandles {
  Id group;
  Id moments, min, max, norm, failed, failure_reason;
  Id unit_histograms, unit_below, unit_above, unit_committed;
  Id spectra, spectrum_length;
  Id estimates, estimate_failure;  // only with estimators
  Id unit_sha256;                  // only with checksums (format 1.2)
  Id certificate;                  // only for extremes_only (format 1.5)
};

// Rows [b, b + rows) of a size's certificate dataset (format 1.5), or nothing without one.
std::vector<double> read_certificates(const SizeHandles& s, hsize_t b, std::size_t rows, Where w,
                                      const std::string& what) {
  if (!s.certificate.valid()) return {};
  std::vector<double> out(rows * kCertificateColumns);
  h5::read_block(s.certificate.get(), H5T_NATIVE_DOUBLE, {b, 0}, {rows, kCertificateColumns},
                 out.data(), w, what);
  return out;
}

}  // namespace

struct RunFile::Impl {
  std::string path;
  Id file;  // declared first, so it closes after every object in it
  bool writable = false;
  RunHeader header;
  Id string_type, session_type, unit_type;
  Id sessions, unit_records;
  std::vector<SizeHandles> sizes;
  bool checksummed = false;  // format 1.2: chunks have Fletcher-32, units and header SHA-256
  // Per size and unit: unit_committed is 1 in the file, and whether the unit is committed and
  // undamaged (what readers use and a resume keeps).
  std::vector<std::vector<bool>> marked;
  std::vector<std::vector<std::int8_t>> markers;  // as read (checks of 1.2 files)
  std::vector<std::vector<bool>> committed;
  Integrity integrity;
  std::int64_t session = -1;  // row of the open session in /provenance/sessions
  SessionRecord current;

  Where where() const { return Where{path}; }
  void flush(const std::string& what) {
    h5::check(H5Fflush(file.get(), H5F_SCOPE_GLOBAL), where(), what);
  }
  void make_types() {
    string_type = h5::string_type(where());
    session_type = store::session_type(string_type.get(), where());
    unit_type = store::unit_type(string_type.get(), where());
  }
  void write_session_row(hsize_t row, bool append);
  // Makes sure `bytes` past HDF5's end of file can be written: within the process's file size
  // limit, and with disk blocks allocated (without changing the file's size). Returns 0 or the
  // errno that says why not (ENOSPC, EDQUOT, EFBIG).
  int reserve_room(std::uint64_t bytes) const {
    haddr_t end = 0;
    void* handle = nullptr;
    if (H5Fget_eoa(file.get(), &end) < 0 ||
        H5Fget_vfd_handle(file.get(), H5P_DEFAULT, &handle) < 0 || handle == nullptr) {
      H5Eclear2(H5E_DEFAULT);
      return 0;  // cannot tell: HDF5's own error will say it if there is no room
    }
    rlimit limit{};
    if (::getrlimit(RLIMIT_FSIZE, &limit) == 0 && limit.rlim_cur != RLIM_INFINITY &&
        end + bytes > limit.rlim_cur) {
      return EFBIG;
    }
    const int fd = *static_cast<int*>(handle);
    if (::fallocate(fd, FALLOC_FL_KEEP_SIZE, static_cast<off_t>(end), static_cast<off_t>(bytes)) !=
        0) {
      // A file system that cannot reserve (EOPNOTSUPP, ...) is no evidence of a full disk.
      if (errno == ENOSPC || errno == EDQUOT) return errno;
    }
    return 0;
  }
  std::vector<SessionRecord> read_sessions() const;
};

namespace {

// ---------------------------------------------------------------------------------------------
// Writing a new file

void write_static_1d(hid_t group, const char* name, hid_t file_type, hid_t mem_type,
                     std::size_t count, const void* data, Where where) {
  // A zero-length dataset must be chunked with an unlimited maximum (a chunk cannot be empty).
  h5::Shape shape{{count}, {}, {}, false};
  if (count == 0) shape = h5::Shape{{0}, {kUnlimited}, {1}, false};
  Id dataset = h5::create_dataset(group, name, file_type, shape, nullptr, where);
  h5::write_block(dataset.get(), mem_type, {0}, {count}, data, where,
                  std::string("write dataset '") + name + "'");
}

// A size's unit_histograms, and (1.5) for an extremes_only size (no bins) its certificates.
void create_histograms(hid_t g, hsize_t bins, hsize_t t, hsize_t rows, hsize_t u, Where where) {
  const std::int64_t zero64 = 0;
  if (bins > 0) {
    h5::create_dataset(g, "unit_histograms", H5T_STD_I64LE,
                       {{u, bins}, {}, {1, bins}, true, true}, &zero64, where);
    return;
  }
  // A chunk cannot be empty, so the width may grow (it never does).
  h5::create_dataset(g, "unit_histograms", H5T_STD_I64LE,
                     {{u, 0}, {u, kUnlimited}, {1, 1}, true, true}, &zero64, where);
  h5::create_dataset(g, "certificate", H5T_IEEE_F64LE,
                     {{t, kCertificateColumns}, {}, {rows, kCertificateColumns}, true, true},
                     &kNaN, where);
}

void write_size(hid_t sizes_group, std::size_t index, const SizeLayout& layout, hid_t string,
                std::size_t estimate_columns, std::size_t estimator_count, Where where) {
  const std::string name = std::to_string(index);
  Id group = h5::own(H5Gcreate2(sizes_group, name.c_str(), H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT),
                     H5Gclose, where, "create group '/sizes/" + name + "'");
  const hid_t g = group.get();
  const auto& config = layout.observe;
  h5::write_int64_attribute(g, "n", layout.n, where);
  h5::write_int64_attribute(g, "trials", layout.trials, where);
  h5::write_int64_attribute(g, "trials_per_unit", layout.trials_per_unit, where);
  h5::write_int64_attribute(g, "units", layout.units(), where);
  h5::write_int64_attribute(g, "max_moment", config.max_moment, where);
  h5::write_int64_attribute(g, "keep_count", layout.keep_count(), where);
  h5::write_int64_attribute(g, "bins", static_cast<std::int64_t>(config.bins()), where);
  if (config.extremes_only) h5::write_int64_attribute(g, "extremes_only", 1, where);

  write_static_1d(g, "bin_edges", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, config.bin_edges.size(),
                  config.bin_edges.data(), where);
  write_static_1d(g, "kept_trials", H5T_STD_U64LE, H5T_NATIVE_UINT64,
                  config.keep_spectrum_trials.size(), config.keep_spectrum_trials.data(), where);

  // Every chunk holds rows of exactly one unit, and every chunk is allocated now: a later write
  // of a unit touches only its own chunks' raw bytes, never another unit's nor the chunk index.
  const hsize_t t = as_hsize(layout.trials);
  const hsize_t rows = as_hsize(std::min(layout.trials_per_unit, layout.trials));
  const hsize_t u = as_hsize(layout.units());
  const hsize_t columns = as_hsize(config.max_moment) + 1;
  const hsize_t bins = config.bins();
  const std::int64_t zero64 = 0;
  const std::int8_t zero8 = 0;
  h5::create_dataset(g, "moments", H5T_IEEE_F64LE, {{t, columns}, {}, {rows, columns}, true, true},
                     &kNaN, where);
  for (const char* scalar : {"min", "max", "norm"}) {
    h5::create_dataset(g, scalar, H5T_IEEE_F64LE, {{t}, {}, {rows}, true, true}, &kNaN, where);
  }
  h5::create_dataset(g, "failed", H5T_STD_I8LE, {{t}, {}, {rows}, true, true}, &zero8, where);
  // Variable-length strings cannot be filtered: the unit's SHA-256 covers them.
  h5::create_dataset(g, "failure_reason", string, {{t}, {}, {rows}, true, false}, nullptr, where);
  create_histograms(g, bins, t, rows, u, where);
  h5::create_dataset(g, "unit_below", H5T_STD_I64LE, {{u}, {}, {1}, true, true}, &zero64, where);
  h5::create_dataset(g, "unit_above", H5T_STD_I64LE, {{u}, {}, {1}, true, true}, &zero64, where);
  // The fill value (what HDF5 returns for a chunk its index cannot find) is kMarkerLost; every
  // marker is then written 0, so only a damaged chunk index can make a marker read kMarkerLost.
  {
    Id markers = h5::create_dataset(g, "unit_committed", H5T_STD_I8LE, {{u}, {}, {1}, true, true},
                                    &kMarkerLost, where);
    const std::vector<std::int8_t> zeros(u, 0);
    h5::write_block(markers.get(), H5T_NATIVE_INT8, {0}, {u}, zeros.data(), where,
                    "write the commit markers");
  }
  // Format 1.2: row u is the SHA-256 of unit u's content, written before its commit marker.
  const std::uint8_t zero_u8 = 0;
  h5::create_dataset(g, "unit_sha256", H5T_STD_U8LE,
                     {{u, kDigestBytes}, {}, {1, kDigestBytes}, true, true}, &zero_u8, where);

  const hsize_t kept = as_hsize(layout.keep_count());
  const hsize_t n = as_hsize(layout.n);
  if (kept == 0) {
    h5::create_dataset(g, "spectra", H5T_IEEE_F64LE, {{0, n}, {kUnlimited, n}, {1, n}, false, true},
                       &kNaN, where);
    h5::create_dataset(g, "spectrum_length", H5T_STD_I64LE, {{0}, {kUnlimited}, {1}, false, true},
                       &zero64, where);
  } else {
    h5::create_dataset(g, "spectra", H5T_IEEE_F64LE, {{kept, n}, {}, {1, n}, true, true}, &kNaN,
                       where);
    h5::create_dataset(g, "spectrum_length", H5T_STD_I64LE, {{kept}, {}, {1}, true, true}, &zero64,
                       where);
  }
  if (estimate_columns > 0) {
    // Format 1.1: the estimates, chunked by unit like every per-trial dataset.
    h5::create_dataset(g, "estimates", H5T_IEEE_F64LE,
                       {{t, estimate_columns}, {}, {rows, estimate_columns}, true, true}, &kNaN,
                       where);
    h5::create_dataset(g, "estimate_failure", string,
                       {{t, estimator_count}, {}, {rows, estimator_count}, true, false}, nullptr,
                       where);
  }
}

// The /estimators group: one row per estimate column (format 1.1).
void write_estimators(hid_t file, const std::vector<EstimateColumn>& columns, hid_t string,
                      Where where) {
  Id group = h5::own(H5Gcreate2(file, "estimators", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT),
                     H5Gclose, where, "create group '/estimators'");
  std::vector<const char*> estimator, estimate, truth;
  for (const auto& c : columns) {
    estimator.push_back(c.estimator.c_str());
    estimate.push_back(c.estimate.c_str());
    truth.push_back(c.truth.c_str());
  }
  for (const auto& [name, values] : {std::pair<const char*, const std::vector<const char*>*>{
                                         "estimator", &estimator},
                                     {"estimate", &estimate},
                                     {"truth", &truth}}) {
    write_static_1d(group.get(), name, string, string, values->size(), values->data(), where);
  }
}

void write_header(hid_t file, const RunHeader& header, hid_t string, hid_t session_file_type,
                  hid_t unit_file_type, Where where) {
  h5::write_string_attribute(file, "file_kind", kFileKind, where);
  const std::vector<int> version = {kFormatMajor, kFormatMinor};
  h5::write_int_array_attribute(file, "format_version", version, where);
  h5::write_string_attribute(file, "header_sha256", header_digest(header, version), where);
  h5::write_string_attribute(file, "tool_version", header.tool_version, where);
  h5::write_string_attribute(file, "git_revision", header.git_revision, where);
  h5::write_string_attribute(file, "job_text", header.job_text, where);
  h5::write_string_attribute(file, "job_canonical", header.job_canonical, where);
  h5::write_string_attribute(file, "job_hash", header.job_hash, where);
  h5::write_string_attribute(file, "expression", header.expression, where);
  h5::write_string_attribute(file, "spectrum", spectrum_name(header.spectrum), where);
  h5::write_int64_attribute(file, "self_adjoint", header.self_adjoint ? 1 : 0, where);
  h5::write_int64_attribute(file, "size_count", static_cast<std::int64_t>(header.sizes.size()),
                            where);

  Id metadata = h5::own(H5Gcreate2(file, "metadata", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT),
                        H5Gclose, where, "create group '/metadata'");
  for (const auto& [key, value] : header.metadata) {
    h5::write_string_attribute(metadata.get(), key.c_str(), value, where);
  }

  Id sizes = h5::own(H5Gcreate2(file, "sizes", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT), H5Gclose,
                     where, "create group '/sizes'");
  for (std::size_t i = 0; i < header.sizes.size(); ++i) {
    write_size(sizes.get(), i, header.sizes[i], string, header.estimates.size(),
               header.estimators().size(), where);
  }

  if (!header.estimates.empty()) write_estimators(file, header.estimates, string, where);

  Id provenance = h5::own(H5Gcreate2(file, "provenance", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT),
                          H5Gclose, where, "create group '/provenance'");
  h5::write_string_attribute(provenance.get(), "created", utc_now(), where);
  if (!header.job_directory.empty()) {
    h5::write_string_attribute(provenance.get(), "job_directory", header.job_directory, where);
  }
  // One row per chunk: an append then writes a new chunk and never rewrites earlier rows.
  h5::create_dataset(provenance.get(), "sessions", session_file_type,
                     {{0}, {kUnlimited}, {1}, false}, nullptr, where);
  h5::create_dataset(provenance.get(), "units", unit_file_type, {{0}, {kUnlimited}, {1}, false},
                     nullptr, where);
}

// ---------------------------------------------------------------------------------------------
// Reading an existing file

// A dataset's stored type must be the one freegap writes before anything is read: HDF5 sizes its
// conversion buffers by the stored type, and a damaged type message (an element claimed to be
// 1.4 GB wide, found by the run-file fuzz campaign) made it allocate and fill gigabytes before it
// found that the data lie past the end of the file.
void expect_stored_type(hid_t dataset, hid_t type, const char* name, Where where) {
  Id stored = h5::own(H5Dget_type(dataset), H5Tclose, where,
                      std::string("read the type of dataset '") + name + "'");
  if (H5Tequal(stored.get(), type) <= 0) {
    throw Error(std::string("dataset '") + name + "' has the wrong type");
  }
}

std::vector<double> read_doubles_1d(hid_t group, const char* name, Where where) {
  Id dataset = h5::open_dataset(group, name, where);
  expect_stored_type(dataset.get(), H5T_IEEE_F64LE, name, where);
  const auto dims = h5::extent_within_file(dataset.get(), sizeof(double), where, name);
  if (dims.size() != 1) h5::fail(where, std::string("read dataset '") + name + "' (not 1-D)");
  std::vector<double> values(dims[0]);
  h5::read_block(dataset.get(), H5T_NATIVE_DOUBLE, {0}, {dims[0]}, values.data(), where,
                 std::string("read dataset '") + name + "'");
  return values;
}

std::vector<std::uint64_t> read_uint64_1d(hid_t group, const char* name, Where where) {
  Id dataset = h5::open_dataset(group, name, where);
  expect_stored_type(dataset.get(), H5T_STD_U64LE, name, where);
  const auto dims = h5::extent_within_file(dataset.get(), sizeof(std::uint64_t), where, name);
  if (dims.size() != 1) h5::fail(where, std::string("read dataset '") + name + "' (not 1-D)");
  std::vector<std::uint64_t> values(dims[0]);
  h5::read_block(dataset.get(), H5T_NATIVE_UINT64, {0}, {dims[0]}, values.data(), where,
                 std::string("read dataset '") + name + "'");
  return values;
}

// The job file's directory as recorded at creation, or "" (an older file, or an unreadable
// attribute: it is a hint for finding the job's files, never a reason to refuse the file).
std::string read_job_directory(hid_t file, Where where) {
  try {
    if (!h5::has_link(file, "provenance")) return {};
    Id provenance = h5::open_group(file, "provenance", where);
    if (!h5::has_attribute(provenance.get(), "job_directory")) return {};
    return h5::read_string_attribute(provenance.get(), "job_directory", where);
  } catch (const Error&) {
    return {};
  }
}

// Reads the header; an Error (a missing or malformed piece) means the file is damaged.
RunHeader read_header(hid_t file, Where where) {
  RunHeader header;
  header.tool_version = h5::read_string_attribute(file, "tool_version", where);
  header.git_revision = h5::read_string_attribute(file, "git_revision", where);
  header.job_text = h5::read_string_attribute(file, "job_text", where);
  header.job_canonical = h5::read_string_attribute(file, "job_canonical", where);
  header.job_hash = h5::read_string_attribute(file, "job_hash", where);
  header.expression = h5::read_string_attribute(file, "expression", where);
  const std::string spectrum = h5::read_string_attribute(file, "spectrum", where);
  bool ok = false;
  header.spectrum = spectrum_from_name(spectrum, ok);
  if (!ok) throw Error("attribute 'spectrum' is \"" + spectrum + "\"");
  header.self_adjoint = h5::read_int64_attribute(file, "self_adjoint", where) != 0;

  Id metadata = h5::open_group(file, "metadata", where);
  H5O_info_t object{};
  h5::check(H5Oget_info2(metadata.get(), &object, H5O_INFO_NUM_ATTRS), where,
            "read group '/metadata'");
  for (hsize_t i = 0; i < object.num_attrs; ++i) {
    Id attribute = h5::own(H5Aopen_by_idx(metadata.get(), ".", H5_INDEX_NAME, H5_ITER_INC, i,
                                          H5P_DEFAULT, H5P_DEFAULT),
                           H5Aclose, where, "read group '/metadata'");
    const ssize_t length = H5Aget_name(attribute.get(), 0, nullptr);
    if (length < 0) h5::fail(where, "read group '/metadata'");
    std::string key(static_cast<std::size_t>(length) + 1, '\0');
    H5Aget_name(attribute.get(), key.size(), key.data());
    key.resize(static_cast<std::size_t>(length));
    header.metadata[key] = h5::read_string_attribute(metadata.get(), key.c_str(), where);
  }

  header.job_directory = read_job_directory(file, where);

  const std::int64_t count = h5::read_int64_attribute(file, "size_count", where);
  if (count < 1) throw Error("attribute 'size_count' is " + std::to_string(count));
  for (std::int64_t i = 0; i < count; ++i) {
    Id group = h5::open_group(file, size_group_name(static_cast<std::size_t>(i)), where);
    const hid_t g = group.get();
    SizeLayout layout;
    layout.n = h5::read_int64_attribute(g, "n", where);
    layout.trials = h5::read_int64_attribute(g, "trials", where);
    layout.trials_per_unit = h5::read_int64_attribute(g, "trials_per_unit", where);
    layout.observe.max_moment = static_cast<int>(h5::read_int64_attribute(g, "max_moment", where));
    layout.observe.kind = header.spectrum;
    layout.observe.bin_edges = read_doubles_1d(g, "bin_edges", where);
    layout.observe.keep_spectrum_trials = read_uint64_1d(g, "kept_trials", where);
    layout.observe.extremes_only = h5::has_attribute(g, "extremes_only") &&
                                   h5::read_int64_attribute(g, "extremes_only", where) == 1;
    header.sizes.push_back(std::move(layout));
  }
  if (h5::has_link(file, "estimators")) {
    Id group = h5::open_group(file, "estimators", where);
    std::vector<std::vector<std::string>> fields;
    for (const char* name : {"estimator", "estimate", "truth"}) {
      Id dataset = h5::open_dataset(group.get(), name, where);
      // A variable-length string is stored as a reference into a heap, which holds an 8-byte
      // address: at least 8 bytes of the file each.
      const auto dims = h5::extent_within_file(dataset.get(), 8, where,
                                               std::string("/estimators/") + name);
      if (dims.size() != 1) throw Error(std::string("dataset '/estimators/") + name + "' is not 1-D");
      fields.push_back(h5::read_strings(dataset.get(), 0, dims[0], where,
                                        std::string("read '/estimators/") + name + "'"));
    }
    if (fields[1].size() != fields[0].size() || fields[2].size() != fields[0].size()) {
      throw Error("the datasets of '/estimators' differ in length");
    }
    for (std::size_t i = 0; i < fields[0].size(); ++i) {
      header.estimates.push_back({fields[0][i], fields[1][i], fields[2][i]});
    }
  }
  try {
    header.validate();
  } catch (const InputError& e) {
    throw Error(e.what());
  }
  return header;
}

void expect_extent(hid_t dataset, const std::vector<hsize_t>& expected, const std::string& name,
                   Where where) {
  if (h5::extent(dataset, where) != expected) {
    throw Error("dataset '" + name + "' has the wrong shape");
  }
}

SizeHandles open_size(hid_t file, std::size_t index, const SizeLayout& layout,
                      std::size_t estimate_columns, std::size_t estimator_count, bool checksummed,
                      Where where) {
  SizeHandles s;
  const std::string group_name = size_group_name(index);
  s.group = h5::open_group(file, group_name, where);
  const hid_t g = s.group.get();
  const hsize_t t = as_hsize(layout.trials);
  const hsize_t u = as_hsize(layout.units());
  // The stored type too: HDF5 converts whatever type the file claims, so a damaged type message
  // would turn values (a commit marker among them) silently into others, or crash a write. So
  // are the chunk shape and (1.2) the checksum filter: HDF5 sizes its buffers by them, and a
  // damaged one made a resume's write of a unit crash.
  const auto open = [&](const char* name, const std::vector<hsize_t>& dims, hid_t type,
                        const std::vector<hsize_t>& chunk) {
    Id dataset = h5::open_dataset(g, name, where);
    const std::string path = "/" + group_name + "/" + name;
    expect_extent(dataset.get(), dims, path, where);
    Id stored = h5::own(H5Dget_type(dataset.get()), H5Tclose, where, "read the type of " + path);
    const bool ok =
        type < 0 ? H5Tget_class(stored.get()) == H5T_STRING && H5Tis_variable_str(stored.get()) > 0
                 : H5Tequal(stored.get(), type) > 0;
    if (!ok) throw Error("dataset '" + path + "' has the wrong type");
    Id create =
        h5::own(H5Dget_create_plist(dataset.get()), H5Pclose, where, "read the layout of " + path);
    std::vector<hsize_t> found(chunk.size() + 1, 0);
    const bool chunked = H5Pget_layout(create.get()) == H5D_CHUNKED &&
                         H5Pget_chunk(create.get(), static_cast<int>(found.size()), found.data()) ==
                             static_cast<int>(chunk.size());
    found.resize(chunk.size());
    if (!chunked || found != chunk) throw Error("dataset '" + path + "' has the wrong chunk shape");
    if (checksummed) {
      const int filters = H5Pget_nfilters(create.get());
      unsigned flags = 0;
      std::size_t count = 0;
      const bool filtered =
          filters == 1 && H5Pget_filter2(create.get(), 0, &flags, &count, nullptr, 0, nullptr,
                                         nullptr) == H5Z_FILTER_FLETCHER32;
      // Variable-length strings cannot be filtered (docs/run-file.md).
      if (type < 0 ? filters != 0 : !filtered) {
        throw Error("dataset '" + path + "' has the wrong filters");
      }
    }
    return dataset;
  };
  const hid_t f64 = H5T_IEEE_F64LE, i64 = H5T_STD_I64LE, i8 = H5T_STD_I8LE, text = -1;
  const hsize_t rows = as_hsize(std::min(layout.trials_per_unit, layout.trials));
  const hsize_t n = as_hsize(layout.n);
  const hsize_t columns = as_hsize(layout.observe.max_moment) + 1;
  const hsize_t bins = layout.observe.bins();
  const hsize_t kept = as_hsize(layout.keep_count());
  s.moments = open("moments", {t, columns}, f64, {rows, columns});
  s.min = open("min", {t}, f64, {rows});
  s.max = open("max", {t}, f64, {rows});
  s.norm = open("norm", {t}, f64, {rows});
  s.failed = open("failed", {t}, i8, {rows});
  s.failure_reason = open("failure_reason", {t}, text, {rows});
  s.unit_histograms = open("unit_histograms", {u, bins}, i64, {1, std::max<hsize_t>(bins, 1)});
  if (layout.observe.extremes_only) {
    const hsize_t c = kCertificateColumns;
    s.certificate = open("certificate", {t, c}, f64, {rows, c});
  }
  s.unit_below = open("unit_below", {u}, i64, {1});
  s.unit_above = open("unit_above", {u}, i64, {1});
  s.unit_committed = open("unit_committed", {u}, i8, {1});
  s.spectra = open("spectra", {kept, n}, f64, {1, n});
  s.spectrum_length = open("spectrum_length", {kept}, i64, {1});
  if (estimate_columns > 0) {
    s.estimates = open("estimates", {t, estimate_columns}, f64, {rows, estimate_columns});
    s.estimate_failure =
        open("estimate_failure", {t, estimator_count}, text, {rows, estimator_count});
  }
  if (checksummed) {
    s.unit_sha256 = open("unit_sha256", {u, kDigestBytes}, H5T_STD_U8LE, {1, kDigestBytes});
  }
  return s;
}

std::vector<std::int8_t> read_markers(const SizeHandles& s, const SizeLayout& layout, Where where) {
  const auto u = static_cast<std::size_t>(layout.units());
  std::vector<std::int8_t> marks(u, 0);
  h5::read_block(s.unit_committed.get(), H5T_NATIVE_INT8, {0}, {u}, marks.data(), where,
                 "read the commit markers");
  return marks;
}

// Only the exact value 1 counts: anything else was never written by a finished commit.
std::vector<bool> committed_of(const std::vector<std::int8_t>& marks) {
  std::vector<bool> out(marks.size());
  for (std::size_t i = 0; i < marks.size(); ++i) out[i] = marks[i] == 1;
  return out;
}

// The first way `file` and `job` differ (empty if none), "what: X in the file, Y for this job".
std::string first_difference(const RunHeader& file, const RunHeader& job) {
  const auto differ = [](const std::string& what, const std::string& in_file,
                         const std::string& for_job) {
    return what + ": " + in_file + " in the file, " + for_job + " for this job";
  };
  if (file.expression != job.expression) {
    return differ("expression", "\"" + file.expression + "\"", "\"" + job.expression + "\"");
  }
  if (file.spectrum != job.spectrum) {
    return differ("spectrum", spectrum_name(file.spectrum), spectrum_name(job.spectrum));
  }
  if (file.estimates != job.estimates) {
    const auto list = [](const std::vector<EstimateColumn>& columns) {
      std::string out;
      for (const auto& c : columns) out += (out.empty() ? "" : ", ") + c.estimator + "." + c.estimate;
      return "[" + out + "]";
    };
    return differ("estimates", list(file.estimates), list(job.estimates));
  }
  if (file.sizes.size() != job.sizes.size()) {
    return differ("number of sizes", std::to_string(file.sizes.size()),
                  std::to_string(job.sizes.size()));
  }
  for (std::size_t i = 0; i < file.sizes.size(); ++i) {
    const SizeLayout& a = file.sizes[i];
    const SizeLayout& b = job.sizes[i];
    const std::string at = "sizes[" + std::to_string(i) + "].";
    if (a.n != b.n) return differ(at + "n", std::to_string(a.n), std::to_string(b.n));
    if (a.trials != b.trials) {
      return differ(at + "trials", std::to_string(a.trials), std::to_string(b.trials));
    }
    if (a.trials_per_unit != b.trials_per_unit) {
      return differ(at + "trials_per_unit", std::to_string(a.trials_per_unit),
                    std::to_string(b.trials_per_unit));
    }
    if (a.observe.extremes_only != b.observe.extremes_only) {
      return differ(at + "extremes_only", a.observe.extremes_only ? "true" : "false",
                    b.observe.extremes_only ? "true" : "false");
    }
    if (a.observe.max_moment != b.observe.max_moment) {
      return differ(at + "max_moment", std::to_string(a.observe.max_moment),
                    std::to_string(b.observe.max_moment));
    }
    if (a.observe.bin_edges != b.observe.bin_edges) {
      return differ(at + "bin_edges", list_text(a.observe.bin_edges),
                    list_text(b.observe.bin_edges));
    }
    if (a.observe.keep_spectrum_trials != b.observe.keep_spectrum_trials) {
      return differ(at + "kept trials", list_text(a.observe.keep_spectrum_trials),
                    list_text(b.observe.keep_spectrum_trials));
    }
  }
  return "";
}

// Whether the file's trials were computed on another path than this job's (/metadata path; a
// file without it predates the O(N) paths and is dense). The same job can change path when a
// newer freegap adds one (format 1.3: two_projection), and the paths draw different random
// numbers, so their trials must not be mixed. Empty when they agree or the job names no path.
// The file's and the job's values of a /metadata key compared on resume, or nothing when the
// job names none or they agree; a file without the key has `before` (what older writers meant).
std::optional<std::pair<std::string, std::string>> metadata_differs(const RunHeader& file,
                                                                    const RunHeader& job,
                                                                    const std::string& key,
                                                                    const std::string& before) {
  const auto wanted = job.metadata.find(key);
  if (wanted == job.metadata.end()) return std::nullopt;
  const auto had = file.metadata.find(key);
  const std::string in_file = had == file.metadata.end() ? before : had->second;
  if (in_file == wanted->second) return std::nullopt;
  return std::pair{in_file, wanted->second};
}

std::string path_mismatch(const RunHeader& file, const RunHeader& job) {
  const auto d = metadata_differs(file, job, "path", "dense");
  if (!d) return "";
  return "holds trials computed on the " + d->first + " path, and this freegap computes this job "
         "on the " + d->second + " path (the paths draw different random numbers, so their "
         "trials cannot be mixed)";
}

// Whether the file's trials were drawn by samplers that draw differently from this freegap's
// (/metadata sampler_changes: how the job's samplers differ from those of format 1.3 and before,
// empty when they do not; a file without it was written by one of those). Same path, same job,
// other numbers: the trials must not be mixed. Empty when they agree or the job names none.
std::string sampler_mismatch(const RunHeader& file, const RunHeader& job) {
  const auto d = metadata_differs(file, job, "sampler_changes", "");
  if (!d) return "";
  auto name = [](const std::string& changes) {
    return changes.empty() ? std::string("the samplers of freegap's run-file format 1.3")
                           : "the samplers '" + changes + "'";
  };
  return "holds trials drawn by " + name(d->first) + ", and this freegap draws this job's trials "
         "by " + name(d->second) + " (they give different numbers, so their trials cannot "
         "be mixed)";
}

// Opens in this process, checks kind and version, reads the header (and compares it with its
// checksum) and every size's datasets and commit markers; the units' data are not checked here
// (see check_units). `flags` is H5F_ACC_RDONLY or H5F_ACC_RDWR.
std::unique_ptr<RunFile::Impl> load_unchecked(const std::string& path, Purpose purpose,
                                              unsigned flags) {
  auto impl = std::make_unique<RunFile::Impl>();
  impl->path = path;
  impl->file = open_existing(path, purpose, flags);
  impl->writable = flags == H5F_ACC_RDWR;
  const std::vector<int> version = check_kind_and_version(impl->file.get(), path, purpose);
  try {
    const Where where = impl->where();
    impl->header = read_header(impl->file.get(), where);
    // A 1.2 file has every checksum; the attribute also counts in case the version was damaged.
    impl->checksummed = version[1] >= 2 || h5::has_attribute(impl->file.get(), "header_sha256");
    impl->integrity.checksummed = impl->checksummed;
    if (impl->checksummed) {
      const std::string stored =
          h5::read_string_attribute(impl->file.get(), "header_sha256", where);
      if (stored != header_digest(impl->header, version)) {
        throw Error("its header does not match the checksum written with it");
      }
    }
    impl->make_types();
    for (std::size_t i = 0; i < impl->header.sizes.size(); ++i) {
      impl->sizes.push_back(open_size(impl->file.get(), i, impl->header.sizes[i],
                                      impl->header.estimates.size(),
                                      impl->header.estimators().size(), impl->checksummed, where));
      impl->markers.push_back(read_markers(impl->sizes.back(), impl->header.sizes[i], where));
      impl->marked.push_back(committed_of(impl->markers.back()));
      impl->committed.push_back(impl->marked.back());
    }
    Id provenance = h5::open_group(impl->file.get(), "provenance", where);
    impl->sessions = h5::open_dataset(provenance.get(), "sessions", where);
    impl->unit_records = h5::open_dataset(provenance.get(), "units", where);
  } catch (const InputError&) {
    throw;
  } catch (const Error& e) {
    refuse_damaged(path, e.what(), purpose);
  }
  return impl;
}

// Whether every chunk that holds unit u's rows is in its dataset's chunk index. A chunk the
// index cannot find reads as fill values (no error), and writing it would add to an index that
// is damaged: such a unit is not rewritten in place.
bool chunks_found(const RunFile::Impl& f, std::size_t i, std::size_t u) {
  const SizeLayout& layout = f.header.sizes[i];
  const SizeHandles& s = f.sizes[i];
  const hsize_t b = as_hsize(layout.unit_begin(static_cast<std::int64_t>(u)));
  const auto found = [](const Id& dataset, std::vector<hsize_t> at) {
    if (!dataset.valid()) return true;
    unsigned mask = 0;
    haddr_t address = HADDR_UNDEF;
    hsize_t size = 0;
    const bool ok =
        H5Dget_chunk_info_by_coord(dataset.get(), at.data(), &mask, &address, &size) >= 0 &&
        address != HADDR_UNDEF;
    H5Eclear2(H5E_DEFAULT);
    return ok;
  };
  bool all = found(s.moments, {b, 0}) && found(s.certificate, {b, 0}) &&
             (layout.observe.bins() == 0 || found(s.unit_histograms, {u, 0})) &&
             found(s.estimates, {b, 0}) && found(s.estimate_failure, {b, 0}) &&
             found(s.unit_sha256, {u, 0});
  for (const Id* d : {&s.min, &s.max, &s.norm, &s.failed, &s.failure_reason}) {
    all = all && found(*d, {b});
  }
  for (const Id* d : {&s.unit_below, &s.unit_above, &s.unit_committed}) all = all && found(*d, {u});
  const auto& kept = layout.observe.keep_spectrum_trials;
  const auto end = static_cast<std::uint64_t>(layout.unit_end(static_cast<std::int64_t>(u)));
  for (std::size_t j = 0; j < kept.size(); ++j) {
    if (kept[j] >= b && kept[j] < end) {
      all = all && found(s.spectra, {j, 0}) && found(s.spectrum_length, {j});
    }
  }
  return all;
}

// Reads unit u of size i as a reader would and compares it with its SHA-256: nullopt if it
// matches, else the damage (a chunk failing its Fletcher-32 checksum makes HDF5's read fail).
std::optional<DamagedUnit> check_unit(const RunFile::Impl& f, std::size_t i, std::size_t u) {
  DamagedUnit damage{i, f.header.sizes[i].n, static_cast<std::int64_t>(u), "", true};
  const SizeLayout& layout = f.header.sizes[i];
  const SizeHandles& s = f.sizes[i];
  const Where w = f.where();
  const std::string what = "read its rows";
  const std::int64_t begin = layout.unit_begin(static_cast<std::int64_t>(u));
  const std::int64_t end = layout.unit_end(static_cast<std::int64_t>(u));
  const auto rows = static_cast<std::size_t>(end - begin);
  const auto columns = static_cast<std::size_t>(layout.observe.max_moment) + 1;
  const std::size_t bins = layout.observe.bins();
  const auto n = static_cast<std::size_t>(layout.n);
  const auto& kept = layout.observe.keep_spectrum_trials;
  const auto kept_begin = static_cast<std::size_t>(
      std::lower_bound(kept.begin(), kept.end(), static_cast<std::uint64_t>(begin)) - kept.begin());
  const auto kept_end = static_cast<std::size_t>(
      std::lower_bound(kept.begin(), kept.end(), static_cast<std::uint64_t>(end)) - kept.begin());
  const std::size_t columns_e = f.header.estimates.size();
  const std::size_t estimators = f.header.estimators().size();
  const hsize_t b = as_hsize(begin);

  std::vector<double> moments(rows * columns), mins(rows), maxs(rows), norms(rows);
  std::vector<std::int8_t> failed(rows);
  std::vector<std::string> reasons, estimate_failures;
  std::vector<std::int64_t> counts(bins);
  std::int64_t below = 0, above = 0;
  std::vector<double> spectra((kept_end - kept_begin) * n);
  std::vector<std::int64_t> lengths(kept_end - kept_begin);
  std::vector<double> estimates(rows * columns_e);
  std::vector<double> certificates;
  Digest stored{};
  try {
    h5::read_block(s.moments.get(), H5T_NATIVE_DOUBLE, {b, 0}, {rows, columns}, moments.data(), w,
                   what);
    h5::read_block(s.min.get(), H5T_NATIVE_DOUBLE, {b}, {rows}, mins.data(), w, what);
    h5::read_block(s.max.get(), H5T_NATIVE_DOUBLE, {b}, {rows}, maxs.data(), w, what);
    h5::read_block(s.norm.get(), H5T_NATIVE_DOUBLE, {b}, {rows}, norms.data(), w, what);
    h5::read_block(s.failed.get(), H5T_NATIVE_INT8, {b}, {rows}, failed.data(), w, what);
    reasons = h5::read_strings(s.failure_reason.get(), b, rows, w, what);
    h5::read_block(s.unit_histograms.get(), H5T_NATIVE_INT64, {u, 0}, {1, bins}, counts.data(), w,
                   what);
    h5::read_block(s.unit_below.get(), H5T_NATIVE_INT64, {u}, {1}, &below, w, what);
    h5::read_block(s.unit_above.get(), H5T_NATIVE_INT64, {u}, {1}, &above, w, what);
    h5::read_block(s.spectra.get(), H5T_NATIVE_DOUBLE, {kept_begin, 0}, {kept_end - kept_begin, n},
                   spectra.data(), w, what);
    h5::read_block(s.spectrum_length.get(), H5T_NATIVE_INT64, {kept_begin}, {kept_end - kept_begin},
                   lengths.data(), w, what);
    if (columns_e > 0) {
      h5::read_block(s.estimates.get(), H5T_NATIVE_DOUBLE, {b, 0}, {rows, columns_e},
                     estimates.data(), w, what);
      estimate_failures = h5::read_strings(s.estimate_failure.get(), std::vector<hsize_t>{b, 0},
                                           std::vector<hsize_t>{rows, estimators}, w, what);
    }
    h5::read_block(s.unit_sha256.get(), H5T_NATIVE_UINT8, {u, 0}, {1, kDigestBytes}, stored.data(),
                   w, "read its SHA-256");
    certificates = read_certificates(s, b, rows, w, what);
  } catch (const Error& e) {
    damage.reason = e.what();
    const std::string prefix = "run file '" + f.path + "': ";
    if (damage.reason.starts_with(prefix)) damage.reason.erase(0, prefix.size());
    // Changed bytes fail the checksum; any other failure means HDF5 could not find the chunk
    // (its index is damaged), and writing through that index could land anywhere.
    damage.rewritable =
        damage.reason.find("Fletcher32") != std::string::npos && chunks_found(f, i, u);
    return damage;
  }
  UnitView view{moments, mins,  maxs,    norms,   failed,    {}, counts,
                below,   above, spectra, lengths, estimates, {}, {}};
  for (const auto& r : reasons) view.reasons.emplace_back(r);
  for (const auto& r : estimate_failures) view.estimate_failures.emplace_back(r);
  view.certificates = certificates;
  if (unit_digest(view) != stored) {
    damage.reason = "its content does not match its SHA-256";
    damage.rewritable = chunks_found(f, i, u);
    if (!damage.rewritable) damage.reason += " (a chunk of it is missing from the chunk index)";
    return damage;
  }
  return std::nullopt;
}

// Every unit marked committed, checked (format 1.2; an older file has nothing to check against).
std::vector<DamagedUnit> check_units(const RunFile::Impl& f, const contained::Emit& emit) {
  std::vector<DamagedUnit> out;
  if (!f.checksummed) return out;
  for (std::size_t i = 0; i < f.header.sizes.size(); ++i) {
    for (std::size_t u = 0; u < f.marked[i].size(); ++u) {
      if (const int mark = f.markers[i][u]; mark != 0 && mark != 1) {
        out.push_back({i, f.header.sizes[i].n, static_cast<std::int64_t>(u),
                       mark == kMarkerLost
                           ? "its commit marker is missing (the chunk index is damaged)"
                           : "its commit marker reads " + std::to_string(mark),
                       false});
        continue;
      }
      if (!f.marked[i][u]) continue;
      if (auto damage = check_unit(f, i, u)) out.push_back(std::move(*damage));
      emit(".");
    }
  }
  return out;
}

// Damaged units count as not committed: readers leave them out, a resume computes them again.
void apply_damage(RunFile::Impl& f, const std::vector<DamagedUnit>& damaged) {
  for (const auto& d : damaged) {
    if (d.size_index < f.committed.size() &&
        static_cast<std::size_t>(d.unit) < f.committed[d.size_index].size()) {
      f.committed[d.size_index][static_cast<std::size_t>(d.unit)] = false;
    }
  }
  f.integrity.damaged = damaged;
}

// Why a write failed for lack of room ("No space left on device", "File too large"), or "" if
// it did not: such a failure is the file system's, not the file's, and says so.
std::string lack_of_room(const std::string& message) {
  for (const int error : {ENOSPC, EFBIG, EDQUOT}) {
    const std::string text = std::strerror(error);
    if (message.find(text) != std::string::npos) return text;
  }
  return "";
}

// Removes a temporary file unless released.
class TempFile {
 public:
  explicit TempFile(std::string path) : path_(std::move(path)) {}
  TempFile(const TempFile&) = delete;
  TempFile& operator=(const TempFile&) = delete;
  ~TempFile() {
    if (!path_.empty()) ::unlink(path_.c_str());
  }
  void release() { path_.clear(); }

 private:
  std::string path_;
};

std::string temp_name_for(const std::string& path) {
  static unsigned counter = 0;
  const auto slash = path.rfind('/');
  const std::string dir = slash == std::string::npos ? "" : path.substr(0, slash + 1);
  const std::string base = slash == std::string::npos ? path : path.substr(slash + 1);
  // Hidden and unique per process and call, in the same directory so the rename is atomic.
  return dir + "." + base + ".creating." + std::to_string(::getpid()) + "." +
         std::to_string(++counter);
}

[[noreturn]] void refuse_existing(const std::string& path) {
  throw InputError("cannot create run file '" + path +
                   "': it already exists; resume it with the same job, use a new output path, "
                   "or --fresh to start over");
}

// Moves the finished file `temp` to `path` (by rename, else by hard link, leaving `temp` to the
// guard to remove), refusing when `path` exists.
void move_into_place(const std::string& temp, const std::string& path, TempFile& guard) {
  // Into place only now, and never over a file that appeared meanwhile. The open HDF5 handle
  // follows the inode, so the file stays open under its new name.
  if (::renameat2(AT_FDCWD, temp.c_str(), AT_FDCWD, path.c_str(), RENAME_NOREPLACE) != 0) {
    const int error = errno;
    if (error == EEXIST) refuse_existing(path);
    bool moved = false;
    if (error == EINVAL || error == ENOSYS) {
      // A file system without RENAME_NOREPLACE: a hard link also refuses an existing target.
      if (::link(temp.c_str(), path.c_str()) == 0) {
        moved = true;
      } else if (errno == EEXIST) {
        refuse_existing(path);
      }
    }
    if (!moved) {
      throw InputError("cannot create run file '" + path + "' (" + std::strerror(error) +
                       "); choose an output path in a directory you can write to");
    }
  } else {
    guard.release();
  }
}

}  // namespace

// ---------------------------------------------------------------------------------------------
// RunFile

RunFile::RunFile(std::unique_ptr<Impl> impl) : impl_(std::move(impl)) {}
RunFile::RunFile(RunFile&&) noexcept = default;
RunFile& RunFile::operator=(RunFile&&) noexcept = default;

RunFile::~RunFile() {
  if (impl_ && impl_->session >= 0) {
    try {
      end_session("interrupted");
    } catch (...) {
      // Destructors must not throw; the row then stays "running", which readers treat as killed.
    }
  }
}

const std::string& RunFile::path() const { return impl_->path; }
const RunHeader& RunFile::header() const { return impl_->header; }

RunFile RunFile::create(const std::string& path, const RunHeader& header_in) {
  header_in.validate();
  h5::quiet();
  RunHeader header = header_in;
  header.tool_version = freegap::tool_version;
  header.git_revision = freegap::git_revision;

  struct stat info {};
  if (::lstat(path.c_str(), &info) == 0) refuse_existing(path);

  // Reserve the temporary name ourselves: unlike HDF5, open() tells why it failed (errno).
  const std::string temp = temp_name_for(path);
  const int fd = ::open(temp.c_str(), O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0666);
  if (fd < 0) {
    throw InputError("cannot create run file '" + path + "' (" + std::strerror(errno) +
                     "); choose an output path in a directory you can write to");
  }
  ::close(fd);
  TempFile guard(temp);

  auto impl = std::make_unique<Impl>();
  impl->path = path;
  impl->writable = true;
  impl->header = header;
  impl->checksummed = true;
  impl->integrity.checksummed = true;
  const Where temp_where{temp};
  try {
    impl->file = h5::own(H5Fcreate(temp.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT), H5Fclose,
                         temp_where, "create the file");
    impl->make_types();
    Id session_file = packed(impl->session_type.get(), temp_where);
    Id unit_file = packed(impl->unit_type.get(), temp_where);
    write_header(impl->file.get(), header, impl->string_type.get(), session_file.get(),
                 unit_file.get(), temp_where);
    for (std::size_t i = 0; i < header.sizes.size(); ++i) {
      impl->sizes.push_back(open_size(impl->file.get(), i, header.sizes[i], header.estimates.size(),
                                      header.estimators().size(), true, temp_where));
      impl->marked.emplace_back(static_cast<std::size_t>(header.sizes[i].units()), false);
      impl->markers.emplace_back(static_cast<std::size_t>(header.sizes[i].units()), 0);
      impl->committed.push_back(impl->marked.back());
    }
    Id provenance = h5::open_group(impl->file.get(), "provenance", temp_where);
    impl->sessions = h5::open_dataset(provenance.get(), "sessions", temp_where);
    impl->unit_records = h5::open_dataset(provenance.get(), "units", temp_where);
    impl->flush("flush the new file");
  } catch (const InputError&) {
    throw;
  } catch (const Error& e) {
    // The file is built under a hidden name; the user knows only `path`.
    std::string why = e.what();
    const std::string prefix = "run file '" + temp + "': ";
    if (why.starts_with(prefix)) why.erase(0, prefix.size());
    if (const std::string room = lack_of_room(why); !room.empty()) {
      throw Error("cannot create run file '" + path + "': there is no room for it (" + room +
                  "); free space or choose an output path on another file system; nothing was "
                  "left behind");
    }
    throw Error("cannot create run file '" + path + "': " + why);
  }

  move_into_place(temp, path, guard);
  return RunFile(std::move(impl));
}

// Why a contained read of a run file did not finish ("" when it did).
static std::string failure_of(const contained::Outcome& outcome) {
  switch (outcome.kind) {
    case contained::Outcome::Kind::signalled:
      return "reading it killed the process that checks it: " +
             contained::signal_text(outcome.signal);
    case contained::Outcome::Kind::stalled: {
      std::ostringstream seconds;
      seconds << outcome.stall_seconds;
      return "reading it made no progress for " + seconds.str() + " s";
    }
    case contained::Outcome::Kind::lost:
      return "the process that checks it ended without an answer";
    case contained::Outcome::Kind::finished:
      break;
  }
  return "";
}

Integrity RunFile::check_contained(const std::string& path, bool resume, bool everything) {
  const Purpose purpose = resume ? Purpose::resume : Purpose::read;
  const contained::Outcome outcome = contained::run(
      [&](const contained::Emit& emit) {
        try {
          h5::quiet();
          auto impl = load_unchecked(path, purpose, H5F_ACC_RDONLY);
          emit(".");
          const bool checksummed = impl->checksummed;
          if (everything) {
            // Every read the commands make, in this process, so that the caller's reads of the
            // same objects afterwards are known not to crash.
            const auto damaged = check_units(*impl, emit);
            apply_damage(*impl, damaged);
            const RunFile file(std::move(impl));
            for (std::size_t i = 0; i < file.header().sizes.size(); ++i) {
              file.read_unit_histograms(i);
              emit(".");
              file.read_observations(i);
              emit(".");
              file.read_estimates(i);
              emit(".");
            }
            file.read_provenance();
            for (const auto& d : damaged) {
              emit("D " + std::to_string(d.size_index) + " " + std::to_string(d.n) + " " +
                   std::to_string(d.unit) + " " + (d.rewritable ? "1 " : "0 ") + d.reason);
            }
          }
          emit(checksummed ? "C" : "U");
        } catch (const InputError& e) {
          emit(std::string("I ") + e.what());
        } catch (const std::exception& e) {
          emit(std::string("F ") + e.what());
        }
      },
      contained::stall_limit());
  const std::string why = failure_of(outcome);
  if (!why.empty()) {
    throw InputError("run file '" + path + "' is damaged where HDF5 cannot read it (" + why +
                     "); " + damaged_fix(purpose));
  }
  Integrity out;
  for (const std::string& line : outcome.lines) {
    if (line == ".") continue;
    if (line.starts_with("I ")) throw InputError(line.substr(2));
    if (line.starts_with("F ")) refuse_damaged(path, line.substr(2), purpose);
    if (line == "C") out.checksummed = true;
    if (line.starts_with("D ")) {
      std::istringstream in(line.substr(2));
      DamagedUnit d;
      in >> d.size_index >> d.n >> d.unit >> d.rewritable;
      std::getline(in >> std::ws, d.reason);
      out.damaged.push_back(std::move(d));
    }
  }
  return out;
}

std::unique_ptr<RunFile::Impl> RunFile::load(const std::string& path, bool resume, unsigned flags) {
  const Integrity found = check_contained(path, resume, true);
  auto impl = load_unchecked(path, resume ? Purpose::resume : Purpose::read, flags);
  apply_damage(*impl, found.damaged);
  return impl;
}

Integrity verify(const std::string& path, bool resume) {
  return RunFile::check_contained(path, resume, true);
}

const Integrity& RunFile::integrity() const { return impl_->integrity; }

RunFile RunFile::open_for_resume(const std::string& path, const RunHeader& expected) {
  expected.validate();
  const Integrity found = check_contained(path, true, true);
  std::string stuck;
  for (const auto& d : found.damaged) {
    if (!d.rewritable) {
      stuck += (stuck.empty() ? "" : "; ") + std::string("N = ") + std::to_string(d.n) + ", unit " +
               std::to_string(d.unit) + ": " + d.reason;
    }
  }
  if (!stuck.empty()) {
    throw InputError("run file '" + path + "' is damaged where a resume cannot write it again (" +
                     stuck + "); restore a good copy, or start over with --fresh");
  }
  {
    // Every check on a read-only handle first: a foreign file is then never opened for writing,
    // so HDF5 cannot touch it (closing a read-write handle may rewrite its end).
    auto probe = load_unchecked(path, Purpose::resume, H5F_ACC_RDONLY);
    const RunHeader& found = probe->header;
    if (found.job_hash != expected.job_hash) {
      throw InputError("run file '" + path + "' was written by another job (job hash " +
                       short_hash(found.job_hash) + " in the file, " +
                       short_hash(expected.job_hash) +
                       " for this job); use a new output path or --fresh to start over");
    }
    std::string path_difference = path_mismatch(found, expected);
    if (path_difference.empty()) path_difference = sampler_mismatch(found, expected);
    if (!path_difference.empty()) {
      throw InputError("run file '" + path + "' " + path_difference +
                       "; use a new output path or --fresh to start over");
    }
    const std::string difference = first_difference(found, expected);
    if (!difference.empty()) {
      throw InputError("run file '" + path +
                       "' does not match this job although the job hash does (" + difference +
                       "); use a new output path or --fresh to start over");
    }
  }
  auto impl = load_unchecked(path, Purpose::resume, H5F_ACC_RDWR);
  apply_damage(*impl, found.damaged);
  return RunFile(std::move(impl));
}

RunHeader read_header_for_resume(const std::string& path) {
  // The header alone: what the check reads is what this reads.
  RunFile::check_contained(path, true, false);
  return load_unchecked(path, Purpose::resume, H5F_ACC_RDONLY)->header;
}

namespace {

// check_replaceable in this process: HDF5 reads the file here.
void check_replaceable_here(const std::string& path) {
  h5::quiet();
  struct stat info {};
  if (::stat(path.c_str(), &info) != 0) return;  // nothing there: nothing to replace
  const std::string refuse = "--fresh replaces only freegap run files; choose another output path";
  if (!S_ISREG(info.st_mode)) {
    throw InputError("'" + path + "' is not a freegap run file (not a regular file); " + refuse);
  }
  {
    std::ifstream in(path, std::ios::binary);
    if (!in || !has_hdf5_signature(in, static_cast<std::uint64_t>(info.st_size))) {
      throw InputError("'" + path + "' is not a freegap run file (not an HDF5 file); " + refuse);
    }
  }
  const hid_t id = H5Fopen(path.c_str(), H5F_ACC_RDONLY, H5P_DEFAULT);
  if (id < 0) {
    const auto stack = h5::error_stack();
    H5Eclear2(H5E_DEFAULT);
    const bool locked = std::any_of(stack.begin(), stack.end(), [](const std::string& line) {
      return line.find("unable to lock") != std::string::npos;
    });
    if (locked) {
      throw InputError("run file '" + path +
                       "' is open in another process (HDF5 could not lock it); wait for that "
                       "run to finish or use another output path");
    }
    // Truncated, damaged, or not HDF5 at all behind a copied signature: nothing proves freegap
    // wrote it, so it is not deleted (a damaged run file of one's own is removed by hand).
    throw InputError("'" + path +
                     "' cannot be opened as an HDF5 file (damaged, cut short or not HDF5), so "
                     "nothing proves it is a freegap run file and --fresh does not delete it; if "
                     "it is a run file of yours, delete it yourself, otherwise choose another "
                     "output path");
  }
  const Id file(id, H5Fclose);
  if (!h5::has_attribute(file.get(), "file_kind")) {
    throw InputError("'" + path + "' is not a freegap run file (file_kind is missing); " + refuse);
  }
  std::string kind(1, '?');  // not a literal assignment: GCC 12 -Wrestrict false positive
  try {
    kind = h5::read_string_attribute(file.get(), "file_kind", Where{path});
  } catch (const Error&) {
  }
  if (kind != kFileKind) {
    throw InputError("'" + path + "' is not a freegap run file (file_kind is \"" + kind + "\"); " +
                     refuse);
  }
}

}  // namespace

void check_replaceable(const std::string& path) {
  const contained::Outcome outcome = contained::run(
      [&](const contained::Emit& emit) {
        try {
          h5::quiet();
          check_replaceable_here(path);
          emit("Y");
        } catch (const InputError& e) {
          emit(std::string("I ") + e.what());
        } catch (const std::exception& e) {
          emit(std::string("F ") + e.what());
        }
      },
      contained::stall_limit());
  const std::string why = failure_of(outcome);
  if (why.empty()) {
    for (const std::string& line : outcome.lines) {
      if (line.starts_with("I ")) throw InputError(line.substr(2));
      if (line.starts_with("F ")) throw Error(line.substr(2));
    }
    return;
  }
  // What cannot be read cannot be proved a run file, and --fresh deletes nothing else.
  throw InputError("'" + path + "' is damaged where HDF5 cannot read it (" + why +
                   "), so it cannot be proved a freegap run file; --fresh replaces only freegap "
                   "run files; move it away yourself or choose another output path");
}

RunFile RunFile::open_read(const std::string& path) {
  return RunFile(load(path, false, H5F_ACC_RDONLY));
}

std::vector<bool> RunFile::committed(std::size_t size_index) const {
  if (size_index >= impl_->committed.size()) {
    throw Error("run file '" + impl_->path + "': no size " + std::to_string(size_index));
  }
  return impl_->committed[size_index];
}

bool RunFile::complete() const {
  for (const auto& flags : impl_->committed) {
    if (std::find(flags.begin(), flags.end(), false) != flags.end()) return false;
  }
  return true;
}

void RunFile::Impl::write_session_row(hsize_t row, bool append) {
  const std::string hosts = join(current.hosts, ',');
  const SessionRow data{current.started.c_str(),
                        current.ended.c_str(),
                        current.ranks,
                        hosts.c_str(),
                        current.status.c_str(),
                        current.tool_version.c_str(),
                        current.git_revision.c_str()};
  if (append) {
    append_row(sessions.get(), session_type.get(), &data, where(), "append a session record");
  } else {
    h5::write_block(sessions.get(), session_type.get(), {row}, {1}, &data, where(),
                    "update a session record");
  }
}

std::vector<SessionRecord> RunFile::Impl::read_sessions() const {
  std::vector<SessionRecord> out;
  read_all_rows<SessionRow>(
      sessions.get(), session_type.get(), where(), "read the sessions",
      [&](const SessionRow& row) {
        SessionRecord r;
        r.started = text_or_empty(row.started);
        r.ended = text_or_empty(row.ended);
        r.ranks = row.ranks;
        r.hosts = split(text_or_empty(row.hosts), ',');
        r.status = text_or_empty(row.status);
        r.tool_version = text_or_empty(row.tool_version);
        r.git_revision = text_or_empty(row.git_revision);
        out.push_back(std::move(r));
      },
      [&](std::size_t) { out.emplace_back(); });
  // A row torn by a kill (no status, or unreadable) and a "running" row followed by a later
  // session were both killed. Only the last row can be "running" for real (a live writer).
  for (std::size_t i = 0; i < out.size(); ++i) {
    if (out[i].status.empty() || (out[i].status == "running" && i + 1 < out.size())) {
      out[i].status = "killed";
    }
  }
  return out;
}

void RunFile::begin_session(int ranks, const std::vector<std::string>& hosts) {
  h5::quiet();
  Impl& f = *impl_;
  if (!f.writable)
    throw Error("run file '" + f.path + "' is open read-only; cannot begin a session");
  if (f.session >= 0) throw Error("run file '" + f.path + "': a session is already open");
  if (ranks < 1) throw Error("run file '" + f.path + "': a session needs ranks ≥ 1");
  for (const auto& host : hosts) {
    if (host.find(',') != std::string::npos) {
      throw Error("run file '" + f.path + "': host name '" + host + "' contains ','");
    }
  }
  // Rows of earlier sessions are never rewritten: one a kill tore may point at file space that
  // HDF5 has since given to another object (docs/run-file.md), so writing it could damage that object.
  // Whether an earlier session was killed is decided when reading instead.
  const hsize_t row = h5::extent(f.sessions.get(), f.where())[0];
  f.current = SessionRecord{
      utc_now(), "", ranks, hosts, "running", freegap::tool_version, freegap::git_revision};
  f.write_session_row(0, true);
  f.session = static_cast<std::int64_t>(row);
  f.flush("flush the session record");
}

void RunFile::end_session(const std::string& status) {
  h5::quiet();
  Impl& f = *impl_;
  if (f.session < 0) throw Error("run file '" + f.path + "': no session is open");
  if (status != "finished" && status != "interrupted") {
    throw Error("run file '" + f.path + "': session status must be finished or interrupted (got '" +
                status + "')");
  }
  f.current.ended = utc_now();
  f.current.status = status;
  const auto row = static_cast<hsize_t>(f.session);
  f.session = -1;
  f.write_session_row(row, false);
  f.flush("flush the session record");
}

namespace {

// ---------------------------------------------------------------------------------------------
// Writing a unit

// Refuses to write `unit` to the run file at `path`, saying why.
[[noreturn]] void refuse_unit(const UnitResult& unit, const std::string& path,
                              const std::string& why) {
  throw Error("cannot write unit " + std::to_string(unit.unit) + " of size " +
              std::to_string(unit.size_index) + " to run file '" + path + "': " + why);
}

// Refuses a unit the open file cannot take now: a read-only file, no open session, no such size
// or unit, a committed unit, or an observe configuration, row count or histogram that differs.
void check_unit_writable(const RunFile::Impl& f, const UnitResult& unit) {
  const auto refuse = [&](const std::string& why) { refuse_unit(unit, f.path, why); };
  if (!f.writable) refuse("the file is open read-only");
  if (f.session < 0) refuse("no session is open (call begin_session first)");
  if (unit.size_index >= f.header.sizes.size()) refuse("no such size");
  const SizeLayout& layout = f.header.sizes[unit.size_index];
  if (unit.unit < 0 || unit.unit >= layout.units()) refuse("no such unit");
  const auto u = static_cast<std::size_t>(unit.unit);
  if (f.committed[unit.size_index][u]) refuse("it is already committed");
  const observe::Observations& obs = unit.obs;
  if (!(obs.config == layout.observe)) refuse("its observe configuration differs from the file's");
  const std::int64_t begin = layout.unit_begin(unit.unit);
  const std::int64_t end = layout.unit_end(unit.unit);
  const auto rows = static_cast<std::size_t>(end - begin);
  if (obs.trials.size() != rows) {
    refuse("it holds " + std::to_string(obs.trials.size()) + " rows, expected " +
           std::to_string(rows));
  }
  const std::size_t bins = layout.observe.bins();
  if (obs.histogram.counts.size() != bins) refuse("its histogram has the wrong number of bins");
}

// One unit's content in the datasets' dense layout, and where it goes.
struct UnitBlock {
  std::size_t u = 0;  // the unit's row in the per-unit datasets
  std::int64_t begin = 0;
  std::size_t rows = 0, columns = 0, bins = 0, n = 0;
  std::vector<double> moments, mins, maxs, norms;
  std::vector<std::int8_t> failed;
  std::vector<const char*> reasons;
  std::size_t kept_begin = 0, kept_end = 0;  // the unit's rows among the kept spectra
  std::vector<double> spectra;
  std::vector<std::int64_t> lengths;
  std::vector<double> certificates;  // rows × 5 for an extremes_only size, else empty
};

// Lays out the trial rows of a unit that check_unit_writable accepted, checking each row.
UnitBlock unit_block(const UnitResult& unit, const SizeLayout& layout, const std::string& path) {
  const auto refuse = [&](const std::string& why) { refuse_unit(unit, path, why); };
  const observe::Observations& obs = unit.obs;
  const std::int64_t begin = layout.unit_begin(unit.unit);
  const std::int64_t end = layout.unit_end(unit.unit);
  const auto rows = static_cast<std::size_t>(end - begin);
  const auto columns = static_cast<std::size_t>(layout.observe.max_moment) + 1;
  const auto n = static_cast<std::size_t>(layout.n);

  // Dense buffers in the datasets' layout.
  std::vector<double> moments(rows * columns, kNaN), mins(rows), maxs(rows), norms(rows);
  std::vector<std::int8_t> failed(rows);
  std::vector<const char*> reasons(rows);
  const auto& kept = layout.observe.keep_spectrum_trials;
  const auto kept_begin = static_cast<std::size_t>(
      std::lower_bound(kept.begin(), kept.end(), static_cast<std::uint64_t>(begin)) - kept.begin());
  const auto kept_end = static_cast<std::size_t>(
      std::lower_bound(kept.begin(), kept.end(), static_cast<std::uint64_t>(end)) - kept.begin());
  std::vector<double> spectra((kept_end - kept_begin) * n, kNaN);
  std::vector<std::int64_t> lengths(kept_end - kept_begin, 0);
  std::vector<double> certificates;
  if (layout.observe.extremes_only) certificates.reserve(rows * kCertificateColumns);
  for (std::size_t i = 0; i < rows; ++i) {
    const observe::TrialRecord& row = obs.trials[i];
    if (layout.observe.extremes_only) {
      const auto values = row.certificate.row();
      certificates.insert(certificates.end(), values.begin(), values.end());
    }
    const auto trial = static_cast<std::uint64_t>(begin) + i;
    if (row.trial != trial) {
      refuse("row " + std::to_string(i) + " holds trial " + std::to_string(row.trial) +
             ", expected " + std::to_string(trial));
    }
    if (row.failed ? !row.moments.empty() : row.moments.size() != columns) {
      refuse("trial " + std::to_string(trial) + " has " + std::to_string(row.moments.size()) +
             " moments");
    }
    std::copy(row.moments.begin(), row.moments.end(), moments.begin() + i * columns);
    mins[i] = row.min;
    maxs[i] = row.max;
    norms[i] = row.norm;
    failed[i] = row.failed ? 1 : 0;
    reasons[i] = row.reason.c_str();
    const bool keeps = layout.observe.keeps_spectrum(trial);
    if (!keeps && !row.spectrum.empty()) {
      refuse("trial " + std::to_string(trial) + " carries a spectrum but is not kept");
    }
    if (keeps) {
      if (row.spectrum.size() > n) {
        refuse("trial " + std::to_string(trial) + " has a spectrum longer than N");
      }
      const auto j = static_cast<std::size_t>(std::lower_bound(kept.begin(), kept.end(), trial) -
                                              kept.begin() - kept_begin);
      std::copy(row.spectrum.begin(), row.spectrum.end(), spectra.begin() + j * n);
      lengths[j] = static_cast<std::int64_t>(row.spectrum.size());
    }
  }
  return UnitBlock{static_cast<std::size_t>(unit.unit),
                   begin,
                   rows,
                   columns,
                   layout.observe.bins(),
                   n,
                   std::move(moments),
                   std::move(mins),
                   std::move(maxs),
                   std::move(norms),
                   std::move(failed),
                   std::move(reasons),
                   kept_begin,
                   kept_end,
                   std::move(spectra),
                   std::move(lengths),
                   std::move(certificates)};
}

// Refuses a unit whose estimates or estimate failure reasons do not fill its `rows` rows.
void check_unit_estimates(const UnitResult& unit, const RunHeader& header, std::size_t rows,
                          const std::string& path) {
  const std::size_t columns_e = header.estimates.size();
  const std::size_t estimators = header.estimators().size();
  if (unit.estimates.size() != rows * columns_e ||
      unit.estimate_failures.size() != rows * estimators) {
    refuse_unit(unit, path,
                "it holds " + std::to_string(unit.estimates.size()) + " estimates and " +
                    std::to_string(unit.estimate_failures.size()) +
                    " estimate failure reasons, expected " + std::to_string(rows * columns_e) +
                    " and " + std::to_string(rows * estimators));
  }
}

// Reserves the room the unit needs past the file's end, or throws saying there is none.
void reserve_unit_room(const RunFile::Impl& f, const UnitResult& unit) {
  // Room first. HDF5 records the grown end of the file in its superblock while it writes there,
  // so a write that fails for lack of room leaves a file that HDF5 then calls truncated. With the
  // room reserved beforehand, a full disk stops the run before any byte of the unit is written.
  std::size_t string_bytes = 0;
  for (const auto& row : unit.obs.trials) string_bytes += row.reason.size() + 16;
  for (const auto& reason : unit.estimate_failures) string_bytes += reason.size() + 16;
  if (const int error = f.reserve_room(kRoomPerUnit + 2 * string_bytes); error != 0) {
    throw Error("run file '" + f.path + "': no room to write unit " + std::to_string(unit.unit) +
                " of size " + std::to_string(unit.size_index) + " (" + std::strerror(error) +
                "); the committed units are safe and the file is resumable: free space and run "
                "the same command again");
  }
}

// Writes the unit's SHA-256 (of its content as laid out in `k`) to its row of unit_sha256.
void write_unit_digest(const RunFile::Impl& f, const SizeHandles& s, const UnitResult& unit,
                       const UnitBlock& k, const std::string& what) {
  const observe::Observations& obs = unit.obs;
  const Where w = f.where();
  const std::size_t u = k.u;
  UnitView view{k.moments,
                k.mins,
                k.maxs,
                k.norms,
                k.failed,
                {},
                obs.histogram.counts,
                obs.histogram.below,
                obs.histogram.above,
                k.spectra,
                k.lengths,
                unit.estimates,
                {},
                {}};
  for (const char* reason : k.reasons) view.reasons.emplace_back(reason);
  for (const auto& reason : unit.estimate_failures) view.estimate_failures.emplace_back(reason);
  view.certificates = k.certificates;
  const Digest digest = unit_digest(view);
  h5::overwrite_block(s.unit_sha256.get(), H5T_NATIVE_UINT8, {u, 0}, {1, kDigestBytes},
                      digest.data(), w, what);
}

// Phase 1 of writing a unit: its rows at their fixed positions and its SHA-256, then flush.
void write_unit_content(RunFile::Impl& f, const SizeHandles& s, const UnitResult& unit,
                        const UnitBlock& k, const std::string& what) {
  const observe::Observations& obs = unit.obs;
  const Where w = f.where();
  const std::size_t u = k.u;
  const hsize_t b = as_hsize(k.begin);
  const hsize_t r = k.rows;
  const std::size_t columns = k.columns, bins = k.bins, n = k.n;
  const std::size_t kept_begin = k.kept_begin, kept_end = k.kept_end;
  const std::size_t columns_e = f.header.estimates.size();
  const std::size_t estimators = f.header.estimators().size();
  std::vector<const char*> estimate_reasons;
  for (const auto& reason : unit.estimate_failures) estimate_reasons.push_back(reason.c_str());

  h5::overwrite_block(s.moments.get(), H5T_NATIVE_DOUBLE, {b, 0}, {r, columns}, k.moments.data(), w,
                      what);
  h5::overwrite_block(s.min.get(), H5T_NATIVE_DOUBLE, {b}, {r}, k.mins.data(), w, what);
  h5::overwrite_block(s.max.get(), H5T_NATIVE_DOUBLE, {b}, {r}, k.maxs.data(), w, what);
  h5::overwrite_block(s.norm.get(), H5T_NATIVE_DOUBLE, {b}, {r}, k.norms.data(), w, what);
  h5::overwrite_block(s.failed.get(), H5T_NATIVE_INT8, {b}, {r}, k.failed.data(), w, what);
  h5::overwrite_block(s.failure_reason.get(), f.string_type.get(), {b}, {r}, k.reasons.data(), w,
                      what);
  h5::overwrite_block(s.unit_histograms.get(), H5T_NATIVE_INT64, {u, 0}, {1, bins},
                      obs.histogram.counts.data(), w, what);
  h5::overwrite_block(s.unit_below.get(), H5T_NATIVE_INT64, {u}, {1}, &obs.histogram.below, w,
                      what);
  h5::overwrite_block(s.unit_above.get(), H5T_NATIVE_INT64, {u}, {1}, &obs.histogram.above, w,
                      what);
  h5::overwrite_block(s.spectra.get(), H5T_NATIVE_DOUBLE, {kept_begin, 0},
                      {kept_end - kept_begin, n}, k.spectra.data(), w, what);
  h5::overwrite_block(s.spectrum_length.get(), H5T_NATIVE_INT64, {kept_begin},
                      {kept_end - kept_begin}, k.lengths.data(), w, what);
  if (columns_e > 0) {
    h5::overwrite_block(s.estimates.get(), H5T_NATIVE_DOUBLE, {b, 0}, {r, columns_e},
                        unit.estimates.data(), w, what);
    h5::overwrite_block(s.estimate_failure.get(), f.string_type.get(), {b, 0}, {r, estimators},
                        estimate_reasons.data(), w, what);
  }
  if (s.certificate.valid()) {
    h5::overwrite_block(s.certificate.get(), H5T_NATIVE_DOUBLE, {b, 0}, {r, kCertificateColumns},
                        k.certificates.data(), w, what);
  }
  if (f.checksummed) write_unit_digest(f, s, unit, k, what);
  f.flush(what);
}

// Phase 2 of writing a unit: the commit marker (and the provenance record), then flush.
void commit_unit(RunFile::Impl& f, const SizeHandles& s, const UnitResult& unit,
                 const UnitProvenance& where_run, std::size_t u, const std::string& what) {
  const Where w = f.where();
  const std::int8_t one = 1;
  h5::overwrite_block(s.unit_committed.get(), H5T_NATIVE_INT8, {u}, {1}, &one, w, what);
  const std::string committed_at = utc_now();
  const UnitRow record{static_cast<std::int64_t>(unit.size_index),
                       unit.unit,
                       where_run.rank,
                       where_run.host.c_str(),
                       where_run.seconds,
                       f.session,
                       committed_at.c_str()};
  append_row(f.unit_records.get(), f.unit_type.get(), &record, w, "append a unit record");
  f.flush(what);
}

}  // namespace

void RunFile::write_unit(const UnitResult& unit, const UnitProvenance& where_run) {
  h5::quiet();
  Impl& f = *impl_;
  check_unit_writable(f, unit);
  const UnitBlock k = unit_block(unit, f.header.sizes[unit.size_index], f.path);
  check_unit_estimates(unit, f.header, k.rows, f.path);
  const std::size_t u = k.u;

  const SizeHandles& s = f.sizes[unit.size_index];
  const Where w = f.where();
  const std::string what =
      "write unit " + std::to_string(unit.unit) + " of size " + std::to_string(unit.size_index);
  reserve_unit_room(f, unit);
  try {
    // A unit found damaged is still marked committed in the file: unmark it first, so a kill
    // while it is rewritten leaves it uncommitted, never committed with half-written rows.
    // (Every write here skips the checksum check of chunks HDF5 reads back to merge a partial
    // write: a damaged chunk is being replaced, not read.)
    if (f.marked[unit.size_index][u]) {
      const std::int8_t zero = 0;
      h5::overwrite_block(s.unit_committed.get(), H5T_NATIVE_INT8, {u}, {1}, &zero, w, what);
      f.flush(what);
      f.marked[unit.size_index][u] = false;
    }
    // Phase 1: the unit's rows at their fixed positions and its SHA-256, then flush.
    write_unit_content(f, s, unit, k, what);

    // Phase 2: the commit marker (and the provenance record), then flush. A kill before this
    // flush completes leaves the marker unset, and the unit is redone on resume.
    commit_unit(f, s, unit, where_run, u, what);
  } catch (const Error& e) {
    throw Error(std::string(e.what()) + "; the unit is not committed and will be redone on resume");
  }
  f.marked[unit.size_index][u] = true;
  f.committed[unit.size_index][u] = true;
}

std::vector<observe::Histogram> RunFile::read_unit_histograms(std::size_t size_index) const {
  h5::quiet();
  const Impl& f = *impl_;
  if (size_index >= f.header.sizes.size()) {
    throw Error("run file '" + f.path + "': no size " + std::to_string(size_index));
  }
  const SizeLayout& layout = f.header.sizes[size_index];
  const SizeHandles& s = f.sizes[size_index];
  const auto& flags = f.committed[size_index];
  const Where w = f.where();
  const std::string what = "read the unit histograms of size " + std::to_string(size_index);
  const std::size_t bins = layout.observe.bins();
  std::vector<observe::Histogram> out;
  for (std::size_t u = 0; u < flags.size(); ++u) {
    if (!flags[u]) continue;
    observe::Histogram h = observe::empty_histogram(layout.observe);
    h5::read_block(s.unit_histograms.get(), H5T_NATIVE_INT64, {u, 0}, {1, bins}, h.counts.data(), w,
                   what);
    h5::read_block(s.unit_below.get(), H5T_NATIVE_INT64, {u}, {1}, &h.below, w, what);
    h5::read_block(s.unit_above.get(), H5T_NATIVE_INT64, {u}, {1}, &h.above, w, what);
    out.push_back(std::move(h));
  }
  return out;
}

namespace {

// Adds the histograms of the `units` consecutive units from `u0` to `histogram`.
void add_unit_histograms(const SizeHandles& s, std::size_t u0, std::size_t units, std::size_t bins,
                         Where w, const std::string& what, observe::Histogram& histogram) {
  std::vector<std::int64_t> counts(units * bins), below(units), above(units);
  h5::read_block(s.unit_histograms.get(), H5T_NATIVE_INT64, {u0, 0}, {units, bins}, counts.data(),
                 w, what);
  h5::read_block(s.unit_below.get(), H5T_NATIVE_INT64, {u0}, {units}, below.data(), w, what);
  h5::read_block(s.unit_above.get(), H5T_NATIVE_INT64, {u0}, {units}, above.data(), w, what);
  for (std::size_t i = 0; i < units; ++i) {
    for (std::size_t k = 0; k < bins; ++k) histogram.counts[k] += counts[i * bins + k];
    histogram.below += below[i];
    histogram.above += above[i];
  }
}

// Appends the trial rows of trials [begin, end) (whole committed units) to `trials`.
void read_trial_rows(const SizeLayout& layout, const SizeHandles& s, std::int64_t begin,
                     std::int64_t end, Where w, const std::string& what,
                     std::vector<observe::TrialRecord>& trials) {
  const auto columns = static_cast<std::size_t>(layout.observe.max_moment) + 1;
  const auto n = static_cast<std::size_t>(layout.n);
  const auto& kept = layout.observe.keep_spectrum_trials;
  const auto rows = static_cast<std::size_t>(end - begin);
  const hsize_t b = as_hsize(begin);

  std::vector<double> moments(rows * columns), mins(rows), maxs(rows), norms(rows);
  std::vector<std::int8_t> failed(rows);
  h5::read_block(s.moments.get(), H5T_NATIVE_DOUBLE, {b, 0}, {rows, columns}, moments.data(), w,
                 what);
  h5::read_block(s.min.get(), H5T_NATIVE_DOUBLE, {b}, {rows}, mins.data(), w, what);
  h5::read_block(s.max.get(), H5T_NATIVE_DOUBLE, {b}, {rows}, maxs.data(), w, what);
  h5::read_block(s.norm.get(), H5T_NATIVE_DOUBLE, {b}, {rows}, norms.data(), w, what);
  h5::read_block(s.failed.get(), H5T_NATIVE_INT8, {b}, {rows}, failed.data(), w, what);
  const auto reasons = h5::read_strings(s.failure_reason.get(), b, rows, w, what);

  const auto kept_begin = static_cast<std::size_t>(
      std::lower_bound(kept.begin(), kept.end(), static_cast<std::uint64_t>(begin)) - kept.begin());
  const auto kept_end = static_cast<std::size_t>(
      std::lower_bound(kept.begin(), kept.end(), static_cast<std::uint64_t>(end)) - kept.begin());
  const std::size_t kept_rows = kept_end - kept_begin;
  std::vector<double> spectra(kept_rows * n);
  std::vector<std::int64_t> lengths(kept_rows);
  h5::read_block(s.spectra.get(), H5T_NATIVE_DOUBLE, {kept_begin, 0}, {kept_rows, n},
                 spectra.data(), w, what);
  h5::read_block(s.spectrum_length.get(), H5T_NATIVE_INT64, {kept_begin}, {kept_rows},
                 lengths.data(), w, what);
  const std::vector<double> certificates = read_certificates(s, b, rows, w, what);

  for (std::size_t i = 0; i < rows; ++i) {
    observe::TrialRecord row;
    row.trial = static_cast<std::uint64_t>(begin) + i;
    row.failed = failed[i] != 0;
    row.reason = reasons[i];
    if (!row.failed) {
      row.moments.assign(moments.begin() + i * columns, moments.begin() + (i + 1) * columns);
    }
    row.min = mins[i];
    row.max = maxs[i];
    row.norm = norms[i];
    if (!certificates.empty()) {
      row.certificate = observe::Certificate::from_row(&certificates[i * kCertificateColumns]);
    }
    const auto slot = std::lower_bound(kept.begin(), kept.end(), row.trial);
    if (slot != kept.end() && *slot == row.trial) {
      const auto j = static_cast<std::size_t>(slot - kept.begin()) - kept_begin;
      if (lengths[j] < 0 || static_cast<std::size_t>(lengths[j]) > n) {
        throw Error("spectrum_length of trial " + std::to_string(row.trial) + " is " +
                    std::to_string(lengths[j]));
      }
      const auto first = spectra.begin() + static_cast<std::ptrdiff_t>(j * n);
      row.spectrum.assign(first, first + lengths[j]);
    }
    trials.push_back(std::move(row));
  }
}

}  // namespace

observe::Observations RunFile::read_observations(std::size_t size_index) const {
  h5::quiet();
  const Impl& f = *impl_;
  if (size_index >= f.header.sizes.size()) {
    throw Error("run file '" + f.path + "': no size " + std::to_string(size_index));
  }
  const SizeLayout& layout = f.header.sizes[size_index];
  const SizeHandles& s = f.sizes[size_index];
  const auto& flags = f.committed[size_index];
  const Where w = f.where();
  const std::string what = "read the rows of size " + std::to_string(size_index);
  const std::size_t bins = layout.observe.bins();

  observe::Observations obs = observe::start_observations(layout.observe);
  try {
    // Committed units in runs of consecutive units, one read per dataset per run.
    std::size_t u0 = 0;
    while (u0 < flags.size()) {
      if (!flags[u0]) {
        ++u0;
        continue;
      }
      std::size_t u1 = u0;
      while (u1 < flags.size() && flags[u1]) ++u1;
      const std::int64_t begin = layout.unit_begin(static_cast<std::int64_t>(u0));
      const std::int64_t end = layout.unit_end(static_cast<std::int64_t>(u1) - 1);
      const std::size_t units = u1 - u0;

      add_unit_histograms(s, u0, units, bins, w, what, obs.histogram);
      read_trial_rows(layout, s, begin, end, w, what, obs.trials);
      u0 = u1;
    }
  } catch (const Error& e) {
    refuse_damaged(f.path, e.what(), Purpose::read);
  }
  return obs;
}

EstimateRows RunFile::read_estimates(std::size_t size_index) const {
  h5::quiet();
  const Impl& f = *impl_;
  if (size_index >= f.header.sizes.size()) {
    throw Error("run file '" + f.path + "': no size " + std::to_string(size_index));
  }
  EstimateRows out;
  const std::size_t columns = f.header.estimates.size();
  const std::size_t estimators = f.header.estimators().size();
  if (columns == 0) return out;
  const SizeLayout& layout = f.header.sizes[size_index];
  const SizeHandles& s = f.sizes[size_index];
  const auto& flags = f.committed[size_index];
  const Where w = f.where();
  const std::string what = "read the estimates of size " + std::to_string(size_index);
  try {
    for (std::size_t u = 0; u < flags.size(); ++u) {
      if (!flags[u]) continue;
      const std::int64_t begin = layout.unit_begin(static_cast<std::int64_t>(u));
      const std::int64_t end = layout.unit_end(static_cast<std::int64_t>(u));
      const auto rows = static_cast<std::size_t>(end - begin);
      std::vector<double> values(rows * columns);
      h5::read_block(s.estimates.get(), H5T_NATIVE_DOUBLE, {as_hsize(begin), 0}, {rows, columns},
                     values.data(), w, what);
      const auto reasons = h5::read_strings(s.estimate_failure.get(),
                                            std::vector<hsize_t>{as_hsize(begin), 0},
                                            std::vector<hsize_t>{rows, estimators}, w, what);
      for (std::size_t i = 0; i < rows; ++i) {
        out.trials.push_back(static_cast<std::uint64_t>(begin) + i);
      }
      out.values.insert(out.values.end(), values.begin(), values.end());
      out.failures.insert(out.failures.end(), reasons.begin(), reasons.end());
    }
  } catch (const Error& e) {
    refuse_damaged(f.path, e.what(), Purpose::read);
  }
  return out;
}

Provenance RunFile::read_provenance() const {
  h5::quiet();
  const Impl& f = *impl_;
  Provenance out;
  const Where w = f.where();
  Id provenance = h5::open_group(f.file.get(), "provenance", w);
  out.created = h5::read_string_attribute(provenance.get(), "created", w);
  out.sessions = f.read_sessions();
  read_all_rows<UnitRow>(
      f.unit_records.get(), f.unit_type.get(), w, "read the unit records",
      [&](const UnitRow& row) {
        // A record whose append was torn by a kill reads as fill (no commit time): skip it.
        if (text_or_empty(row.committed_at).empty()) return;
        UnitRecord r;
        r.size_index = static_cast<std::size_t>(row.size_index);
        r.unit = row.unit;
        r.rank = row.rank;
        r.host = text_or_empty(row.host);
        r.seconds = row.seconds;
        r.session = row.session;
        r.committed_at = text_or_empty(row.committed_at);
        out.units.push_back(std::move(r));
      },
      [](std::size_t) {});
  return out;
}

}  // namespace freegap::store
