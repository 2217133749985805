// Volumes larger than memory (issue 17): the slab pipeline against the in-memory path, voxel for
// voxel, with forced small slabs. Reference: the in-memory path of the same method, which is itself
// checked against scikit-image/scipy (test_global.cpp: Otsu; test_prefilter.cpp: scipy.ndimage
// median; test_local.cpp: scikit-image threshold_niblack/threshold_sauvola/threshold_local, and
// phansalkar, wolf, bernsen and local-gaussian against brute-force windows from each paper's
// formula; test_pores.cpp: scipy.ndimage.label).
#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>
#include <optional>
#include <random>

#include "core/components.hpp"
#include "core/io.hpp"
#include "core/parallel.hpp"
#include "core/slabs.hpp"
#include "methods/pores.hpp"
#include "methods/registry.hpp"
#include "methods/streaming.hpp"
#include "metrics/score_slabs.hpp"
#include "tests/helpers.hpp"

using namespace pb;

namespace {

// A part (a block of material inside an air margin) holding dark spherical pores and an air
// channel from the outside, with Gaussian noise (invented data: a glass-filled polyamide blank).
template <class T>
Image<T> part_volume(const Geometry& g, unsigned seed, double offset = 0) {
  Image<T> v(g);
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> noise(0, 6);
  std::uniform_real_distribution<double> u(0, 1);
  struct Ball {
    double x, y, z, r;
  };
  std::vector<Ball> balls;
  for (int k = 0; k < 14; ++k)
    balls.push_back({4 + u(rng) * double(g.dims[0] - 8), 4 + u(rng) * double(g.dims[1] - 8),
                     4 + u(rng) * double(g.dims[2] - 8), 0.8 + 2.2 * u(rng)});
  for (int64_t z = 0; z < g.dims[2]; ++z)
    for (int64_t y = 0; y < g.dims[1]; ++y)
      for (int64_t x = 0; x < g.dims[0]; ++x) {
        const bool inside = x >= 2 && y >= 2 && z >= 2 && x < g.dims[0] - 2 && y < g.dims[1] - 2 && z < g.dims[2] - 2;
        bool dark = !inside || (y == g.dims[1] / 2 && x < g.dims[0] / 2 && z == g.dims[2] / 3);  // channel
        for (const Ball& b : balls)
          dark = dark || std::hypot(x - b.x, y - b.y, z - b.z) <= b.r;
        const double grey = (dark ? 60.0 : 180.0) + noise(rng) + offset;
        v(x, y, z) = T(std::round(grey));
      }
  return v;
}

Geometry geometry(int64_t nx, int64_t ny, int64_t nz) {
  Geometry g;
  g.dims = {nx, ny, nz};
  g.spacing_mm = {0.05, 0.05, 0.06};
  g.origin_mm = {1.5, -2.0, 3.25};
  return g;
}

struct Outcome {
  Mask pores;
  std::vector<std::pair<std::string, double>> chosen;
  std::vector<std::string> warnings;
  int64_t part_voxels = 0;
};

Outcome in_memory(const std::string& path, const std::string& method, const std::vector<std::string>& sets,
                  const ReadOptions& ro = {}, const std::string& roi_path = "") {
  const AnyVolume raw = read_volume(path, ro);
  const VolumeF v = raw.to_float();
  const MethodInfo& m = Registry::instance().get(method);
  const Mask roi = roi_path.empty() ? Mask() : read_volume(roi_path).to_mask();
  MethodOutput out = run_method(m, parse_params(m, sets), MethodInput{v, roi_path.empty() ? nullptr : &roi, raw.type()});
  return {std::move(out.pores), out.chosen, out.warnings, out.part_voxels};
}

Outcome by_slabs(const std::string& path, const std::string& method, const std::vector<std::string>& sets,
                 int64_t slab, const std::string& out_path, const ReadOptions& ro = {}, const std::string& roi_path = "") {
  const MethodInfo& m = Registry::instance().get(method);
  std::optional<SlabFile> roi;
  if (!roi_path.empty()) roi.emplace(roi_path, ReadOptions{});
  SlabSegmentOptions so;
  so.slab_slices = slab;
  so.roi = roi ? &*roi : nullptr;
  const SlabSegmentResult r = segment_by_slabs(method, parse_params(m, sets), SlabFile(path, ro), out_path, so);
  Outcome o{read_volume(out_path).to_mask(), r.chosen, r.warnings, r.part_voxels};
  CHECK(r.pore_voxels == count_nonzero(o.pores));
  return o;
}

void check_same(const Outcome& a, const Outcome& b) {
  REQUIRE(a.pores.geometry().dims == b.pores.geometry().dims);
  CHECK(a.pores.buffer() == b.pores.buffer());  // bit for bit
  CHECK(a.part_voxels == b.part_voxels);
  CHECK(a.chosen == b.chosen);
  CHECK(a.warnings == b.warnings);
}

}  // namespace

