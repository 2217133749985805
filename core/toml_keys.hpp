#pragma once
// Unknown keys in TOML tables: the one check that the recipe reader (synthetic/recipe.cpp) and the
// suite reader (suites/suite.cpp) share, so that both refuse a misspelt key the same way and offer
// the closest known name (core/names.hpp). Header-only: its users already include toml++.
#include <algorithm>
#include <optional>
#include <string>
#include <toml++/toml.h>
#include <vector>

#include "core/names.hpp"

namespace pb {

struct UnknownKey {
  std::string key;           // as written in the table
  std::string near;          // the closest known key, or "" when none is close
  toml::source_region where; // where the key stands in its file (line 0 when built in memory)
};

// The first key of `t` (in table order) that is not in `known`, or nothing when every key is known.
inline std::optional<UnknownKey> first_unknown_key(const toml::table& t, const std::vector<std::string>& known) {
  for (auto&& [k, v] : t) {
    const std::string key(k.str());
    if (std::find(known.begin(), known.end(), key) == known.end()) return UnknownKey{key, closest_name(key, known), k.source()};
  }
  return std::nullopt;
}

}  // namespace pb
