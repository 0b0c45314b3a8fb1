// The HDF5 run file: a self-describing, resumable record of one job's observations.
//
// One writer (rank 0) creates the file, streams finished work units into it and marks each unit
// committed with a two-phase flush (data, flush, marker, flush), so a kill at any instant leaves a
// file that opens and resumes: a resume trusts only committed units. Every unit's rows sit at
// fixed positions (trial index), so the file's content outside /provenance does not depend on
// how many ranks ran, in what order units finished or how often the run was resumed.
// The layout is documented in docs/run-file.md. Only this part knows HDF5 exists.
#pragma once

#include <cstddef>
#include <cstdint>
#include <map>
#include <memory>
#include <string>
#include <utility>
#include <vector>

#include "freegap/matrix_file.hpp"
#include "freegap/observe.hpp"

namespace freegap::store {

/// The value of the root attribute file_kind.
inline constexpr const char* kFileKind = "freegap run";
/// Format version [major, minor]. A reader refuses another major version; a minor version only
/// adds things an older reader may ignore.
inline constexpr int kFormatMajor = 1;
/// The minor version written: 1.1 added the estimates, 1.2 the checksums, 1.3 the value
/// "two_projection" of /metadata path, which a resume now compares with the job's path (a file of
/// another path, or one without the attribute — dense — is refused; docs/run-file.md). Files of
/// 1.0 and 1.1 stay readable and resumable; they are reported as unverified. 1.2 files read and
/// resume as before. 1.4 added /metadata sampler_changes: how the job's samplers draw differently
/// from those of 1.3 and before (empty when they do not), compared on resume like the path, so a
/// file drawn by an older sampler is refused where the samplers changed and resumed where not.
/// 1.5 added runs that observe only the extremes (observe.extremes_only): their sizes carry the
/// attribute extremes_only = 1, a zero-width unit_histograms, and a per-trial `certificate`
/// dataset (observe::Certificate), and the path value "krylov". Other files are as in 1.4.
inline constexpr int kFormatMinor = 5;

/// What is stored for one matrix size N.
struct SizeLayout {
  std::int64_t n = 0;                ///< N, ≥ 1: the length of a kept spectrum row
  std::int64_t trials = 0;           ///< T, ≥ 1: trials 0..T−1
  std::int64_t trials_per_unit = 0;  ///< B, ≥ 1: unit u holds trials [u·B, min((u+1)·B, T))
  /// Bin edges, max moment, spectrum kind (must equal RunHeader::spectrum) and the trials whose
  /// full spectrum is kept (each < T).
  observe::ObserveConfig observe;

  /// U = ⌈T / B⌉.
  std::int64_t units() const;
  /// The first trial of unit u and one past its last.
  std::int64_t unit_begin(std::int64_t unit) const;
  std::int64_t unit_end(std::int64_t unit) const;
  /// S: how many trials keep their full spectrum.
  std::int64_t keep_count() const {
    return static_cast<std::int64_t>(observe.keep_spectrum_trials.size());
  }
  friend bool operator==(const SizeLayout&, const SizeLayout&) = default;
};

/// One estimate column: which estimator made it, its name, and the text of its truth (a number,
/// "none" or a quantity the analysis computes; include/freegap/job.hpp).
struct EstimateColumn {
  std::string estimator;
  std::string estimate;
  std::string truth;
  friend bool operator==(const EstimateColumn&, const EstimateColumn&) = default;
};

/// Everything about the run that does not depend on how it ran.
struct RunHeader {
  std::string job_text;       ///< the job file, verbatim
  std::string job_canonical;  ///< its canonical text
  std::string job_hash;       ///< hash of the canonical text; resume requires it to match
  std::string expression;     ///< the expression as written
  observe::SpectrumKind spectrum = observe::SpectrumKind::eigenvalues;
  bool self_adjoint = true;  ///< whether the expression was found self-adjoint
  std::vector<SizeLayout> sizes;
  /// Free-form key/value pairs the caller wants recorded (seed, job name, ...); keys are
  /// non-empty and contain no '/' or '.'.
  std::map<std::string, std::string> metadata;
  /// The build that created the file. create() writes this build's freegap::tool_version and
  /// freegap::git_revision, whatever is given here; reading fills them from the file.
  std::string tool_version;
  std::string git_revision;
  /// The estimate columns, estimator by estimator (an estimator's columns are consecutive).
  /// Empty: the job declares no estimators, and the file has no estimate datasets.
  std::vector<EstimateColumn> estimates;
  /// Where the job file was when the run file was created (its directory, absolute): the
  /// anchor of the job's relative paths (eigenvalue and matrix files), for readers that rebuild
  /// the job elsewhere. A hint, not a result: kept under /provenance (excluded from comparisons
  /// and from the header digest); "" when unknown (files written before it was recorded).
  std::string job_directory;

