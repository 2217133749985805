#pragma once
// Test phantom for registration: a polyamide-like cylinder (grey 1) with dark pores, in air
// (grey 0), and dense reference spheres (grey 3) on the fixture around it. Rendered analytically in
// any pose with 2x2x2 supersampling (partial volume), so a moving scan has exact truth: no
// interpolation of one rendered volume into the other. Invented scenario data.
#include <Eigen/Dense>
#include <random>
#include <vector>

#include "core/registration.hpp"
#include "core/volume.hpp"

namespace pbtest {

struct AlignSphere {
  Eigen::Vector3d c;  // phantom mm
  double r;
};

struct AlignPhantom {
  Eigen::Vector3d centre;
  double radius = 0, half_height = 0;
  std::vector<AlignSphere> pores, markers;

  float value(const Eigen::Vector3d& q) const {
    for (const auto& m : markers)
      if ((q - m.c).squaredNorm() <= m.r * m.r) return 3.0f;
    const Eigen::Vector3d d = q - centre;
    if (d.head<2>().squaredNorm() > radius * radius || std::abs(d.z()) > half_height) return 0.0f;
    for (const auto& p : pores)
      if ((q - p.c).squaredNorm() <= p.r * p.r) return 0.0f;
    return 1.0f;
  }
};

// n^3 voxels of `spacing` mm: cylinder of radius 0.3 n spacing, pores and six markers placed
// asymmetrically (no symmetry of the marker pattern).
inline AlignPhantom align_phantom(int64_t n, double spacing, unsigned seed = 7) {
  AlignPhantom ph;
  const double L = double(n - 1) * spacing;
  ph.centre = Eigen::Vector3d(L / 2, L / 2, L / 2);
  ph.radius = 0.3 * double(n) * spacing;
  ph.half_height = 0.3 * double(n) * spacing;
  std::mt19937_64 rng(seed);
  std::uniform_real_distribution<double> u(-1, 1);
  while (ph.pores.size() < 30) {
    const Eigen::Vector3d c = ph.centre + Eigen::Vector3d(u(rng), u(rng), u(rng)) * 0.8 * ph.radius;
    if ((c - ph.centre).head<2>().norm() > 0.8 * ph.radius) continue;
    ph.pores.push_back({c, (2.5 + 2.0 * (u(rng) + 1)) * spacing});
  }
  const double mr = 3.5 * spacing, ring = ph.radius + 0.12 * double(n) * spacing;
  const double angles[6] = {0.2, 1.3, 2.1, 3.3, 4.2, 5.5};
  const double heights[6] = {-0.6, 0.4, -0.1, 0.7, -0.35, 0.15};
  for (int i = 0; i < 6; ++i)
    ph.markers.push_back({ph.centre + Eigen::Vector3d(ring * std::cos(angles[i]), ring * std::sin(angles[i]),
                                                      heights[i] * ph.half_height),
                          mr});
  return ph;
}

// A pose about the volume centre c: p_scan = c + scale R (p - c) + t, as a SimilarityTransform.
inline pb::SimilarityTransform pose_about(const Eigen::Vector3d& c, const Eigen::Vector3d& angles_deg,
                                          const Eigen::Vector3d& t_mm, double scale) {
  pb::SimilarityTransform T = pb::SimilarityTransform::from_euler_deg(angles_deg, Eigen::Vector3d::Zero(), scale);
  T.t = c + t_mm - scale * (T.R * c);
  return T;
}

// Scan of the phantom placed by `pose` (phantom mm -> scan mm), Gaussian noise sigma; 2x2x2
// supersampling, or one sample per voxel when !supersample (large benchmark volumes).
inline pb::VolumeF render_scan(const AlignPhantom& ph, const pb::Geometry& g, const pb::SimilarityTransform& pose,
                               double noise, unsigned seed, bool supersample = true) {
  pb::VolumeF v(g);
  const pb::SimilarityTransform inv = pose.inverse();
  const std::vector<double> h = supersample ? std::vector<double>{-0.25, 0.25} : std::vector<double>{0.0};
  const float w = 1.0f / float(h.size() * h.size() * h.size());
#pragma omp parallel for schedule(static)
  for (int64_t z = 0; z < g.dims[2]; ++z)
    for (int64_t y = 0; y < g.dims[1]; ++y)
      for (int64_t x = 0; x < g.dims[0]; ++x) {
        float s = 0;
        for (double dz : h)
          for (double dy : h)
            for (double dx : h) {
              const Eigen::Vector3d p(g.origin_mm[0] + (double(x) + dx) * g.spacing_mm[0],
                                      g.origin_mm[1] + (double(y) + dy) * g.spacing_mm[1],
                                      g.origin_mm[2] + (double(z) + dz) * g.spacing_mm[2]);
              s += ph.value(inv.apply(p));
            }
        v(x, y, z) = s * w;
      }
  if (noise > 0) {
    std::mt19937_64 rng(seed);
    std::normal_distribution<float> nd(0.0f, float(noise));
    for (int64_t i = 0; i < v.size(); ++i) v[i] += nd(rng);
  }
  return v;
}

// Largest displacement error (mm) of `est` against `truth` over the corners of the cylinder's
// bounding box and the marker centres (target registration error over the part).
inline double max_tre_mm(const AlignPhantom& ph, const pb::SimilarityTransform& est, const pb::SimilarityTransform& truth) {
  std::vector<Eigen::Vector3d> pts;
  for (int sx : {-1, 1})
    for (int sy : {-1, 1})
      for (int sz : {-1, 1})
        pts.push_back(ph.centre + Eigen::Vector3d(sx * ph.radius, sy * ph.radius, sz * ph.half_height));
  for (const auto& m : ph.markers) pts.push_back(m.c);
  double e = 0;
  for (const auto& p : pts) e = std::max(e, (est.apply(p) - truth.apply(p)).norm());
  return e;
}

}  // namespace pbtest
