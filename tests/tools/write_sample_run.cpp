// Test helper: writes the sample run of tests/support/store_sample.hpp to a run file, so that
// tests/store/check_run_file.py can read a file freegap made, finished or still being written.
//
// Usage:
//   write_sample_run --out PATH [--stop-after K]
//     Creates PATH, begins a session and writes units in order (size 0's units, then size 1's).
//     With --stop-after K it writes only K units first, prints "ready" on its own line (the file
//     is flushed and still open for writing) and waits for a line (or end of input) on stdin
//     before it writes the rest, so a reader can look at the live file without a race.
//     Ends the session as "finished" and prints "done".
// Exit status: 0 on success, 1 on an error (message on stderr).
#include <cstdio>
#include <cstdlib>
#include <exception>
#include <iostream>
#include <string>

#include "store_sample.hpp"
#include "freegap/errors.hpp"
#include "freegap/store.hpp"

int main(int argc, char** argv) {
  std::string out;
  long stop_after = -1;
  for (int i = 1; i + 1 < argc; i += 2) {
    const std::string key = argv[i];
    if (key == "--out") {
      out = argv[i + 1];
    } else if (key == "--stop-after") {
      stop_after = std::strtol(argv[i + 1], nullptr, 10);
    } else {
      std::fprintf(stderr, "write_sample_run: unknown option %s\n", key.c_str());
      return 1;
    }
  }
  if (out.empty() || argc % 2 == 0) {
    std::fprintf(stderr, "usage: write_sample_run --out PATH [--stop-after K]\n");
    return 1;
  }
  try {
    const auto header = store_sample::header();
    auto file = freegap::store::RunFile::create(out, header);
    file.begin_session(1, {"sample-host"});
    long written = 0;
    for (std::size_t s = 0; s < header.sizes.size(); ++s) {
      for (std::int64_t u = 0; u < header.sizes[s].units(); ++u) {
        if (written == stop_after) {
          std::printf("ready\n");
          std::fflush(stdout);
          std::string go;
          std::getline(std::cin, go);
        }
        file.write_unit(store_sample::unit(header, s, u), {0, "sample-host", 0.25});
        ++written;
      }
    }
    file.end_session("finished");
    std::printf("done\n");
  } catch (const std::exception& e) {
    std::fprintf(stderr, "write_sample_run: %s\n", e.what());
    return 1;
  }
  return 0;
}
