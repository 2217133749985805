#include "methods/threshold.hpp"

#include <cmath>

#include "core/error.hpp"
#include "methods/pores.hpp"

namespace pb {

std::vector<ParamSpec> histogram_params() {
  return {
      {"bins", ParamType::Int, "256", 2, 65536, {}, "bins", "number of histogram bins over the grey-value range"},
      {"clip_pct", ParamType::Float, "0", 0, 10, {}, "%",
       "robust range: ignore this percentage at each end of the grey-value distribution (0 = full min..max)"},
      {"histogram", ParamType::Enum, "volume", -1e300, 1e300, {"volume", "roi"}, "",
       "voxels that form the histogram: the whole volume, so that the air and material peaks are both present "
       "(common practice in CT), or only the part mask (ROI); pores are classified inside the ROI either way"},
  };
}

Histogram method_histogram(const MethodInput& in, const ParamValues& p) {
  const uint8_t* roi = in.roi && p.choice("histogram") == "roi" ? in.roi->data() : nullptr;
  const Stats s = compute_stats(in.volume.data(), in.volume.size(), roi);
  if (s.count == 0) throw InputError(roi ? "no finite voxels inside the region of interest" : "no finite voxels in the volume");
  double lo = s.min, hi = s.max;
  const double clip = p.num("clip_pct");
  if (clip > 0 && hi > lo) {
    const Histogram fine = compute_histogram(in.volume.data(), in.volume.size(), lo, hi, 65536, roi);
    lo = histogram_quantile(fine, clip / 100.0);
    hi = histogram_quantile(fine, 1.0 - clip / 100.0);
  }
  return compute_histogram(in.volume.data(), in.volume.size(), lo, hi, int(p.integer("bins")), roi);
}

bool single_occupied_bin(const Histogram& h) {
  int occupied = 0;
  for (auto c : h.counts) occupied += c > 0;
  return occupied < 2;
}

MethodOutput apply_threshold(const MethodInput& in, const ThresholdChoice& c) {
  MethodOutput out;
  out.pores = air_below(in.volume, c.threshold, in.roi);
  out.part_voxels = air_to_pores(out.pores, in.roi);
  out.chosen.emplace_back("threshold", c.threshold);
  out.warnings = c.warnings;
  return out;
}

MethodInfo histogram_method(std::string name, std::string doc, std::string citation, ThresholdCalculator calc,
                            std::vector<ParamSpec> extra) {
  MethodInfo m;
  m.name = std::move(name);
  m.family = "global";
  m.doc = std::move(doc);
  m.citation = std::move(citation);
  m.params = histogram_params();
  m.params.insert(m.params.end(), extra.begin(), extra.end());
  m.run = [calc = std::move(calc)](const MethodInput& in, const ParamValues& p) {
    const Histogram h = method_histogram(in, p);
    if (single_occupied_bin(h)) {
      // A constant volume has nothing to split: no voxel is called air.
      ThresholdChoice c{h.lo, {"the grey-value histogram has a single occupied bin (constant volume): no pores"}};
      return apply_threshold(in, c);
    }
    return apply_threshold(in, calc(h, p));
  };
  return m;
}

}  // namespace pb
