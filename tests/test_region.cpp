// Region-growing methods. References: scikit-image 0.19 apply_hysteresis_threshold and watershed
// (Debian python3-skimage, tests/ref/skimage_region.py); ITK ConnectedThresholdImageFilter as an
// independent flood fill for region-grow; an analytic two-phase phantom for confidence-connected.
#include <itkConnectedThresholdImageFilter.h>

#include <catch2/catch.hpp>
#include <fstream>

#include "core/error.hpp"
#include "core/itk_bridge.hpp"
#include "methods/pores.hpp"
#include "methods/region.hpp"
#include "methods/threshold.hpp"
#include "tests/helpers.hpp"

using namespace pb;
using pbtest::TempDir;

namespace pb {
VolumeF gradient_magnitude(const VolumeF& v, double sigma_mm);  // methods/region_itk.cpp
Mask watershed_from_markers(const VolumeF& relief, const Mask& markers);
}  // namespace pb

namespace {

// Material (grey 1) with spherical pores (grey 0) of radius 2..4 voxels, Gaussian noise sigma.
VolumeF pore_phantom(int64_t n, double noise, unsigned seed, Mask* truth = nullptr) {
  VolumeF v(pbtest::cube(n, 0.01));
  std::mt19937_64 rng(seed);
  std::uniform_real_distribution<double> u(0, 1);
  std::normal_distribution<double> g(0, noise);
  std::vector<std::array<double, 4>> s;
  for (int i = 0; i < 12; ++i) {
    const double r = 2 + 2 * u(rng);
    s.push_back({6 + (n - 12) * u(rng), 6 + (n - 12) * u(rng), 6 + (n - 12) * u(rng), r});
  }
  if (truth) *truth = Mask(v.geometry());
  for (int64_t z = 0; z < n; ++z)
    for (int64_t y = 0; y < n; ++y)
      for (int64_t x = 0; x < n; ++x) {
        bool pore = false;
        for (auto& p : s) pore |= (x - p[0]) * (x - p[0]) + (y - p[1]) * (y - p[1]) + (z - p[2]) * (z - p[2]) <= p[3] * p[3];
        if (truth) (*truth)(x, y, z) = pore;
        v(x, y, z) = float((pore ? 0.0 : 1.0) + g(rng));
      }
  return v;
}

Mask read_u8(const std::string& path, const Geometry& g) {
  Mask m(g);
  std::ifstream f(path, std::ios::binary);
  f.read(reinterpret_cast<char*>(m.data()), std::streamsize(m.size()));
  REQUIRE(f);
  return m;
}

std::string dims(const Geometry& g) {
  return std::to_string(g.dims[0]) + " " + std::to_string(g.dims[1]) + " " + std::to_string(g.dims[2]);
}

}  // namespace

TEST_CASE("hysteresis equals skimage apply_hysteresis_threshold on the negated volume", "[region]") {
  // Source: skimage.filters.apply_hysteresis_threshold (0.19), 6-connected labelling.
  TempDir d;
  const VolumeF v = pore_phantom(40, 0.25, 1);
  write_raw(AnyVolume(v), d / "v.raw");
  const auto r = pbtest::run_ref_script("skimage_region.py", "hysteresis " + (d / "v.raw") + " " + dims(v.geometry()) +
                                                               " 0.2 0.6 " + (d / "ref.raw"));
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  const Mask ref = read_u8(d / "ref.raw", v.geometry());
  const Mask ours = grow_air(v, 0.2, 0.6, nullptr, 6);
  REQUIRE(count_nonzero(ref) > 1000);
  CHECK(ours.buffer() == ref.buffer());
}

