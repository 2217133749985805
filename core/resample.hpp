#pragma once
// Resampling a moving scan onto a fixed grid under a registration transform (fixed mm -> moving
// mm, core/registration.hpp): out(p) = moving(T(p)) for every fixed voxel centre p. Masks take the
// nearest neighbour (labels stay labels), grey values linear interpolation (ITK's
// ResampleImageFilter with NearestNeighbor- / LinearInterpolateImageFunction). Points that fall
// outside the moving volume get `outside`.
#include "core/registration.hpp"
#include "core/volume.hpp"

namespace pb {

Mask resample_nearest(const Mask& moving, const Geometry& grid, const SimilarityTransform& T, uint8_t outside = 0);
VolumeF resample_linear(const VolumeF& moving, const Geometry& grid, const SimilarityTransform& T,
                        float outside = 0.0f);

// True when the two geometries put voxel centres at the same places (dims, spacing and origin
// within rel_tol of a voxel): no resampling is needed.
bool same_grid(const Geometry& a, const Geometry& b, double rel_tol = 1e-4);

}  // namespace pb
