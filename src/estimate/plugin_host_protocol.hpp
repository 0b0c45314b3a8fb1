// What a rank and its plug-in host (src/estimate/host/plugin_host.cpp) say to each other over
// their socket pair (descriptor 3 in the host). Private to src/estimate: both ends are built
// from this one header, and every message from the host starts with kHostMagic, so a host of
// another build is noticed instead of misread.
#pragma once

#include <cstdint>

namespace freegap::estimate::host {

/// "FGH" and the protocol's revision in the low byte.
constexpr std::uint32_t kHostMagic = 0x46474801u;

/// The program's file name, looked for beside the running executable (docs/plugins.md).
constexpr const char* kHostProgram = "freegap-plugin-host";

/// The host's command line: kHostProgram LIBRARY PARENT_PID [KEY VALUE]... (the estimator's
/// parameters, sorted by key as the job has them).
constexpr int kFirstParameterArg = 3;

/// Rank → host: one trial. This header, then `length` spectrum values. When the plug-in reads
/// the matrix, it is at the start of the shared memory (rows · cols doubles, twice that for a
/// complex one); the descriptor of that memory comes once, read-only, as SCM_RIGHTS data on the
/// first header that needs it.
struct Request {
  std::uint64_t trial;
  std::uint64_t seed;
  std::int64_t n;
  std::int64_t length;
  std::int32_t kind;
  std::int32_t matrix_is_complex;
  std::int64_t matrix_rows;  // 0 without a matrix
  std::int64_t matrix_cols;
};

/// Host → rank: this header, then `length` bytes whose meaning depends on `kind`.
struct Message {
  std::uint32_t magic;  // kHostMagic
  std::uint32_t kind;   // Kind
  std::int32_t status;
  std::uint32_t length;
};

enum Kind : std::uint32_t {
  /// The library is loaded and both entry points found; describe is called next. No payload.
  kLoaded = 1,
  /// describe returned. Payload: u32 abi_version, i32 estimate_count, u32 wants (0 below
  /// version 2), u32 flags (DescribeFlags), u32 names_sent, then names_sent times (u32 length,
  /// bytes). Names are sent only when the version and count are ones this freegap reads.
  kDescribed = 2,
  /// Loading failed before describe; status is a LoadFailure, payload dlerror's text if any.
  kLoadFailed = 3,
  /// An answer to a Request: status is estimate's return value; payload min(status, capacity)
  /// doubles (none when status <= 0), then the plug-in's message.
  kAnswer = 4,
  /// The plug-in called exit(status) (the host's exit handler sends this and ends at once, so
  /// the rank's exit handlers are never in play). Payload: the phase, "loading", "describe" or
  /// "estimate".
  kExited = 5,
};

enum DescribeFlags : std::uint32_t {
  kNamesNull = 1,  // estimate_names is NULL
  kNameNull = 2,   // one of the names is NULL
};

enum LoadFailure : std::int32_t {
  kCannotLoad = 0,
  kNoDescribe = 1,
  kNoEstimate = 2,
  kDescribeNull = 3,
};

/// The longest estimate name the host sends (longer ones are refused by the rank anyway).
constexpr std::uint32_t kMaxNameBytes = 1024;
/// The plug-in's failure message is at most this many bytes, its NUL included.
constexpr int kMessageSize = 512;

}  // namespace freegap::estimate::host