TEST_CASE("region-grow equals ITK ConnectedThresholdImageFilter with the same seeds", "[region]") {
  // Independent flood fill: ITK's ConnectedThresholdImageFilter (face connectivity, inclusive
  // interval [lower, upper]) seeded at every voxel below the seed threshold.
  const VolumeF v = pore_phantom(32, 0.2, 2);
  const MethodInfo& m = Registry::instance().get("region-grow");
  const ParamValues p = parse_params(m, {});
  const AutoSeeds a = auto_seeds(method_histogram(MethodInput{v}, p), 0.5, 0.25);
  auto f = itk::ConnectedThresholdImageFilter<itk::Image<float, 3>, itk::Image<uint8_t, 3>>::New();
  f->SetInput(itk_view(v));
  f->SetLower(-1e30f);
  f->SetUpper(float(a.limit));
  f->SetReplaceValue(1);
  int seeds = 0;
  for (int64_t z = 0; z < v.nz(); ++z)
    for (int64_t y = 0; y < v.ny(); ++y)
      for (int64_t x = 0; x < v.nx(); ++x)
        if (v(x, y, z) < float(a.seed)) {
          itk::Image<float, 3>::IndexType idx = {{x, y, z}};
          f->AddSeed(idx);
          ++seeds;
        }
  REQUIRE(seeds > 100);
  f->Update();
  const Mask ref = from_itk<uint8_t>(f->GetOutput(), v.geometry());
  CHECK(grow_air(v, a.seed, a.limit, nullptr, 6).buffer() == ref.buffer());
  // And the method reports the values it used.
  const MethodOutput out = run_method(m, p, MethodInput{v});
  CHECK(out.chosen[0].first == "seed_threshold");
  CHECK(out.chosen[0].second == Approx(a.seed));
}

TEST_CASE("marker watershed agrees with skimage.segmentation.watershed", "[region]") {
  // Source: skimage.segmentation.watershed (0.19), connectivity=1, on the same relief and markers.
  // Flooding order among equal relief values differs between implementations: >= 99 % agreement.
  TempDir d;
  const VolumeF v = pore_phantom(36, 0.15, 3);
  const VolumeF grad = gradient_magnitude(v, 0.01);
  Mask markers(v.geometry());
  for (int64_t i = 0; i < v.size(); ++i) markers[i] = v[i] < 0.2f ? 1 : v[i] > 0.8f ? 2 : 0;
  const Mask ours = watershed_from_markers(grad, markers);
  write_raw(AnyVolume(grad), d / "g.raw");
  write_raw(AnyVolume(markers), d / "m.raw");
  const auto r = pbtest::run_ref_script("skimage_region.py", "watershed " + (d / "g.raw") + " " + (d / "m.raw") + " " +
                                                               dims(v.geometry()) + " " + (d / "ref.raw"));
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  const Mask ref = read_u8(d / "ref.raw", v.geometry());
  int64_t agree = 0;
  for (int64_t i = 0; i < v.size(); ++i) agree += ours[i] == ref[i];
  CHECK(double(agree) / double(v.size()) >= 0.99);
}

TEST_CASE("region methods recover the pores of a two-phase phantom", "[region]") {
  // Analytic case: pores at grey 0 in material at grey 1 with noise sigma 0.1 (SNR 10); every
  // method must find the true pore voxels with Jaccard >= 0.9.
  Mask truth;
  const VolumeF v = pore_phantom(40, 0.1, 4, &truth);
  for (const char* name : {"region-grow", "confidence-connected", "watershed"}) {
    INFO(name);
    const MethodInfo& m = Registry::instance().get(name);
    const MethodOutput out = run_method(m, parse_params(m, {}), MethodInput{v});
    int64_t inter = 0, uni = 0;
    for (int64_t i = 0; i < v.size(); ++i) inter += out.pores[i] && truth[i], uni += out.pores[i] || truth[i];
    CHECK(double(inter) / double(uni) >= 0.9);
  }
}

TEST_CASE("region methods: constant volume warns, bad parameters are named", "[region]") {
  const VolumeF c(pbtest::cube(10), 5.f);
  for (const char* name : {"region-grow", "confidence-connected", "watershed"}) {
    INFO(name);
    const MethodInfo& m = Registry::instance().get(name);
    const MethodOutput out = run_method(m, parse_params(m, {}), MethodInput{c});
    CHECK(count_nonzero(out.pores) == 0);
    CHECK_FALSE(out.warnings.empty());
  }
  const MethodInfo& h = Registry::instance().get("hysteresis");
  CHECK_THROWS_WITH(run_method(h, parse_params(h, {"low=0.7", "high=0.3"}), MethodInput{c}),
                    Catch::Contains("'low'") && Catch::Contains("'high'"));
  CHECK_THROWS_WITH(parse_params(h, {"low=0.1", "high=0.3", "connectivity=8"}), Catch::Contains("6, 18, 26"));
}

