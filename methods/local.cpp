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
#include <type_traits>

#include "core/error.hpp"
#include "core/format.hpp"
#include "core/histogram.hpp"
#include "methods/integral.hpp"
#include "methods/pores.hpp"
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

// Largest window std over voxels inside the ROI (Wolf & Jolion's R).
double max_local_std(const MethodInput& in, int64_t window, double centre) {
  const VolumeF& v = in.volume;
  const int64_t nxy = v.geometry().slice_voxels();
  SliceMoments mom(v, window, centre);
  std::vector<double> mean(static_cast<size_t>(nxy * mom.batch())), sd(mean.size());
  const uint8_t* roi = in.roi ? in.roi->data() : nullptr;
  double best = 0;
  for (;;) {
    const int64_t z0 = mom.next_z(), n = mom.next(mean.data(), sd.data()) * nxy;
    if (n == 0) break;
    const uint8_t* r = roi ? roi + z0 * nxy : nullptr;
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

MethodInfo local_info(std::string name, std::string doc, std::string citation, std::vector<ParamSpec> params,
                      AirFn air) {
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
  return m;
}

// ---- the moments rules ---------------------------------------------------------------------------
// Each method of the window mean (and std) derives its threshold rule from its parameters and the
// context, hands it to use(rule) unless the volume is constant (no rule is derived then), and
// returns its chosen values. The in-memory path (air_from_moments) and the slab path
// (local_air_by_slices) share them, so both answer the same.
using Chosen = std::vector<std::pair<std::string, double>>;

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

template <class Use>
Chosen local_mean_rule(int64_t w, const ParamValues& p, Context&, bool constant, Use&& use) {
  const double off = p.num("offset");
  if (!constant) use([off](double m) { return m - off; });
  return {{"window", double(w)}, {"offset", off}};
}

// The rules by method name (the methods of local_method_by_slices); false for any other.
template <class Use>
bool moments_rule(const std::string& method, int64_t w, const ParamValues& p, Context& c, bool constant, Use&& use,
                  Chosen& chosen) {
  if (method == "niblack") chosen = niblack_rule(w, p, c, constant, use);
  else if (method == "sauvola") chosen = sauvola_rule(w, p, c, constant, use);
  else if (method == "phansalkar") chosen = phansalkar_rule(w, p, c, constant, use);
  else if (method == "local-mean") chosen = local_mean_rule(w, p, c, constant, use);
  else return false;
  return true;
}

// Whether a moments method takes the grey range of the ROI (with its clip_pct).
bool moments_rule_needs_range(const std::string& method) { return method == "sauvola" || method == "phansalkar"; }

// A moments method on a volume in memory.
LocalAir moments_local_air(const std::string& method, const MethodInput& in, const ParamValues& p) {
  const int64_t w = checked_window(method, in.volume.geometry(), p);
  const bool range = moments_rule_needs_range(method);
  Context c = context(in, range ? p.num("clip_pct") : 0, range);
  LocalAir out;
  const bool constant = constant_volume(in, c, out);
  Chosen chosen;
  moments_rule(method, w, p, c, constant, [&](auto rule) { out = finish(air_from_moments(in, w, c.all.mean, rule), c); },
               chosen);
  out.chosen = std::move(chosen);
  return out;
}

// ---- niblack ------------------------------------------------------------------------------------
MethodInfo niblack_info() {
  return local_info(
      "niblack", "Niblack: T = m - k*s from the window mean m and standard deviation s (scikit-image's sign)",
      "Niblack W. (1986) An Introduction to Digital Image Processing. Prentice-Hall, pp. 115-116",
      {{"k", ParamType::Float, "0.2", -1, 1, {}, "",
        "weight of the window std; Niblack's T = m + k's with k' = -0.2 is k = 0.2 here"}},
      [](const MethodInput& in, const ParamValues& p) { return moments_local_air("niblack", in, p); });
}

// ---- sauvola ------------------------------------------------------------------------------------
MethodInfo sauvola_info() {
  return local_info(
      "sauvola",
      "Sauvola: T = m * (1 + k * (s/R - 1)); R, the dynamic range of the std, in grey units or (r=0) half the "
      "grey range of the ROI (robust with clip_pct). Grey values should be >= 0 with air darkest",
      "Sauvola J., Pietikainen M. (2000) Adaptive document image binarization. Pattern Recognition 33(2):225-236",
      {{"k", ParamType::Float, "0.2", 0, 1, {}, "", "weight of the std term (paper 0.5, scikit-image 0.2)"},
       {"r", ParamType::Float, "0", 0, 3.4e38, {}, "grey",
        "R in grey units; 0 = half the grey range (hi - lo)/2 of the ROI voxels. Note: scikit-image's default "
        "for float images is 1 (half the float dtype range -1..1), not data-derived"},
       clip_param()},
      [](const MethodInput& in, const ParamValues& p) { return moments_local_air("sauvola", in, p); });
}

// ---- phansalkar ---------------------------------------------------------------------------------
MethodInfo phansalkar_info() {
  return local_info(
      "phansalkar",
      "Phansalkar: on grey values normalised to [0,1] by the ROI grey range, T = m(1 + p exp(-q m) + k(s/r - 1))",
      "Phansalkar N., More S., Sabale A., Joshi M. (2011) Adaptive local thresholding for detection of nuclei in "
      "diversity stained cytology images. Int. Conf. Communications and Signal Processing (ICCSP), 218-220",
      {{"k", ParamType::Float, "0.25", 0, 1, {}, "", "weight of the std term (paper 0.25)"},
       {"p", ParamType::Float, "2", 0, 10, {}, "", "weight of the exponential term (paper 2)"},
       {"q", ParamType::Float, "10", 0, 100, {}, "", "decay of the exponential term (paper 10)"},
       {"r", ParamType::Float, "0.5", 1e-6, 1, {}, "normalised grey", "R on the normalised scale (paper 0.5)"},
       clip_param()},
      [](const MethodInput& in, const ParamValues& p) { return moments_local_air("phansalkar", in, p); });
}

// ---- wolf ---------------------------------------------------------------------------------------
MethodInfo wolf_info() {
  return local_info(
      "wolf",
      "Wolf & Jolion: T = m - k (1 - s/R)(m - M), R the largest window std in the ROI, M the lowest ROI grey "
      "value (robust with clip_pct); two passes",
      "Wolf C., Jolion J.-M. (2004) Extraction and recognition of artificial text in multimedia documents. "
      "Pattern Analysis and Applications 6(4):309-326",
      {{"k", ParamType::Float, "0.5", 0, 1, {}, "", "weight (paper 0.5)"}, clip_param()},
      [](const MethodInput& in, const ParamValues& p) {
        const int64_t w = checked_window("wolf", in.volume.geometry(), p);
        const double k = p.num("k");
        Context c = context(in, p.num("clip_pct"), true);
        double r = 0;
        const double mg = c.lo;
        LocalAir out;
        if (!constant_volume(in, c, out)) {
          r = max_local_std(in, w, c.all.mean);
          if (r > 0) {
            out = finish(air_from_moments(in, w, c.all.mean, [=](double m, double s) {
                           return m - k * (1 - s / r) * (m - mg);
                         }), c);
          } else {
            c.warnings.push_back("no window inside the ROI has any contrast (largest std 0): no pores");
            out = finish(Mask(in.volume.geometry()), c);
          }
        }
        out.chosen = {{"window", double(w)}, {"k", k}, {"r", r}, {"min_grey", mg}};
        return out;
      });
}

// ---- bernsen ------------------------------------------------------------------------------------
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
        double contrast = p.num("contrast");
        if (contrast == 0) contrast = (c.hi - c.lo) * 15.0 / 255.0;
        const double split = 0.5 * (c.lo + c.hi);
        LocalAir out;
        if (!constant_volume(in, c, out)) {
          VolumeF vmin, vmax;
          box_min_max(in.volume, w, vmin, vmax);
          const float* v = in.volume.data();
          const uint8_t* roi = in.roi ? in.roi->data() : nullptr;
          const int64_t n = in.volume.size();
          // The decision goes into vmin first and the mask is made after vmax is freed, so that
          // the peak stays at the input plus two float volumes.
#pragma omp parallel for schedule(static)
          for (int64_t i = 0; i < n; ++i) {
            const double lo = vmin[i], hi = vmax[i], mid = 0.5 * (lo + hi);
            const bool dark = hi - lo >= contrast ? double(v[i]) < mid : mid < split;
            vmin[i] = dark && !std::isnan(v[i]) && (!roi || roi[i]) ? 1.0f : 0.0f;
          }
          vmax = VolumeF();
          Mask air(in.volume.geometry(), Uninitialized{});
#pragma omp parallel for schedule(static)
          for (int64_t i = 0; i < n; ++i) air[i] = vmin[i] != 0;
          out = finish(std::move(air), c);
        }
        out.chosen = {{"window", double(w)}, {"contrast", contrast}, {"low_contrast_split", split}};
        return out;
      });
}

