// Numbers and times as text, one copy of each rule for every part: the exact text a hash or a
// file stores, the shortest text that reads back, the 12- and 6-digit texts of messages and explanations,
// and UTC time.
#pragma once

#include <string>

namespace freegap::text {

/// %.17g in the C locale whatever the process's locale: round-trips every double, so two
/// different numbers never print alike (canonical job text, file digests, CSV cells).
std::string exact(double x);

/// The shortest text that reads back as the same double ("0.9", not "0.90000000000000002").
std::string shortest(double x);

/// 12 significant digits (%.12g): numbers in messages and descriptions.
std::string readable(double x);

/// 6 significant digits (%g): numbers in explanations and durations ("0.5", "1e+06").
std::string compact(double x);

/// The current time in UTC as ISO 8601, "2026-12-04T08:23:20Z".
std::string utc_now();

}  // namespace freegap::text
