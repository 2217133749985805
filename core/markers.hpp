#pragma once
// Reference markers: dense spheres on the fixture (steel or ruby balls, common practice, no
// source) that are much brighter than the part. Found by a threshold, 26-connected components and
// a least-squares sphere fit to sub-voxel surface points (threshold crossings interpolated along
// the grid lines); matched between two scans by their distance pattern (triangles of equal side
// ratios, then the transform with the most markers within tolerance), solved in closed form
// (core/registration.hpp: absolute_orientation).
#include <Eigen/Dense>
#include <utility>
#include <vector>

#include "core/registration.hpp"
#include "core/volume.hpp"

namespace pb {

struct Marker {
  Eigen::Vector3d centre_mm;
  double radius_mm = 0;
  int64_t voxels = 0;
  double fit_rms_mm = 0;  // RMS distance of the surface points from the fitted sphere
};

// Markers sorted by decreasing size; at most opt.max_markers. threshold_used reports the grey level.
std::vector<Marker> find_markers(const VolumeF& v, const MarkerOptions& opt, double* threshold_used = nullptr);

// Least-squares sphere through points: algebraic fit (linear in centre and r^2 - |c|^2), then
// Gauss-Newton on the geometric distances. Needs 4 non-coplanar points.
struct SphereFit {
  Eigen::Vector3d centre;
  double radius = 0, rms = 0;
};
SphereFit fit_sphere(const std::vector<Eigen::Vector3d>& pts);

struct MarkerMatch {
  std::vector<std::pair<int, int>> pairs;  // (fixed index, moving index)
  PointFit fit;                            // fixed -> moving
  bool ambiguous = false;                  // another correspondence fitted as well (symmetric pattern)
};

// Correspondence between fixed and moving markers. tol_mm: largest residual of a matched pair.
// max_scale_change: allowed |scale - 1| when with_scale. Empty pairs when fewer than 3 match.
MarkerMatch match_markers(const std::vector<Marker>& fixed, const std::vector<Marker>& moving, bool with_scale,
                          double tol_mm, double max_scale_change = 0.15);

}  // namespace pb
