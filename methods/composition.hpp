#pragma once
// How a composed method name "FILTER+...+METHOD" (registry.hpp) is read: its stages, and each
// stage's own parameter values out of the composed method's (filter parameters are prefixed
// "FILTER."). One reading for Registry::compose and for segmentation by slabs (streaming.cpp).
#include <string>
#include <vector>

#include "methods/registry.hpp"

namespace pb {

// "median+gaussian+otsu" -> {"median", "gaussian", "otsu"}; a name without '+' is one stage. Empty
// stages stay ("a++b" -> {"a", "", "b"}): the caller names them as unknown.
std::vector<std::string> composition_stages(const std::string& name);

// The values of one stage's parameters `specs`, stored in `all` under prefix + name.
ParamValues stage_params(const std::vector<ParamSpec>& specs, const std::string& prefix, const ParamValues& all);

}  // namespace pb
