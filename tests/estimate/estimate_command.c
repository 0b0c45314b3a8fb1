/* A test command for the estimator bridge (docs/plugins.md): reads a trial on standard
 * input, writes "top X" and "mean_square Y" on standard output — the same estimates as plugin.c.
 * argv[1] selects a behaviour: ok, sleep (30 s on trials ≡ 1 mod 3), nan, garbage, fail (exit 3
 * with a message on standard error), missing (leaves out mean_square). Other trials behave. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

int main(int argc, char** argv) {
  const char* mode = argc > 1 ? argv[1] : "ok";
  char line[256];
  unsigned long long trial = 0;
  long long count = -1;
  if (!fgets(line, sizeof line, stdin) || strcmp(line, "freegap-estimate 1\n") != 0) {
    fprintf(stderr, "not a freegap-estimate 1 input\n");
    return 4;
  }
  while (fgets(line, sizeof line, stdin)) {
    if (sscanf(line, "trial %llu", &trial) == 1) continue;
    if (sscanf(line, "values %lld", &count) == 1) break;
  }
  if (count < 1) return 5;
  double top = 0.0, sum = 0.0;
  for (long long i = 0; i < count; ++i) {
    double x = 0.0;
    if (scanf("%lf", &x) != 1) return 6;
    if (i == 0 || x > top) top = x;
    sum += x * x;
  }
  const int faulty = trial % 3 == 1;
  if (faulty && strcmp(mode, "sleep") == 0) sleep(30);
  if (faulty && strcmp(mode, "fail") == 0) {
    fprintf(stderr, "warming up\nestimate_command: cannot handle trial %llu\n", trial);
    return 3;
  }
  if (faulty && strcmp(mode, "garbage") == 0) {
    printf("top is large\n");
    return 0;
  }
  printf("# test command\n");
  printf("top %.17g\n", top);
  if (faulty && strcmp(mode, "missing") == 0) return 0;
  if (faulty && strcmp(mode, "nan") == 0) {
    printf("mean_square nan\n");
  } else {
    printf("mean_square %.17g\n", sum / (double)count);
  }
  return 0;
}
