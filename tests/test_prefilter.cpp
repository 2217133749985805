// Pre-filters and their composition with methods. References: scipy.ndimage median_filter and
// gaussian_filter (Debian python3-scipy, run by tests/ref/scipy_filters.py); the bilateral formula
// of Tomasi & Manduchi (1998) evaluated by brute force; properties for diffusion and NLM.
#include <catch2/catch.hpp>
#include <cmath>
#include <fstream>

#include "core/cpu.hpp"
#include "core/error.hpp"
#include "core/histogram.hpp"
#include "methods/prefilter.hpp"
#include "methods/registry.hpp"
#include "tests/helpers.hpp"

using namespace pb;
using pbtest::TempDir;

namespace {

VolumeF noisy_volume(int64_t nx, int64_t ny, int64_t nz, unsigned seed) {
  Geometry g;
  g.dims = {nx, ny, nz};
  g.spacing_mm = {0.01, 0.01, 0.02};
  return pbtest::mixture_volume(g, {{0.3, 0.1, 0.05}, {0.7, 1.0, 0.1}}, seed);
}

VolumeF scipy_reference(const VolumeF& v, const std::string& args) {
  TempDir d;
  write_raw(AnyVolume(v), d / "in.raw");
  const auto r = pbtest::run_ref_script("scipy_filters.py", (d / "in.raw") + " " + std::to_string(v.nx()) + " " +
                                                              std::to_string(v.ny()) + " " + std::to_string(v.nz()) + " " +
                                                              (d / "out.raw") + " " + args);
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  VolumeF out(v.geometry());
  std::ifstream f(d / "out.raw", std::ios::binary);
  f.read(reinterpret_cast<char*>(out.data()), std::streamsize(out.size() * 4));
  REQUIRE(f);
  return out;
}

double max_abs_diff(const VolumeF& a, const VolumeF& b) {
  double m = 0;
  for (int64_t i = 0; i < a.size(); ++i) m = std::max(m, double(std::abs(a[i] - b[i])));
  return m;
}

double std_in_box(const VolumeF& v, int64_t lo, int64_t hi) {
  double s = 0, s2 = 0, n = 0;
  for (int64_t z = lo; z < hi; ++z)
    for (int64_t y = lo; y < hi; ++y)
      for (int64_t x = lo; x < hi; ++x) s += v(x, y, z), s2 += double(v(x, y, z)) * v(x, y, z), ++n;
  return std::sqrt(s2 / n - (s / n) * (s / n));
}

}  // namespace

TEST_CASE("median equals scipy.ndimage.median_filter (mode reflect), borders included", "[prefilter]") {
  // Source: scipy.ndimage.median_filter, Debian python3-scipy. Odd sizes catch lane-tail bugs.
  // Both the AVX kernels and the portable network (SIMD level capped, core/cpu.hpp).
  const VolumeF v = noisy_volume(29, 13, 11, 3);
  for (int r : {1, 2}) {
    const VolumeF ref = scipy_reference(v, "median " + std::to_string(r));
    for (Simd simd : {Simd::avx512, Simd::generic}) {
      INFO("radius " << r << " " << simd_name(simd));
      set_simd_cap(simd);
      const VolumeF ours = median_filter(v, r);
      set_simd_cap(Simd::avx512);
      CHECK(max_abs_diff(ours, ref) == 0.0);  // a median picks an input value: exact
    }
  }
}

TEST_CASE("gaussian equals scipy.ndimage.gaussian_filter (reflect, truncate 4)", "[prefilter]") {
  // Source: scipy.ndimage.gaussian_filter in float64, Debian python3-scipy; we accumulate in float.
  const VolumeF v = noisy_volume(31, 17, 12, 4);
  const VolumeF ours = gaussian_filter(v, {1.5, 0.8, 2.0});
  const VolumeF ref = scipy_reference(v, "gaussian 1.5 0.8 2.0");
  CHECK(max_abs_diff(ours, ref) < 2e-6);
  // Kernel weights sum to one (a constant stays constant).
  double sum = 0;
  for (float w : gaussian_kernel(1.7)) sum += w;
  CHECK(sum == Approx(1.0).epsilon(1e-6));
}

TEST_CASE("gaussian with sigma in mm divides by the spacing per axis", "[prefilter]") {
  const MethodInfo& m = Registry::instance().get("gaussian+otsu");
  const ParamValues p = parse_params(m, {"gaussian.sigma=0.02", "gaussian.unit=mm"});
  CHECK(p.choice("gaussian.unit") == "mm");
  const VolumeF v = noisy_volume(20, 20, 20, 5);
  // spacing 0.01, 0.01, 0.02 mm -> sigma 2, 2, 1 voxels
  const FilterInfo* f = Registry::instance().find_filter("gaussian");
  ParamValues fp;
  fp.set(f->params[0], "0.02");
  fp.set(f->params[1], "mm");
  CHECK(max_abs_diff(f->apply(v, fp), gaussian_filter(v, {2, 2, 1})) == 0.0);
}

