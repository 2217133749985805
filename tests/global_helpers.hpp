#pragma once
// Test volumes and helpers shared by the global-threshold tests (test_global.cpp and
// test_global_itk.cpp, test_global_levels_itk.cpp): three grey-value mixtures (bimodal, low-porosity, three-phase) with
// invented phase grey values, running a registered method by name, the scikit-image reference script.
#include <algorithm>
#include <cmath>
#include <string>
#include <vector>

#include <catch2/catch.hpp>

#include "core/histogram.hpp"
#include "core/json.hpp"
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

// tests/ref/skimage_thresholds.py on v: {method: value} (see the script for METHOD syntax).
inline nlohmann::json skimage_thresholds(const pb::VolumeF& v, const std::string& methods, int bins = 256) {
  TempDir d;
  write_raw(pb::AnyVolume(v), d / "v.raw");
  const auto r = run_ref_script("skimage_thresholds.py", (d / "v.raw") + " " + std::to_string(v.nx()) + " " +
                                                             std::to_string(v.ny()) + " " + std::to_string(v.nz()) +
                                                             " " + std::to_string(bins) + " " + methods);
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  return nlohmann::json::parse(r.out);
}

inline bool has_warning(const pb::MethodOutput& o, const std::string& word) {
  for (const auto& w : o.warnings)
    if (w.find(word) != std::string::npos) return true;
  return false;
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

// Kittler & Illingworth (1986) eq. 15 at the split {0..t} | {t+1..}: J = 1 + 2[P0 ln s0 + P1 ln s1]
// - 2[P0 ln P0 + P1 ln P1] (s = class standard deviation in bins, floored at the one-bin value
// sqrt(1/12) as ours is); +inf when a class is empty.
inline double minimum_error_criterion(const pb::Histogram& h, int t) {
  double n0 = 0, s0 = 0, q0 = 0, n1 = 0, s1 = 0, q1 = 0;
  for (int i = 0; i < h.bins(); ++i) {
    const double c = double(h.counts[size_t(i)]);
    (i <= t ? n0 : n1) += c;
    (i <= t ? s0 : s1) += c * i;
    (i <= t ? q0 : q1) += c * double(i) * i;
  }
  if (n0 == 0 || n1 == 0) return double(INFINITY);
  const double N = n0 + n1, P0 = n0 / N, P1 = n1 / N;
  const double sd0 = std::sqrt(std::max(q0 / n0 - (s0 / n0) * (s0 / n0), 1.0 / 12));
  const double sd1 = std::sqrt(std::max(q1 / n1 - (s1 / n1) * (s1 / n1), 1.0 / 12));
  return 1 + 2 * (P0 * std::log(sd0) + P1 * std::log(sd1)) - 2 * (P0 * std::log(P0) + P1 * std::log(P1));
}

}  // namespace pbtest
