// The job file: a TOML declaration of a study, parsed and validated with line-precise messages,
// and the canonical text and SHA-256 hash of everything that defines its numbers.
//
// The file, by example (every key is explained in jobs/*.toml):
//
//   name = "free sum of two ±1 spectra"     # optional; default: the job file's stem
//   seed = 2026                             # required, integer ≥ 0
//   sizes = [100, 200, 400, 800]            # required, strictly increasing, 1 ≤ N < 2^31
//   trials = 40                             # required; one number for every size, or a list
//   expression = "B + U B U^*"              # required; checked by the runner, not here
//
//   [matrices.B]                            # at least one; a name is a letter, then letters,
//   ensemble = "diagonal"                   # digits or '_' (not "i": the imaginary unit)
//   atoms = [[1.0, 0.5], [-1.0, 0.5]]       # [value, weight] pairs, weights sum to 1
//   [matrices.U]
//   ensemble = "haar_unitary"
//   method = "qr"                           # or "polar"; default "qr"
//
//   [observe]                               # optional, every key has a default
//   bins = 200                              # 1 ≤ bins ≤ observe::kMaxBins
//   range = "auto"                          # or [low, high] with low < high
//   margin = 0.1                            # only with range = "auto"; ≥ 0
//   max_moment = 8                          # 0..64
//   keep_spectra = "auto"                   # "all", "none", or k ≥ 0 (the first k trials);
//                                           # "auto": all, while the kept spectra of the job
//                                           # stay within kKeptSpectraBudget bytes
//   spectrum = "auto"                       # or "singular_values"
//
//   [[estimator]]                           # optional, any number (docs/plugins.md)
//   name = "second"                         # required, unique identifier
//   builtin = "population_second_moment"    # exactly one of builtin, library, command
//   library = "libmine.so"                  #   (relative to the job file)
//   command = ["python3", "est.py"]         #   (argv; a relative argv[0] with '/' is resolved)
//   timeout = 60                            # seconds per trial, > 0; default 60
//   [estimator.parameters]                  # optional key = value (string, number, boolean)
//   ratio = 0.5
//   [estimator.truth]                       # required: one key per estimate, naming its truth
//   second_moment = "matrix_moment:T:4"     # a number, "none", "limit_moment:K",
//                                           # "limit_edge:lower|upper", "limit_norm",
//                                           # "matrix_moment:NAME:K", "matrix_ratio:NAME"
//
//   [run]                                   # optional
//   trials_per_unit = 8                     # ≥ 1; default kDefaultTrialsPerUnit
//   memory_per_rank = "8 GiB"               # B, kB, MB, GB, TB, KiB, MiB, GiB, TiB, or integer
//   bytes output = "free-sum.h5"                  # relative to the job file's directory
//   force_dense = false
//   path = "auto"                           # "auto", "dense", "tridiagonal", "two_projection"
//
// Matrix keys by ensemble (a key that does not apply is an error):
//   gue, goe, wigner_rademacher            ensemble
//   wishart_*, ginibre_*                   ensemble, ratio (c = N/M > 0, default 1)
//   haar_unitary, haar_orthogonal          ensemble, method ("qr" | "polar", default "qr")
//   diagonal                               ensemble, law ("atoms" default | "uniform" |
//   "semicircle"
//                                          | "marchenko_pastur" | "file" | "spiked") and by law:
//                                            atoms: atoms (required)
//                                            uniform: low, high (both required)
//                                            semicircle: variance (> 0, default 1)
//                                            marchenko_pastur: ratio (> 0, default 1)
//                                            file: path (required; relative to the job file)
//                                            spiked: spikes (1–64 values, required), base
//                                              (default 0): a finite-rank perturbation
//   toeplitz                               ensemble, coefficients (c_0 … c_k, 1–17 numbers),
//                                          circulant (default false)
//   jacobi                                 ensemble, diagonal and off_diagonal (required, 1–16
//                                          numbers each, as many of one as of the other)
//   file                                   ensemble, path (required: .h5/.hdf5, .npy, .mtx/.mm;
//                                          "{N}" in it: one file per size), dataset (HDF5 only;
//                                          default the file's only dataset): a self-adjoint
//                                          matrix (declarations.hpp, FileMatrix)
//
// Every message is "file:line: key: rule broken and how to fix it" (line omitted when the key is
// missing from the file altogether); a TOML syntax error is "file:line:column: TOML syntax: ...".
#pragma once

#include <cstdint>
#include <functional>
#include <map>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "freegap/declarations.hpp"

