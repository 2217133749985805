// Number text (see format.hpp).
#include "core/format.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>

namespace pb {

std::string format_number(double v, int digits, const char* missing) {
  if (!std::isfinite(v) && missing) return missing;
  if (v == 0) return "0";
  const double a = std::abs(v);
  const int int_digits = a >= 1 && a < 1e6 ? int(std::floor(std::log10(a))) + 1 : 0;
  char b[48];
  std::snprintf(b, sizeof(b), "%.*g", std::max(std::max(digits, 1), int_digits), v);
  return b;
}

std::string format_duration(double s) {
  if (!std::isfinite(s) || s < 0) return "--:--";
  char b[32];
  std::snprintf(b, sizeof(b), "%d:%02d", int(s) / 60, int(s) % 60);
  return b;
}

}  // namespace pb
