/* A test plug-in estimator (include/freegap/estimator_abi.h) built against ABI version 1 — its
 * info is version 1's struct, which ends before `wants` — so it also shows that freegap still
 * loads a version-1 plug-in. Compiled once per behaviour:
 * FAULT = 0 well-behaved; 1 segfaults on trials ≡ 1 (mod 3); 2 sleeps 30 s on trials ≡ 1 (mod 3);
 * 3 returns NaN on trials ≡ 1 (mod 3); 4 declares the wrong ABI version; 5 returns one value fewer
 * than declared on trials ≡ 1 (mod 3); 6 exports no estimate entry point; 7 reports failure with a
 * message on trials ≡ 1 (mod 3); 8 segfaults in describe; 9 hangs in describe; 10 calls exit(0)
 * on trials ≡ 1 (mod 3); 11 prints (CHATTY_LINES lines of about 100 characters to standard output and
 * one line to standard error on every trial, and a line when loaded); 12 hangs for good on
 * trials ≡ 1 (mod 3) when the environment variable FREEGAP_TEST_PLUGIN_HANG names a file, after
 * writing "hanging on trial T" to that file, and is well-behaved otherwise (so that a stopped run
 * can be resumed); 13 calls exit(3) in describe.
 * Estimates: top = the largest value; mean_square = (1/N) Σ x² — deterministic in the spectrum. */
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <unistd.h>

#include "freegap/estimator_abi.h"

#ifndef FAULT
#define FAULT 0
#endif

static const char* const kNames[] = {"top", "mean_square"};

/* freegap_estimator_info as version 1 of the header declared it. */
typedef struct info_version_1 {
  uint32_t abi_version;
  int32_t estimate_count;
  const char* const* estimate_names;
  const char* description;
} info_version_1;

#define CHATTY_LINES 100

#if FAULT == 11
__attribute__((constructor)) static void announce(void) {
  printf("chatty plug-in loaded\n");
}
#endif

const freegap_estimator_info* freegap_estimator_describe(void) {
#if FAULT == 8
  raise(SIGSEGV);
#elif FAULT == 9
  for (;;) pause();
#elif FAULT == 13
  exit(3);
#endif
  static const info_version_1 info = {
#if FAULT == 4
      FREEGAP_ESTIMATOR_ABI_VERSION + 1,
#else
      1,
#endif
      2, kNames, "test plug-in: largest value and mean square"};
  return (const freegap_estimator_info*)&info;
}

#if FAULT != 6
int freegap_estimator_estimate(const freegap_trial* trial, double* estimates, int capacity,
                               char* message, int message_size) {
  if (capacity < 2 || trial->spectrum_length < 1) return -1;
  const int faulty = trial->trial % 3 == 1;
  double top = trial->spectrum[0], sum = 0.0;
  for (int64_t i = 0; i < trial->spectrum_length; ++i) {
    const double x = trial->spectrum[i];
    if (x > top) top = x;
    sum += x * x;
  }
  estimates[0] = top;
  estimates[1] = sum / (double)trial->spectrum_length;
#if FAULT == 1
  if (faulty) raise(SIGSEGV);
#elif FAULT == 2
  if (faulty) sleep(30);
#elif FAULT == 3
  if (faulty) estimates[1] = NAN;
#elif FAULT == 5
  if (faulty) return 1;
#elif FAULT == 10
  if (faulty) exit(0);
#elif FAULT == 11
  for (int line = 0; line < CHATTY_LINES; ++line) {
    printf("chatty trial %llu line %03d ", (unsigned long long)trial->trial, line);
    for (int i = 0; i < 72; ++i) putchar('.');
    putchar('\n');
  }
  fprintf(stderr, "chatty trial %llu to standard error\n", (unsigned long long)trial->trial);
#elif FAULT == 12
  const char* sentinel = getenv("FREEGAP_TEST_PLUGIN_HANG");
  if (faulty && sentinel != NULL) {
    FILE* f = fopen(sentinel, "w");
    if (f != NULL) {
      fprintf(f, "hanging on trial %llu\n", (unsigned long long)trial->trial);
      fclose(f);
    }
    for (;;) pause();
  }
#elif FAULT == 7
  if (faulty) {
    snprintf(message, (size_t)message_size, "spectrum too short for trial %llu",
             (unsigned long long)trial->trial);
    return -1;
  }
#endif
  (void)faulty;
  (void)message;
  (void)message_size;
  return 2;
}
#endif
