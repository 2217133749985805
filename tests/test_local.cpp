// Local adaptive thresholds (methods/local.cpp) and their window statistics (methods/integral.cpp):
// (a) hand-computable window statistics on a 3D checkerboard, also under a large grey offset;
// (b) niblack, sauvola and local-mean against scikit-image 0.19 in 3D (tests/ref/skimage_local.py);
// (c) phansalkar, wolf, bernsen, local-mean and local-gaussian against brute-force window loops
//     written here from each paper's formula; (d) bad input, degenerate input, thread independence.
#include <catch2/catch.hpp>
#include <omp.h>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <fstream>
#include <functional>

#include "core/error.hpp"
#include "core/parallel.hpp"
#include "methods/integral.hpp"
#include "methods/pores.hpp"
#include "tests/helpers.hpp"

using namespace pb;
using pbtest::TempDir;

namespace {

Geometry dims(int64_t nx, int64_t ny, int64_t nz) {
  Geometry g;
  g.dims = {nx, ny, nz};
  return g;
}

// Dark spherical pores in a material whose grey value drifts across the part (as beam hardening
// does), plus Gaussian noise; all grey values positive. Deterministic.
VolumeF porous_drift(const Geometry& g, unsigned seed) {
  VolumeF v(g);
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> noise(0, 0.03);
  std::uniform_real_distribution<double> u(0, 1);
  std::vector<std::array<double, 4>> pores;
  for (int i = 0; i < 12; ++i) pores.push_back({u(rng) * g.dims[0], u(rng) * g.dims[1], u(rng) * g.dims[2], 1.5 + 3 * u(rng)});
  for (int64_t z = 0; z < g.dims[2]; ++z)
    for (int64_t y = 0; y < g.dims[1]; ++y)
      for (int64_t x = 0; x < g.dims[0]; ++x) {
        double val = 0.45 + 0.3 * double(x) / double(g.dims[0]) + 0.1 * double(z) / double(g.dims[2]);
        for (auto& p : pores) {
          const double dx = x - p[0], dy = y - p[1], dz = z - p[2];
          if (dx * dx + dy * dy + dz * dz < p[3] * p[3]) val = 0.15;
        }
        v(x, y, z) = float(val + noise(rng));
      }
  return v;
}

int64_t refl(int64_t i, int64_t n) { return i < 0 ? -i : (i >= n ? 2 * (n - 1) - i : i); }

// Brute force: calls f(value) for every voxel of the mirrored window (numpy 'reflect') at (x,y,z).
template <class F>
void window_each(const VolumeF& v, int64_t x, int64_t y, int64_t z, int64_t h, F f) {
  for (int64_t dz = -h; dz <= h; ++dz)
    for (int64_t dy = -h; dy <= h; ++dy)
      for (int64_t dx = -h; dx <= h; ++dx)
        f(double(v(refl(x + dx, v.nx()), refl(y + dy, v.ny()), refl(z + dz, v.nz()))), dx, dy, dz);
}

struct MeanStd {
  double m, s;
};
MeanStd brute_mean_std(const VolumeF& v, int64_t x, int64_t y, int64_t z, int64_t h) {
  double s1 = 0, s2 = 0, n = 0;
  window_each(v, x, y, z, h, [&](double a, int64_t, int64_t, int64_t) {
    s1 += a;
    n += 1;
  });
  const double m = s1 / n;
  window_each(v, x, y, z, h, [&](double a, int64_t, int64_t, int64_t) { s2 += (a - m) * (a - m); });
  return {m, std::sqrt(s2 / n)};
}

// Compares a method's air mask with a brute-force threshold T(x,y,z): every voxel must agree
// except where the voxel lies within `tie` of the reference threshold (rounding).
void check_against(const LocalAir& got, const VolumeF& v, const std::function<double(int64_t, int64_t, int64_t)>& t,
                   double tie = 1e-5) {
  int64_t bad = 0, ties = 0;
  for (int64_t z = 0; z < v.nz(); ++z)
    for (int64_t y = 0; y < v.ny(); ++y)
      for (int64_t x = 0; x < v.nx(); ++x) {
        const double ref_t = t(x, y, z);
        const bool want = double(v(x, y, z)) < ref_t;
        if (want != bool(got.air(x, y, z))) {
          if (std::abs(double(v(x, y, z)) - ref_t) < tie) ++ties;
          else ++bad;
        }
      }
  INFO("mismatches " << bad << ", near-ties " << ties);
  CHECK(bad == 0);
  CHECK(ties <= v.size() / 1000);
}

double chosen(const LocalAir& a, const std::string& key) {
  for (auto& [k, v] : a.chosen)
    if (k == key) return v;
  FAIL("no chosen value " << key);
  return NAN;
}

void write_raw_f32(const VolumeF& v, const std::string& path) {
  std::ofstream f(path, std::ios::binary);
  f.write(reinterpret_cast<const char*>(v.data()), std::streamsize(v.size() * 4));  // x86-64: little-endian
}

Mask read_raw_u8(const Geometry& g, const std::string& path) {
  Mask m(g);
  std::ifstream f(path, std::ios::binary);
  f.read(reinterpret_cast<char*>(m.data()), std::streamsize(m.size()));
  REQUIRE(f.gcount() == m.size());
  return m;
}

// Share of voxels at least `margin` from every face where the two masks agree.
double agreement_inside(const Mask& a, const Mask& b, int64_t margin) {
  int64_t n = 0, same = 0;
  for (int64_t z = margin; z < a.nz() - margin; ++z)
    for (int64_t y = margin; y < a.ny() - margin; ++y)
      for (int64_t x = margin; x < a.nx() - margin; ++x) {
        ++n;
        same += (a(x, y, z) != 0) == (b(x, y, z) != 0);
      }
  REQUIRE(n > 0);
  return double(same) / double(n);
}

}  // namespace