TEST_CASE("region methods share the applier's degenerate-input policy: no part voxels is warned", "[region][degenerate]") {
  // Analytic: with both thresholds above every grey value, every voxel is air connected to the
  // border, so no part voxel remains and porosity is undefined (the same words as global methods).
  VolumeF v(pbtest::cube(12));
  for (int64_t i = 0; i < v.size(); ++i) v[i] = float(i % 7) * 0.1f;
  const MethodInfo& h = Registry::instance().get("hysteresis");
  const MethodOutput o = run_method(h, parse_params(h, {"low=5", "high=6"}), MethodInput{v});
  CHECK(o.part_voxels == 0);
  bool warned = false;
  for (const auto& w : o.warnings) warned |= w.find("hysteresis: every voxel is air") != std::string::npos &&
                                            w.find("no part voxels, porosity undefined") != std::string::npos;
  CHECK(warned);
  // A part that is not all air: no such warning.
  const MethodOutput p = run_method(h, parse_params(h, {"low=0.05", "high=0.15"}), MethodInput{v});
  CHECK(p.part_voxels > 0);
  for (const auto& w : p.warnings) CHECK(w.find("no part voxels") == std::string::npos);
}

TEST_CASE("watershed on thin volumes: the in-plane gradient, then the usual pore rule", "[region][thin]") {
  // ITK's recursive Gaussian filters need 4 voxels along each axis; thin axes are extended by
  // their last slice (the constant continuation those filters assume), so the gradient is the
  // in-plane one. Analytic: the Gaussian derivative of a linear ramp is its slope (smoothing
  // keeps a ramp), away from the borders.
  for (int64_t nz : {1, 2, 3}) {
    INFO("nz = " << nz);
    Geometry g;
    g.dims = {32, 32, nz};
    g.spacing_mm = {0.1, 0.1, 0.1};
    VolumeF ramp(g);
    for (int64_t z = 0; z < nz; ++z)
      for (int64_t y = 0; y < 32; ++y)
        for (int64_t x = 0; x < 32; ++x) ramp(x, y, z) = 0.5f * float(x);
    const VolumeF grad = gradient_magnitude(ramp, 0.1);
    REQUIRE(grad.geometry().dims == g.dims);
    for (int64_t z = 0; z < nz; ++z)
      for (int64_t y = 8; y < 24; ++y)
        for (int64_t x = 8; x < 24; ++x) REQUIRE(grad(x, y, z) == Approx(5.0).epsilon(1e-3));  // 0.5 per 0.1 mm
  }
  // Analytic: a disc pore (grey 0, radius 6 voxels) in the middle slice of three, material grey 1
  // around it: the pore is enclosed, so watershed finds it (Jaccard >= 0.9 against the disc).
  Geometry g;
  g.dims = {40, 40, 3};
  g.spacing_mm = {0.01, 0.01, 0.01};
  VolumeF v(g, 1.f);
  Mask truth(g);
  for (int64_t y = 0; y < 40; ++y)
    for (int64_t x = 0; x < 40; ++x)
      if ((x - 20) * (x - 20) + (y - 20) * (y - 20) <= 36) v(x, y, 1) = 0.f, truth(x, y, 1) = 1;
  const MethodInfo& m = Registry::instance().get("watershed");
  const MethodOutput out = run_method(m, parse_params(m, {}), MethodInput{v});
  int64_t inter = 0, uni = 0;
  for (int64_t i = 0; i < v.size(); ++i) inter += out.pores[i] && truth[i], uni += out.pores[i] || truth[i];
  CHECK(double(inter) / double(uni) >= 0.9);
  // A single slice: every voxel lies on the volume border, so all air is outside air (pores.hpp)
  // and no pore remains -- the answer every other method gives, not an error.
  Geometry g1 = g;
  g1.dims[2] = 1;
  VolumeF s(g1, 1.f);
  for (int64_t i = 0; i < s.size(); ++i) s[i] = truth(i % 40, (i / 40) % 40, 1) ? 0.f : 1.f;
  const MethodOutput one = run_method(m, parse_params(m, {}), MethodInput{s});
  CHECK(count_nonzero(one.pores) == 0);
  const MethodInfo& otsu = Registry::instance().get("otsu");
  CHECK(count_nonzero(run_method(otsu, parse_params(otsu, {}), MethodInput{s}).pores) == 0);
}
