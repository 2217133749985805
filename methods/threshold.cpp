// What threshold methods share (threshold.hpp): the histogram schema (bins with its auto rule,
// clip_pct, histogram = volume | roi), the method histogram over the (robust) grey range, the
// applier (air below the threshold, then pore extraction) and the registration of a histogram
// calculator. Global calculators and their degenerate-input policy: methods/global.cpp.
#include "methods/threshold.hpp"

#include <algorithm>
#include <cmath>

#include "core/error.hpp"
#include "core/format.hpp"
#include "methods/pores.hpp"
#include "methods/slab_method.hpp"

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

namespace {
HistogramOf histogram_of(const VolumeF& v, const uint8_t* roi) {
  return [&v, roi](double lo, double hi, int bins) { return compute_histogram(v.data(), v.size(), lo, hi, bins, roi); };
}
}  // namespace

GreyRange grey_range(const Stats& s, double clip_pct, const HistogramOf& hist) {
  if (!(clip_pct > 0 && s.max > s.min)) return {s.min, s.max};
  const Histogram fine = hist(s.min, s.max, 65536);
  return {histogram_quantile(fine, clip_pct / 100.0), histogram_quantile(fine, 1.0 - clip_pct / 100.0)};
}

GreyRange grey_range(const VolumeF& v, const uint8_t* roi, const Stats& s, double clip_pct) {
  return grey_range(s, clip_pct, histogram_of(v, roi));
}

Histogram method_histogram(const Stats& s, bool roi, VoxelType stored_type, const ParamValues& p, const HistogramOf& hist) {
  if (s.count == 0) throw InputError(roi ? "no finite voxels inside the region of interest" : "no finite voxels in the volume");
  const double clip = p.num("clip_pct");
  const bool automatic = p.is_word("bins");
  auto [lo, hi] = grey_range(s, clip, hist);
  if (clip > 0 && s.max > s.min && automatic && integer_type(stored_type)) {
    lo = std::floor(lo);  // whole levels at both ends, so that bins fall on levels
    hi = std::ceil(hi);
  }
  int bins = automatic ? kAutoBins : int(p.integer("bins"));
  if (automatic && integer_type(stored_type) && grey_levels(lo, hi) <= kAutoMaxLevels)
    bins = std::max(2, int(grey_levels(lo, hi)));
  return hist(lo, hi, bins);
}

// What a histogram method reads of its volume in memory. Integer data (what CT writes): one read
// counting every grey level (LevelCounts), from which the statistics and every histogram follow
// exactly; with the comparison that makes Otsu two reads. Float data (or integer-typed data that
// are not whole levels): the statistics, then a read per histogram asked for (three reads).
// BM_OtsuBinarise / BM_OtsuBinarise3Reads compare the two on uint16 data (bench/README); the
// slab path counts the same way (methods/streaming.cpp).
Histogram method_histogram(const MethodInput& in, const ParamValues& p) {
  const uint8_t* roi = in.roi && p.choice("histogram") == "roi" ? in.roi->data() : nullptr;
  if (integer_type(in.stored_type)) {
    LevelCounts levels(in.stored_type);
    if (levels.add(in.volume.data(), in.volume.size(), roi))
      return method_histogram(levels.stats(), roi != nullptr, in.stored_type, p,
                              [&](double lo, double hi, int bins) { return levels.histogram(lo, hi, bins); });
  }
  return method_histogram(compute_stats(in.volume.data(), in.volume.size(), roi), roi != nullptr, in.stored_type, p,
                          histogram_of(in.volume, roi));
}

bool single_occupied_bin(const Histogram& h) {
  int occupied = 0;
  for (auto c : h.counts) occupied += c > 0;
  return occupied < 2;
}

MethodOutput pores_from_air(Mask air, const MethodInput& in, const std::string& method, const std::string& setting) {
  MethodOutput out;
  out.pores = std::move(air);
  out.part_voxels = air_to_pores(out.pores, in.roi);
  if (out.part_voxels == 0) out.warnings.push_back(no_part_voxels_warning(method, setting));
  return out;
}

std::string no_part_voxels_warning(const std::string& method, const std::string& setting) {
  return method + ": every voxel is air connected to the outside at " + setting + ": no part voxels, porosity undefined (all air?)";
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
  a.histogram = method_histogram(in, p);
  a.choice = choose_threshold(a.histogram, calc, p);
  a.air = air_below(in.volume, a.choice.threshold, in.roi);
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
  m.slabs = histogram_slabs([calc](const Histogram& h, VoxelType, const std::function<double()>&, const ParamValues& p) {
    return HistogramDecision{choose_threshold(h, calc, p), {}};
  });
  m.run = [calc = std::move(calc), name = m.name](const MethodInput& in, const ParamValues& p) {
    ThresholdAir a = threshold_air(in, p, calc);
    return threshold_output(std::move(a.air), in, a.choice, name);
  };
  return m;
}

ThresholdChoice choose_threshold(const Histogram& h, const ThresholdCalculator& calc, const ParamValues& p) {
  // A constant volume has nothing to split: no voxel is called air.
  if (single_occupied_bin(h)) return {h.lo, {"the grey-value histogram has a single occupied bin (constant volume): no pores"}};
  return calc(h, p);
}

std::shared_ptr<const SlabMethod> histogram_slabs(HistogramDecider decide) {
  auto m = std::make_shared<SlabMethod>();
  m->air = [decide = std::move(decide)](const ParamValues& p, const SlabSource& src, const AirOut& out) {
    const bool roi_hist = src.roi && p.choice("histogram") == "roi";  // as method_histogram in memory
    const Histogram h = roi_hist ? method_histogram(src.part, true, src.stored, p, src.part_hist)
                                 : method_histogram(src.all, false, src.stored, p, src.hist);
    const HistogramDecision d = decide(h, src.stored, [&src] { return src.part.min; }, p);
    const double t = d.choice.threshold;
    const int64_t nz = src.geometry.dims[2];
    VolumeF v;  // buffers reused for every slab
    std::vector<uint8_t> a;
    for (int64_t z0 = 0; z0 < nz; z0 += src.slab) {
      const int64_t z1 = std::min(nz, z0 + src.slab);
      src.read(z0, z1, v);
      a.resize(size_t(v.size()));
      air_below(v.data(), v.size(), t, nullptr, a.data());
      out(z0, z1 - z0, a.data());
    }
    SlabAir r;
    r.chosen.emplace_back("threshold", t);
    r.chosen.insert(r.chosen.end(), d.chosen.begin(), d.chosen.end());
    r.warnings = d.choice.warnings;
    r.no_part_setting = "threshold " + format_number(t, 6);
    return r;
  };
  return m;
}

}  // namespace pb