TEST_CASE("window mean and std on a 3D checkerboard are the hand-computed ones, also with a large offset",
          "[local]") {
  // Voxel value offset + p, p = (x+y+z) mod 2. With e even and o odd offsets in -h..h per axis, a
  // w^3 window holds e^3 + 3 e o^2 offsets (dx,dy,dz) with an even sum (zero or two odd parts):
  // those voxels share the centre's parity. So the share f of ones in the window is even/w^3 for
  // p = 1 and 1 - even/w^3 for p = 0; mean = offset + f, std of 0/1 values = sqrt(f (1 - f)). The
  // mirror keeps the parity pattern (index -1 reads 1), so this holds at the borders too.
  // With offset 1e4 (voxels 10000 and 10001, exact in float) a naive float E[v^2] - E[v]^2 would
  // cancel entirely; centred double sums must keep std to 1e-9.
  const double offset = GENERATE(0.0, 1e4);
  const int64_t w = GENERATE(3, 9, 21);
  VolumeF v(dims(23, 22, 21));
  for (int64_t z = 0; z < v.nz(); ++z)
    for (int64_t y = 0; y < v.ny(); ++y)
      for (int64_t x = 0; x < v.nx(); ++x) v(x, y, z) = float(offset + double((x + y + z) % 2));
  const int64_t h = w / 2;
  const double e = double(h / 2 * 2 + 1), o = double(w) - e;  // even offsets in -h..h: h/2*2 + 1 of them
  const double even = e * e * e + 3 * e * o * o, all = double(w * w * w);
  double mean_total = 0;
  for (int64_t i = 0; i < v.size(); ++i) mean_total += v[i];
  SliceMoments mom(v, w, mean_total / double(v.size()));
  // The mean alone (local-mean's use, without the squared sums) must be the same to the bit.
  SliceMoments mean_only(v, w, mean_total / double(v.size()), false);
  const int64_t nxy = v.geometry().slice_voxels();
  std::vector<double> m(size_t(nxy * mom.batch())), s(m.size()), m_only(m.size());
  double worst_m = 0, worst_s = 0;
  int64_t slices = 0, mean_only_differs = 0;
  for (int64_t z0 = 0, n; (n = mom.next(m.data(), s.data())) > 0; z0 += n) {
    REQUIRE(mean_only.next(m_only.data(), nullptr) == n);
    for (int64_t i = 0; i < n * nxy; ++i) mean_only_differs += m_only[size_t(i)] != m[size_t(i)];
    for (int64_t t = 0; t < n; ++t, ++slices)
      for (int64_t y = 0; y < v.ny(); ++y)
        for (int64_t x = 0; x < v.nx(); ++x) {
          const bool odd = (x + y + z0 + t) % 2;
          const double f = odd ? even / all : (all - even) / all;
          const size_t i = size_t(t * nxy + y * v.nx() + x);
          worst_m = std::max(worst_m, std::abs(m[i] - (offset + f)));
          worst_s = std::max(worst_s, std::abs(s[i] - std::sqrt(f * (1 - f))));
        }
  }
  CHECK(mean_only.next(m_only.data(), nullptr) == 0);
  CHECK(mean_only_differs == 0);
  CHECK(slices == v.nz());
  INFO("window " << w << " offset " << offset);
  CHECK(worst_m < 1e-9);
  CHECK(worst_s < 1e-9);
}

