// Console text: what freegap's commands print on standard output — `plan`'s forecast — composed
// here, in the reporting room, and returned as strings. The commands compute (the forecast) and
// write the strings; nothing here prints or writes a file.
#pragma once

#include <string>

#include "freegap/plan.hpp"

namespace freegap::analysis {

// --- plan ---

/// The forecast `freegap plan` prints: the cost model, a row per size, totals, the run file,
/// the wall time, the deadline's suggestion, the Slurm request and the warnings.
std::string forecast_text(const plan::Forecast& e);

}  // namespace freegap::analysis
