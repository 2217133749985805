#pragma once
// Test data for the metrics tests: Bernoulli random masks, digital balls, hit/miss data from a
// known POD curve; and the head of a suite (one synthetic dataset, otsu) that criteria and scoring
// tests append their tables to.
#include <cmath>
#include <random>
#include <vector>

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

// Invented hit/miss data from a known logit POD curve: n target sizes a log-uniform in [lo, hi] um,
// each hit with probability 1 / (1 + exp(-(b0 + b1 ln a))), drawn from rng.
struct HitMiss {
  std::vector<double> a;
  std::vector<int> y;
};
inline HitMiss simulate_hit_miss(std::mt19937_64& rng, int n, double b0, double b1, double lo, double hi) {
  std::uniform_real_distribution<double> u(std::log(lo), std::log(hi)), h(0, 1);
  HitMiss d;
  for (int i = 0; i < n; ++i) {
    const double x = u(rng);
    d.a.push_back(std::exp(x));
    d.y.push_back(h(rng) < 1 / (1 + std::exp(-(b0 + b1 * x))));
  }
  return d;
}
inline HitMiss simulate_hit_miss(uint64_t seed, int n, double b0, double b1, double lo, double hi) {
  std::mt19937_64 rng(seed);
  return simulate_hit_miss(rng, n, b0, b1, lo, hi);
}

inline const char* const kSuiteHead = R"([[dataset]]
name = "d"
preset = "demo-small"

[[method]]
name = "otsu"

)";

}  // namespace pbtest
