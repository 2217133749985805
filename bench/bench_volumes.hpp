#pragma once
// Shared benchmark inputs: a 256^3 float volume of Gaussian noise (mean 0.5, sigma 0.2), one per
// seed, built once.
#include <map>
#include <random>

#include "core/volume.hpp"

namespace pb::bench {

inline const VolumeF& noise_volume256(unsigned seed) {
  static std::map<unsigned, VolumeF> cache;
  auto it = cache.find(seed);
  if (it != cache.end()) return it->second;
  Geometry g;
  g.dims = {256, 256, 256};
  VolumeF out(g);
  std::mt19937 rng(seed);
  std::normal_distribution<float> n(0.5f, 0.2f);
  for (int64_t i = 0; i < out.size(); ++i) out[i] = n(rng);
  return cache.emplace(seed, std::move(out)).first->second;
}

}  // namespace pb::bench
