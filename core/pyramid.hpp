#pragma once
// One step of a Gaussian pyramid, for multi-resolution registration (core/registration_itk.cpp):
// REDUCE of Burt & Adelson (1983) "The Laplacian pyramid as a compact image code", IEEE Trans.
// Commun. 31(4):532-540, with their generating kernel at a = 3/8, i.e. the binomial
// [1 4 6 4 1] / 16 (variance 1 voxel^2), along each axis, keeping every second voxel.
// Output voxel i is input voxel 2i: same origin, twice the spacing, ceil(n/2) voxels along an axis
// (an axis of one voxel stays one voxel). Borders repeat the edge voxel (scipy.ndimage mode
// "nearest"). Two steps smooth by sigma = sqrt(1 + 4) = 2.2 voxels of the full grid, three by
// sqrt(21) = 4.6: about shrink / 2, the smoothing ITK's own pyramid applies, at a fraction of
// the cost (filtering runs on the voxels kept along the axes already reduced). No reduction or
// accumulation crosses threads, so results do not depend on the thread count.
#include "core/volume.hpp"

namespace pb {

VolumeF reduce2(const VolumeF& in);

}  // namespace pb