  /// The estimators' names, in column order, each once.
  std::vector<std::string> estimators() const;
  /// Throws InputError naming the field and the rule it breaks.
  void validate() const;
};

/// The observations of exactly one unit: `obs.config` equals the size's layout, `obs.trials`
/// holds one row for each of the unit's trials in order, `obs.histogram` counts only them.
struct UnitResult {
  std::size_t size_index = 0;
  std::int64_t unit = 0;
  observe::Observations obs;
  /// With estimators only: rows × E values (row i is trial unit_begin + i; NaN where failed) and
  /// rows × P failure reasons ("" where the estimator did not fail), row-major.
  std::vector<double> estimates;
  std::vector<std::string> estimate_failures;
};

/// The estimates of a size's committed trials, in trial order.
struct EstimateRows {
  std::vector<std::uint64_t> trials;
  std::vector<double> values;         ///< trials × E, row-major
  std::vector<std::string> failures;  ///< trials × P, row-major
};

/// Where and how long a unit ran. Goes to /provenance only.
struct UnitProvenance {
  int rank = 0;
  std::string host;
  double seconds = 0.0;
};

/// One row of /provenance/sessions: one open-run-close of the writer.
struct SessionRecord {
  std::string started;  ///< UTC, ISO 8601 ("2026-01-31T12:00:00Z")
  std::string ended;    ///< empty while running or if the session was killed
  int ranks = 0;
  std::vector<std::string> hosts;
  /// "finished", "interrupted", "running" (only the last row: a live writer, or one killed
  /// with no later session yet), or "killed" (stored "running" with a later session after it,
  /// or a row a kill tore; decided when read, never written).
  std::string status;
  std::string tool_version;
  std::string git_revision;
};

/// One row of /provenance/units, appended when a unit commits.
struct UnitRecord {
  std::size_t size_index = 0;
  std::int64_t unit = 0;
  int rank = 0;
  std::string host;
  double seconds = 0.0;
  std::int64_t session = 0;  ///< row of /provenance/sessions
  std::string committed_at;  ///< UTC, ISO 8601
};

struct Provenance {
  std::string created;  ///< UTC, ISO 8601: when create() made the file
  std::vector<SessionRecord> sessions;
  /// In commit order; a record whose append a kill tore (or cannot be read) is left out.
  std::vector<UnitRecord> units;
};

/// A committed unit whose bytes no longer match the checksums written when it was committed.
struct DamagedUnit {
  std::size_t size_index = 0;
  std::int64_t n = 0;  ///< N of that size, for messages
  std::int64_t unit = 0;
  std::string reason;  ///< what failed: a chunk's Fletcher-32 checksum, or the unit's SHA-256
  /// Whether a resume may write the unit again in place: only when its bytes changed (a
  /// checksum failed), not when HDF5 cannot find them (a damaged chunk index).
  bool rewritable = false;
};

/// What the checks made when a run file was opened found.
struct Integrity {
  /// false: the file was written before checksums (format 1.0 or 1.1), so its data could not be
  /// verified.
  bool checksummed = false;
  /// Damaged units, by size and unit. They count as not committed: readers leave them out and a
  /// resume computes them again.
  std::vector<DamagedUnit> damaged;
};

/// An open run file. Move-only; closing (destruction) ends an open session as "interrupted".
/// Errors: InputError for a file the user pointed at that cannot be used (the message names the
/// path and the fix), Error for a failure while writing or a misuse of the API.
class RunFile {
 public:
  /// Creates a run file for `header` at `path`, which must not exist. The file is built under a
  /// temporary name in the same directory and renamed into place only when the header and every
  /// dataset exist; on failure nothing is left behind.
  static RunFile create(const std::string& path, const RunHeader& header);
  /// Every open first checks the whole file in a child process (see verify): a file HDF5 cannot
  /// read without crashing is refused with InputError, and damaged units are left out.
  ///
  /// Opens an existing run file to continue it. Checks, in order: a freegap run file, major
  /// format version, the job hash, then the layout. Throws InputError printing both sides.
  /// Damaged units are not committed: the resume computes them again.
  static RunFile open_for_resume(const std::string& path, const RunHeader& expected);
  /// Opens read-only (checks kind and major version). To read a file while a writer holds it,
  /// set HDF5_USE_FILE_LOCKING=FALSE in the environment.
  static RunFile open_read(const std::string& path);

  RunFile(RunFile&&) noexcept;
  RunFile& operator=(RunFile&&) noexcept;
  RunFile(const RunFile&) = delete;
  RunFile& operator=(const RunFile&) = delete;
  ~RunFile();

