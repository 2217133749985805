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
// Counts of every grey level of an integer voxel type (uint8, uint16, int16: 256 or 65,536 levels)
// in one read of the voxels; the statistics and any histogram follow from them exactly, without
// another read. Threshold methods use them for integer data, in memory and by slabs, so that they
// read the voxels twice (these counts, then the comparison; methods/threshold.cpp). The statistics
// equal compute_stats's (the mean is the exact sum of whole numbers over the count, as compute_stats's
// double sums are exact for whole numbers below 2^53) and every histogram equals compute_histogram's.
class LevelCounts {
 public:
  explicit LevelCounts(VoxelType t);  // t: uint8, uint16 or int16 (std::invalid_argument otherwise)
  // Adds the voxels of data[0, n) (where mask is non-zero, when given). False, and nothing added,
  // when a voxel is not a whole grey level of the type (say a filtered volume): use the float path.
  bool add(const float* data, int64_t n, const uint8_t* mask = nullptr);
  Stats stats() const;
  // compute_histogram over the voxels added: compute_histogram over the occupied levels, once each,
  // gives the number of levels in each bin; taken in ascending order (binning is monotone in the
  // value) they say which bin every level falls in.
  Histogram histogram(double lo, double hi, int bins) const;

 private:
  int64_t offset_, levels_;        // level k is the grey value k + offset_
  std::vector<uint64_t> counts_;
};

// Value below which `fraction` of the counted voxels lie, interpolated within a bin.
double histogram_quantile(const Histogram& h, double fraction);

inline Stats compute_stats(const VolumeF& v, const Mask* m = nullptr) {
  return compute_stats(v.data(), v.size(), m ? m->data() : nullptr);
}

}  // namespace pb
