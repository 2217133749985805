// Global histogram thresholds (issue 4): each method against scikit-image 0.19 / numpy on three
// mixtures within one histogram bin; properties of Otsu's and Li's criteria; hand-computable
// two-level volumes; degenerate input; integer-data resolution warnings.
//
// Bin conventions: our split methods report the upper edge of the last bin of the dark class
// (air is v < t); scikit-image reports that bin's centre (foreground is v > t), half a bin lower.
// So for split methods we compare ours with skimage + w/2, for li and mean (grey values in
// skimage) ours with skimage directly, each within one bin width w.
#include <catch2/catch.hpp>

#include "core/histogram.hpp"
#include "core/parallel.hpp"
#include "methods/pores.hpp"
#include "methods/threshold.hpp"
#include "tests/global_helpers.hpp"

using namespace pb;
using namespace pbtest;

namespace {



const std::vector<std::string> kAutomatic = {"otsu",   "iso50",      "isodata", "triangle", "li",   "yen",
                                             "kapur",  "kittler-illingworth", "huang",    "moments",
                                             "intermodes", "minimum", "mean"};

}  // namespace

TEST_CASE("global thresholds agree with scikit-image 0.19 within one bin", "[global][ref]") {
  for (const auto& [name, v] : global_test_volumes()) {
    INFO(name);
    const Histogram h = full_histogram(v);
    const double w = h.width();
    std::map<std::string, double> ours;
    for (const char* m : {"otsu", "li", "yen", "triangle", "isodata", "mean", "minimum"}) {
      const MethodOutput o = run_named(m, v);
      INFO(m);
      CHECK(o.warnings.empty());
      ours[m] = chosen(o, "threshold");
    }
    // Source: scikit-image 0.19 skimage.filters.threshold_* (tests/ref/skimage_thresholds.py).
    const auto ref = skimage_thresholds(v, "otsu li yen triangle isodata mean minimum");
    for (const char* m : {"otsu", "yen", "triangle", "isodata", "minimum"}) {
      INFO(m << ": ours " << ours[m] << ", skimage bin centre " << ref[m].get<double>() << ", bin width " << w);
      CHECK(std::abs(ours[m] - (ref[m].get<double>() + 0.5 * w)) <= 1.0001 * w);
    }
    for (const char* m : {"li", "mean"}) {
      INFO(m << ": ours " << ours[m] << ", skimage " << ref[m].get<double>() << ", bin width " << w);
      CHECK(std::abs(ours[m] - ref[m].get<double>()) <= 1.0001 * w);
    }
  }
}

TEST_CASE("percentile agrees with numpy.percentile within one bin", "[global][ref]") {
  for (const auto& [name, v] : global_test_volumes()) {
    INFO(name);
    const double w = full_histogram(v).width();
    // Source: numpy.percentile (linear interpolation), via tests/ref/skimage_thresholds.py.
    const auto ref = skimage_thresholds(v, "percentile:1 percentile:3 percentile:40");
    for (double pct : {1.0, 3.0, 40.0}) {
      const MethodOutput o = run_named("percentile", v, {"air_pct=" + std::to_string(pct)});
      const std::string key = "percentile:" + std::to_string(int(pct));
      INFO(key << " ours " << chosen(o, "threshold") << " numpy " << ref[key].get<double>());
      CHECK(std::abs(chosen(o, "threshold") - ref[key].get<double>()) <= w);
    }
  }
}

TEST_CASE("Otsu's between-class variance is maximal at its threshold", "[global][property]") {
  // Property from Otsu (1979) eq. 18: sigma_B^2(k) = [mu_T w(k) - mu(k)]^2 / [w(k)(1 - w(k))],
  // w(k), mu(k) the zeroth and first cumulative moments up to bin k; evaluated at every split.
  for (const auto& [name, v] : global_test_volumes()) {
    INFO(name);
    const Histogram h = full_histogram(v);
    const int k = split_index(h, chosen(run_named("otsu", v), "threshold"));
    const double N = double(h.total());
    double muT = 0;
    for (int i = 0; i < h.bins(); ++i) muT += h.centre(i) * double(h.counts[size_t(i)]) / N;
    std::vector<double> sb;
    double wk = 0, muk = 0;
    for (int i = 0; i + 1 < h.bins(); ++i) {
      wk += double(h.counts[size_t(i)]) / N;
      muk += h.centre(i) * double(h.counts[size_t(i)]) / N;
      sb.push_back(wk > 0 && wk < 1 ? std::pow(muT * wk - muk, 2) / (wk * (1 - wk)) : 0.0);
    }
    REQUIRE(k >= 0);
    REQUIRE(k < int(sb.size()));
    for (size_t i = 0; i < sb.size(); ++i) {
      INFO("split " << i << " vs ours " << k);
      CHECK(sb[size_t(k)] >= sb[i] * (1 - 1e-12));
    }
  }
}

