// Region growing from confident air. Pores are dark.
//   hysteresis: two thresholds, low < high: air is every voxel below high that is connected
//               (6/18/26) to a voxel below low. Canny J. (1986) A computational approach to edge
//               detection. IEEE PAMI 8(6):679-698 (hysteresis thresholding), applied in 3D.
//   region-grow: connected threshold from automatic seeds: seeds are confident air below the
//               Otsu split, grown 6-connected through voxels below a limit above it. Adams R. &
//               Bischof L. (1994) Seeded region growing. IEEE PAMI 16(6):641-647.
// Both label the candidate air with our CCL and keep components holding a seed.
#include "methods/region.hpp"

#include <cmath>

#include "core/error.hpp"
#include "methods/pores.hpp"
#include "methods/threshold.hpp"
#include "core/components.hpp"

namespace pb {

Mask grow_air(const VolumeF& v, double strong, double weak, const Mask* roi, int connectivity) {
  Mask candidate = air_below(v, weak, roi);
  const Components c = label_components(candidate, connectivity);
  std::vector<uint8_t> seeded(size_t(c.count) + 1, 0);
  const float s = float(strong);
  const float* d = v.data();
  const uint32_t* l = c.labels.data();
  const int64_t n = v.size();
  for (int64_t i = 0; i < n; ++i)
    if (l[i] && d[i] < s) seeded[l[i]] = 1;
  uint8_t* a = candidate.data();
#pragma omp parallel for schedule(static)
  for (int64_t i = 0; i < n; ++i) a[i] = seeded[l[i]];
  return candidate;
}

AutoSeeds auto_seeds(const Histogram& h, double seed_margin, double grow_margin) {
  const int k = otsu_split(h);
  double w0 = 0, s0 = 0, w1 = 0, s1 = 0;
  for (int i = 0; i < h.bins(); ++i) {
    const double c = double(h.counts[size_t(i)]);
    (i <= k ? w0 : w1) += c;
    (i <= k ? s0 : s1) += c * h.centre(i);
  }
  AutoSeeds a;
  a.otsu = h.edge(k + 1);
  a.mu_air = w0 > 0 ? s0 / w0 : h.lo;
  a.mu_material = w1 > 0 ? s1 / w1 : h.hi;
  a.seed = a.otsu - seed_margin * (a.otsu - a.mu_air);
  a.limit = a.otsu + grow_margin * (a.mu_material - a.otsu);
  return a;
}

MethodOutput constant_volume_output(const MethodInput& in) {
  MethodOutput out;
  out.pores = Mask(in.volume.geometry());
  out.part_voxels = air_to_pores(out.pores, in.roi);
  out.warnings.push_back("the grey-value histogram has a single occupied bin (constant volume): no pores");
  return out;
}

std::vector<ParamSpec> seed_params() {
  return {{"seed_margin", ParamType::Float, "0.5", 0, 1, {}, "fraction",
           "seeds are below otsu - seed_margin*(otsu - air mean): 0 = the Otsu split, 1 = the air mean"},
          {"grow_margin", ParamType::Float, "0.25", 0, 1, {}, "fraction",
           "air may grow up to otsu + grow_margin*(material mean - otsu)"}};
}

MethodInfo seeded_method(std::string name, std::string doc, std::string citation, bool with_grow,
                         std::vector<ParamSpec> extra, SeededRun run) {
  MethodInfo m{std::move(name), "region", std::move(doc), std::move(citation), histogram_params(), {}, nullptr};  // not by slabs
  const std::vector<ParamSpec> seeds = seed_params();
  m.params.insert(m.params.end(), seeds.begin(), seeds.begin() + (with_grow ? 2 : 1));
  m.params.insert(m.params.end(), extra.begin(), extra.end());
  m.run = [with_grow, run](const MethodInput& in, const ParamValues& p) {
    const Histogram h = method_histogram(in, p);
    if (single_occupied_bin(h)) return constant_volume_output(in);
    return run(in, p, h, auto_seeds(h, p.num("seed_margin"), with_grow ? p.num("grow_margin") : 0));
  };
  return m;
}

namespace {

int connectivity_of(const ParamValues& p) { return std::stoi(p.choice("connectivity")); }

MethodInfo hysteresis_info() {
  MethodInfo m{"hysteresis", "region", "hysteresis thresholding in 3D: air below `high` connected to air below `low`",
               "Canny J. (1986) A computational approach to edge detection. IEEE Trans. PAMI 8(6):679-698", {}, {}, nullptr};  // not by slabs
  m.params = {{"low", ParamType::Float, "", -3.4e38, 3.4e38, {}, "grey", "strong threshold: voxels below are surely air"},
              {"high", ParamType::Float, "", -3.4e38, 3.4e38, {}, "grey", "weak threshold: voxels below are air if connected to strong air"},
              {"connectivity", ParamType::Enum, "26", -1e300, 1e300, {"6", "18", "26"}, "", "neighbourhood for growing"}};
  m.run = [](const MethodInput& in, const ParamValues& p) {
    const double lo = p.num("low"), hi = p.num("high");
    if (!(lo <= hi))
      throw InputError("hysteresis: parameter 'low' (" + p.text().at("low") + ") must not exceed 'high' (" +
                       p.text().at("high") + ")");
    MethodOutput out = pores_from_air(grow_air(in.volume, lo, hi, in.roi, connectivity_of(p)), in, "hysteresis",
                                      "low " + p.text().at("low") + ", high " + p.text().at("high"));
    out.chosen = {{"low", lo}, {"high", hi}};
    return out;
  };
  return m;
}

MethodInfo region_grow_info() {
  return seeded_method(
      "region-grow",
      "connected threshold from automatic seeds: confident air below the Otsu split grows 6-connected up to a limit",
      "Adams R., Bischof L. (1994) Seeded region growing. IEEE Trans. PAMI 16(6):641-647", true, {},
      [](const MethodInput& in, const ParamValues&, const Histogram& h, const AutoSeeds& a) {
        MethodOutput out = pores_from_air(grow_air(in.volume, a.seed, a.limit, in.roi, 6), in, "region-grow",
                                          "seed threshold " + std::to_string(a.seed) + ", grow limit " + std::to_string(a.limit));
        out.chosen = {{"seed_threshold", a.seed}, {"grow_limit", a.limit}, {"otsu", a.otsu}, {"bins", h.bins()}};
        return out;
      });
}

}  // namespace

PB_REGISTER_METHOD(hysteresis_info());
PB_REGISTER_METHOD(region_grow_info());

}  // namespace pb