TEST_CASE("niblack and sauvola agree with scikit-image 0.19 in 3D (same window, k, R)", "[local][ref]") {
  // Source: skimage.filters.threshold_niblack / threshold_sauvola (0.19), which mirror the border
  // with numpy.pad mode 'reflect' like ours: agreement is checked inside and over the whole volume.
  // Issue 4 asks >= 99.9 % away from the borders.
  TempDir d;
  const Geometry g = dims(48, 41, 37);  // unequal dims catch axis mix-ups
  const VolumeF v = porous_drift(g, 7);
  write_raw_f32(v, d / "v.raw");
  struct Case {
    std::string method;
    int64_t window;
    double k, r;
  };
  const std::vector<Case> cases = {Case{"niblack", 7, 0.2, 0}, Case{"niblack", 15, -0.3, 0},
                                   Case{"sauvola", 7, 0.2, 0.4}, Case{"sauvola", 15, 0.5, 0.25},
                                   Case{"sauvola", 21, 0.34, 0.5}};
  std::string specs;
  for (const Case& c : cases)
    specs += " " + c.method + ":" + std::to_string(c.window) + ":" + std::to_string(c.k) +
             (c.method == "sauvola" ? ":" + std::to_string(c.r) : "");
  const auto r = pbtest::run_ref_script("skimage_local.py", d / "v.raw" + " 48 41 37 " + (d / "ref") + specs);
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  for (size_t i = 0; i < cases.size(); ++i) {
    const Case& c = cases[i];
    INFO(c.method << " window " << c.window << " k " << c.k << " r " << c.r);
    const Mask ref = read_raw_u8(g, d / ("ref" + std::to_string(i) + ".raw"));
    std::vector<std::string> kv = {"window=" + std::to_string(c.window), "k=" + std::to_string(c.k)};
    if (c.method == "sauvola") kv.push_back("r=" + std::to_string(c.r));
    const LocalAir a = local_air(c.method, MethodInput{v}, kv);
    const int64_t air = count_nonzero(a.air);
    CHECK(air > v.size() / 100);  // the case is not trivially empty
    CHECK(agreement_inside(a.air, ref, c.window / 2) >= 0.999);
    CHECK(agreement_inside(a.air, ref, 0) >= 0.999);
    CHECK(chosen(a, "window") == c.window);
    CHECK(chosen(a, "k") == Approx(c.k));
  }
}

TEST_CASE("local-mean agrees with scikit-image threshold_local (mean) away from the borders", "[local][ref]") {
  // Source: skimage.filters.threshold_local(method='mean') = scipy.ndimage.uniform_filter minus
  // offset. Its border mode is scipy's 'reflect' (edge voxel repeated), unlike ours, so only
  // voxels at least window/2 from every face are compared.
  TempDir d;
  const Geometry g = dims(40, 36, 33);
  const VolumeF v = porous_drift(g, 11);
  write_raw_f32(v, d / "v.raw");
  const auto r = pbtest::run_ref_script("skimage_local.py", d / "v.raw" + " 40 36 33 " + (d / "ref") + " local-mean:9:0.05");
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  const Mask ref = read_raw_u8(g, d / "ref0.raw");
  const LocalAir a = local_air("local-mean", MethodInput{v}, {"window=9", "offset=0.05"});
  CHECK(count_nonzero(a.air) > v.size() / 100);
  CHECK(agreement_inside(a.air, ref, 4) >= 0.999);
}

