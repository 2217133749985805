#pragma once
// Shared pore extraction. Pores are dark: a voxel is air when its grey value is below the
// threshold. Air 6-connected to the volume border, or to air outside the part mask (ROI), is
// background; the rest of the air inside the ROI is pores.
#include <cstdint>
#include <vector>

#include "core/components.hpp"
#include "core/volume.hpp"

namespace pb {

// 1 where v < threshold (and inside roi, when given); NaN voxels are never air.
Mask air_below(const VolumeF& v, double threshold, const Mask* roi);
// The same into a caller's buffer of n bytes (a slab, methods/streaming.cpp); roi may be nullptr.
void air_below(const float* v, int64_t n, double threshold, const uint8_t* roi, uint8_t* air);

// Turns an air mask into a pore mask in place (see above). Returns the number of part voxels:
// voxels inside the ROI that are not outside air (material plus pores), the porosity denominator.
int64_t air_to_pores(Mask& air, const Mask* roi);

// The one rule of pore extraction, on the components c of the open mask (air, or outside the ROI;
// 6-connected). Per label of c: 1 when the component reaches the volume border or holds a voxel
// outside the ROI (background). The ROI as a mask (roi nullptr: none), or as the runs of the voxels
// outside it (a volume read by slabs, methods/streaming.cpp: collected beside the open mask, so that
// the ROI is read once).
std::vector<uint8_t> outside_components(const LabelRuns& c, const uint8_t* roi);
std::vector<uint8_t> outside_components(const LabelRuns& c, const LabelRuns& out_of_roi);
// The part voxels (the porosity denominator): inside the ROI and not in a background component.
// Every voxel outside the ROI is open, so in a background component: the part is every voxel of the
// volume that no background component holds.
int64_t part_voxels(const LabelRuns& c, const std::vector<uint8_t>& outside);

int64_t count_nonzero(const Mask& m);

// Clears pores (26-connected components) of fewer than min_voxels voxels; returns how many
// components were removed.
int64_t remove_small_pores(Mask& pores, int64_t min_voxels);

}  // namespace pb