  const std::string& path() const;
  const RunHeader& header() const;
  /// What the checks at opening found (damaged units are not committed()).
  const Integrity& integrity() const;
  /// One flag per unit of a size: whether it is committed (and not damaged).
  std::vector<bool> committed(std::size_t size_index) const;
  /// Whether every unit of every size is committed.
  bool complete() const;

  /// Appends a session row to /provenance/sessions. Required before write_unit.
  void begin_session(int ranks, const std::vector<std::string>& hosts);
  /// Ends the open session: status "finished" or "interrupted".
  void end_session(const std::string& status);
  /// Writes a unit's rows at their trial positions, flushes, marks it committed, appends its
  /// provenance record, flushes again. Throws Error if the unit does not fit the layout or is
  /// already committed; nothing is marked committed then.
  void write_unit(const UnitResult& unit, const UnitProvenance& where);

  /// Observations of a size rebuilt from its committed units only: the histogram is the sum of
  /// their unit histograms, rows are their trials in trial order.
  observe::Observations read_observations(std::size_t size_index) const;

  /// The histogram of each committed unit of a size, in unit order (the independent replicates
  /// a bootstrap resamples).
  std::vector<observe::Histogram> read_unit_histograms(std::size_t size_index) const;

  /// The estimate rows of a size's committed units (empty without estimators).
  EstimateRows read_estimates(std::size_t size_index) const;
  Provenance read_provenance() const;

  /// The implementation (opaque; public only so that helpers in the source file can name it).
  struct Impl;

  /// The check of verify (everything) or of the header alone, in a child process.
  static Integrity check_contained(const std::string& path, bool resume, bool everything);

 private:
  explicit RunFile(std::unique_ptr<Impl> impl);
  // Checks the file in a child process, then opens it here and leaves damaged units out.
  static std::unique_ptr<Impl> load(const std::string& path, bool resume, unsigned flags);
  std::unique_ptr<Impl> impl_;
};

/// The header of an existing run file, read-only, after the checks of open_for_resume that do not
/// need the job (kind, major version), with the messages of a resume. For a runner that must
/// look at the file (its bin edges, its metadata) before deciding to open it for writing.
RunHeader read_header_for_resume(const std::string& path);

/// Checks a run file without opening it in this process: a child process opens it read-only,
/// reads every object the readers use and compares every committed unit (and the header) with
/// the checksums written with it. Throws InputError for a file that is not a usable run file,
/// including one whose reading killed the child (a signal) or stalled it; otherwise returns the
/// damaged units. `resume` only changes the fix the messages suggest.
Integrity verify(const std::string& path, bool resume = false);

/// Throws InputError unless `path` may be deleted to start a run over (--fresh): it must not
/// exist, or be a freegap run file (possibly truncated or damaged so that HDF5 cannot open it)
/// that no other process holds open. A directory, a foreign HDF5 file or any other file is
/// refused.
void check_replaceable(const std::string& path);

/// One column of a table in an HDF5 file of tables: float64 numbers, or UTF-8 text.
struct TableColumn {
  std::string name;
  bool text = false;
  std::vector<double> numbers;     ///< when !text
  std::vector<std::string> texts;  ///< when text
};

/// A named table of equally long columns.
struct TableData {
  std::string name;
  std::vector<TableColumn> columns;
};

/// Creates the HDF5 file `path` (refused when it exists) holding the string `attributes` on its
/// root, in the order given, and every table as the datasets /tables/<table>/<column>. The
/// report's copy of its tables goes through here, so that only this part writes HDF5. Throws
/// Error ("cannot create '<path>'" or "writing '<path>' failed").
void write_tables(const std::string& path,
                  const std::vector<std::pair<std::string, std::string>>& attributes,
                  const std::vector<TableData>& tables);

/// A matrix from an HDF5 file (matrix_file::read's reader for .h5 and .hdf5 files; the program
/// installs it with matrix_file::set_hdf5_reader). `dataset` names the dataset ("/grp/A" or
/// "A"); "" takes the only dataset at the file's root. The dataset must be rank 2, rows first
/// (HDF5 stores row-major), of floats or integers, or complex as h5py writes it: a compound of
/// two floats named "r" and "i". Throws InputError "matrix file 'PATH': …" for anything else: a
/// missing, truncated or foreign file, another rank or type, a non-finite entry.
matrix_file::Matrix read_matrix_dataset(const std::string& path, const std::string& dataset);

/// "eigenvalues" or "singular_values", as stored in the file.
std::string spectrum_name(observe::SpectrumKind kind);

}  // namespace freegap::store
