#pragma once
// Test volumes for the metrics tests: Bernoulli random masks and digital balls.
#include <random>

#include "core/volume.hpp"

namespace pbtest {

// Each voxel 1 with probability p, independently (deterministic for a seed).
inline pb::Mask random_mask(const pb::Geometry& g, double p, unsigned seed) {
  pb::Mask m(g);
  std::mt19937_64 rng(seed);
  std::bernoulli_distribution b(p);
  for (int64_t i = 0; i < m.size(); ++i) m[i] = b(rng) ? 1 : 0;
  return m;
}

// Voxels whose centre (x, y, z in voxel units) lies within r of (cx, cy, cz).
inline pb::Mask ball(const pb::Geometry& g, double cx, double cy, double cz, double r) {
  pb::Mask m(g);
  for (int64_t z = 0; z < g.dims[2]; ++z)
    for (int64_t y = 0; y < g.dims[1]; ++y)
      for (int64_t x = 0; x < g.dims[0]; ++x)
        m(x, y, z) = (x - cx) * (x - cx) + (y - cy) * (y - cy) + (z - cz) * (z - cz) <= r * r;
  return m;
}

}  // namespace pbtest
