#pragma once
// Window statistics for local thresholds, in 3D, at a cost per voxel that does not depend on the
// window: box mean and standard deviation by summed tables (Crow 1984; Viola & Jones 2001; in 3D
// as in Shafait et al. 2008), taken separably as running sums in double over mean-centred data;
// box min/max by the running min/max of van Herk (1992) and Gil & Werman (1993); a Gaussian
// weighted mean by a separable FIR. Borders: mirrored without repeating the edge voxel
// (numpy.pad mode 'reflect', as scikit-image's threshold_sauvola: index -1 reads voxel 1).
#include <cstdint>
#include <functional>
#include <vector>

#include "core/volume.hpp"
#include "methods/registry.hpp"
#include "methods/threshold.hpp"

namespace pb {

// Local mean and standard deviation of a cubic window of `window` voxels (odd, <= every dim),
// produced a few z slices at a time in order 0..nz-1. Working memory is about 6 * batch() + 2 *
// threads slices of doubles (batch() <= nz / 16, so at most about 0.75 float volume plus
// per-thread scratch), whatever the window size. Values are centred on `centre` (e.g. the global
// mean) before squaring, so the variance does not cancel on CT data with a large grey offset;
// non-finite voxels are read as `centre`. std = sqrt(max(0, E[(v-c)^2] - E[v-c]^2)) (population
// form, as scikit-image). The z recurrence runs in one fixed order: results do not depend on the
// thread count. With with_std = false only the mean is computed (no squared sums: about half the
// work and memory); the means are the same to the bit.
// Slices of a float volume by index: a volume in memory, or slices read by slabs in z order
// (methods/streaming.cpp). Called from one thread; a slice must stay valid while the slices of
// the next 2 * (window/2) + 2 * batch() + 2 calls to it are served (SliceMoments asks in z order,
// never further back than that).
using SliceOf = std::function<const float*(int64_t z)>;

class SliceMoments {
 public:
  SliceMoments(const VolumeF& v, int64_t window, double centre, bool with_std = true);
  // The same over the volume of geometry g whose slice z is slice(z), asked in z order.
  SliceMoments(const Geometry& g, SliceOf slice, int64_t window, double centre, bool with_std = true);
  int64_t next_z() const { return z_; }
  int64_t batch() const { return batch_; }  // slices per call: 1..8, from nz only
  // Fills mean and (with_std) std of slices next_z() .. next_z()+n-1 (batch() * nx * ny values
  // each, slice after slice), advances, and returns n (0 at the end). std is not read without with_std.
  int64_t next(double* mean, double* std);

 private:
  template <bool Std>
  int64_t next_slices(double* mean, double* std);

  Geometry g_;
  SliceOf slice_;
  int64_t h_, batch_, z_ = 0;
  double c_;
  bool with_std_;
  std::vector<double> z1_, z2_, e_, l_;
};

// Box min and max over a cubic window (odd, <= every dim) into two float volumes shaped as v (their
// buffers reused when they hold as many voxels: a slab after slab).
void box_min_max(const VolumeF& v, int64_t window, VolumeF& vmin, VolumeF& vmax);

// Gaussian-weighted local mean: separable kernel exp(-d^2 / (2 sigma^2)) over |d| <= window/2
// on each axis, normalised to sum 1. The second form writes into out, reusing its buffer as box_min_max.
VolumeF gaussian_mean(const VolumeF& v, int64_t window, double sigma_vox);
void gaussian_mean(const VolumeF& v, int64_t window, double sigma_vox, VolumeF& out);

// The air mask of a local method of methods/local.cpp (voxel below its local threshold, inside the
// ROI) before pore extraction, with what it chose: for tests and for composing with pre-filters.
struct LocalAir {
  Mask air;
  std::vector<std::pair<std::string, double>> chosen;
  std::vector<std::string> warnings;
};
LocalAir local_air(const std::string& method, const MethodInput& in, const std::vector<std::string>& key_values);

// The slices z0 .. z0+n-1 of an ROI mask (valid until the next call).
using RoiOf = std::function<const uint8_t*(int64_t z0, int64_t n)>;

}  // namespace pb