TEST_CASE("Li's criterion is lower at its threshold than at the neighbouring bins", "[global][property][ref]") {
  // Criterion from scikit-image 0.19's skimage.filters.thresholding._cross_entropy (Li & Lee 1993,
  // eq. 8), evaluated at our split and one bin either side (skimage's split: centre > t). Where the
  // valley between the classes has empty bins the criterion is flat there (the classes do not
  // change), so the three mixtures require "not higher"; a mixture with overlapping classes
  // (occupied valley) requires strictly lower.
  auto volumes = global_test_volumes();
  volumes.push_back({"overlapping", mixture_volume(cube(64), {{0.4, 0.3, 0.1}, {0.6, 0.7, 0.1}}, 14)});
  for (const auto& [name, v] : volumes) {
    INFO(name);
    const Histogram h = full_histogram(v);
    const double w = h.width();
    // A value between the centre of our last dark bin and its upper edge: skimage splits there
    // (centre > t) without depending on how the centre itself rounds.
    const double t = chosen(run_named("li", v), "threshold") - 0.25 * w;
    char buf[128];
    std::snprintf(buf, sizeof buf, "li_criterion:%.9g,%.9g,%.9g", t - w, t, t + w);
    const auto ref = skimage_thresholds(v, buf);
    const auto c = ref["li_criterion"].get<std::vector<double>>();
    INFO("criterion at -1, 0, +1 bins: " << c[0] << " " << c[1] << " " << c[2]);
    if (name == "overlapping") {
      CHECK(c[1] < c[0]);
      CHECK(c[1] < c[2]);
    } else {
      CHECK(c[1] <= c[0] * (1 + 1e-12));
      CHECK(c[1] <= c[2] * (1 + 1e-12));
    }
  }
}

TEST_CASE("on a two-level volume every automatic method splits the two levels", "[global]") {
  // Hand-computable: 30 % of the voxels at 0.2, 70 % at 0.9 (every 10th voxel pattern). Any
  // threshold in (0.2, 0.9] separates them; iso50 is exactly halfway between the bin centres of
  // the two peaks, (0.2 + w/2 + 0.9 - w/2)/2 = 0.55; Tsai's moment-preserving dark fraction is
  // exactly the fraction of the lower level, 0.3 (Tsai 1985: a two-level image preserves itself).
  VolumeF v(cube(20));
  for (int64_t i = 0; i < v.size(); ++i) v[i] = (i % 10) < 3 ? 0.2f : 0.9f;
  for (const auto& m : kAutomatic) {
    INFO(m);
    const MethodOutput o = run_named(m, v);
    if (m == "minimum") {
      // The bright level sits in the last bin, which the running mean with reflected ends keeps as
      // its maximum and which skimage's maxima search never reports: scikit-image's
      // threshold_minimum raises on this volume; ours gives the defined no-air result and says why.
      CHECK(has_warning(o, "exactly two modes"));
      CHECK(count_nonzero(o.pores) == 0);
      continue;
    }
    CHECK(o.warnings.empty());
    const double t = chosen(o, "threshold");
    CHECK(t > 0.2);
    CHECK(t <= 0.9);
  }
  CHECK(chosen(run_named("iso50", v), "threshold") == Approx(0.55).margin(1e-6));
  CHECK(chosen(run_named("moments", v), "dark_fraction") == Approx(0.3).margin(1e-9));
}