TEST_CASE("slab segmentation equals the in-memory path, every streaming method family", "[streaming]") {
  pbtest::TempDir d;
  const Geometry g = geometry(37, 33, 29);
  write_volume(part_volume<uint16_t>(g, 7), d / "scan.mha");
  const std::string scan = d / "scan.mha";
  struct Case {
    std::string method;
    std::vector<std::string> sets;
  };
  const std::vector<Case> cases = {
      {"otsu", {}},
      {"otsu", {"bins=64", "clip_pct=1", "min_pore_voxels=4"}},
      {"triangle", {}},
      {"median+otsu", {}},
      {"median+otsu", {"median.radius=2"}},
      {"sauvola", {"window=7"}},
      {"sauvola", {"window=9", "k=0.3", "clip_pct=2", "min_pore_voxels=3"}},
      {"niblack", {"window=7", "k=0.5"}},
      {"phansalkar", {"window=9"}},
      {"phansalkar", {"window=7", "clip_pct=1", "k=0.4"}},
      {"local-mean", {"window=7", "offset=30"}},
      {"wolf", {"window=7"}},
      {"wolf", {"window=11", "k=0.3", "clip_pct=2", "min_pore_voxels=3"}},
      {"median+wolf", {"window=9"}},
      {"bernsen", {"window=7"}},
      {"bernsen", {"window=9", "contrast=40", "clip_pct=1"}},
      {"median+bernsen", {"window=5", "median.radius=2"}},
      {"local-gaussian", {"window=7", "offset=20"}},
      {"local-gaussian", {"window=11", "sigma=2.5", "offset=25", "min_pore_voxels=2"}},
      {"median+local-gaussian", {"window=9", "offset=20"}},
  };
  for (const Case& c : cases) {
    const Outcome ref = in_memory(scan, c.method, c.sets);
    REQUIRE(count_nonzero(ref.pores) > 0);  // the case has pores to compare
    for (int threads : {1, 2})
      for (int64_t slab : {1, 3, 7, 29}) {
        INFO(c.method << " " << (c.sets.empty() ? "" : c.sets[0]) << ", slabs of " << slab << " slices, " << threads
                      << " threads");
        set_threads(threads);
        check_same(by_slabs(scan, c.method, c.sets, slab, d / "pores.mha"), ref);
      }
    set_threads(0);
  }
}

TEST_CASE("every registered method with a slab run equals its in-memory run", "[streaming][registry]") {
  // Reference: each method's in-memory run (see the file header). The methods come from the
  // registry (MethodInfo::slabs), not from a list here, so a method that starts to stream is
  // checked without touching this test; the known streaming families must be among them.
  pbtest::TempDir d;
  const Geometry g = geometry(37, 33, 29);
  write_volume(part_volume<uint16_t>(g, 9), d / "scan.mha");
  const std::string scan = d / "scan.mha";
  std::vector<std::string> streaming;
  for (const MethodInfo* m : Registry::instance().all()) {
    CHECK(slab_refusal_of_method(m->name).empty() == bool(m->slabs));
    if (!m->slabs) continue;
    streaming.push_back(m->name);
    const std::vector<std::string> sets = m->family == "local" ? std::vector<std::string>{"window=7"} : std::vector<std::string>{};
    const Outcome ref = in_memory(scan, m->name, sets);
    for (int64_t slab : {1, 4}) {
      INFO(m->name << ", slabs of " << slab << " slices");
      check_same(by_slabs(scan, m->name, sets, slab, d / "pores.mha"), ref);
    }
  }
  for (const char* name : {"otsu", "triangle", "percentile", "niblack", "sauvola", "phansalkar", "wolf", "bernsen",
                           "local-mean", "local-gaussian"}) {
    INFO(name);
    CHECK(std::find(streaming.begin(), streaming.end(), name) != streaming.end());
  }
  // What does not stream is refused, and the refusal names what does.
  const std::string why = slab_refusal_of_method("hysteresis");
  CHECK_THAT(why, Catch::Contains("method hysteresis does not run by slabs") && Catch::Contains("otsu") &&
                      Catch::Contains("local-gaussian"));
  CHECK_THAT(slab_refusal_of_method("gaussian+otsu"), Catch::Contains("pre-filter gaussian"));
  CHECK(slab_refusal_of_method("median+bernsen").empty());
}