TEST_CASE("phansalkar, wolf, bernsen, local-mean and local-gaussian match brute-force windows", "[local]") {
  const VolumeF v = porous_drift(dims(19, 17, 15), 3);
  const int64_t w = GENERATE(5, 7);
  const int64_t h = w / 2;
  const std::string ws = "window=" + std::to_string(w);
  INFO("window " << w);
  double lo = 1e30, hi = -1e30;
  for (int64_t i = 0; i < v.size(); ++i) {
    lo = std::min(lo, double(v[i]));
    hi = std::max(hi, double(v[i]));
  }

  SECTION("phansalkar") {
    // Phansalkar et al. (2011) eq. (1): T = m (1 + p exp(-q m) + k (s/R - 1)) on grey values
    // normalised to [0, 1] (here by the min..max range); defaults p = 2, q = 10, k = 0.25, R = 0.5.
    const LocalAir a = local_air("phansalkar", MethodInput{v}, {ws});
    CHECK(chosen(a, "grey_lo") == Approx(lo));
    CHECK(chosen(a, "grey_hi") == Approx(hi));
    check_against(a, v, [&](int64_t x, int64_t y, int64_t z) {
      const MeanStd ms = brute_mean_std(v, x, y, z, h);
      const double m = (ms.m - lo) / (hi - lo), s = ms.s / (hi - lo);
      const double tn = m * (1 + 2 * std::exp(-10 * m) + 0.25 * (s / 0.5 - 1));
      return lo + tn * (hi - lo);
    });
  }
  SECTION("wolf") {
    // Wolf & Jolion (2004): T = (1 - k) m + k M + k (s / R) (m - M), M the minimum grey value of
    // the image, R the largest window std; k = 0.5.
    double rmax = 0;
    for (int64_t z = 0; z < v.nz(); ++z)
      for (int64_t y = 0; y < v.ny(); ++y)
        for (int64_t x = 0; x < v.nx(); ++x) rmax = std::max(rmax, brute_mean_std(v, x, y, z, h).s);
    const LocalAir a = local_air("wolf", MethodInput{v}, {ws});
    CHECK(chosen(a, "r") == Approx(rmax).epsilon(1e-9));
    CHECK(chosen(a, "min_grey") == Approx(lo));
    check_against(a, v, [&](int64_t x, int64_t y, int64_t z) {
      const MeanStd ms = brute_mean_std(v, x, y, z, h);
      const double k = 0.5;
      return (1 - k) * ms.m + k * lo + k * (ms.s / rmax) * (ms.m - lo);
    });
  }
  SECTION("bernsen") {
    // Bernsen (1986): T = (zmin + zmax) / 2 of the window when the contrast zmax - zmin reaches
    // the contrast limit; below it the window is one class, decided (common practice, no source;
    // as in the usual 8-bit implementations against mid-grey 128) by its mid-grey against the
    // middle of the grey range. Contrast limit 0.3 here, so both branches occur.
    const LocalAir a = local_air("bernsen", MethodInput{v}, {ws, "contrast=0.3"});
    int64_t low_contrast = 0;
    check_against(a, v, [&](int64_t x, int64_t y, int64_t z) {
      double zmin = 1e30, zmax = -1e30;
      window_each(v, x, y, z, h, [&](double a, int64_t, int64_t, int64_t) {
        zmin = std::min(zmin, a);
        zmax = std::max(zmax, a);
      });
      const double mid = (zmin + zmax) / 2;
      if (zmax - zmin >= 0.3) return mid;
      ++low_contrast;
      return mid < (lo + hi) / 2 ? 1e30 : -1e30;  // all air or no air
    });
    CHECK(low_contrast > 0);
    CHECK(low_contrast < v.size());
    CHECK(chosen(a, "contrast") == 0.3);
  }
  SECTION("local-mean") {
    // T = window mean - offset (common practice; scikit-image threshold_local 'mean').
    const LocalAir a = local_air("local-mean", MethodInput{v}, {ws, "offset=0.02"});
    check_against(a, v, [&](int64_t x, int64_t y, int64_t z) { return brute_mean_std(v, x, y, z, h).m - 0.02; });
  }
  SECTION("local-gaussian") {
    // T = sum g(d) v / sum g(d) - offset, g(d) = exp(-|d|^2 / (2 sigma^2)) over the cube, sigma =
    // (window - 1) / 6 by default (scikit-image threshold_local 'gaussian' convention).
    const double sigma = double(w - 1) / 6;
    const LocalAir a = local_air("local-gaussian", MethodInput{v}, {ws, "offset=-0.01"});
    CHECK(chosen(a, "sigma_vox") == Approx(sigma));
    check_against(a, v, [&](int64_t x, int64_t y, int64_t z) {
      double sw = 0, sv = 0;
      window_each(v, x, y, z, h, [&](double a, int64_t dx, int64_t dy, int64_t dz) {
        const double g = std::exp(-double(dx * dx + dy * dy + dz * dz) / (2 * sigma * sigma));
        sw += g;
        sv += g * a;
      });
      return sv / sw + 0.01;
    });
  }
}

