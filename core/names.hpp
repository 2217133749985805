#pragma once
// "Did you mean": the closest known name to a mistyped word, by Levenshtein edit distance
// (Levenshtein 1966, Soviet Physics Doklady 10(8):707-710), for error messages at every layer
// (method and parameter names, suite and recipe keys).
#include <string>
#include <vector>

namespace pb {

// The closest of `candidates` to `word` by edit distance, or "" when none is close (distance above
// max(2, |word| / 3)). A prefixed candidate whose suffix after the last '.' equals `word` exactly
// ("median.radius" for "radius") is offered when nothing is close by distance.
std::string closest_name(const std::string& word, const std::vector<std::string>& candidates);

}  // namespace pb
