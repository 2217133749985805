// What threshold methods share (threshold.hpp): the histogram schema (bins with its auto rule,
// clip_pct, histogram = volume | roi), the method histogram over the (robust) grey range, the
// applier (air below the threshold, then pore extraction) and the registration of a histogram
// calculator. Global calculators and their degenerate-input policy: methods/global.cpp.
#include "methods/threshold.hpp"

#include <cmath>

#include "core/error.hpp"
#include "core/format.hpp"
#include "methods/pores.hpp"

namespace pb {

std::vector<ParamSpec> histogram_params() {
  return {
      {"bins", ParamType::Int, "auto", 2, 65536, {"auto"}, "bins",
       "number of histogram bins over the grey-value range; auto = one bin per grey level for integer volumes "
       "(uint8/uint16/int16) spanning at most " + std::to_string(kAutoMaxLevels) + " levels, else " +
           std::to_string(kAutoBins) + " (the value used is reported as chosen bins)"},
      {"clip_pct", ParamType::Float, "0", 0, 10, {}, "%",
       "robust range: ignore this percentage at each end of the grey-value distribution (0 = full min..max)"},
      {"histogram", ParamType::Enum, "volume", -1e300, 1e300, {"volume", "roi"}, "",
       "voxels that form the histogram: the whole volume, so that the air and material peaks are both present "
       "(common practice in CT), or only the part mask (ROI); pores are classified inside the ROI either way"},
  };
}

bool integer_type(VoxelType t) { return t == VoxelType::u8 || t == VoxelType::u16 || t == VoxelType::i16; }

double grey_levels(double lo, double hi) { return std::floor(hi) - std::ceil(lo) + 1; }

GreyRange grey_range(const VolumeF& v, const uint8_t* roi, const Stats& s, double clip_pct) {
  if (!(clip_pct > 0 && s.max > s.min)) return {s.min, s.max};
  const Histogram fine = compute_histogram(v.data(), v.size(), s.min, s.max, 65536, roi);
  return {histogram_quantile(fine, clip_pct / 100.0), histogram_quantile(fine, 1.0 - clip_pct / 100.0)};
}

namespace {

// method_histogram; with `codes` and at most 256 bins, each voxel's bin is written there too, so
// that the air mask comes from the codes (below_from_codes) instead of a third read of the volume.
Histogram method_histogram_codes(const MethodInput& in, const ParamValues& p, Mask* codes) {
  const uint8_t* roi = in.roi && p.choice("histogram") == "roi" ? in.roi->data() : nullptr;
  const Stats s = compute_stats(in.volume.data(), in.volume.size(), roi);
  if (s.count == 0) throw InputError(roi ? "no finite voxels inside the region of interest" : "no finite voxels in the volume");
  const double clip = p.num("clip_pct");
  const bool automatic = p.is_word("bins");
  auto [lo, hi] = grey_range(in.volume, roi, s, clip);
  if (clip > 0 && s.max > s.min && automatic && integer_type(in.stored_type)) {
    lo = std::floor(lo);  // whole levels at both ends, so that bins fall on levels
    hi = std::ceil(hi);
  }
  int bins = automatic ? kAutoBins : int(p.integer("bins"));
  if (automatic && integer_type(in.stored_type) && grey_levels(lo, hi) <= kAutoMaxLevels)
    bins = std::max(2, int(grey_levels(lo, hi)));
  if (codes && bins <= 256) {
    *codes = Mask(in.volume.geometry(), Uninitialized{});  // every voxel written
    return compute_histogram_codes(in.volume.data(), in.volume.size(), lo, hi, bins, roi, codes->data());
  }
  return compute_histogram(in.volume.data(), in.volume.size(), lo, hi, bins, roi);
}

}  // namespace

Histogram method_histogram(const MethodInput& in, const ParamValues& p) { return method_histogram_codes(in, p, nullptr); }

bool single_occupied_bin(const Histogram& h) {
  int occupied = 0;
  for (auto c : h.counts) occupied += c > 0;
  return occupied < 2;
}

MethodOutput pores_from_air(Mask air, const MethodInput& in, const std::string& method, const std::string& setting) {
  MethodOutput out;
  out.pores = std::move(air);
  out.part_voxels = air_to_pores(out.pores, in.roi);
  if (out.part_voxels == 0)
    out.warnings.push_back(method + ": every voxel is air connected to the outside at " + setting +
                           ": no part voxels, porosity undefined (all air?)");
  return out;
}

namespace {

MethodOutput threshold_output(Mask air, const MethodInput& in, const ThresholdChoice& c, const std::string& method) {
  MethodOutput out = pores_from_air(std::move(air), in, method, "threshold " + format_number(c.threshold, 6));
  out.chosen.emplace_back("threshold", c.threshold);
  out.warnings.insert(out.warnings.begin(), c.warnings.begin(), c.warnings.end());
  return out;
}

}  // namespace

MethodOutput apply_threshold(const MethodInput& in, const ThresholdChoice& c, const std::string& method) {
  return threshold_output(air_below(in.volume, c.threshold, in.roi), in, c, method);
}

ThresholdAir threshold_air(const MethodInput& in, const ParamValues& p, const ThresholdCalculator& calc) {
  ThresholdAir a;
  Mask codes;
  a.histogram = method_histogram_codes(in, p, &codes);
  if (single_occupied_bin(a.histogram))  // a constant volume has nothing to split: no voxel is called air
    a.choice = {a.histogram.lo, {"the grey-value histogram has a single occupied bin (constant volume): no pores"}};
  else
    a.choice = calc(a.histogram, p);
  if (codes.empty()) {  // more than 256 bins: the codes do not fit a byte
    a.air = air_below(in.volume, a.choice.threshold, in.roi);
  } else {  // the same voxels as air_below: v < float(threshold), inside the ROI, NaN never air
    below_from_codes(codes.data(), in.volume.data(), in.volume.size(), a.histogram, float(a.choice.threshold),
                     in.roi ? in.roi->data() : nullptr);
    a.air = std::move(codes);
  }
  return a;
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
  m.run = [calc = std::move(calc), name = m.name](const MethodInput& in, const ParamValues& p) {
    ThresholdAir a = threshold_air(in, p, calc);
    return threshold_output(std::move(a.air), in, a.choice, name);
  };
  return m;
}

}  // namespace pb
