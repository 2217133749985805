#pragma once
// Surface distances between two segmentations: a surface voxel is a foreground voxel (label != 0)
// with a 6-neighbour that is background or outside the volume. For every surface voxel of one side
// the Euclidean distance (mm, between voxel centres) to the nearest surface voxel of the other is
// found exactly (uniform-grid nearest-neighbour search). hd95_mm = max of the two directed 95th
// percentiles (linear interpolation, the numpy default), as in Nikolov et al. (2021) J. Med.
// Internet Res. 23(7):e26151 (DeepMind surface-distance); assd_mm = mean over both directions'
// distances (Heimann et al. 2009, IEEE TMI 28(8):1251). NaN when either surface is empty.
#include <cstdint>
#include <vector>

#include "core/volume.hpp"
#include "metrics/pod.hpp"

namespace pb {

struct SurfaceDistances {
  double hd95_mm = kMetricNaN, assd_mm = kMetricNaN;
  int64_t surface_voxels_ref = 0, surface_voxels_pred = 0;
};

struct LabelRuns;
SurfaceDistances surface_distances(const LabelRuns& pred, const LabelRuns& ref);

// Percentile with linear interpolation between order statistics (numpy's default); NaN if empty.
double percentile_linear(std::vector<double> v, double q_pct);

}  // namespace pb