TEST_CASE("slab segmentation with an ROI equals the in-memory path", "[streaming][roi]") {
  // Reference: the in-memory path with the same part mask (its ROI handling is checked in
  // test_pores.cpp against a flood fill from the outside and in test_local.cpp/test_global.cpp).
  // The ROI: a cylinder along z (a gear blank's hub) over slices 3..25, so its faces, and pores it
  // cuts, cross the slab faces; voxels outside it are read by the windows but never air.
  pbtest::TempDir d;
  const Geometry g = geometry(37, 33, 29);
  write_volume(part_volume<uint16_t>(g, 7), d / "scan.mha");
  Image<uint8_t> roi(g);
  for (int64_t z = 3; z <= 25; ++z)
    for (int64_t y = 0; y < g.dims[1]; ++y)
      for (int64_t x = 0; x < g.dims[0]; ++x) roi(x, y, z) = std::hypot(x - 18.0, y - 16.0) <= 13.5 ? 255 : 0;
  write_volume(roi, d / "roi.nrrd");
  const std::string scan = d / "scan.mha", part = d / "roi.nrrd";
  const std::vector<std::vector<std::string>> cases = {
      {"otsu"},
      {"otsu", "histogram=roi", "clip_pct=1"},
      {"triangle", "histogram=roi", "min_pore_voxels=3"},
      {"median+otsu", "histogram=roi"},
      {"sauvola", "window=7", "clip_pct=2"},
      {"niblack", "window=7", "k=0.5"},
      {"phansalkar", "window=9"},
      {"local-mean", "window=7", "offset=30"},
      {"wolf", "window=9"},
      {"median+wolf", "window=7", "clip_pct=1"},
      {"bernsen", "window=7"},
      {"local-gaussian", "window=9", "offset=20"},
  };
  for (const auto& c : cases) {
    const std::string method = c[0];
    const std::vector<std::string> sets(c.begin() + 1, c.end());
    const Outcome ref = in_memory(scan, method, sets, {}, part);
    REQUIRE(count_nonzero(ref.pores) > 0);
    REQUIRE(ref.part_voxels < int64_t(count_nonzero(roi)));  // pores cut by the ROI's surface are background
    for (int threads : {1, 2})
      for (int64_t slab : {1, 3, 7, 29}) {
        INFO(method << " " << (sets.empty() ? "" : sets[0]) << ", slabs of " << slab << " slices, " << threads << " threads");
        set_threads(threads);
        check_same(by_slabs(scan, method, sets, slab, d / "pores.mha", {}, part), ref);
      }
    set_threads(0);
  }
}

