// Local adaptive thresholds in 3D: each voxel gets its own threshold from a cubic window around it
// (niblack, sauvola, phansalkar, wolf from the window mean and standard deviation; bernsen from
// the window min and max; local-mean and local-gaussian from a weighted mean). Sources are in
// each method's citation. Pores are dark: a voxel is air when below its local threshold; then the
// shared pore extraction. Windows are cubes of odd size in voxels; borders are mirrored without
// repeating the edge voxel (numpy 'reflect', as scikit-image's threshold_sauvola). Windows see all
// voxels; the ROI only limits which voxels may be air. Cost per voxel does not depend on the
// window (methods/integral.hpp) except for local-gaussian (a separable FIR of the window length).
#include <cmath>
#include <functional>
#include <map>
#include <stdexcept>
#include <type_traits>

#include "core/error.hpp"
#include "core/format.hpp"
#include "core/histogram.hpp"
#include "methods/integral.hpp"
#include "methods/pores.hpp"
#include "methods/slab_method.hpp"
#include "methods/threshold.hpp"

namespace pb {
namespace {

// Window: odd and no larger than the volume along any axis (the mirror needs window/2 < dim).
int64_t checked_window(const std::string& method, const Geometry& g, const ParamValues& p) {
  const int64_t w = p.integer("window");
  if (w % 2 == 0)
    throw InputError("method " + method + ": parameter 'window': even value " + std::to_string(w) +
                     " (voxels); the window must be odd (3, 5, 7, ...) so that it is centred on the voxel");
  const char* axis = "xyz";
  for (int a = 0; a < 3; ++a)
    if (w > g.dims[size_t(a)])
      throw InputError("method " + method + ": parameter 'window': value " + std::to_string(w) +
                       " is larger than the volume along " + axis[a] + " (" + describe(g) + ")");
  return w;
}

ParamSpec window_param() {
  return {"window", ParamType::Int, "15", 3, 4095, {}, "voxels",
          "edge of the cubic window (odd, at most the smallest volume dim); at the borders the volume is mirrored "
          "without repeating the edge voxel (numpy 'reflect', as scikit-image threshold_sauvola)"};
}
ParamSpec clip_param() {
  return {"clip_pct", ParamType::Float, "0", 0, 10, {}, "%",
          "grey range used to derive R, min grey and normalisation: [clip_pct, 100-clip_pct] percentiles "
          "of the ROI voxels (0 = min..max)"};
}

struct Context {
  Stats all;             // every voxel (windows see all voxels)
  double lo = 0, hi = 0;  // grey range of the ROI voxels (robust with clip_pct)
  std::vector<std::string> warnings;
};

// The context's statistics of every voxel, refused when none is finite.
Context context_start(const Stats& all) {
  Context c;
  c.all = all;
  if (c.all.count == 0) throw InputError("the volume has no finite voxels");
  if (c.all.nan_count > 0)
    c.warnings.push_back(std::to_string(c.all.nan_count) +
                         " NaN voxels: read as the volume mean in window statistics, never air");
  return c;
}

Context context(const MethodInput& in, double clip_pct, bool need_range) {
  Context c = context_start(compute_stats(in.volume));
  if (need_range) {
    const uint8_t* roi = in.roi ? in.roi->data() : nullptr;
    const Stats s = roi ? compute_stats(in.volume.data(), in.volume.size(), roi) : c.all;
    if (s.count == 0) throw InputError("no finite voxels inside the region of interest");
    const GreyRange r = grey_range(in.volume, roi, s, clip_pct);
    c.lo = r.lo;
    c.hi = r.hi;
  }
  return c;
}

LocalAir finish(Mask air, Context& c) {
  LocalAir out;
  out.air = std::move(air);
  out.warnings = std::move(c.warnings);
  return out;
}

// A constant volume has no local contrast: defined result, no pores, and a warning.
bool constant_volume(const MethodInput& in, const Context& c, LocalAir& out) {
  if (c.all.max > c.all.min) return false;
  Context cc = c;
  cc.warnings.push_back("constant volume (every voxel " + format_number(c.all.min, 8) + "): no local contrast, no pores");
  out = finish(Mask(in.volume.geometry()), cc);
  return true;
}

// Air from the window mean and std over the slices of g served in z order: air where
// v < thr(mean, std) (and inside roi). A threshold of the mean alone, thr(mean), is served without
// the std sums. Each batch of air slices is written to dest(z0, n), then handed to done (if any).
template <class Thr>
void moments_air(const Geometry& g, const SliceOf& slice, const uint8_t* roi, int64_t window, double centre, Thr thr,
                 const std::function<uint8_t*(int64_t z0, int64_t n)>& dest, const AirOut& done) {
  constexpr bool with_std = std::is_invocable_v<Thr, double, double>;
  const int64_t nxy = g.slice_voxels();
  SliceMoments mom(g, slice, window, centre, with_std);
  std::vector<double> mean(static_cast<size_t>(nxy * mom.batch())), sd(with_std ? mean.size() : 0);
  for (;;) {
    const int64_t z0 = mom.next_z(), n = mom.next(mean.data(), sd.data());
    if (n == 0) break;
    uint8_t* air = dest(z0, n);
    for (int64_t t = 0; t < n; ++t) {
      const float* s = slice(z0 + t);
      uint8_t* a = air + t * nxy;
      const double* m = mean.data() + t * nxy;
      const double* sdev = with_std ? sd.data() + t * nxy : nullptr;
      const uint8_t* r = roi ? roi + (z0 + t) * nxy : nullptr;
#pragma omp parallel for schedule(static)
      for (int64_t i = 0; i < nxy; ++i) {
        double threshold;
        if constexpr (with_std)
          threshold = thr(m[i], sdev[i]);
        else
          threshold = thr(m[i]);
        a[i] = double(s[i]) < threshold && (!r || r[i]);
      }
    }
    if (done) done(z0, n, air);
  }
}

// Air mask of a volume in memory from the window mean and std (moments_air).
template <class Thr>
Mask air_from_moments(const MethodInput& in, int64_t window, double centre, Thr thr) {
  const VolumeF& v = in.volume;
  Mask air(v.geometry(), Uninitialized{});  // every slice written below
  moments_air(
      v.geometry(), [&v](int64_t z) { return v.slice(z); }, in.roi ? in.roi->data() : nullptr, window, centre, thr,
      [&air](int64_t z0, int64_t) { return air.slice(z0); }, nullptr);
  return air;
}

// Largest window std over voxels inside the ROI (Wolf & Jolion's R), over the slices of g served in
// z order (a volume in memory, or one read by slabs); roi may be empty (no ROI).
double max_local_std(const Geometry& g, const SliceOf& slice, const RoiOf& roi, int64_t window, double centre) {
  const int64_t nxy = g.slice_voxels();
  SliceMoments mom(g, slice, window, centre);
  std::vector<double> mean(static_cast<size_t>(nxy * mom.batch())), sd(mean.size());
  double best = 0;
  for (;;) {
    const int64_t z0 = mom.next_z(), slices = mom.next(mean.data(), sd.data()), n = slices * nxy;
    if (n == 0) break;
    const uint8_t* r = roi ? roi(z0, slices) : nullptr;
#pragma omp parallel for schedule(static) reduction(max : best)
    for (int64_t i = 0; i < n; ++i)
      if (!r || r[i]) best = std::max(best, sd[size_t(i)]);
  }
  return best;
}

using AirFn = std::function<LocalAir(const MethodInput&, const ParamValues&)>;
std::map<std::string, AirFn>& air_functions() {
  static std::map<std::string, AirFn> f;
  return f;
}

using Chosen = std::vector<std::pair<std::string, double>>;

// A local method's own part of its run by slabs: given the window w, the context c (statistics, and
// the ROI's grey range when the method takes one) and whether the volume is constant, it writes
// every air slice to out in z order and returns true, or writes nothing and returns false (no air
// anywhere); it sets what the method chose.
using SlabBody = std::function<bool(const ParamValues& p, const SlabSource& src, int64_t w, Context& c, bool constant,
                                    const AirOut& out, Chosen& chosen)>;
struct LocalSlabs {
  bool range = false;  // takes the ROI's grey range (clip_pct), as context(in, clip_pct, true)
  bool halo = false;   // reads each slab with a halo of window/2 slices (a window filter)
  SlabBody body;
};

// The frame of every local method by slabs, as context() and constant_volume() in memory: the
// window checked, the statistics of every voxel and (range) the grey range of the ROI's, no air
// anywhere when the body writes none, the constant-volume warning. The air is not cut to the ROI
// (the pipeline's open mask takes every voxel outside it: the same pores as in memory).
SlabAir local_by_slabs(const std::string& method, const LocalSlabs& m, const ParamValues& p, const SlabSource& src,
                       const AirOut& out) {
  const Geometry& g = src.geometry;
  const int64_t w = checked_window(method, g, p);
  Context c = context_start(src.all);
  if (m.range) {
    if (src.roi && src.part.count == 0) throw InputError("no finite voxels inside the region of interest");
    const GreyRange range = grey_range(src.part, p.num("clip_pct"), src.part_hist);
    c.lo = range.lo;
    c.hi = range.hi;
  }
  const bool constant = !(c.all.max > c.all.min);
  SlabAir res;
  const bool air = m.body(p, src, w, c, constant, out, res.chosen);
  if (constant)  // as constant_volume
    c.warnings.push_back("constant volume (every voxel " + format_number(c.all.min, 8) + "): no local contrast, no pores");
  if (!air) {  // no air anywhere
    const std::vector<uint8_t> none(size_t(g.slice_voxels()), 0);
    for (int64_t z = 0; z < g.dims[2]; ++z) out(z, 1, none.data());
  }
  res.warnings = std::move(c.warnings);
  return res;
}

// Registers the in-memory air function and the slab run of a local method beside its run.
MethodInfo local_info(std::string name, std::string doc, std::string citation, std::vector<ParamSpec> params,
                      AirFn air, LocalSlabs slabs) {
  air_functions()[name] = air;
  MethodInfo m;
  m.name = std::move(name);
  m.family = "local";
  m.doc = std::move(doc);
  m.citation = std::move(citation);
  m.params.push_back(window_param());
  m.params.insert(m.params.end(), params.begin(), params.end());
  m.run = [air](const MethodInput& in, const ParamValues& p) {
    LocalAir a = air(in, p);
    MethodOutput out;
    out.pores = std::move(a.air);
    out.part_voxels = air_to_pores(out.pores, in.roi);
    out.chosen = std::move(a.chosen);
    out.warnings = std::move(a.warnings);
    return out;
  };
  auto s = std::make_shared<SlabMethod>();
  s->check = [name = m.name](const ParamValues& p, const Geometry& g) { checked_window(name, g, p); };
  if (slabs.halo) s->halo = [](const ParamValues& p) { return p.integer("window") / 2; };
  s->air = [name = m.name, slabs = std::move(slabs)](const ParamValues& p, const SlabSource& src, const AirOut& out) {
    return local_by_slabs(name, slabs, p, src, out);
  };
  m.slabs = std::move(s);
  return m;
}

// ---- the moments rules ---------------------------------------------------------------------------
// Each method of the window mean (and std) derives its threshold rule from its parameters and the
// context, hands it to use(rule) unless the volume is constant (no rule is derived then), and
// returns its chosen values. The in-memory path (air_from_moments) and the slab path
// (moments_info's SlabBody) share them, so both answer the same.

template <class Use>
Chosen niblack_rule(int64_t w, const ParamValues& p, Context&, bool constant, Use&& use) {
  const double k = p.num("k");
  if (!constant) use([k](double m, double s) { return m - k * s; });
  return {{"window", double(w)}, {"k", k}};
}

// Sauvola: T = m (1 + k (s/R - 1)).
struct SauvolaRule {
  double k, r;
  double operator()(double m, double s) const { return m * (1 + k * (s / r - 1)); }
};

// R = r, or (r = 0) half the grey range (hi - lo)/2, or half the whole volume's range when that is 0;
// a warning for grey values below 0.
template <class Use>
Chosen sauvola_rule(int64_t w, const ParamValues& p, Context& c, bool constant, Use&& use) {
  SauvolaRule rule{p.num("k"), p.num("r")};
  if (!constant) {
    if (rule.r == 0) rule.r = 0.5 * (c.hi - c.lo);
    if (!(rule.r > 0)) rule.r = 0.5 * (c.all.max - c.all.min);  // ROI constant: fall back to the whole volume
    if (c.lo < 0)
      c.warnings.push_back("grey values below 0 (low " + format_number(c.lo, 8) +
                           "): Sauvola's T = m(1 + k(s/R - 1)) assumes non-negative grey values");
    use(rule);
  }
  return {{"window", double(w)}, {"k", rule.k}, {"r", rule.r}};
}

// Phansalkar on grey values normalised by the ROI grey range (the whole range when that is 0).
template <class Use>
Chosen phansalkar_rule(int64_t w, const ParamValues& p, Context& c, bool constant, Use&& use) {
  const double k = p.num("k"), pp = p.num("p"), q = p.num("q"), r = p.num("r");
  if (!constant) {
    if (!(c.hi > c.lo)) {
      c.lo = c.all.min;
      c.hi = c.all.max;
    }
    const double lo = c.lo, span = c.hi - c.lo;
    use([=](double m, double s) {
      const double mn = (m - lo) / span, sn = s / span;
      return lo + span * mn * (1 + pp * std::exp(-q * mn) + k * (sn / r - 1));
    });
  }
  return {{"window", double(w)}, {"k", k}, {"p", pp}, {"q", q}, {"r", r}, {"grey_lo", c.lo}, {"grey_hi", c.hi}};
}

// Wolf & Jolion: T = m - k (1 - s/R)(m - M), R = max_std() (the largest window std in the ROI, a
// first pass over the volume), M the low end of the ROI grey range. No rule when R is 0.
template <class Use>
Chosen wolf_rule(int64_t w, const ParamValues& p, Context& c, bool constant, const std::function<double()>& max_std,
                 Use&& use) {
  const double k = p.num("k"), mg = c.lo;
  double r = 0;
  if (!constant) {
    r = max_std();
    if (r > 0)
      use([=](double m, double s) { return m - k * (1 - s / r) * (m - mg); });
    else
      c.warnings.push_back("no window inside the ROI has any contrast (largest std 0): no pores");
  }
  return {{"window", double(w)}, {"k", k}, {"r", r}, {"min_grey", mg}};
}

template <class Use>
Chosen local_mean_rule(int64_t w, const ParamValues& p, Context&, bool constant, Use&& use) {
  const double off = p.num("offset");
  if (!constant) use([off](double m) { return m - off; });
  return {{"window", double(w)}, {"offset", off}};
}

// A moments method, registered by moments_info: rule(w, p, c, constant, max_std, use) is one of the
// rules above (max_std: wolf's first pass, the largest window std in the ROI, asked only by wolf);
// range: whether it takes the ROI's grey range (with its clip_pct).
using MaxStd = std::function<double()>;

template <class Rule>
LocalAir moments_local_air(const std::string& method, bool range, const Rule& rule, const MethodInput& in,
                           const ParamValues& p) {
  const int64_t w = checked_window(method, in.volume.geometry(), p);
  Context c = context(in, range ? p.num("clip_pct") : 0, range);
  LocalAir out;
  const bool constant = constant_volume(in, c, out);
  const VolumeF& v = in.volume;
  RoiOf roi;
  if (in.roi) roi = [&in](int64_t z0, int64_t) { return in.roi->slice(z0); };
  const MaxStd max_std = [&] {
    return max_local_std(v.geometry(), [&v](int64_t z) { return v.slice(z); }, roi, w, c.all.mean);
  };
  bool used = false;
  Chosen chosen = rule(w, p, c, constant, max_std, [&](auto r) {
    used = true;
    out = finish(air_from_moments(in, w, c.all.mean, r), c);
  });
  if (!constant && !used) out = finish(Mask(v.geometry()), c);  // no rule (wolf without contrast): no air
  out.chosen = std::move(chosen);
  return out;
}

// By slabs: the window sums over passes of slices in z order (wolf: a first pass for max_std).
template <class Rule>
MethodInfo moments_info(std::string name, std::string doc, std::string citation, std::vector<ParamSpec> params,
                        bool range, Rule rule) {
  AirFn air = [name, range, rule](const MethodInput& in, const ParamValues& p) {
    return moments_local_air(name, range, rule, in, p);
  };
  LocalSlabs slabs;
  slabs.range = range;
  slabs.body = [rule](const ParamValues& p, const SlabSource& src, int64_t w, Context& c, bool constant,
                      const AirOut& out, Chosen& chosen) {
    const Geometry& g = src.geometry;
    std::vector<uint8_t> buf;
    auto dest = [&](int64_t, int64_t n) {  // moments_air writes every voxel
      buf.resize(size_t(n * g.slice_voxels()));
      return buf.data();
    };
    bool air = false;
    chosen = rule(w, p, c, constant, [&] { return max_local_std(g, src.slices(w), src.roi, w, c.all.mean); },
                  [&](auto r) {
                    air = true;
                    moments_air(g, src.slices(w), nullptr, w, c.all.mean, r, dest, out);
                  });
    return air;
  };
  return local_info(std::move(name), std::move(doc), std::move(citation), std::move(params), std::move(air),
                    std::move(slabs));
}

// ---- niblack ------------------------------------------------------------------------------------
MethodInfo niblack_info() {
  return moments_info(
      "niblack", "Niblack: T = m - k*s from the window mean m and standard deviation s (scikit-image's sign)",
      "Niblack W. (1986) An Introduction to Digital Image Processing. Prentice-Hall, pp. 115-116",
      {{"k", ParamType::Float, "0.2", -1, 1, {}, "",
        "weight of the window std; Niblack's T = m + k's with k' = -0.2 is k = 0.2 here"}},
      false, [](int64_t w, const ParamValues& p, Context& c, bool constant, const MaxStd&, auto&& use) {
        return niblack_rule(w, p, c, constant, use);
      });
}

// ---- sauvola ------------------------------------------------------------------------------------
MethodInfo sauvola_info() {
  return moments_info(
      "sauvola",
      "Sauvola: T = m * (1 + k * (s/R - 1)); R, the dynamic range of the std, in grey units or (r=0) half the "
      "grey range of the ROI (robust with clip_pct). Grey values should be >= 0 with air darkest",
      "Sauvola J., Pietikainen M. (2000) Adaptive document image binarization. Pattern Recognition 33(2):225-236",
      {{"k", ParamType::Float, "0.2", 0, 1, {}, "", "weight of the std term (paper 0.5, scikit-image 0.2)"},
       {"r", ParamType::Float, "0", 0, 3.4e38, {}, "grey",
        "R in grey units; 0 = half the grey range (hi - lo)/2 of the ROI voxels. Note: scikit-image's default "
        "for float images is 1 (half the float dtype range -1..1), not data-derived"},
       clip_param()},
      true, [](int64_t w, const ParamValues& p, Context& c, bool constant, const MaxStd&, auto&& use) {
        return sauvola_rule(w, p, c, constant, use);
      });
}

// ---- phansalkar ---------------------------------------------------------------------------------
MethodInfo phansalkar_info() {
  return moments_info(
      "phansalkar",
      "Phansalkar: on grey values normalised to [0,1] by the ROI grey range, T = m(1 + p exp(-q m) + k(s/r - 1))",
      "Phansalkar N., More S., Sabale A., Joshi M. (2011) Adaptive local thresholding for detection of nuclei in "
      "diversity stained cytology images. Int. Conf. Communications and Signal Processing (ICCSP), 218-220",
      {{"k", ParamType::Float, "0.25", 0, 1, {}, "", "weight of the std term (paper 0.25)"},
       {"p", ParamType::Float, "2", 0, 10, {}, "", "weight of the exponential term (paper 2)"},
       {"q", ParamType::Float, "10", 0, 100, {}, "", "decay of the exponential term (paper 10)"},
       {"r", ParamType::Float, "0.5", 1e-6, 1, {}, "normalised grey", "R on the normalised scale (paper 0.5)"},
       clip_param()},
      true, [](int64_t w, const ParamValues& p, Context& c, bool constant, const MaxStd&, auto&& use) {
        return phansalkar_rule(w, p, c, constant, use);
      });
}

// ---- wolf ---------------------------------------------------------------------------------------
MethodInfo wolf_info() {
  return moments_info(
      "wolf",
      "Wolf & Jolion: T = m - k (1 - s/R)(m - M), R the largest window std in the ROI, M the lowest ROI grey "
      "value (robust with clip_pct); two passes",
      "Wolf C., Jolion J.-M. (2004) Extraction and recognition of artificial text in multimedia documents. "
      "Pattern Analysis and Applications 6(4):309-326",
      {{"k", ParamType::Float, "0.5", 0, 1, {}, "", "weight (paper 0.5)"}, clip_param()},
      true, [](int64_t w, const ParamValues& p, Context& c, bool constant, const MaxStd& max_std, auto&& use) {
        return wolf_rule(w, p, c, constant, max_std, use);
      });
}

// ---- the window filter methods (bernsen, local-gaussian) -----------------------------------------
// Each takes its rule from its parameters and the context (shared by the in-memory path and the
// slab path) and decides every voxel of a float volume from a window filter of it: a whole volume,
// or a slab with a halo of the window radius (window_filter_by_slabs).

// Reads the volume by slabs with a halo of h slices on each side (fewer at the volume's ends, where
// the filters mirror as they do on the whole volume); air_of(buf, lead, n, air) writes the air of
// the n slices of buf from slice lead, which go to out in z order.
template <class AirOf>
void window_filter_by_slabs(const SlabSource& src, int64_t h, const AirOut& out, AirOf air_of) {
  const Geometry& g = src.geometry;
  const int64_t nz = g.dims[2], nxy = g.slice_voxels(), slab = std::max<int64_t>(1, src.slab);
  VolumeF buf;
  std::vector<uint8_t> air;
  for (int64_t z0 = 0; z0 < nz; z0 += slab) {
    const int64_t z1 = std::min(nz, z0 + slab), a = std::max<int64_t>(0, z0 - h), b = std::min(nz, z1 + h);
    src.read(a, b, buf);
    air.resize(size_t((z1 - z0) * nxy));
    air_of(static_cast<const VolumeF&>(buf), z0 - a, z1 - z0, air.data());
    out(z0, z1 - z0, air.data());
  }
}

// ---- bernsen ------------------------------------------------------------------------------------
struct BernsenRule {
  double contrast, split;
  Chosen chosen;
  // Voxels [first, first + n) of v from its window min vmin and max vmax: 1 where the voxel is air
  // (and inside roi, aligned with them), else 0, into out (which may be vmin's own voxels).
  template <class T>
  void decide(const VolumeF& v, const VolumeF& vmin, const VolumeF& vmax, int64_t first, int64_t n,
              const uint8_t* roi, T* out) const {
    const float *d = v.data() + first, *vlo = vmin.data() + first, *vhi = vmax.data() + first;
    const double cmin = contrast, sp = split;
#pragma omp parallel for schedule(static)
    for (int64_t i = 0; i < n; ++i) {
      const double lo = vlo[i], hi = vhi[i], mid = 0.5 * (lo + hi);
      const bool dark = hi - lo >= cmin ? double(d[i]) < mid : mid < sp;
      out[i] = dark && !std::isnan(d[i]) && (!roi || roi[i]) ? T(1) : T(0);
    }
  }
};

BernsenRule bernsen_rule(int64_t w, const ParamValues& p, const Context& c) {
  BernsenRule r{p.num("contrast"), 0.5 * (c.lo + c.hi), {}};
  if (r.contrast == 0) r.contrast = (c.hi - c.lo) * 15.0 / 255.0;
  r.chosen = {{"window", double(w)}, {"contrast", r.contrast}, {"low_contrast_split", r.split}};
  return r;
}

MethodInfo bernsen_info() {
  return local_info(
      "bernsen",
      "Bernsen: T = (min + max)/2 of the window where max - min >= contrast; in low-contrast windows a voxel is "
      "air when that mid-grey is below the middle of the ROI grey range",
      "Bernsen J. (1986) Dynamic thresholding of grey-level images. Proc. 8th Int. Conf. Pattern Recognition, "
      "Paris, 1251-1255",
      {{"contrast", ParamType::Float, "0", 0, 3.4e38, {}, "grey",
        "least local contrast max - min in grey units; 0 = 15/255 of the ROI grey range (the usual 15 grey "
        "levels of 8-bit data)"},
       clip_param()},
      [](const MethodInput& in, const ParamValues& p) {
        const int64_t w = checked_window("bernsen", in.volume.geometry(), p);
        Context c = context(in, p.num("clip_pct"), true);
        const BernsenRule rule = bernsen_rule(w, p, c);
        LocalAir out;
        if (!constant_volume(in, c, out)) {
          VolumeF vmin, vmax;
          box_min_max(in.volume, w, vmin, vmax);
          // The decision goes into vmin first and the mask is made after vmax is freed, so that
          // the peak stays at the input plus two float volumes.
          rule.decide(in.volume, vmin, vmax, 0, vmin.size(), in.roi ? in.roi->data() : nullptr, vmin.data());
          vmax = VolumeF();
          Mask air(in.volume.geometry(), Uninitialized{});
          const int64_t n = in.volume.size();
#pragma omp parallel for schedule(static)
          for (int64_t i = 0; i < n; ++i) air[i] = vmin[i] != 0;
          out = finish(std::move(air), c);
        }
        out.chosen = rule.chosen;
        return out;
      },
      LocalSlabs{true, true, [](const ParamValues& p, const SlabSource& src, int64_t w, Context& c, bool constant,
                                const AirOut& out, Chosen& chosen) {
                   const BernsenRule rule = bernsen_rule(w, p, c);
                   chosen = rule.chosen;
                   if (constant) return false;
                   const int64_t nxy = src.geometry.slice_voxels();
                   VolumeF vmin, vmax;  // one pair of buffers for every slab
                   window_filter_by_slabs(src, w / 2, out, [&](const VolumeF& v, int64_t lead, int64_t n, uint8_t* a) {
                     box_min_max(v, w, vmin, vmax);
                     rule.decide(v, vmin, vmax, lead * nxy, n * nxy, nullptr, a);  // the slab's own slices
                   });
                   return true;
                 }});
}

// ---- local mean / local gaussian ----------------------------------------------------------------
const char* kLocalMeanCitation =
    "common practice (variable thresholding by the local mean, e.g. Gonzalez R.C., Woods R.E. Digital Image "
    "Processing, 3rd ed. 2008, ch. 10; scikit-image threshold_local)";

MethodInfo local_mean_info() {
  return moments_info(
      "local-mean", "Local mean: T = m - offset, m the mean of the cubic window", kLocalMeanCitation,
      {{"offset", ParamType::Float, "0", -3.4e38, 3.4e38, {}, "grey",
        "a voxel is air when darker than its window mean by more than offset (at 0 about half of a noisy "
        "uniform material is below its mean: take a few noise sigmas)"}},
      false, [](int64_t w, const ParamValues& p, Context& c, bool constant, const MaxStd&, auto&& use) {
        return local_mean_rule(w, p, c, constant, use);
      });
}

struct GaussianRule {
  double sigma, offset;
  Chosen chosen;
  // Air of voxels [first, first + n) of v (and inside roi, aligned with them) from the Gaussian mean g of v.
  void decide(const VolumeF& v, const VolumeF& g, int64_t first, int64_t n, const uint8_t* roi, uint8_t* air) const {
    const float* d = v.data() + first;
    const float* m = g.data() + first;
    const double off = offset;
#pragma omp parallel for schedule(static)
    for (int64_t i = 0; i < n; ++i) air[i] = double(d[i]) < double(m[i]) - off && (!roi || roi[i]);
  }
};

// Refuses NaN voxels (after the constant-volume check, as the in-memory path always did).
GaussianRule gaussian_rule(int64_t w, const ParamValues& p, const Context& c, bool constant) {
  GaussianRule r{p.num("sigma"), p.num("offset"), {}};
  if (r.sigma == 0) r.sigma = double(w - 1) / 6.0;
  if (!constant && c.all.nan_count > 0)
    throw InputError("method local-gaussian: the volume has " + std::to_string(c.all.nan_count) +
                     " NaN voxels, which a Gaussian mean cannot skip; use local-mean or fill them");
  r.chosen = {{"window", double(w)}, {"sigma_vox", r.sigma}, {"offset", r.offset}};
  return r;
}

MethodInfo local_gaussian_info() {
  return local_info(
      "local-gaussian",
      "Local Gaussian mean: T = g - offset, g the Gaussian-weighted mean over the window (separable, cut at "
      "window/2; cost grows with the window)",
      kLocalMeanCitation,
      {{"offset", ParamType::Float, "0", -3.4e38, 3.4e38, {}, "grey",
        "a voxel is air when darker than its weighted mean by more than offset (at 0 about half of a "
        "noisy uniform material is below its mean: take a few noise sigmas)"},
       {"sigma", ParamType::Float, "0", 0, 1e4, {}, "voxels", "Gaussian sigma; 0 = (window - 1)/6 as scikit-image"}},
      [](const MethodInput& in, const ParamValues& p) {
        const int64_t w = checked_window("local-gaussian", in.volume.geometry(), p);
        Context c = context(in, 0, false);
        LocalAir out;
        const bool constant = constant_volume(in, c, out);
        const GaussianRule rule = gaussian_rule(w, p, c, constant);
        if (!constant) {
          Mask air(in.volume.geometry(), Uninitialized{});
          rule.decide(in.volume, gaussian_mean(in.volume, w, rule.sigma), 0, air.size(),
                      in.roi ? in.roi->data() : nullptr, air.data());
          out = finish(std::move(air), c);
        }
        out.chosen = rule.chosen;
        return out;
      },
      LocalSlabs{false, true, [](const ParamValues& p, const SlabSource& src, int64_t w, Context& c, bool constant,
                                 const AirOut& out, Chosen& chosen) {
                   const GaussianRule rule = gaussian_rule(w, p, c, constant);
                   chosen = rule.chosen;
                   if (constant) return false;
                   const int64_t nxy = src.geometry.slice_voxels();
                   VolumeF mean;  // one buffer for every slab
                   window_filter_by_slabs(src, w / 2, out, [&](const VolumeF& v, int64_t lead, int64_t n, uint8_t* a) {
                     gaussian_mean(v, w, rule.sigma, mean);
                     rule.decide(v, mean, lead * nxy, n * nxy, nullptr, a);
                   });
                   return true;
                 }});
}

}  // namespace

LocalAir local_air(const std::string& method, const MethodInput& in, const std::vector<std::string>& key_values) {
  const MethodInfo& m = Registry::instance().get(method);
  auto it = air_functions().find(method);
  if (it == air_functions().end()) throw InputError("method " + method + " is not a local method");
  return it->second(in, parse_params(m, key_values));
}

PB_REGISTER_METHOD(niblack_info());
PB_REGISTER_METHOD(sauvola_info());
PB_REGISTER_METHOD(phansalkar_info());
PB_REGISTER_METHOD(wolf_info());
PB_REGISTER_METHOD(bernsen_info());
PB_REGISTER_METHOD(local_mean_info());
PB_REGISTER_METHOD(local_gaussian_info());

}  // namespace pb