TEST_CASE("iso50 is halfway between the two phase means of a Gaussian mixture", "[global]") {
  // Analytic: the mode of a Gaussian is its mean, so the peaks are at 0.2 and 0.8 and iso50 at
  // 0.5, up to the noise of a histogram mode (allowed: 3 bins per peak).
  const VolumeF v = mixture_volume(cube(64), {{0.4, 0.2, 0.03}, {0.6, 0.8, 0.05}}, 21);
  const double w = full_histogram(v).width();
  const MethodOutput o = run_named("iso50", v);
  CHECK(chosen(o, "air_peak") == Approx(0.2).margin(3 * w));
  CHECK(chosen(o, "material_peak") == Approx(0.8).margin(3 * w));
  CHECK(chosen(o, "threshold") == Approx(0.5).margin(3 * w));
}

TEST_CASE("degenerate input gives a defined result and a warning", "[global][degenerate]") {
  SECTION("constant volume") {
    const VolumeF v(cube(12), 3.5f);
    for (const auto& m : kAutomatic) {
      INFO(m);
      const MethodOutput o = run_named(m, v);
      CHECK(has_warning(o, "single occupied bin"));
      CHECK(count_nonzero(o.pores) == 0);
      CHECK(chosen(o, "threshold") == 3.5);
    }
  }
  SECTION("single-mode histogram (dense material only)") {
    // One Gaussian population: any split would cut the noise of one phase.
    const VolumeF v = mixture_volume(cube(48), {{1.0, 0.7, 0.05}}, 31);
    const double lowest = compute_stats(v).min;
    for (const auto& m : kAutomatic) {
      INFO(m);
      const MethodOutput o = run_named(m, v);
      CHECK(has_warning(o, "single significant mode"));
      CHECK(count_nonzero(o.pores) == 0);
      CHECK(chosen(o, "threshold") == Approx(lowest));
      CHECK(o.part_voxels == v.size());
      // With clipping the clipped tails collect in the end bins; they are not taken for modes.
      const MethodOutput c = run_named(m, v, {"clip_pct=0.5"});
      CHECK(has_warning(c, "single significant mode"));
      if (m != "triangle") CHECK(count_nonzero(c.pores) == 0);  // triangle cuts the clipped dark tail, warned
    }
    // triangle is made for one peak with a dark tail of pores (Zack et al. 1977): given one, it
    // cuts the tail off and says so (the mirror image of the Gaussian above, plus a dark tail).
    VolumeF tail = v;
    std::mt19937_64 rng(32);
    std::uniform_real_distribution<double> uniform(0.1, 0.6);
    for (int64_t i = 0; i < tail.size(); i += 10) tail[i] = float(uniform(rng));
    const MethodOutput t = run_named("triangle", tail);
    CHECK(has_warning(t, "check that the tail is air"));
    CHECK(chosen(t, "threshold") < 0.7 - 1.5 * 0.05);  // below the peak's mean - 1.5 sigma
    CHECK(chosen(t, "threshold") > 0.1);
    // percentile is the user's split and is not guarded: 2 % of the voxels are air.
    const MethodOutput p = run_named("percentile", v, {"air_pct=2"});
    CHECK(p.warnings.empty());
    CHECK(count_nonzero(air_below(v, chosen(p, "threshold"), nullptr)) == Approx(0.02 * double(v.size())).epsilon(0.05));
  }
  SECTION("all air: no part voxels, porosity undefined, warned") {
    const VolumeF v = mixture_volume(cube(16), {{0.5, 0.1, 0.02}, {0.5, 0.9, 0.02}}, 41);
    const MethodOutput o = run_named("manual", v, {"threshold=5"});
    CHECK(o.part_voxels == 0);
    CHECK(has_warning(o, "no part voxels"));
    const MethodOutput p = run_named("percentile", v, {"air_pct=100"});
    CHECK(p.part_voxels == 0);
    CHECK(has_warning(p, "no part voxels"));
  }
  SECTION("a low-porosity part is not mistaken for a single mode") {
    for (const auto& [name, v] : global_test_volumes()) {
      INFO(name);
      for (const auto& m : kAutomatic) {
        INFO(m);
        CHECK_FALSE(has_warning(run_named(m, v), "single"));
      }
    }
  }
}