TEST_CASE("segment by slabs with --roi: the in-memory mask and record; a bad ROI exits 2 before any work",
          "[streaming][roi][cli]") {
  pbtest::TempDir d;
  const Geometry g = geometry(24, 20, 18);
  write_volume(part_volume<uint16_t>(g, 3), d / "scan.mha");
  Image<uint8_t> roi(g);
  for (int64_t i = 0; i < roi.size(); ++i) roi[i] = (i / 7) % 3 != 0;
  write_volume(roi, d / "roi.mha");
  const std::string cmd = "segment wolf " + d / "scan.mha" + " --set window=5 --roi ";
  SECTION("by slabs equals in memory") {
    const auto a = pbtest::run_cli(cmd + d / "roi.mha" + " -o " + d / "a.mha" + " --memory-limit 4K --slab-slices 4 --json " + d / "a.json");
    const auto b = pbtest::run_cli(cmd + d / "roi.mha" + " -o " + d / "b.mha" + " --json " + d / "b.json");
    REQUIRE(a.exit_code == 0);
    REQUIRE(b.exit_code == 0);
    CHECK_THAT(a.err, Catch::Contains("by slabs of 4 slices"));
    CHECK(read_volume(d / "a.mha").to_mask().buffer() == read_volume(d / "b.mha").to_mask().buffer());
    const auto ja = pbtest::read_json(d / "a.json"), jb = pbtest::read_json(d / "b.json");
    for (const char* key : {"pore_voxels", "part_voxels", "chosen", "roi"}) {
      INFO(key);
      CHECK(ja[key] == jb[key]);
    }
  }
  SECTION("a compressed ROI cannot be read by slabs") {
    WriteOptions wo;
    wo.compress = true;
    write_volume(roi, d / "z.mha", wo);
    const auto r = pbtest::run_cli(cmd + d / "z.mha" + " -o " + d / "p.mha" + " --memory-limit 4K");
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Catch::Contains("the ROI " + d / "z.mha") && Catch::Contains("compressed"));
    CHECK_FALSE(pbtest::fs::exists(d / "p.mha"));
  }
  SECTION("an ROI of other dims, an empty ROI") {
    write_volume(Image<uint8_t>(geometry(24, 20, 17), uint8_t(1)), d / "short.mha");
    write_volume(Image<uint8_t>(g), d / "empty.mha");
    const auto r = pbtest::run_cli(cmd + d / "short.mha" + " -o " + d / "p.mha" + " --memory-limit 4K");
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Catch::Contains(d / "short.mha") && Catch::Contains("17"));
    const auto e = pbtest::run_cli(cmd + d / "empty.mha" + " -o " + d / "p.mha" + " --memory-limit 4K");
    CHECK(e.exit_code == 2);
    CHECK_THAT(e.err, Catch::Contains("ROI " + d / "empty.mha" + " is empty"));
    CHECK_FALSE(pbtest::fs::exists(d / "p.mha"));
  }
}

TEST_CASE("slabs thinner than twice a window filter's halo are raised to it, said, and segment the same",
          "[streaming][cli]") {
  // bernsen window 9 reads 4 slices beyond each slab face: --slab-slices 1 would read and filter 9
  // slices per slice; it is raised to 8 and the log says why. Methods without a halo keep the slab.
  // Reference: the in-memory mask.
  pbtest::TempDir d;
  const Geometry g = geometry(24, 20, 18);
  write_volume(part_volume<uint16_t>(g, 4), d / "scan.mha");
  const std::string scan = d / "scan.mha";
  const auto a = pbtest::run_cli("segment bernsen " + scan + " --set window=9 -o " + d / "a.mha" +
                                 " --memory-limit 4K --slab-slices 1");
  const auto b = pbtest::run_cli("segment bernsen " + scan + " --set window=9 -o " + d / "b.mha");
  REQUIRE(a.exit_code == 0);
  REQUIRE(b.exit_code == 0);
  CHECK_THAT(a.err, Catch::Contains("--slab-slices 1 raised to 8: method bernsen reads 4 slices beyond each face") &&
                        Catch::Contains("by slabs of 8 slices"));
  CHECK(read_volume(d / "a.mha").to_mask().buffer() == read_volume(d / "b.mha").to_mask().buffer());
  const MethodInfo& m = Registry::instance().get("local-gaussian");
  SlabSegmentOptions so;
  so.slab_slices = 3;
  const SlabSegmentResult r = segment_by_slabs("local-gaussian", parse_params(m, {"window=11"}), SlabFile(scan, {}),
                                               d / "c.mha", so);
  CHECK(r.slab_slices == 10);
  CHECK_THAT(r.slab_note, Catch::Contains("--slab-slices 3 raised to 10"));
  for (const char* method : {"sauvola", "otsu"}) {  // slices in z order, or no window: slabs as asked
    INFO(method);
    const MethodInfo& k = Registry::instance().get(method);
    const SlabSegmentResult s = segment_by_slabs(method, parse_params(k, {}), SlabFile(scan, {}), d / "c.mha", so);
    CHECK(s.slab_slices == 3);
    CHECK(s.slab_note.empty());
  }
}