TEST_CASE("window min/max and the Gaussian mean into reused buffers: brute-force windows, no new buffers",
          "[local][slabs]") {
  // Reference: the brute-force mirrored window (window_each, numpy 'reflect') for min and max; the
  // Gaussian mean into a reused buffer against its fresh-buffer form (itself checked by
  // local-gaussian against brute-force windows above). The buffers first hold another volume's
  // results (a slab after slab), so nothing may depend on what they held.
  const VolumeF a = porous_drift(dims(13, 11, 9), 5), b = porous_drift(dims(13, 11, 9), 6);
  const int64_t w = 5, h = w / 2;
  VolumeF vmin, vmax, mean;
  box_min_max(a, w, vmin, vmax);
  gaussian_mean(a, w, 1.3, mean);
  const float *pmin = vmin.data(), *pmax = vmax.data(), *pmean = mean.data();
  box_min_max(b, w, vmin, vmax);
  gaussian_mean(b, w, 1.3, mean);
  CHECK(vmin.data() == pmin);  // the same buffers: no allocation per slab
  CHECK(vmax.data() == pmax);
  CHECK(mean.data() == pmean);
  int64_t bad = 0;
  for (int64_t z = 0; z < b.nz(); ++z)
    for (int64_t y = 0; y < b.ny(); ++y)
      for (int64_t x = 0; x < b.nx(); ++x) {
        double lo = 1e30, hi = -1e30;
        window_each(b, x, y, z, h, [&](double q, int64_t, int64_t, int64_t) {
          lo = std::min(lo, q);
          hi = std::max(hi, q);
        });
        bad += double(vmin(x, y, z)) != lo || double(vmax(x, y, z)) != hi;
      }
  CHECK(bad == 0);
  CHECK(mean.buffer() == gaussian_mean(b, w, 1.3).buffer());
  CHECK(vmin.geometry().dims == b.geometry().dims);
}

TEST_CASE("sauvola derives R as half the grey range and reports it", "[local]") {
  // Issue 4: for float CT data R is derived from the data; ours is (hi - lo) / 2 of the ROI grey
  // values, lo/hi the clip_pct percentiles (min/max at 0).
  const VolumeF v = porous_drift(dims(20, 20, 20), 5);
  double lo = 1e30, hi = -1e30;
  for (int64_t i = 0; i < v.size(); ++i) {
    lo = std::min(lo, double(v[i]));
    hi = std::max(hi, double(v[i]));
  }
  const LocalAir a = local_air("sauvola", MethodInput{v}, {"window=9"});
  CHECK(chosen(a, "r") == Approx((hi - lo) / 2));
  const LocalAir b = local_air("sauvola", MethodInput{v}, {"window=9", "clip_pct=1"});
  CHECK(chosen(b, "r") < chosen(a, "r"));
}