TEST_CASE("integer data: bins=auto gives one bin per grey level up to 4096 levels, a user's bins that split levels are warned about",
          "[global][resolution]") {
  // uint16-like grey values 1000..21000 (20001 levels) in two phases: more than 4096 levels.
  VolumeF v(cube(24));
  for (int64_t i = 0; i < v.size(); ++i) v[i] = float((i % 3) == 0 ? 1000 + (i * 7) % 2000 : 15000 + (i * 13) % 6001);
  const MethodOutput a = run_named("otsu", v, {}, VoxelType::u16);
  CHECK(a.warnings.empty());  // auto: 256 bins, the documented choice, reported
  CHECK(chosen(a, "bins") == 256);
  CHECK(chosen(a, "bin_width") == Approx(20000.0 / 256));
  const MethodOutput o = run_named("otsu", v, {"bins=256"}, VoxelType::u16);
  CHECK(has_warning(o, "uint16"));
  CHECK(has_warning(o, "20001 grey levels"));
  CHECK(has_warning(o, "bins=20001"));
  // One bin per grey level: no warning; stored float: no warning.
  CHECK(run_named("otsu", v, {"bins=20001"}, VoxelType::u16).warnings.empty());
  CHECK(run_named("otsu", v, {"bins=256"}, VoxelType::f32).warnings.empty());
  // Fewer levels than bins (levels 10..99): auto takes 90 bins, one per level (bin k holds level
  // 10 + k: the width 89/90 < 1 puts each level in a bin of its own); a user's 256 bins are a comb.
  VolumeF b(cube(24));
  for (int64_t i = 0; i < b.size(); ++i) b[i] = float((i % 3) == 0 ? 10 + i % 20 : 80 + i % 20);
  const MethodOutput m = run_named("minimum", b, {}, VoxelType::u8);
  CHECK(m.warnings.empty());
  CHECK(chosen(m, "bins") == 90);
  const Histogram h = compute_histogram(b.data(), b.size(), 10, 99, 90);
  for (int k = 0; k < 90; ++k) CHECK(h.counts[size_t(k)] == uint64_t(count_nonzero(air_below(b, 10.5 + k, nullptr)) -
                                                                     count_nonzero(air_below(b, 9.5 + k, nullptr))));
  const MethodOutput c = run_named("minimum", b, {"bins=256"}, VoxelType::u8);
  CHECK(has_warning(c, "narrower than one grey level"));
  CHECK(has_warning(c, "bins=auto or bins=90"));
  // Float data: auto is 256 bins.
  CHECK(chosen(run_named("otsu", b, {}, VoxelType::f32), "bins") == 256);
  // With clipping, auto widens the clipped range to whole levels: still one bin per level.
  const MethodOutput k = run_named("otsu", b, {"clip_pct=1"}, VoxelType::u8);
  const double range = chosen(k, "bin_width") * chosen(k, "bins");  // hi - lo
  CHECK(range == Approx(std::round(range)).margin(1e-9));
  CHECK(chosen(k, "bins") == std::round(range) + 1);
  // The word is accepted only as documented.
  const MethodInfo& otsu = Registry::instance().get("otsu");
  CHECK(parse_params(otsu, {"bins=auto"}).text().at("bins") == "auto");
  CHECK_THROWS_WITH(parse_params(otsu, {"bins=automatic"}), Catch::Contains("[2, 65536] or auto"));
}

TEST_CASE("clip_pct keeps the threshold in grey units and ignores outliers", "[global]") {
  // A few extreme voxels stretch the range 100-fold; with clip_pct the bimodal split is found at
  // the resolution of the clipped range (bin width from the 0.5..99.5 % range).
  VolumeF v = global_test_volumes()[0].volume;
  v[0] = -50.f;
  v[1] = 50.f;
  const MethodOutput wide = run_named("otsu", v);
  const MethodOutput clipped = run_named("otsu", v, {"clip_pct=0.5"});
  CHECK(chosen(clipped, "bin_width") < chosen(wide, "bin_width") / 50);
  CHECK(chosen(clipped, "threshold") > 0.2);
  CHECK(chosen(clipped, "threshold") < 0.7);
}

