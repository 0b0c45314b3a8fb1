/* A plug-in estimator of the spectrum's upper edge and centre: the largest eigenvalue and the
 * mean eigenvalue of each trial (an example scenario of our own: the noise floor and the top of
 * a detector's background spectrum). */
#include <freegap/estimator_abi.h>

static const char* const names[] = {"centre", "top"};

static const freegap_estimator_info info = {
    FREEGAP_ESTIMATOR_ABI_VERSION, 2, names, "largest and mean eigenvalue", 0u, 0u};

const freegap_estimator_info* freegap_estimator_describe(void) { return &info; }

int freegap_estimator_estimate(const freegap_trial* trial, double* estimates, int capacity,
                               char* message, int message_size) {
  (void)message;
  (void)message_size;
  if (capacity != 2 || trial->spectrum_length < 1) return -1;
  double sum = 0.0, top = trial->spectrum[0];
  for (int64_t i = 0; i < trial->spectrum_length; ++i) {
    sum += trial->spectrum[i];
    if (trial->spectrum[i] > top) top = trial->spectrum[i];
  }
  estimates[0] = sum / (double)trial->spectrum_length;
  estimates[1] = top;
  return 2;
}