TEST_CASE("local methods reject even windows, windows larger than the volume and k out of range", "[local]") {
  const VolumeF v = porous_drift(dims(30, 25, 20), 1);
  const MethodInput in{v};
  for (std::string m : {"niblack", "sauvola", "phansalkar", "wolf", "bernsen", "local-mean", "local-gaussian"}) {
    INFO(m);
    CHECK_THROWS_WITH(local_air(m, in, {"window=14"}), Catch::Contains("'window'") && Catch::Contains("even") &&
                                                           Catch::Contains("14"));
    CHECK_THROWS_WITH(local_air(m, in, {"window=21"}),
                      Catch::Contains("'window'") && Catch::Contains("21") && Catch::Contains("along z"));
    CHECK_THROWS_AS(local_air(m, in, {"window=1"}), InputError);  // below the schema's minimum 3
  }
  CHECK_THROWS_WITH(local_air("sauvola", in, {"k=1.5"}), Catch::Contains("'k'") && Catch::Contains("1.5"));
  CHECK_THROWS_WITH(local_air("niblack", in, {"k=-2"}), Catch::Contains("'k'") && Catch::Contains("-2"));
  CHECK_THROWS_WITH(local_air("wolf", in, {"k=2"}), Catch::Contains("'k'"));
  CHECK_THROWS_WITH(local_air("phansalkar", in, {"r=0"}), Catch::Contains("'r'"));
  CHECK_THROWS_WITH(local_air("sauvola", in, {"r=-1"}), Catch::Contains("'r'"));
}

TEST_CASE("the command line exits 2 naming the window for an even or oversized window", "[local][cli]") {
  TempDir d;
  const VolumeF v = porous_drift(dims(24, 24, 16), 2);
  write_volume(v, d / "v.mha");
  auto r = pbtest::run_cli("segment sauvola " + d / "v.mha" + " -o " + d / "p.mha" + " --set window=16");
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("'window'") && Catch::Contains("16"));
  r = pbtest::run_cli("segment bernsen " + d / "v.mha" + " -o " + d / "p.mha" + " --set window=17");
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("'window'") && Catch::Contains("17"));
  CHECK_FALSE(std::filesystem::exists(d / "p.mha"));
  r = pbtest::run_cli("segment niblack " + d / "v.mha" + " -o " + d / "p.mha" + " --set window=9 --json " + d / "p.json");
  CHECK(r.exit_code == 0);
  CHECK(std::filesystem::exists(d / "p.mha"));
}

TEST_CASE("a constant volume gives no pores and a warning for every local method", "[local]") {
  VolumeF v(dims(16, 16, 16), 0.7f);
  for (std::string m : {"niblack", "sauvola", "phansalkar", "wolf", "bernsen", "local-mean", "local-gaussian"}) {
    INFO(m);
    const LocalAir a = local_air(m, MethodInput{v}, {"window=5"});
    CHECK(count_nonzero(a.air) == 0);
    REQUIRE(a.warnings.size() == 1);
    CHECK_THAT(a.warnings[0], Catch::Contains("constant"));
  }
}

TEST_CASE("local masks do not depend on the thread count", "[local]") {
  const VolumeF v = porous_drift(dims(37, 29, 23), 9);
  for (std::string m : {"sauvola", "wolf", "bernsen", "local-gaussian"}) {
    INFO(m);
    set_threads(1);
    const LocalAir one = local_air(m, MethodInput{v}, {"window=9"});
    set_threads(2);
    const LocalAir two = local_air(m, MethodInput{v}, {"window=9"});
    set_threads(0);
    CHECK(std::memcmp(one.air.data(), two.air.data(), size_t(v.size())) == 0);
  }
}

