#pragma once
// Number text for people (reports, messages, parameter values): one formatter for the whole tool.
#include <string>

namespace pb {

// `digits` significant digits ("%.*g": "0.873", "3.5e+06"); whole parts below a million keep all
// their digits ("50000", not "5e+04"); 0 is "0"; a non-finite value is `missing` ("n/a" unless said),
// or with missing = nullptr printf's own "inf", "-inf", "nan" (messages that quote a value as read).
// For digits >= 6 a finite non-zero value reads as "%.<digits>g" (and as an ostream at that precision).
std::string format_number(double v, int digits = 4, const char* missing = "n/a");

// Minutes and seconds for an ETA: "3:07"; "--:--" when not finite or negative.
std::string format_duration(double seconds);

}  // namespace pb