TEST_CASE("by slabs, a local method's bad window is refused before any pass over the file", "[streaming]") {
  // The float volume holds a NaN, which the first pass over the file (check_finite) refuses: the
  // window's refusal must come first, naming the parameter and its value; no mask is written.
  pbtest::TempDir d;
  Image<float> v = part_volume<float>(geometry(16, 14, 12), 5);
  v(3, 4, 5) = NAN;
  write_volume(v, d / "nan.mha");
  for (const std::string method : {"bernsen", "sauvola", "wolf"}) {
    INFO(method);
    const MethodInfo& m = Registry::instance().get(method);
    for (const char* window : {"window=4", "window=13"}) {  // even; larger than the 12 slices
      INFO(window);
      CHECK_THROWS_WITH(segment_by_slabs(method, parse_params(m, {window}), SlabFile(d / "nan.mha", {}), d / "p.mha"),
                        Catch::Contains("method " + method + ": parameter 'window'") &&
                            Catch::Contains(std::string(window).substr(7)));
    }
    CHECK_THROWS_WITH(segment_by_slabs(method, parse_params(m, {"window=5"}), SlabFile(d / "nan.mha", {}), d / "p.mha"),
                      Catch::Contains("non-finite") || Catch::Contains("NaN"));
  }
  CHECK_FALSE(pbtest::fs::exists(d / "p.mha"));
}

TEST_CASE("slab segmentation of a constant volume: no pores and the in-memory warning", "[streaming]") {
  // Reference: the in-memory path (constant volume: no local contrast, no pores, a warning).
  pbtest::TempDir d;
  write_volume(Image<uint16_t>(geometry(12, 10, 9), uint16_t(500)), d / "flat.mha");
  for (const std::string method : {"niblack", "sauvola", "wolf", "bernsen", "local-gaussian", "local-mean"}) {
    INFO(method);
    const Outcome ref = in_memory(d / "flat.mha", method, {"window=5"});
    REQUIRE(ref.warnings.size() == 1);
    CHECK_THAT(ref.warnings[0], Catch::Contains("constant volume"));
    check_same(by_slabs(d / "flat.mha", method, {"window=5"}, 2, d / "p.mha"), ref);
  }
}

TEST_CASE("slab segmentation reads int16, float32, big-endian NRRD and raw as read_volume does", "[streaming]") {
  pbtest::TempDir d;
  const Geometry g = geometry(31, 28, 23);
  SECTION("int16 MetaImage with negative grey values") {
    write_volume(part_volume<int16_t>(g, 11, -120), d / "s.mha");
    check_same(by_slabs(d / "s.mha", "otsu", {}, 3, d / "p.nrrd"), in_memory(d / "s.mha", "otsu", {}));
    check_same(by_slabs(d / "s.mha", "median+otsu", {}, 4, d / "p.mha"), in_memory(d / "s.mha", "median+otsu", {}));
  }
  SECTION("float32 (global methods and the window filters; the window sums' centring mean is summed in another order)") {
    write_volume(part_volume<float>(g, 12), d / "s.nrrd");
    check_same(by_slabs(d / "s.nrrd", "otsu", {}, 3, d / "p.mha"), in_memory(d / "s.nrrd", "otsu", {}));
    for (const std::string method : {"bernsen", "local-gaussian"}) {
      INFO(method);
      const std::vector<std::string> sets = {"window=7", method == "bernsen" ? "clip_pct=1" : "offset=20"};
      check_same(by_slabs(d / "s.nrrd", method, sets, 4, d / "p.mha"), in_memory(d / "s.nrrd", method, sets));
    }
  }
  SECTION("big-endian raw with a header") {
    const AnyVolume v(part_volume<uint16_t>(g, 13));
    write_raw(v, d / "s.raw", true, 100);
    ReadOptions ro;
    ro.raw = RawSpec{g.dims, VoxelType::u16, true, 100, g.spacing_mm};
    check_same(by_slabs(d / "s.raw", "sauvola", {"window=5"}, 3, d / "p.mha", ro), in_memory(d / "s.raw", "sauvola", {"window=5"}, ro));
  }
  SECTION("big-endian NRRD (endian: big)") {
    const AnyVolume v(part_volume<uint16_t>(g, 14));
    write_raw(v, d / "s.raw", true, 0);
    pbtest::write_file(d / "s.nhdr", "NRRD0004\ntype: uint16\ndimension: 3\nsizes: 31 28 23\nspacings: 0.05 0.05 0.06\n"
                                     "endian: big\nencoding: raw\ndata file: s.raw\n\n");
    ReadOptions ro;
    ro.raw = RawSpec{g.dims, VoxelType::u16, true, 0, {0.05, 0.05, 0.06}};
    check_same(by_slabs(d / "s.nhdr", "otsu", {}, 3, d / "p.mha"), in_memory(d / "s.raw", "otsu", {}, ro));
  }
}