TEST_CASE("a local method through the registry extracts pores inside the part only", "[local]") {
  // One dark sphere well inside a drifting material: sauvola finds it as a pore; voxels outside
  // the ROI are never pores.
  VolumeF v(dims(32, 32, 32));
  for (int64_t z = 0; z < 32; ++z)
    for (int64_t y = 0; y < 32; ++y)
      for (int64_t x = 0; x < 32; ++x) {
        const double r2 = (x - 16.0) * (x - 16) + (y - 16.0) * (y - 16) + (z - 16.0) * (z - 16);
        v(x, y, z) = float(r2 < 16 ? 0.1 : 0.5 + 0.01 * double(x));
      }
  const MethodInfo& m = Registry::instance().get("sauvola");
  const MethodOutput out = run_method(m, parse_params(m, {"window=11"}), MethodInput{v});
  int64_t inside = 0;
  for (int64_t i = 0; i < v.size(); ++i) inside += out.pores[i] && v[i] < 0.2f;
  CHECK(inside == count_nonzero(out.pores));
  CHECK(inside > 200);  // a sphere of radius 4 holds about 4/3 pi 4^3 = 268 voxels
  CHECK(out.part_voxels == v.size());
}

TEST_CASE("voxels outside the ROI are never air; windows still see them", "[local]") {
  // Convention (methods/local.cpp): the ROI limits which voxels may be air, not what a window sees,
  // so inside the ROI the mask equals the mask without ROI.
  const VolumeF v = porous_drift(dims(30, 26, 22), 13);
  Mask roi(v.geometry());
  for (int64_t z = 0; z < v.nz(); ++z)
    for (int64_t y = 0; y < v.ny(); ++y)
      for (int64_t x = 0; x < v.nx(); ++x) roi(x, y, z) = x >= 8 && y < 20;
  for (std::string m : {"niblack", "sauvola", "wolf", "bernsen", "local-gaussian"}) {
    INFO(m);
    const LocalAir all = local_air(m, MethodInput{v}, {"window=7"});
    const LocalAir part = local_air(m, MethodInput{v, &roi}, {"window=7"});
    int64_t outside = 0, differ = 0, inside_air = 0;
    for (int64_t i = 0; i < v.size(); ++i) {
      if (!roi[i]) outside += part.air[i] != 0;
      else {
        differ += (part.air[i] != 0) != (all.air[i] != 0);
        inside_air += part.air[i] != 0;
      }
    }
    CHECK(outside == 0);
    CHECK(inside_air > 0);
    // Methods that derive a value from the ROI grey range (sauvola R, wolf R and M, bernsen split)
    // may differ inside; niblack and local-gaussian do not use the ROI range.
    if (m == "niblack" || m == "local-gaussian") CHECK(differ == 0);
  }
}

TEST_CASE("a NaN voxel is never air and changes nothing beyond its window", "[local]") {
  // NaN is read as the volume mean in window statistics (sauvola) or skipped (bernsen): only
  // voxels whose window holds the NaN voxel may change, and a warning says so.
  VolumeF v = porous_drift(dims(28, 24, 20), 17);
  const LocalAir before_s = local_air("sauvola", MethodInput{v}, {"window=5", "r=0.35"});
  const LocalAir before_b = local_air("bernsen", MethodInput{v}, {"window=5", "contrast=0.3"});
  const int64_t cx = 12, cy = 10, cz = 9;
  v(cx, cy, cz) = NAN;
  const LocalAir after_s = local_air("sauvola", MethodInput{v}, {"window=5", "r=0.35"});
  const LocalAir after_b = local_air("bernsen", MethodInput{v}, {"window=5", "contrast=0.3"});
  REQUIRE_FALSE(after_s.warnings.empty());
  CHECK_THAT(after_s.warnings[0], Catch::Contains("NaN"));
  CHECK(after_s.air(cx, cy, cz) == 0);
  CHECK(after_b.air(cx, cy, cz) == 0);
  int64_t far_changed = 0;
  for (int64_t z = 0; z < v.nz(); ++z)
    for (int64_t y = 0; y < v.ny(); ++y)
      for (int64_t x = 0; x < v.nx(); ++x) {
        const bool near = std::abs(x - cx) <= 2 && std::abs(y - cy) <= 2 && std::abs(z - cz) <= 2;
        if (near) continue;
        far_changed += after_s.air(x, y, z) != before_s.air(x, y, z);
        far_changed += after_b.air(x, y, z) != before_b.air(x, y, z);
      }
  CHECK(far_changed == 0);
  CHECK_THROWS_WITH(local_air("local-gaussian", MethodInput{v}, {"window=5"}), Catch::Contains("NaN"));
}
