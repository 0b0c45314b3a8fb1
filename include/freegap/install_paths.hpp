// Where freegap finds the files it ships beside the executable (plotting scripts): relative to the
// executable when installed, the source tree's copy only in a build directory.
#pragma once

#include <string>

namespace freegap::install_paths {

/// The folder holding the Python scripts (plot_report.py, plot_limit.py, ...): first
/// <executable's folder>/<bin → share/freegap>/analysis of an installed freegap, then the build's
/// own source tree. Throws freegap::Error naming both places when neither holds `script`.
std::string analysis_script(const std::string& script);

}  // namespace freegap::install_paths