TEST_CASE("run labelling by slabs equals label_runs on the whole mask", "[streaming][components]") {
  // Reference: label_runs on the whole mask (itself checked against scipy.ndimage.label, test_components.cpp).
  Geometry g;
  g.dims = {45, 17, 23};
  Mask m(g);
  std::mt19937 rng(5);
  std::bernoulli_distribution on(0.35);
  for (int64_t i = 0; i < m.size(); ++i) m[i] = on(rng);
  for (int conn : {6, 18, 26}) {
    const LabelRuns whole = label_runs(m, nullptr, conn);
    for (int64_t slab : {1, 2, 3, 5, 23}) {
      INFO("connectivity " << conn << ", slabs of " << slab);
      RunCollector c(g);
      for (int64_t z = 0; z < g.dims[2]; z += slab) c.add(m.slice(z), std::min(slab, g.dims[2] - z));
      const LabelRuns s = c.finish(conn);
      CHECK(s.count == whole.count);
      CHECK(s.row_begin == whole.row_begin);
      CHECK(std::equal(s.label.begin(), s.label.end(), whole.label.begin(), whole.label.end()));
      CHECK(s.sizes == whole.sizes);
    }
  }
}

TEST_CASE("a pore crossing slab faces is one pore, and air reaching the outside only past a face is no pore",
          "[streaming]") {
  // Analytic case: one U-shaped pore whose two arms meet only in the last slab, and an air channel
  // that reaches the volume border only in a later slab than where it passes the part. Slabs of 3
  // slices put faces at z = 3, 6, 9.
  pbtest::TempDir d;
  Geometry g;
  g.dims = {20, 16, 12};
  Image<uint8_t> v(g, uint8_t(200));
  for (int64_t z = 2; z <= 9; ++z) {
    v(5, 5, z) = 10;  // arm 1
    v(9, 5, z) = 10;  // arm 2
  }
  for (int64_t x = 5; x <= 9; ++x) v(x, 5, 9) = 10;  // the bottom of the U, in slab 3
  // Channel: from (14, 10, 1) down to z = 10, then along x to the border at z = 10.
  for (int64_t z = 1; z <= 10; ++z) v(14, 10, z) = 10;
  for (int64_t x = 14; x < 20; ++x) v(x, 10, 10) = 10;
  write_volume(v, d / "u.mha");
  const Outcome ref = in_memory(d / "u.mha", "otsu", {});
  const Outcome s = by_slabs(d / "u.mha", "otsu", {}, 3, d / "p.mha");
  check_same(s, ref);
  CHECK(count_nonzero(s.pores) == 8 + 8 + 3);  // the U: two arms of 8 voxels and 3 between them
  CHECK(label_components(s.pores, 26).count == 1);
  CHECK(s.pores(14, 10, 5) == 0);  // the channel is outside air
}

TEST_CASE("segment refuses what cannot stream above --memory-limit, naming file, size and limit", "[streaming][cli]") {
  pbtest::TempDir d;
  const Geometry g = geometry(24, 20, 18);
  write_volume(part_volume<uint16_t>(g, 3), d / "scan.mha");
  SECTION("a method that does not stream") {
    const auto r = pbtest::run_cli("segment hysteresis " + d / "scan.mha" + " -o " + d / "p.mha" +
                                   " --set low=80 --set high=120 --memory-limit 4K");
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Catch::Contains(d / "scan.mha") && Catch::Contains("24 x 20 x 18 voxels of uint16, 17280 bytes") &&
                          Catch::Contains("--memory-limit 4096 bytes") && Catch::Contains("method hysteresis"));
    CHECK_FALSE(pbtest::fs::exists(d / "p.mha"));
  }
  SECTION("a compressed input") {
    WriteOptions wo;
    wo.compress = true;
    write_volume(part_volume<uint16_t>(g, 3), d / "z.mha", wo);
    const auto r = pbtest::run_cli("segment otsu " + d / "z.mha" + " -o " + d / "p.mha" + " --memory-limit 4K");
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Catch::Contains("compressed") && Catch::Contains("17280 bytes"));
  }
  SECTION("a bad limit") {
    const auto r = pbtest::run_cli("segment otsu " + d / "scan.mha" + " -o " + d / "p.mha" + " --memory-limit 12Q");
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Catch::Contains("--memory-limit '12Q'"));
  }
  SECTION("above the limit by slabs, below it in memory: the same mask") {
    const auto a = pbtest::run_cli("segment median+otsu " + d / "scan.mha" + " -o " + d / "a.mha" +
                                   " --memory-limit 4K --slab-slices 3 --json " + d / "a.json");
    const auto b = pbtest::run_cli("segment median+otsu " + d / "scan.mha" + " -o " + d / "b.mha" + " --json " + d / "b.json");
    REQUIRE(a.exit_code == 0);
    REQUIRE(b.exit_code == 0);
    CHECK_THAT(a.err, Catch::Contains("by slabs of 3 slices"));
    CHECK(read_volume(d / "a.mha").to_mask().buffer() == read_volume(d / "b.mha").to_mask().buffer());
    const auto ja = pbtest::read_json(d / "a.json"), jb = pbtest::read_json(d / "b.json");
    CHECK(ja["input"]["sha256_voxels"] == jb["input"]["sha256_voxels"]);
    CHECK(ja["pore_voxels"] == jb["pore_voxels"]);
    CHECK(ja["chosen"] == jb["chosen"]);
  }
}