TEST_CASE("bilateral follows the Tomasi-Manduchi formula", "[prefilter]") {
  // Brute-force evaluation of Tomasi & Manduchi (1998), eq. for the normalised bilateral filter,
  // at interior voxels: sum_j w_d(|x_i-x_j|) w_r(|v_i-v_j|) v_j / sum_j w_d w_r, Gaussian weights.
  // ITK truncates the domain kernel at 2.5 sigma (DomainMu default) and tabulates the range
  // Gaussian, so agreement is within a small tolerance, not exact.
  Geometry g = pbtest::cube(16, 1.0);
  VolumeF v = pbtest::mixture_volume(g, {{0.5, 0.0, 0.1}, {0.5, 1.0, 0.1}}, 9);
  const double ds = 1.2, rs = 0.3;
  const VolumeF ours = bilateral_filter(v, ds, rs);
  const int r = int(std::ceil(2.5 * ds));
  double worst = 0;
  for (int64_t z = 6; z < 10; ++z)
    for (int64_t y = 6; y < 10; ++y)
      for (int64_t x = 6; x < 10; ++x) {
        double num = 0, den = 0;
        for (int dz = -r; dz <= r; ++dz)
          for (int dy = -r; dy <= r; ++dy)
            for (int dx = -r; dx <= r; ++dx) {
              const double d2 = dx * dx + dy * dy + dz * dz;
              const double vj = v(x + dx, y + dy, z + dz), dv = vj - v(x, y, z);
              const double w = std::exp(-0.5 * d2 / (ds * ds)) * std::exp(-0.5 * dv * dv / (rs * rs));
              num += w * vj;
              den += w;
            }
        worst = std::max(worst, std::abs(num / den - ours(x, y, z)));
      }
  CHECK(worst < 0.02);  // grey range is ~1: 2 % of it
}

TEST_CASE("diffusion and nlm keep a constant volume and reduce noise", "[prefilter]") {
  // Properties of any consistent denoiser (Perona & Malik 1990; Buades et al. 2005): a constant
  // image is a fixed point; noise in a uniform region is reduced.
  VolumeF c(pbtest::cube(12, 0.01), 3.5f);
  CHECK(max_abs_diff(anisotropic_diffusion(c, 5, 0.0625, 1.0), c) < 1e-5);
  CHECK(max_abs_diff(nlm_filter(c, 0.05, 5, 11), c) < 1e-5);
  Geometry g = pbtest::cube(32, 0.01);
  VolumeF n = pbtest::mixture_volume(g, {{1.0, 1.0, 0.1}}, 11);
  n(0, 0, 0) = 0;  // a fixed grey range for nlm's quantisation
  n(1, 0, 0) = 2;
  const double before = std_in_box(n, 8, 24);
  CHECK(std_in_box(anisotropic_diffusion(n, 5, 0.0625, 3.0), 8, 24) < 0.5 * before);
  CHECK(std_in_box(nlm_filter(n, 0.08, 5, 11), 8, 24) < 0.5 * before);
}

TEST_CASE("a composed method runs its filters, then the method, with prefixed parameters", "[prefilter]") {
  const MethodInfo& m = Registry::instance().get("median+otsu");
  CHECK(m.family == "global");
  CHECK_THAT(m.citation, Catch::Contains("Tukey") && Catch::Contains("Otsu"));
  REQUIRE(m.params.front().name == "median.radius");
  const VolumeF v = noisy_volume(24, 24, 24, 6);
  const ParamValues p = parse_params(m, {"median.radius=2", "bins=128"});
  const MethodOutput composed = run_method(m, p, MethodInput{v});
  // The same by hand: filter, then otsu.
  const VolumeF f = median_filter(v, 2);
  const MethodInfo& otsu = Registry::instance().get("otsu");
  const MethodOutput direct = run_method(otsu, parse_params(otsu, {"bins=128"}), MethodInput{f});
  CHECK(composed.chosen == direct.chosen);
  CHECK(composed.pores.buffer() == direct.pores.buffer());
  // The same composed name resolves to the same description.
  CHECK(&Registry::instance().get("median+otsu") == &m);
}

TEST_CASE("bad compositions name what is wrong", "[prefilter]") {
  auto& r = Registry::instance();
  CHECK_THROWS_WITH(r.get("medain+otsu"), Catch::Contains("unknown pre-filter 'medain'") && Catch::Contains("median"));
  CHECK_THROWS_WITH(r.get("median+otsuu"), Catch::Contains("unknown method 'otsuu'"));
  CHECK_THROWS_WITH(r.get("median+median+otsu"), Catch::Contains("appears twice"));
  CHECK_THROWS_WITH(r.get("otsu+median"), Catch::Contains("unknown pre-filter 'otsu'"));
  CHECK_THROWS_WITH(parse_params(r.get("median+otsu"), {"radius=2"}), Catch::Contains("did you mean 'median.radius'"));
  CHECK_THROWS_WITH(parse_params(r.get("median+otsu"), {"median.radius=9"}), Catch::Contains("[1, 3]"));
  CHECK_THROWS_WITH(parse_params(r.get("bilateral+otsu"), {}), Catch::Contains("'bilateral.range_sigma' is required"));
}
