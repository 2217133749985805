#pragma once
// Shared machinery of threshold methods: the histogram a method sees (bins and range are
// parameters, with optional robust clipping), and the shared apply step (air = grey < threshold,
// then pore extraction). A global method is a calculator: histogram -> threshold in grey units.
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "core/histogram.hpp"
#include "methods/registry.hpp"

namespace pb {

// bins=auto: one bin per grey level for integer data spanning at most kAutoMaxLevels levels
// (bins = levels over [min, max]: each level in a bin of its own), else kAutoBins.
inline constexpr int kAutoMaxLevels = 4096;
inline constexpr int kAutoBins = 256;

// Schema entries every histogram method takes: bins (default auto), clip_pct, histogram.
std::vector<ParamSpec> histogram_params();

// The grey range [lo, hi] of the voxels that `s` describes (the ROI's where `roi` is given, else
// the volume's): [s.min, s.max], or with clip_pct > 0 the [clip_pct, 100 - clip_pct] percentiles
// (from a 65,536-bin histogram over [s.min, s.max]). One computation for the method histogram and
// for the local methods' R, lowest grey and normalisation (methods/local.cpp).
struct GreyRange {
  double lo = 0, hi = 0;
};
GreyRange grey_range(const VolumeF& v, const uint8_t* roi, const Stats& s, double clip_pct);
// The same from any source of histograms: hist(lo, hi, bins) is the histogram of the voxels over
// [lo, hi] (compute_histogram over a volume in memory, or summed over the slabs of a volume read by
// slabs, methods/streaming.hpp).
using HistogramOf = std::function<Histogram(double lo, double hi, int bins)>;
GreyRange grey_range(const Stats& s, double clip_pct, const HistogramOf& hist);

// Histogram of the voxels of the volume (histogram=volume, the default) or of the ROI
// (histogram=roi) over [min, max] or, with clip_pct > 0, over the [clip_pct, 100 - clip_pct]
// percentile range (values outside go to the end bins; with bins=auto on integer data the range
// is widened to whole grey levels). Its bins() is the resolved bin count. Integer data (stored_type
// uint8/uint16/int16, whole levels) are read once: grey-level counts give statistics and histograms.
Histogram method_histogram(const MethodInput& in, const ParamValues& p);
// The same from the statistics of the voxels that form the histogram and a source of histograms of them.
Histogram method_histogram(const Stats& s, bool roi, VoxelType stored_type, const ParamValues& p, const HistogramOf& hist);

// Voxel types stored as whole numbers (uint8, uint16, int16), and the grey levels in [lo, hi].
bool integer_type(VoxelType t);
double grey_levels(double lo, double hi);

struct ThresholdChoice {
  double threshold = 0;           // grey units: air is v < threshold
  std::vector<std::string> warnings;
};

// The one applier of every method that calls air: pore extraction (methods/pores.hpp) and the one
// degenerate-input policy: when no part voxel remains (all air connected to the outside),
// porosity is undefined and a warning says so, naming `method` and its `setting`.
MethodOutput pores_from_air(Mask air, const MethodInput& in, const std::string& method, const std::string& setting);
std::string no_part_voxels_warning(const std::string& method, const std::string& setting);  // its warning

// Pore mask from a threshold (pores_from_air of air below it), recording it as chosen["threshold"].
MethodOutput apply_threshold(const MethodInput& in, const ThresholdChoice& c, const std::string& method);

// Registers a histogram method: `calc` sees the method's histogram and parameters.
using ThresholdCalculator = std::function<ThresholdChoice(const Histogram&, const ParamValues&)>;
MethodInfo histogram_method(std::string name, std::string doc, std::string citation, ThresholdCalculator calc,
                            std::vector<ParamSpec> extra_params = {});

// The air mask of a histogram method, before pore extraction: its histogram, the calculator's
// choice (a constant volume: the lowest grey, no air, with a warning) and air = v < threshold inside
// the ROI. Reads integer data twice (grey-level counts, comparison), float data three times
// (stats, histogram, comparison): threshold.cpp's method_histogram.
struct ThresholdAir {
  Histogram histogram;
  ThresholdChoice choice;
  Mask air;
};
ThresholdAir threshold_air(const MethodInput& in, const ParamValues& p, const ThresholdCalculator& calc);

// The threshold the histogram method `calc` chooses on h, with the one constant-volume policy (a
// single occupied bin: no voxel is called air, and a warning says so).
ThresholdChoice choose_threshold(const Histogram& h, const ThresholdCalculator& calc, const ParamValues& p);

// All that a histogram method decides from its histogram, apart from the volume: the threshold and
// its warnings, and what it reports as chosen after "threshold". `stored` is the voxel type the
// method sees; lowest() the lowest grey value of the classified voxels (asked only when needed).
// A volume read by slabs (methods/streaming.cpp) gives the same histogram and gets the same decision.
struct HistogramDecision {
  ThresholdChoice choice;
  std::vector<std::pair<std::string, double>> chosen;
};
using HistogramDecider = std::function<HistogramDecision(const Histogram& h, VoxelType stored,
                                                         const std::function<double()>& lowest, const ParamValues& p)>;
// The slab run of a histogram method (MethodInfo::slabs, methods/slab_method.hpp): its histogram
// from the slab source's statistics and histograms (the ROI's with histogram=roi, as
// method_histogram), decide's threshold, then air = v < threshold slab by slab. histogram_method
// sets it with choose_threshold and its calculator; a method with its own policy (methods/global.cpp)
// sets it with its decider.
std::shared_ptr<const SlabMethod> histogram_slabs(HistogramDecider decide);

// True when fewer than two bins are occupied (constant volume): no threshold can split it.
bool single_occupied_bin(const Histogram& h);

}  // namespace pb

namespace pb {
// Otsu's split on a histogram: the last bin index of the dark class (methods/global.cpp).
int otsu_split(const Histogram& h);
}  // namespace pb