TEST_CASE("scoring by slabs equals score() on the masks in memory", "[streaming][metrics]") {
  // Reference: score() in memory (its figures are checked against scipy/scikit-learn in test_metrics_*.cpp).
  pbtest::TempDir d;
  const Geometry g = geometry(34, 30, 26);
  const Image<uint16_t> a = part_volume<uint16_t>(g, 21), b = part_volume<uint16_t>(g, 22);
  // Pred: dark voxels of one scan; ref: synthetic truth labels 0/1/2 (pores = 2) of the other.
  Image<uint8_t> pred(g), ref(g);
  for (int64_t i = 0; i < pred.size(); ++i) {
    pred[i] = a[i] < 120;
    ref[i] = b[i] < 120 ? 2 : 1;
  }
  write_volume(pred, d / "pred.mha");
  write_volume(ref, d / "ref.nrrd");
  ScoreArgs args;
  args.bootstrap = 200;
  for (const std::string z : {"", "5:19"}) {
    args.z_range = z;
    const ScoreSetup s = score_setup(args);
    const AnyVolume pv = read_volume(d / "pred.mha"), rv = read_volume(d / "ref.nrrd");
    const ScoreRecord mem = score_record(s, {view_of(pv), d / "pred.mha", d / "pred.mha"}, {view_of(rv), d / "ref.nrrd", d / "ref.nrrd"},
                                         nullptr, true);
    REQUIRE(mem.result.pores_ref.size() > 3);
    for (int64_t slab : {1, 3, 26}) {
      INFO("z range '" << z << "', slabs of " << slab);
      const ScoreRecord sl = score_record_by_slabs(s, SlabFile(d / "pred.mha", {}), SlabFile(d / "ref.nrrd", {}), true, slab);
      CHECK(sl.ref_how == mem.ref_how);
      CHECK(sl.pred_how == mem.pred_how);
      nlohmann::ordered_json jm = mem.json, js = sl.json;
      jm.erase("context"), js.erase("context");  // run time and host
      CHECK(js.dump() == jm.dump());
    }
  }
}

TEST_CASE("score refuses what cannot stream above --memory-limit", "[streaming][cli]") {
  pbtest::TempDir d;
  Geometry g = geometry(20, 16, 12);
  Image<uint8_t> m(g);
  m(5, 5, 5) = 1;
  write_volume(m, d / "p.mha");
  write_volume(m, d / "r.mha");
  SECTION("with an ROI") {
    const auto r = pbtest::run_cli("score --pred " + d / "p.mha" + " --ref " + d / "r.mha" + " --roi " + d / "r.mha" + " --memory-limit 1K");
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Catch::Contains(d / "p.mha") && Catch::Contains("20 x 16 x 12 voxels of uint8, 3840 bytes") &&
                          Catch::Contains("--memory-limit 1024 bytes") && Catch::Contains("ROI"));
  }
  SECTION("without: scored by slabs, the figures of the in-memory run") {
    const auto a = pbtest::run_cli("score --pred " + d / "p.mha" + " --ref " + d / "r.mha" + " --memory-limit 1K --slab-slices 2");
    const auto b = pbtest::run_cli("score --pred " + d / "p.mha" + " --ref " + d / "r.mha");
    REQUIRE(a.exit_code == 0);
    CHECK_THAT(a.err, Catch::Contains("scored by slabs"));
    CHECK(a.out == b.out);
  }
}