TEST_CASE("global thresholds do not depend on the thread count, nor crash on few bins", "[global]") {
  const VolumeF v = global_test_volumes()[2].volume;  // three-phase
  std::vector<std::string> all = kAutomatic;
  all.push_back("percentile");
  for (const auto& m : all) {
    INFO(m);
    set_threads(1);
    const double one = chosen(run_named(m, v), "threshold");
    set_threads(2);
    const double two = chosen(run_named(m, v), "threshold");
    set_threads(0);
    CHECK(one == two);
    for (int bins : {2, 3, 5}) {
      INFO("bins " << bins);
      // What the code claims (file header of methods/global.cpp): a split method reports the
      // upper edge of a bin that leaves both classes occupied, or the no-air threshold (the
      // lowest grey value) with a warning; mean, iso50 and percentile a grey value in [min, max].
      const MethodOutput o = run_named(m, v, {"bins=" + std::to_string(bins)});
      const double t = chosen(o, "threshold");
      const Histogram h = full_histogram(v, bins);
      CHECK(t >= h.lo);
      CHECK(t <= h.hi);
      if (m == "mean" || m == "iso50" || m == "percentile") continue;
      if (t == h.lo) {
        CHECK_FALSE(o.warnings.empty());
        continue;
      }
      const double k = (t - h.lo) / h.width();  // the number of dark bins
      CHECK(k == Approx(std::round(k)).margin(1e-6));
      CHECK(std::round(k) >= 1);
      CHECK(std::round(k) <= bins - 1);
    }
  }
}

TEST_CASE("out-of-range global parameters are rejected before any work, naming the parameter", "[global]") {
  const MethodInfo& p = Registry::instance().get("percentile");
  CHECK_THROWS_WITH(parse_params(p, {"air_pct=150"}), Catch::Contains("air_pct") && Catch::Contains("150"));
  const MethodInfo& k = Registry::instance().get("kapur");
  CHECK_THROWS_WITH(parse_params(k, {"bins=1"}), Catch::Contains("bins") && Catch::Contains("[2, 65536]"));
  CHECK_THROWS_WITH(parse_params(k, {"clip_pct=20"}), Catch::Contains("clip_pct"));
}

TEST_CASE("non-finite voxels cannot crash the histogram path: +-inf go to the end bins, NaN nowhere", "[global][nonfinite]") {
  // Issue 15: one +inf or -inf voxel made compute_histogram index out of range (SIGSEGV). Analytic
  // expectation (IEEE 754 ordering): -inf is below every value, +inf above, NaN unordered.
  VolumeF v = global_test_volumes()[0].volume;  // bimodal
  const Stats before = compute_stats(v);
  v[0] = -INFINITY;
  v[1] = INFINITY;
  v[2] = NAN;
  const Stats s = compute_stats(v);
  CHECK(std::isfinite(s.min));
  CHECK(std::isfinite(s.max));
  CHECK(std::isfinite(s.mean));
  CHECK(s.count == v.size() - 3);
  CHECK(s.nan_count == 1);
  CHECK(s.min >= before.min);
  CHECK(s.max <= before.max);
  const Histogram h = compute_histogram(v.data(), v.size(), s.min, s.max, 256);
  CHECK(h.total() == uint64_t(v.size() - 1));  // every voxel but the NaN
  const Histogram f = compute_histogram(v.data(), v.size(), s.min, s.max, 256);
  CHECK(h.counts == f.counts);
  CHECK(h.bin_of(-INFINITY) == 0);
  CHECK(h.bin_of(INFINITY) == 255);
  CHECK(h.bin_of(NAN) == 0);
  CHECK_THROWS(compute_histogram(v.data(), v.size(), -INFINITY, 1.0, 256));
  // Extreme finite ranges: no overflow into an index out of range.
  VolumeF w(cube(4));
  for (int64_t i = 0; i < w.size(); ++i) w[i] = i % 2 ? 3.4e38f : -3.4e38f;
  w[5] = INFINITY;
  const Histogram e = compute_histogram(w.data(), w.size(), -3.4e38, 3.4e38, 65536);
  CHECK(e.total() == uint64_t(w.size()));
  CHECK(e.counts.front() + e.counts.back() == uint64_t(w.size()));
  // Every histogram method runs and gives a finite threshold; -inf is air, +inf is not.
  std::vector<std::string> all = kAutomatic;
  all.push_back("percentile");
  for (const auto& m : all) {
    INFO(m);
    const MethodOutput o = run_named(m, v);
    CHECK(std::isfinite(chosen(o, "threshold")));
    const Mask air = air_below(v, chosen(o, "threshold"), nullptr);
    CHECK(air[0] == 1);
    CHECK(air[1] == 0);
    CHECK(air[2] == 0);
  }
}
