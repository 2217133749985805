// The histogram kernels (issue 16): the four-table counter and the grey-level counts of integer
// data (one read for statistics and histograms, so that a threshold method reads integer data twice
// instead of three times) agree bit for bit with the plain definitions and with compute_stats /
// compute_histogram, for 1, 2 and 3 threads, with NaN, +-inf, a region of interest and the
// histogram options. The thresholds themselves keep their external checks (test_global.cpp: scikit-image 0.19;
// test_global_levels_itk.cpp: ITK).
#include <catch2/catch.hpp>

#include <cmath>
#include <algorithm>
#include <random>
#include <tuple>

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

namespace {

// Whole grey levels of `t` (all of its range used: both ends, and a noisy bulk) in float voxels, as
// the readers store integer volumes.
VolumeF level_volume(VoxelType t, Mask& roi) {
  Geometry g;
  g.dims = {67, 45, 29};
  VolumeF v(g);
  roi = Mask(g, 0);
  const double lo = t == VoxelType::u8 ? 0 : t == VoxelType::u16 ? 0 : -32768, hi = t == VoxelType::u8 ? 255 : lo + 65535;
  std::mt19937 rng(18);
  std::normal_distribution<double> n(lo + 0.4 * (hi - lo), 0.05 * (hi - lo));
  for (int64_t i = 0; i < v.size(); ++i) {
    v[i] = float(std::clamp(std::round(n(rng)), lo, hi));
    roi[i] = (i * 2654435761u >> 7) % 5 != 0;
  }
  v[3] = float(lo), v[v.size() - 2] = float(hi);
  return v;
}

}  // namespace

TEST_CASE("grey-level counts give compute_stats and compute_histogram exactly", "[histogram]") {
  for (VoxelType t : {VoxelType::u8, VoxelType::u16, VoxelType::i16}) {
    Mask roi;
    const VolumeF v = level_volume(t, roi);
    for (const uint8_t* mask : {static_cast<const uint8_t*>(nullptr), static_cast<const uint8_t*>(roi.data())})
      for (int threads : {1, 2, 3}) {
        INFO(voxel_type_name(t) << ", mask " << (mask != nullptr) << ", threads " << threads);
        set_threads(threads);
        LevelCounts c(t);
        REQUIRE(c.add(v.data(), v.size(), mask));
        const Stats s = c.stats(), want = compute_stats(v.data(), v.size(), mask);
        CHECK(s.min == want.min);
        CHECK(s.max == want.max);
        CHECK(s.mean == want.mean);
        CHECK(s.count == want.count);
        CHECK(s.nan_count == 0);
        // The full range, a range cutting levels inside bins, a narrow one (values outside go to
        // the end bins), one bin per level.
        for (auto [lo, hi, bins] : {std::tuple<double, double, int>{s.min, s.max, 256}, {s.min + 0.3, s.max - 17.7, 100},
                                    {s.mean - 3.5, s.mean + 2.25, 7}, {s.min, s.max, 65536}, {s.min, s.max, 2}}) {
          INFO("lo " << lo << ", hi " << hi << ", bins " << bins);
          CHECK(c.histogram(lo, hi, bins).counts == plain_counts(v, lo, hi, bins, mask));
        }
      }
    // Counts add up over parts of a volume (slabs), and a second add changes the statistics.
    LevelCounts whole(t), halves(t);
    REQUIRE(whole.add(v.data(), v.size()));
    REQUIRE(halves.add(v.data(), v.size() / 2));
    REQUIRE(halves.add(v.data() + v.size() / 2, v.size() - v.size() / 2));
    CHECK(halves.histogram(-40000, 70000, 999).counts == whole.histogram(-40000, 70000, 999).counts);
    CHECK(halves.stats().mean == whole.stats().mean);
  }
  set_threads(0);
}

TEST_CASE("grey-level counts refuse voxels that are not whole levels of the type, adding nothing", "[histogram]") {
  Mask roi;
  const VolumeF good = level_volume(VoxelType::u8, roi);
  for (float odd : {0.5f, -1.f, 256.f, NAN, INFINITY, -INFINITY, 1e30f}) {
    INFO("odd voxel " << odd);
    VolumeF v = good;
    v[v.size() / 3] = odd;
    for (int threads : {1, 2}) {
      set_threads(threads);
      LevelCounts c(VoxelType::u8);
      CHECK_FALSE(c.add(v.data(), v.size()));
      CHECK(c.stats().count == 0);
      // a masked-out odd voxel is not looked at
      Mask m(v.geometry(), 1);
      m[v.size() / 3] = 0;
      CHECK(c.add(v.data(), v.size(), m.data()));
      CHECK(c.stats().count == v.size() - 1);
    }
  }
  CHECK_THROWS_AS(LevelCounts(VoxelType::f32), std::invalid_argument);
  set_threads(0);
}

TEST_CASE("a histogram method's histogram from grey-level counts equals the one from stats and histogram reads, 1 and 2 threads",
          "[histogram][global]") {
  // Reference: the three-read composition (compute_stats + compute_histogram, each checked against
  // the plain definition above, as float data are read); the counts (what integer data take in
  // memory and by slabs) must give the same method histogram for every setting.
  for (VoxelType t : {VoxelType::u8, VoxelType::u16, VoxelType::i16}) {
    Mask roi;
    const VolumeF v = level_volume(t, roi);
    for (const std::vector<std::string>& params :
         {std::vector<std::string>{}, {"histogram=roi"}, {"bins=100"}, {"bins=1000"}, {"clip_pct=1"}, {"clip_pct=2", "bins=64"}}) {
      const MethodInfo& m = Registry::instance().get("otsu");
      const ParamValues p = parse_params(m, params);
      const MethodInput in{v, &roi, t};
      const uint8_t* r = p.choice("histogram") == "roi" ? roi.data() : nullptr;
      for (int threads : {1, 2}) {
        set_threads(threads);
        INFO(voxel_type_name(t) << " " << (params.empty() ? "" : params[0]) << ", threads " << threads);
        const Histogram want = method_histogram(compute_stats(v.data(), v.size(), r), r != nullptr, t, p, [&](double lo, double hi, int bins) {
          return compute_histogram(v.data(), v.size(), lo, hi, bins, r);
        });
        LevelCounts levels(t);
        REQUIRE(levels.add(v.data(), v.size(), r));
        const Histogram h = method_histogram(levels.stats(), r != nullptr, t, p,
                                             [&](double lo, double hi, int bins) { return levels.histogram(lo, hi, bins); });
        CHECK(h.lo == want.lo);
        CHECK(h.hi == want.hi);
        CHECK(h.counts == want.counts);
        ThresholdAir a = threshold_air(in, p, [&](const Histogram& hh, const ParamValues&) {
          return ThresholdChoice{hh.edge(otsu_split(hh) + 1), {}};
        });
        CHECK(a.histogram.counts == want.counts);
        const Mask air = air_below(v, a.choice.threshold, &roi);
        CHECK(std::equal(a.air.data(), a.air.data() + a.air.size(), air.data()));
      }
    }
  }
  set_threads(0);
}
