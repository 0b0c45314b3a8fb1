/* A test plug-in of ABI version 2 that asks for the trial's matrix (FREEGAP_WANTS_MATRIX) and
 * returns what lets a test check the matrix arrived whole and bit for bit
 * (tests/estimate/test_estimate.cpp, tests/estimate/check_estimators.py):
 *   rows, cols, is_complex      the shape and kind it received;
 *   abi_seen                    the trial struct's abi_version;
 *   checksum                    matrix_checksum below over every double of the matrix, in order;
 *   trace                       the sum of the real parts of the diagonal (square matrices);
 *   frobenius_square            the sum of |entry|^2 (equals the sum of squared eigenvalues or
 *                               singular values);
 *   entry_10_re, entry_10_im,   entries (1, 0) and (0, 1), read with the documented
 *   entry_01_re, entry_01_im    column-major layout.
 * FAULT = 1 builds one that also sets an unknown bit of `wants`, which freegap must refuse;
 * FAULT = 2 one that tries to make the matrix writable and scribble on it (which freegap's
 * read-only sharing must refuse): it reports failure with the reason mprotect gave, or, if it
 * could write, returns its values as usual after writing. */
#include <errno.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>
#include <sys/mman.h>

#include "freegap/estimator_abi.h"

#ifndef FAULT
#define FAULT 0
#endif

static const char* const kNames[] = {"rows",        "cols",        "is_complex",  "abi_seen",
                                     "checksum",    "trace",       "frobenius_square",
                                     "entry_10_re", "entry_10_im", "entry_01_re", "entry_01_im"};

const freegap_estimator_info* freegap_estimator_describe(void) {
  static const freegap_estimator_info info = {
      2, 11, kNames, "test plug-in: what it received of the matrix",
#if FAULT == 1
      FREEGAP_WANTS_MATRIX | 4u,
#else
      FREEGAP_WANTS_MATRIX,
#endif
      0};
  return &info;
}

/* FNV-1a over the 64-bit patterns of the doubles, folded to 52 bits so that the result is an
 * integer a double holds exactly. tests/estimate/test_estimate.cpp computes the same. */
static double matrix_checksum(const double* x, int64_t count) {
  uint64_t h = 14695981039346656037ull;
  for (int64_t i = 0; i < count; ++i) {
    uint64_t bits;
    memcpy(&bits, &x[i], sizeof bits);
    h ^= bits;
    h *= 1099511628211ull;
  }
  return (double)(h >> 12);
}

int freegap_estimator_estimate(const freegap_trial* t, double* out, int capacity, char* message,
                               int message_size) {
  if (capacity != 11) return -1;
  if (t->matrix == NULL || t->matrix_rows < 2 || t->matrix_cols < 2) {
    strncpy(message, "no matrix, or smaller than 2 x 2", (size_t)message_size - 1);
    return -1;
  }
  const int64_t rows = t->matrix_rows, cols = t->matrix_cols;
  const int64_t stride = t->matrix_is_complex ? 2 : 1; /* doubles per entry */
  const int64_t count = rows * cols * stride;
  double frobenius = 0.0, trace = 0.0;
  for (int64_t i = 0; i < count; ++i) frobenius += t->matrix[i] * t->matrix[i];
  if (rows == cols) {
    for (int64_t i = 0; i < rows; ++i) trace += t->matrix[(i + i * rows) * stride];
  }
  const double* e10 = &t->matrix[(1 + 0 * rows) * stride]; /* entry (1, 0) */
  const double* e01 = &t->matrix[(0 + 1 * rows) * stride]; /* entry (0, 1) */
  out[0] = (double)rows;
  out[1] = (double)cols;
  out[2] = (double)t->matrix_is_complex;
  out[3] = (double)t->abi_version;
  out[4] = matrix_checksum(t->matrix, count);
  out[5] = trace;
  out[6] = frobenius;
  out[7] = e10[0];
  out[8] = t->matrix_is_complex ? e10[1] : 0.0;
  out[9] = e01[0];
  out[10] = t->matrix_is_complex ? e01[1] : 0.0;
#if FAULT == 2
  /* The matrix starts a mapping of its own, so it is page-aligned. */
  if (mprotect((void*)t->matrix, (size_t)count * sizeof(double), PROT_READ | PROT_WRITE) != 0) {
    snprintf(message, (size_t)message_size, "cannot make the matrix writable (%s)", strerror(errno));
    return -1;
  }
  ((double*)t->matrix)[0] = 1e300;
#endif
  return 11;
}