// ---- local mean / local gaussian ----------------------------------------------------------------
const char* kLocalMeanCitation =
    "common practice (variable thresholding by the local mean, e.g. Gonzalez R.C., Woods R.E. Digital Image "
    "Processing, 3rd ed. 2008, ch. 10; scikit-image threshold_local)";

MethodInfo local_mean_info() {
  return local_info(
      "local-mean", "Local mean: T = m - offset, m the mean of the cubic window", kLocalMeanCitation,
      {{"offset", ParamType::Float, "0", -3.4e38, 3.4e38, {}, "grey",
        "a voxel is air when darker than its window mean by more than offset (at 0 about half of a noisy "
        "uniform material is below its mean: take a few noise sigmas)"}},
      [](const MethodInput& in, const ParamValues& p) { return moments_local_air("local-mean", in, p); });
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
        const double off = p.num("offset");
        double sigma = p.num("sigma");
        if (sigma == 0) sigma = double(w - 1) / 6.0;
        Context c = context(in, 0, false);
        LocalAir out;
        if (!constant_volume(in, c, out)) {
          if (c.all.nan_count > 0)
            throw InputError("method local-gaussian: the volume has " + std::to_string(c.all.nan_count) +
                             " NaN voxels, which a Gaussian mean cannot skip; use local-mean or fill them");
          const VolumeF g = gaussian_mean(in.volume, w, sigma);
          Mask air(in.volume.geometry(), Uninitialized{});
          const float* v = in.volume.data();
          const uint8_t* roi = in.roi ? in.roi->data() : nullptr;
          const int64_t n = in.volume.size();
#pragma omp parallel for schedule(static)
          for (int64_t i = 0; i < n; ++i) air[i] = double(v[i]) < double(g[i]) - off && (!roi || roi[i]);
          out = finish(std::move(air), c);
        }
        out.chosen = {{"window", double(w)}, {"sigma_vox", sigma}, {"offset", off}};
        return out;
      });
}

}  // namespace

