#pragma once
// How a method runs on a volume read by slabs (methods/streaming.hpp). A family whose method can
// stream sets MethodInfo::slabs beside MethodInfo::run, in the family's own file (threshold.cpp and
// global.cpp: the histogram methods; local.cpp: the local methods), so that a method that streams
// is one file's business: segment_by_slabs runs whatever a registered method's SlabMethod does, and
// refuses a method without one. The SlabMethod gives the method's air (voxels below its threshold)
// slab by slab in z order; the pipeline does the rest (ROI, pore extraction, the mask) as in memory.
#include <cstdint>
#include <functional>
#include <string>
#include <utility>
#include <vector>

#include "core/volume.hpp"
#include "methods/integral.hpp"
#include "methods/registry.hpp"
#include "methods/threshold.hpp"

namespace pb {

// A volume read by slabs (methods/streaming.cpp). read(z0, z1, out) puts slices [z0, z1) into out
// as floats (any range, in any order; cheapest in z order, `slab` slices at a time);
// slices(window) starts a new pass of slices in z order for SliceMoments of that window (wolf
// takes two). What a method takes from the whole volume: `all` and `hist`, the statistics and
// histograms of every voxel, and `part` / `part_hist`, those of the voxels inside the ROI (of every
// voxel without one). `stored`: the voxel type the method sees (integer data: whole grey levels;
// a pre-filtered volume: f32, as Registry::compose hands it on). roi: the ROI by slices, or empty,
// for a pass of the method's own (wolf's largest window std inside the ROI).
struct SlabSource {
  Geometry geometry;  // of the whole volume
  std::function<void(int64_t z0, int64_t z1, VolumeF& out)> read;
  std::function<SliceOf(int64_t window)> slices;
  int64_t slab = 1;
  VoxelType stored = VoxelType::f32;
  Stats all, part;
  HistogramOf hist, part_hist;
  RoiOf roi;
};

// Air slices go to out in z order, a batch at a time (z0, n slices, n * nx * ny bytes).
using AirOut = std::function<void(int64_t z0, int64_t n, const uint8_t* air)>;

// What a method chose and warned of, as its in-memory run reports them before pore extraction.
// no_part_setting: the setting named by the warning when no part voxel remains (pores_from_air's
// policy: the histogram methods name their threshold); empty: no such warning (the local methods).
struct SlabAir {
  std::vector<std::pair<std::string, double>> chosen;
  std::vector<std::string> warnings;
  std::string no_part_setting;
};

struct SlabMethod {
  // Throws InputError for parameters the volume of geometry g cannot take (a local method's window:
  // even, or larger than the volume), before any pass over the file; empty: nothing to check.
  std::function<void(const ParamValues&, const Geometry& g)> check;
  // The slices a slab of the method reads beyond each of its faces (a window filter: window/2);
  // empty: none. The pipeline's slab is at least twice this.
  std::function<int64_t(const ParamValues&)> halo;
  // The air of every slice to out, in z order: the in-memory run's air, except that it need not be
  // cut to the ROI (the pipeline's open mask, air or outside the ROI, is the same either way).
  std::function<SlabAir(const ParamValues&, const SlabSource&, const AirOut&)> air;
};

}  // namespace pb
