// "Did you mean": Levenshtein distance by the two-row dynamic programme (Wagner & Fischer 1974,
// J. ACM 21(1):168-173).
#include "core/names.hpp"

#include <algorithm>

namespace pb {

std::string closest_name(const std::string& w, const std::vector<std::string>& cands) {
  std::string best;
  size_t best_d = std::max<size_t>(2, w.size() / 3) + 1;
  for (const auto& c : cands) {
    std::vector<size_t> prev(c.size() + 1), cur(c.size() + 1);
    for (size_t j = 0; j <= c.size(); ++j) prev[j] = j;
    for (size_t i = 1; i <= w.size(); ++i) {
      cur[0] = i;
      for (size_t j = 1; j <= c.size(); ++j)
        cur[j] = std::min({prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (w[i - 1] == c[j - 1] ? 0 : 1)});
      std::swap(prev, cur);
    }
    if (prev[c.size()] < best_d) {
      best_d = prev[c.size()];
      best = c;
    }
  }
  if (best.empty())  // "radius" for "median.radius": a prefixed name whose suffix matches exactly
    for (const auto& c : cands) {
      const auto dot = c.rfind('.');
      if (dot != std::string::npos && c.compare(dot + 1, std::string::npos, w) == 0) return c;
    }
  return best;
}

}  // namespace pb
