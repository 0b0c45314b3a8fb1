// Test helper: prints everything a command reads from a run file, exactly, after the checks
// every reader goes through (RunFile::open_read), so tests/store/check_damaged_run_files.py can
// compare a damaged copy with the original unit by unit and prove that no changed number gets
// through unnamed.
//
// Usage: dump_run_file PATH
// Output: "header ..." lines, one "damaged SIZE UNIT" line per damaged unit, then per size one
// "unit SIZE UNIT <values>" line per committed unit with every value of its rows (doubles as %a,
// so equal text means equal bits). Exit status: 0, or 2 with the message on stderr when the
// file is refused (InputError), 1 on any other error.
#include <cstdio>
#include <exception>
#include <string>

#include "freegap/errors.hpp"
#include "freegap/store.hpp"

namespace {

std::string hex(double x) {
  char text[64];
  std::snprintf(text, sizeof text, "%a", x);
  return text;
}

}  // namespace

int main(int argc, char** argv) {
  if (argc != 2) {
    std::fprintf(stderr, "usage: dump_run_file PATH\n");
    return 1;
  }
  namespace store = freegap::store;
  try {
    const auto file = store::RunFile::open_read(argv[1]);
    const auto& h = file.header();
    std::printf("header job_hash %s\n", h.job_hash.c_str());
    std::printf("header expression %s\n", h.expression.c_str());
    std::printf("header job_canonical %zu\n", std::hash<std::string>{}(h.job_canonical));
    std::printf("header checksummed %d\n", file.integrity().checksummed ? 1 : 0);
    for (const auto& d : file.integrity().damaged) {
      std::printf("damaged %zu %lld\n", d.size_index, static_cast<long long>(d.unit));
    }
    for (std::size_t i = 0; i < h.sizes.size(); ++i) {
      const auto& layout = h.sizes[i];
      std::string edges;
      for (const double e : layout.observe.bin_edges) edges += " " + hex(e);
      std::printf("size %zu n %lld trials %lld per_unit %lld edges%s\n", i,
                  static_cast<long long>(layout.n), static_cast<long long>(layout.trials),
                  static_cast<long long>(layout.trials_per_unit), edges.c_str());
      const auto committed = file.committed(i);
      const auto histograms = file.read_unit_histograms(i);
      const auto obs = file.read_observations(i);
      const auto estimates = file.read_estimates(i);
      std::size_t next_histogram = 0, next_trial = 0;
      const std::size_t columns = h.estimates.size();
      for (std::size_t u = 0; u < committed.size(); ++u) {
        if (!committed[u]) continue;
        std::string line = "unit " + std::to_string(i) + " " + std::to_string(u);
        const auto& hist = histograms.at(next_histogram++);
        line += " below " + std::to_string(hist.below) + " above " + std::to_string(hist.above) +
                " counts";
        for (const auto c : hist.counts) line += " " + std::to_string(c);
        const auto begin = layout.unit_begin(static_cast<std::int64_t>(u));
        const auto end = layout.unit_end(static_cast<std::int64_t>(u));
        for (auto t = begin; t < end; ++t, ++next_trial) {
          const auto& row = obs.trials.at(next_trial);
          line += " | trial " + std::to_string(row.trial) + " failed " +
                  std::to_string(row.failed ? 1 : 0) + " reason '" + row.reason + "' min " +
                  hex(row.min) + " max " + hex(row.max) + " norm " + hex(row.norm) + " moments";
          for (const double m : row.moments) line += " " + hex(m);
          line += " spectrum";
          for (const double x : row.spectrum) line += " " + hex(x);
          if (columns > 0) {
            line += " estimates";
            for (std::size_t c = 0; c < columns; ++c) {
              line += " " + hex(estimates.values.at(next_trial * columns + c));
            }
          }
        }
        std::printf("%s\n", line.c_str());
      }
    }
  } catch (const freegap::InputError& e) {
    std::fprintf(stderr, "%s\n", e.what());
    return 2;
  } catch (const std::exception& e) {
    std::fprintf(stderr, "%s\n", e.what());
    return 1;
  }
  return 0;
}
