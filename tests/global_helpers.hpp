#pragma once
// Test volumes and helpers shared by the global-threshold tests (test_global.cpp and
// test_global_itk.cpp): three grey-value mixtures (bimodal, low-porosity, three-phase) with
// invented phase grey values, and running a registered method by name.
#include <string>
#include <vector>

#include "core/histogram.hpp"
#include "methods/registry.hpp"
#include "tests/helpers.hpp"

namespace pbtest {

struct NamedVolume {
  std::string name;
  pb::VolumeF volume;
};

// Phases as {weight, mean, sigma}, grey values in arbitrary units (air dark).
inline std::vector<NamedVolume> global_test_volumes() {
  const auto g = cube(64);
  return {
      {"bimodal", mixture_volume(g, {{0.3, 0.10, 0.05}, {0.7, 0.80, 0.08}}, 11)},
      {"low-porosity", mixture_volume(g, {{0.03, 0.20, 0.05}, {0.97, 0.70, 0.05}}, 12)},
      {"three-phase", mixture_volume(g, {{0.25, 0.05, 0.04}, {0.55, 0.45, 0.06}, {0.20, 0.85, 0.06}}, 13)},
  };
}

inline pb::MethodOutput run_named(const std::string& method, const pb::VolumeF& v,
                                  const std::vector<std::string>& params = {},
                                  pb::VoxelType stored = pb::VoxelType::f32) {
  const pb::MethodInfo& m = pb::Registry::instance().get(method);
  return pb::run_method(m, pb::parse_params(m, params), pb::MethodInput{v, nullptr, stored});
}

inline double chosen(const pb::MethodOutput& o, const std::string& key) {
  for (const auto& [k, v] : o.chosen)
    if (k == key) return v;
  return NAN;
}

// The histogram a method sees with default parameters (clip_pct = 0): bins over [min, max].
inline pb::Histogram full_histogram(const pb::VolumeF& v, int bins = 256) {
  const pb::Stats s = pb::compute_stats(v);
  return pb::compute_histogram(v.data(), v.size(), s.min, s.max, bins);
}

// Our split (last bin of the dark class) from our threshold, which is that bin's upper edge.
inline int split_index(const pb::Histogram& h, double threshold) {
  return int(std::lround((threshold - h.lo) / h.width())) - 1;
}

}  // namespace pbtest
