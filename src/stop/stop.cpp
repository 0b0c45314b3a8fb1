// The stop flag and its handlers (include/freegap/stop.hpp).
#include "freegap/stop.hpp"

#include <string>

namespace freegap {

volatile std::sig_atomic_t g_stop_signal = 0;

Stopped::Stopped(int signal)
    : Error("stopped by signal " + std::to_string(signal) + "; nothing was written"),
      signal_(signal) {}

namespace {
extern "C" void on_stop_request(int signal) { g_stop_signal = signal; }
}  // namespace

void install_stop_handlers() {
  struct sigaction sa {};
  sa.sa_handler = on_stop_request;
  sigemptyset(&sa.sa_mask);
  sa.sa_flags = SA_RESTART;
  sigaction(SIGTERM, &sa, nullptr);
  sigaction(SIGINT, &sa, nullptr);
}

}  // namespace freegap
