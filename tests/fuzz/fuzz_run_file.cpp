// libFuzzer target for the run-file reader: the input bytes are a run file. Whatever they are,
// reading them must end in a refusal (InputError), an error, or data whose damaged units are
// named; never a crash or a hang of this process. HDF5 itself may crash on such bytes: that
// happens inside the checking child of RunFile::open_read (store::verify), which turns it into a
// refusal, so what this target proves is that the containment holds, that everything the parent
// reads afterwards is safe to read, and that every unit found damaged reads as not committed.
//
// Build: see tests/fuzz/run_file.cmake. Seed corpus: any small run file, e.g. one written by
// `freegap run` of tests/store/check_damaged_run_files.py's job.
#include <unistd.h>

#include <cstddef>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <string>

#include "freegap/errors.hpp"
#include "freegap/store.hpp"

namespace {

// One file per fuzzing process, rewritten for every input.
const std::string& scratch_path() {
  static const std::string path = [] {
    const char* dir = std::getenv("TMPDIR");
    return std::string(dir && *dir ? dir : "/tmp") + "/freegap-fuzz-run-file." +
           std::to_string(::getpid()) + ".h5";
  }();
  return path;
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  namespace store = freegap::store;
  const std::string& path = scratch_path();
  if (std::FILE* out = std::fopen(path.c_str(), "wb")) {
    if (size > 0) std::fwrite(data, 1, size, out);
    std::fclose(out);
  } else {
    std::abort();  // the fuzzer cannot work without its scratch file
  }
  try {
    // What a command does: open_read checks the whole file in a forked child (store::verify)
    // before this process reads any of it.
    const store::RunFile file = store::RunFile::open_read(path);
    // Every unit the check named damaged must read as not committed.
    for (const store::DamagedUnit& d : file.integrity().damaged) {
      if (d.size_index >= file.header().sizes.size()) std::abort();
      const auto committed = file.committed(d.size_index);
      if (d.unit < 0 || static_cast<std::size_t>(d.unit) >= committed.size()) std::abort();
      if (committed[static_cast<std::size_t>(d.unit)]) std::abort();
    }
    for (std::size_t i = 0; i < file.header().sizes.size(); ++i) {
      const auto committed = file.committed(i);
      const auto observations = file.read_observations(i);
      const auto histograms = file.read_unit_histograms(i);
      file.read_estimates(i);
      std::size_t units = 0;
      for (const bool c : committed) units += c ? 1 : 0;
      if (histograms.size() != units) std::abort();
      (void)observations;
    }
    file.read_provenance();
  } catch (const freegap::Error&) {
    // A refusal with a message (InputError derives from Error): the expected end for most inputs.
  }
  return 0;
}
