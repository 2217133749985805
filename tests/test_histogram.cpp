// The histogram kernels (issue 16): the four-table counter, the per-voxel bin codes and the air
// mask made from them (two reads of the volume instead of three) agree bit for bit with the plain
// definitions, for 1 and 2 threads, with NaN, +-inf, a region of interest and thresholds on bin
// edges. The thresholds themselves keep their external checks (test_global.cpp: scikit-image 0.19;
// test_global_levels_itk.cpp: ITK).
#include <catch2/catch.hpp>

#include <cmath>
#include <random>

#include "core/histogram.hpp"
#include "core/parallel.hpp"
#include "methods/pores.hpp"
#include "methods/threshold.hpp"
#include "tests/helpers.hpp"

using namespace pb;

namespace {

// Noise with NaN, +-inf and values far outside the range, and a part mask; odd sizes so that the
// vector loops leave tails.
VolumeF odd_volume(Mask& roi) {
  Geometry g;
  g.dims = {67, 45, 29};
  VolumeF v(g);
  roi = Mask(g, 0);
  std::mt19937 rng(16);
  std::normal_distribution<float> n(0.5f, 0.2f);
  for (int64_t i = 0; i < v.size(); ++i) {
    v[i] = n(rng);
    roi[i] = (i * 2654435761u >> 7) % 5 != 0;
  }
  v[0] = NAN, v[17] = INFINITY, v[200] = -INFINITY, v[201] = 40.f, v[5000] = -40.f, v[v.size() - 1] = NAN;
  return v;
}

// The definition: bin = clamp(int((v - float(lo)) * float(bins / (hi - lo)))), NaN not counted.
std::vector<uint64_t> plain_counts(const VolumeF& v, double lo, double hi, int bins, const uint8_t* mask) {
  std::vector<uint64_t> c(size_t(bins), 0);
  const float flo = float(lo), scale = float(double(bins) / (hi - lo));
  for (int64_t i = 0; i < v.size(); ++i) {
    if (std::isnan(v[i]) || (mask && !mask[i])) continue;
    float f = (v[i] - flo) * scale;
    f = f > 0 ? f : 0;
    f = f < float(bins - 1) ? f : float(bins - 1);
    ++c[size_t(int(f))];
  }
  return c;
}

}  // namespace

TEST_CASE("histogram counts equal the plain definition for any thread count", "[histogram]") {
  Mask roi;
  const VolumeF v = odd_volume(roi);
  for (int bins : {1, 2, 7, 256, 4096, 65536})
    for (const uint8_t* mask : {static_cast<const uint8_t*>(nullptr), static_cast<const uint8_t*>(roi.data())})
      for (int threads : {1, 2, 3}) {
        INFO("bins " << bins << ", mask " << (mask != nullptr) << ", threads " << threads);
        set_threads(threads);
        const Histogram h = compute_histogram(v.data(), v.size(), -0.2, 1.3, bins, mask);
        CHECK(h.counts == plain_counts(v, -0.2, 1.3, bins, mask));
      }
  set_threads(0);
}

TEST_CASE("statistics do not depend on the number of threads", "[histogram]") {
  // The mean is summed per 65,536-voxel block and the blocks in order: the same double for any
  // thread count (a volume of several blocks).
  Geometry g;
  g.dims = {128, 128, 40};
  VolumeF v(g);
  std::mt19937 rng(3);
  std::uniform_real_distribution<float> u(-1e3f, 1e4f);
  for (int64_t i = 0; i < v.size(); ++i) v[i] = u(rng);
  v[7] = NAN;
  v[9] = INFINITY;
  set_threads(1);
  const Stats a = compute_stats(v);
  set_threads(2);
  const Stats b = compute_stats(v);
  set_threads(0);
  CHECK(a.mean == b.mean);
  CHECK(a.min == b.min);
  CHECK(a.max == b.max);
  CHECK(a.count == v.size() - 2);
  CHECK(a.nan_count == 1);
  // Against a long-double sum of the finite voxels (relative 1e-12: double rounding only).
  long double sum = 0;
  for (int64_t i = 0; i < v.size(); ++i)
    if (std::isfinite(v[i])) sum += v[i];
  CHECK(a.mean == Approx(double(sum / (long double)a.count)).epsilon(1e-12));
}

TEST_CASE("the air mask from bin codes is the comparison v < t, bit for bit", "[histogram]") {
  Mask roi;
  const VolumeF v = odd_volume(roi);
  for (int bins : {2, 100, 256}) {
    Mask codes(v.geometry(), Uninitialized{});
    const Histogram h = compute_histogram_codes(v.data(), v.size(), -0.2, 1.3, bins, nullptr, codes.data());
    CHECK(h.counts == plain_counts(v, -0.2, 1.3, bins, nullptr));
    for (int64_t i = 0; i < v.size(); ++i)
      if (!std::isnan(v[i])) REQUIRE(int(codes[i]) == histogram_bin(h, v[i]));
      else REQUIRE(int(codes[i]) == 255);
    // Thresholds on bin edges, inside bins, on a voxel's own value, outside the range, +-inf, NaN.
    std::vector<float> ts = {float(h.edge(1)), float(h.edge(bins / 2)), float(h.centre(bins / 3)), v[1], v[2],
                             -5.f, 5.f, INFINITY, -INFINITY, NAN, std::nextafter(float(h.edge(1)), 0.f)};
    for (float t : ts)
      for (const Mask* r : {static_cast<const Mask*>(nullptr), static_cast<const Mask*>(&roi)}) {
        INFO("bins " << bins << ", t " << t << ", roi " << (r != nullptr));
        Mask air = codes;
        below_from_codes(air.data(), v.data(), v.size(), h, t, r ? r->data() : nullptr);
        const Mask want = air_below(v, t, r);
        CHECK(std::equal(air.data(), air.data() + air.size(), want.data()));
      }
  }
  CHECK_THROWS(compute_histogram_codes(v.data(), v.size(), 0, 1, 257, nullptr, nullptr));
}

TEST_CASE("threshold_air equals the three-read composition for 1 and 2 threads", "[histogram][global]") {
  Mask roi;
  const VolumeF v = odd_volume(roi);
  for (const std::vector<std::string>& params :
       {std::vector<std::string>{}, {"histogram=roi"}, {"bins=100"}, {"bins=1000"}, {"clip_pct=1"}}) {
      const MethodInfo& m = Registry::instance().get("otsu");
      const ParamValues p = parse_params(m, params);
      const MethodInput in{v, &roi};
      std::vector<Mask> airs;
      for (int threads : {1, 2}) {
        set_threads(threads);
        const Histogram h = method_histogram(in, p);
        ThresholdAir a = threshold_air(in, p, [&](const Histogram& hh, const ParamValues&) {
          return ThresholdChoice{hh.edge(otsu_split(hh) + 1), {}};
        });
        INFO((params.empty() ? "" : params[0]) << ", threads " << threads);
        CHECK(a.histogram.counts == h.counts);
        const Mask want = air_below(v, a.choice.threshold, &roi);
        CHECK(std::equal(a.air.data(), a.air.data() + a.air.size(), want.data()));
        airs.push_back(std::move(a.air));
      }
      CHECK(std::equal(airs[0].data(), airs[0].data() + airs[0].size(), airs[1].data()));
    }
  set_threads(0);
}