namespace freegap::job {

/// Trials per work unit when [run] does not say: large enough that a unit's result (a few KB to
/// MB) and its commit are cheap next to its O(N^3) work, small enough that a killed run loses
/// little and ranks stay balanced on short ladders.
inline constexpr std::int64_t kDefaultTrialsPerUnit = 8;
/// Sizes must be below 2^31: LAPACK's default integer interface is 32-bit.
inline constexpr std::int64_t kSizeLimit = std::int64_t{1} << 31;

/// keep_spectra = "auto": every trial keeps its sorted spectrum (8N bytes, against O(N³) work
/// for a dense trial) while the spectra of the whole job take at most this many bytes; beyond
/// it, the first k trials of each size with the largest k that fits (at least 1). A job with a
/// size above kKeptSpectraMaxN keeps none by default: such sizes run on the tridiagonal path,
/// where a kept spectrum means computing every eigenvalue (O(N²)) instead of counting them per
/// bin (O(N·bins)), and a spectrum of 10⁷ values is 80 MB. The budget also bounds the memory of
/// `freegap report`, which holds about 100 bytes per kept eigenvalue of the size it analyses
/// (analysis::spectra_distances): 256 MiB of spectra in one size is about 3.4 GB there.
inline constexpr double kKeptSpectraBudget = 256.0 * 1024.0 * 1024.0;
inline constexpr std::int64_t kKeptSpectraMaxN = 16384;

struct ObserveSettings {
  std::int64_t bins = 200;
  bool auto_range = true;    ///< range from a deterministic pilot trial (the runner does it)
  double low = 0, high = 0;  ///< when auto_range is false
  /// Auto range: widen the pilot's [min, max] by margin × width on each side.
  double margin = 0.1;
  int max_moment = 8;             ///< 0..64
  /// The first k trials of each size keep their full spectrum (resolved at parse time from
  /// keep_spectra = k, "all", "none" or "auto", see keep_spectra_rule).
  std::int64_t keep_spectra = 0;
  /// How keep_spectra was given: "auto" (the default), "all", "none" or "first k".
  std::string keep_spectra_rule = "auto";
  bool singular_values = false;   ///< force singular values of a self-adjoint expression
  /// Observe only the smallest and largest eigenvalue and the norm (observe.extremes_only): no
  /// histogram, no moments, no kept spectra, so an iterative solver can find them without the
  /// whole spectrum (model::Path::krylov). bins, range, margin, max_moment and keep_spectra are
  /// then refused in the job file.
  bool extremes_only = false;
  /// With extremes_only: the relative error estimate at which the krylov path stops
  /// (observe.extremes_tolerance, 1e-14 … 1e-3; 0 = not given, the default 1e-12) and its step
  /// limit (observe.extremes_max_steps, 2 … 100000; 0 = not given, the default 1000).
  double extremes_tolerance = 0.0;
  std::int64_t extremes_max_steps = 0;
};

/// Bounds of observe.extremes_tolerance: below 1e-14 a residual bound in double precision cannot
/// certify it at the norms freegap meets; above 1e-3 the extremes would hardly be numbers.
inline constexpr double kMinExtremesTolerance = 1e-14;
inline constexpr double kMaxExtremesTolerance = 1e-3;
inline constexpr std::int64_t kMaxExtremesSteps = 100000;

/// Default per-trial timeout of an estimator, seconds.
inline constexpr double kDefaultEstimatorTimeout = 60.0;

/// One [[estimator]] of the job file: where its estimates come from and what each is compared
/// with. Plain data; src/estimate/ loads and runs it.
struct EstimatorSpec {
  enum class Source { builtin, library, command };
  std::string name;  ///< identifier, unique in the job
  Source source = Source::builtin;
  std::string builtin;               ///< builtin: its name
  std::string library;               ///< library: path resolved against the job's directory
  std::string library_digest;        ///< library: SHA-256 of the file when the job was loaded
  std::vector<std::string> command;  ///< command: argv (argv[0] resolved if relative with '/')
  double timeout = kDefaultEstimatorTimeout;  ///< seconds per trial
  /// [estimator.parameters], values as text, sorted by key.
  std::vector<std::pair<std::string, std::string>> parameters;
  /// The estimates, sorted by name, and each one's truth text (parallel): a number written with
  /// %.17g, "none", or a quantity the analysis computes (see the file comment above).
  std::vector<std::string> estimates;
  std::vector<std::string> truths;
};

struct Job {
  std::string path;  ///< where it was read from ("<text>" when parsed from a string)
  std::string text;  ///< the file's text, verbatim (stored in the run file)
  std::string name;  ///< default: the stem of path
  std::uint64_t seed = 0;
  std::vector<std::int64_t> sizes;   ///< strictly increasing, 1 ≤ N < kSizeLimit
  std::vector<std::int64_t> trials;  ///< one per size (a single number in the file is expanded)
  std::int64_t trials_per_unit = kDefaultTrialsPerUnit;  ///< work-unit block size
  /// Sorted by name (canonical order). A law = "file" path is resolved against the job file's
  /// directory.
  std::vector<declarations::MatrixSpec> matrices;
  std::string expression;  ///< verbatim; not parsed here
  ObserveSettings observe;
  /// Run file path; default: the job file's stem + ".h5" next to the job file. A relative path
  /// in the file is resolved against the job file's directory.
  std::string output;
  std::int64_t memory_per_rank_bytes = 0;  ///< 0 = not given
  bool force_dense = false;                ///< force the dense path
  /// [run] path: "auto" (the cheapest path that applies, by predicted cost) or a path's name:
  /// "dense", "tridiagonal", "two_projection" or "krylov" (observe.extremes_only jobs only).
  std::string run_path = "auto";
  /// [[estimator]] tables, in file order.
  std::vector<EstimatorSpec> estimators;

