#pragma once
// Grey-value histograms and simple statistics over a float volume, optionally inside a mask.
// Bin i covers [lo + i*w, lo + (i+1)*w) with w = (hi - lo) / bins; the last bin includes hi.
// NaN voxels are never counted; +-inf voxels fall into the end bins, like any value outside
// [lo, hi], and are left out of Stats (min, max, mean and count are over finite voxels); any
// float, and any finite range, is safe. Parallel with per-thread histograms merged in thread order.
#include <cstdint>
#include <vector>

#include "core/volume.hpp"

namespace pb {

struct Histogram {
  double lo = 0, hi = 1;
  std::vector<uint64_t> counts;

  int bins() const { return int(counts.size()); }
  double width() const { return (hi - lo) / double(counts.size()); }
  double edge(int i) const { return lo + width() * i; }          // lower edge of bin i
  double centre(int i) const { return lo + width() * (i + 0.5); }
  uint64_t total() const;
  int bin_of(double v) const;  // clamped to [0, bins-1]
};

struct Stats {
  double min = 0, max = 0, mean = 0;
  int64_t count = 0;      // finite voxels counted
  int64_t nan_count = 0;  // NaN voxels (+-inf are in neither count)
};

Stats compute_stats(const float* data, int64_t n, const uint8_t* mask = nullptr);
Histogram compute_histogram(const float* data, int64_t n, double lo, double hi, int bins,
                            const uint8_t* mask = nullptr);
// compute_histogram (bins <= 256) that also writes each voxel's bin to codes[i] (NaN voxels: 255;
// every voxel, the mask only selects what is counted): with below_from_codes, a threshold method
// reads the volume twice (stats, histogram) instead of three times (issue 16).
Histogram compute_histogram_codes(const float* data, int64_t n, double lo, double hi, int bins, const uint8_t* mask,
                                  uint8_t* codes);
// The bin compute_histogram counts v in (float arithmetic; monotone in v; NaN -> 0).
int histogram_bin(const Histogram& h, float v);
// codes[i] := data[i] < t (and mask[i], when given), from the codes of compute_histogram_codes on
// the same data and histogram: only voxels in t's own bin read their value. Equals the plain
// comparison bit for bit (bins are monotone in the value).
void below_from_codes(uint8_t* codes, const float* data, int64_t n, const Histogram& h, float t,
                      const uint8_t* mask = nullptr);
// Value below which `fraction` of the counted voxels lie, interpolated within a bin.
double histogram_quantile(const Histogram& h, double fraction);

inline Stats compute_stats(const VolumeF& v, const Mask* m = nullptr) {
  return compute_stats(v.data(), v.size(), m ? m->data() : nullptr);
}

}  // namespace pb
