// Locating shipped files relative to the running executable (install_paths.hpp).
#include "freegap/install_paths.hpp"

#include <filesystem>
#include <system_error>

#include "freegap/errors.hpp"

#ifndef FREEGAP_SHARE_FROM_BIN
#define FREEGAP_SHARE_FROM_BIN "../share/freegap"
#endif
#ifndef FREEGAP_BUILD_ANALYSIS_DIR
#define FREEGAP_BUILD_ANALYSIS_DIR ""
#endif

namespace freegap::install_paths {

namespace fs = std::filesystem;

std::string analysis_script(const std::string& script) {
  std::error_code ec;
  // The installed layout first, so an installed freegap never reads the source tree even when
  // that tree still exists (the executable in a build directory has no share/ beside it).
  const fs::path exe = fs::read_symlink("/proc/self/exe", ec);
  fs::path installed;
  if (!ec) {
    installed = (exe.parent_path() / FREEGAP_SHARE_FROM_BIN / "analysis" / script).lexically_normal();
    if (fs::is_regular_file(installed, ec)) return installed.string();
  }
  const fs::path build = fs::path(FREEGAP_BUILD_ANALYSIS_DIR) / script;
  if (!std::string(FREEGAP_BUILD_ANALYSIS_DIR).empty() && fs::is_regular_file(build, ec)) {
    return build.string();
  }
  throw Error("the script " + script + " is missing: looked in '" + installed.string() +
              "' (an installed freegap) and '" + build.string() +
              "' (a build directory); reinstall freegap, or leave out the figures");
}

}  // namespace freegap::install_paths