LocalAir local_air(const std::string& method, const MethodInput& in, const std::vector<std::string>& key_values) {
  const MethodInfo& m = Registry::instance().get(method);
  auto it = air_functions().find(method);
  if (it == air_functions().end()) throw InputError("method " + method + " is not a local method");
  return it->second(in, parse_params(m, key_values));
}

bool local_method_by_slices(const std::string& method) {
  return method == "niblack" || method == "sauvola" || method == "phansalkar" || method == "local-mean";
}

LocalAir local_air_by_slices(const std::string& method, const ParamValues& p, const Geometry& g, const Stats& all,
                             const HistogramOf& hist, const SliceOf& slice, const AirOut& out) {
  if (!local_method_by_slices(method))
    throw InputError("method " + method + " is not read by slabs (of the local methods, " + kLocalMethodsBySlices +
                     " are)");
  const int64_t w = checked_window(method, g, p);
  Context c = context_start(all);
  if (moments_rule_needs_range(method)) {
    const GreyRange range = grey_range(all, p.num("clip_pct"), hist);
    c.lo = range.lo;
    c.hi = range.hi;
  }
  std::vector<uint8_t> buf;
  auto dest = [&](int64_t, int64_t n) {
    buf.assign(size_t(n * g.slice_voxels()), 0);
    return buf.data();
  };
  const bool constant = !(c.all.max > c.all.min);
  LocalAir res;
  moments_rule(method, w, p, c, constant,
               [&](auto rule) { moments_air(g, slice, nullptr, w, c.all.mean, rule, dest, out); }, res.chosen);
  if (constant) {  // as constant_volume: no air
    c.warnings.push_back("constant volume (every voxel " + format_number(c.all.min, 8) + "): no local contrast, no pores");
    for (int64_t z = 0; z < g.dims[2]; ++z) out(z, 1, dest(z, 1));
  }
  res.warnings = std::move(c.warnings);
  return res;
}

PB_REGISTER_METHOD(niblack_info());
PB_REGISTER_METHOD(sauvola_info());
PB_REGISTER_METHOD(phansalkar_info());
PB_REGISTER_METHOD(wolf_info());
PB_REGISTER_METHOD(bernsen_info());
PB_REGISTER_METHOD(local_mean_info());
PB_REGISTER_METHOD(local_gaussian_info());

}  // namespace pb
