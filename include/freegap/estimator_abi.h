/* The plug-in estimator interface: a plain-C ABI for shared libraries that freegap loads with
 * dlopen, in a helper process of each rank, and calls on every trial of a run. Usable from C and
 * C++.
 *
 * A plug-in exports two functions with C linkage:
 *
 *   const freegap_estimator_info* freegap_estimator_describe(void);
 *       Returns static data: the ABI version the plug-in was built against and the names of the
 *       scalar estimates it returns, in the order it writes them. Called once per helper process
 *       (when the job is checked, before any trial, and again when a helper is replaced); it
 *       must return the same data every time, and must not fail, allocate per call, have side
 *       effects or take longer than the estimator's timeout (a crash, hang or exit refuses the
 *       job).
 *
 *   int freegap_estimator_estimate(const freegap_trial* trial, double* estimates, int capacity,
 *                                  char* message, int message_size);
 *       Called once per trial with the trial's spectrum (and its matrix, when the plug-in's
 *       info asks for it with FREEGAP_WANTS_MATRIX). Writes its estimates into
 *       estimates[0..k) in the order of estimate_names and returns k, the number written
 *       (capacity is the declared count; k must equal it). On failure returns a negative number
 *       and may write a short NUL-terminated reason into message (at most message_size bytes).
 *
 * Rules (enforced by freegap; see docs/plugins.md):
 *   - abi_version must be one this freegap loads, FREEGAP_ESTIMATOR_ABI_OLDEST to
 *     FREEGAP_ESTIMATOR_ABI_VERSION, else the job is refused. A plug-in built against an older
 *     version keeps working: freegap reads only the fields its version has, and passes a
 *     freegap_trial whose first fields are that version's;
 *   - estimate names are letters, digits and '_', starting with a letter, at most 64 characters,
 *     no name twice, 1..FREEGAP_ESTIMATOR_MAX_ESTIMATES of them; the job file's [estimator.truth]
 *     table must name exactly these estimates;
 *   - the call runs in a helper process of the rank (one per estimator per rank), so a crash, an
 *     exit, a hang past the job's timeout, a NaN or infinite value, or a return value other than
 *     the declared count marks that trial's estimates failed with the reason, and the run goes
 *     on; what the plug-in prints goes to the run's log RUN.estimators.log;
 *   - estimates must be a deterministic function of the trial's input (spectrum, matrix, N,
 *     trial index, seed, parameters) for results to be the same on any number of ranks; use the
 *     seed and trial index if the estimator needs random numbers;
 *   - the helper is a program of its own (freegap-plugin-host), not a copy of the rank: a
 *     plug-in must not call MPI, and state kept between calls in the helper is lost when the
 *     helper is restarted after a failure.
 */
#ifndef FREEGAP_ESTIMATOR_ABI_H
#define FREEGAP_ESTIMATOR_ABI_H

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Version of this interface. A change to any struct below or to the meaning of a field raises
 * it. New fields are only ever appended, so freegap still loads plug-ins built against any
 * version from FREEGAP_ESTIMATOR_ABI_OLDEST on, and refuses others.
 *   1  the spectrum, N, trial, seed and parameters;
 *   2  adds freegap_estimator_info.wants and the trial's matrix (FREEGAP_WANTS_MATRIX). */
#define FREEGAP_ESTIMATOR_ABI_VERSION 2
#define FREEGAP_ESTIMATOR_ABI_OLDEST 1

/* The exported symbols freegap looks up. */
#define FREEGAP_ESTIMATOR_DESCRIBE_SYMBOL "freegap_estimator_describe"
#define FREEGAP_ESTIMATOR_ESTIMATE_SYMBOL "freegap_estimator_estimate"

/* At most this many estimates per estimator. */
#define FREEGAP_ESTIMATOR_MAX_ESTIMATES 64

/* What the spectrum is (freegap_trial.spectrum_kind). */
#define FREEGAP_SPECTRUM_EIGENVALUES 0     /* real eigenvalues of a self-adjoint matrix, ascending */
#define FREEGAP_SPECTRUM_SINGULAR_VALUES 1 /* singular values of any other matrix, descending */

/* What a plug-in asks for besides the spectrum (bits of freegap_estimator_info.wants). */
#define FREEGAP_WANTS_MATRIX 1u /* the trial's evaluated matrix (freegap_trial.matrix) */

/* One parameter of the job file's [estimator.parameters] table, as text: strings verbatim,
 * numbers as the shortest text that reads back to the same double, booleans "true"/"false". */
typedef struct freegap_parameter {
  const char* key;
  const char* value;
} freegap_parameter;

/* One trial's input. All pointers are valid for the duration of the call only. */
typedef struct freegap_trial {
  uint32_t abi_version;    /* the version of this struct freegap passes: its own
                              FREEGAP_ESTIMATOR_ABI_VERSION, never older than the plug-in's */
  int32_t spectrum_kind;   /* FREEGAP_SPECTRUM_* */
  int64_t n;               /* the matrix size N */
  uint64_t trial;          /* trial index within this size, 0-based */
  uint64_t seed;           /* the job's seed */
  const double* spectrum;  /* spectrum_length values (N: freegap's expressions are square) */
  int64_t spectrum_length;
  const freegap_parameter* parameters; /* sorted by key */
  int64_t parameter_count;
  /* Since version 2. The trial's evaluated matrix P — the matrix whose spectrum is `spectrum`
   * — when the plug-in asked for it with FREEGAP_WANTS_MATRIX; otherwise NULL and zeros.
   * Column-major, rows × cols (N × N today: freegap refuses expressions that are not square; a
   * plug-in should still use both, and refuse a shape it cannot handle): entry (i, j)
   * is matrix[i + j*rows] for a real matrix, and matrix[2*(i + j*rows)] (real part),
   * matrix[2*(i + j*rows) + 1] (imaginary part) for a complex one — the layout of C99
   * `double complex` and C++ `std::complex<double>` arrays, and of LAPACK's column-major
   * arguments with leading dimension rows. When spectrum_kind is EIGENVALUES the matrix is
   * self-adjoint and both triangles are filled: the lower one is what the eigenvalues were
   * computed from, the upper one its exact (conjugate) mirror. Read-only. */
  const double* matrix;
  int64_t matrix_rows;
  int64_t matrix_cols;
  int32_t matrix_is_complex; /* 1: complex (interleaved real, imaginary parts); 0: real */
  int32_t reserved;          /* 0 */
} freegap_trial;

/* What a plug-in declares about itself. */
typedef struct freegap_estimator_info {
  uint32_t abi_version;              /* must be FREEGAP_ESTIMATOR_ABI_VERSION */
  int32_t estimate_count;            /* 1..FREEGAP_ESTIMATOR_MAX_ESTIMATES */
  const char* const* estimate_names; /* estimate_count names */
  const char* description;           /* one line for humans; may be NULL */
  /* Since version 2 (freegap reads it only when abi_version >= 2): */
  uint32_t wants;                    /* FREEGAP_WANTS_* bits; 0 for the spectrum alone */
  uint32_t reserved;                 /* 0 */
} freegap_estimator_info;

typedef const freegap_estimator_info* (*freegap_estimator_describe_fn)(void);
typedef int (*freegap_estimator_estimate_fn)(const freegap_trial* trial, double* estimates,
                                             int capacity, char* message, int message_size);

#ifdef __cplusplus
}
#endif

#endif /* FREEGAP_ESTIMATOR_ABI_H */