  /// One entry per matrix, parallel to `matrices`: for a law = "file" diagonal, the count and
  /// SHA-256 of the sorted numbers read from its file when the job was loaded ("<K> <hex>"), so
  /// that editing the file changes the hash; empty for every other matrix.
  std::vector<std::string> file_digests;
  /// 1-based line of every key in the file, by dotted name ("seed", "matrices.B",
  /// "matrices.B.ratio", "observe.bins"). Filled by parse_job.
  std::map<std::string, int, std::less<>> key_lines;

  /// Canonical text of everything that defines the numbers: seed, sizes, trials,
  /// trials_per_unit, matrices (sorted, numbers as %.17g, file digests), the expression
  /// verbatim, the observe settings, force_dense and the estimators (when there are any; a job
  /// without estimators keeps the canonical text it had before they existed). Not the name, output, memory limit, path,
  /// comments or formatting.
  std::string canonical() const;
  /// SHA-256 of canonical(), 64 lowercase hex digits.
  std::string hash() const;
  /// 1-based line of a key ("expression", "matrices.B.ratio"), 0 if the file does not have it.
  int line_of(std::string_view key) const;
  /// "file:line: key: " (or "file: key: " when the line is unknown), to prefix a message about
  /// a key that the runner checks (e.g. the expression).
  std::string where(std::string_view key) const;
};

/// Sets job.observe.keep_spectra from its rule and the job's sizes and trials ("auto", "all",
/// "none"; "first k" is left as given). The parser calls it; call it again after changing the
/// sizes or trials of a parsed job (freegap plan --rate-halfwidth does).
void resolve_keep_spectra(Job& job);

/// Where the paths a job names may lie. A job names paths in matrices.NAME.path (an eigenvalue
/// file it reads), run.output (the run file it writes), estimator library (a shared library it
/// loads) and estimator command (a program it starts; a name without '/' is looked up on PATH).
/// `confined` (`--confine`) refuses, before anything is opened, every one of them that resolves —
/// through "..", absolute paths and symbolic links — outside the job file's directory, and every
/// command looked up on PATH. It confines paths only: a plug-in or command inside the directory
/// still runs with the user's rights.
enum class Paths { anywhere, confined };

/// Reads and parses a job file. Throws InputError ("cannot read job file 'x.toml': <reason>" or a
/// validation message).
Job load_job(const std::string& path, Paths paths = Paths::anywhere);
/// Parses job text; `path` names it in messages and anchors relative paths. Throws InputError.
/// With `read_estimator_libraries` false, an estimator's library is not read (its digest stays
/// empty): for readers of a finished run file's job text, where the library may be gone. With
/// `read_files` false nothing but the text is read (no library, no eigenvalue file: a law =
/// "file" diagonal is checked for its keys only and gets no digest): validation without touching
/// the file system, as the job parser's fuzz target needs.
Job parse_job(std::string_view text, const std::string& path, bool read_estimator_libraries = true,
              Paths paths = Paths::anywhere, bool read_files = true);

/// Parses an amount of memory: "<number> <unit>" with unit B, kB, MB, GB, TB (powers of 1000)
/// or KiB, MiB, GiB, TiB (powers of 1024), case-insensitive, space optional ("4GiB", "1.5 GB").
/// Returns bytes (rounded down); throws InputError with a short reason if it cannot, if the
/// amount is below one byte or does not fit in int64.
std::int64_t parse_memory(std::string_view text);

/// SHA-256 (FIPS 180-4) of `data`, as 64 lowercase hex digits.
std::string sha256_hex(std::string_view data);

}  // namespace freegap::job
