// Connected-component labelling: hand-computed tiny volumes for 6/18/26-connectivity, comparison
// with scipy.ndimage.label on random volumes (same count, same partition up to relabelling), and
// independence from the thread count.
#include <catch2/catch.hpp>
#include <omp.h>

#include <array>
#include <fstream>
#include <map>

#include "core/components.hpp"
#include "core/cpu.hpp"
#include "core/error.hpp"
#include "core/json.hpp"
#include "tests/helpers.hpp"
#include "tests/metrics_helpers.hpp"

using namespace pb;
using pbtest::random_mask;

namespace {

// True when a and b are the same partition of the foreground: label maps are bijective.
bool same_partition(const uint32_t* a, const uint32_t* b, int64_t n) {
  std::map<uint32_t, uint32_t> ab, ba;
  for (int64_t i = 0; i < n; ++i) {
    if ((a[i] == 0) != (b[i] == 0)) return false;
    if (a[i] == 0) continue;
    auto [it, fresh] = ab.emplace(a[i], b[i]);
    if (!fresh && it->second != b[i]) return false;
    auto [jt, fresh2] = ba.emplace(b[i], a[i]);
    if (!fresh2 && jt->second != a[i]) return false;
  }
  return true;
}

}  // namespace

TEST_CASE("tiny volumes: face, edge and corner neighbours per connectivity", "[core][ccl]") {
  // Two voxels of a 3x3x3 volume are one component when they are neighbours under the
  // connectivity: 6 = shared face, 18 = face or edge, 26 = face, edge or corner (the definitions of
  // 3D digital topology, Kong & Rosenfeld 1989, Comput. Vision Graph. Image Process. 48:357-393).
  struct Case {
    const char* what;
    std::array<int, 3> a, b;
    int n6, n18, n26;  // expected component counts
  };
  const Case cases[] = {
      {"face step (+1,0,0)", {0, 0, 0}, {1, 0, 0}, 1, 1, 1},
      {"edge step (+1,+1,0)", {0, 0, 0}, {1, 1, 0}, 2, 1, 1},
      {"corner step (+1,+1,+1)", {0, 0, 0}, {1, 1, 1}, 2, 2, 1},
      {"corner step backwards in y (+1,-1,+1): the (+1,-1) row offset", {1, 2, 0}, {2, 1, 1}, 2, 2, 1},
      {"edge step (0,-1,+1) seen from the later voxel", {1, 2, 0}, {1, 1, 1}, 2, 1, 1},
  };
  Geometry g;
  g.dims = {3, 3, 3};
  for (const auto& c : cases) {
    INFO(c.what);
    Mask m(g);
    m(c.a[0], c.a[1], c.a[2]) = m(c.b[0], c.b[1], c.b[2]) = 1;
    CHECK(label_components(m, 6).count == uint32_t(c.n6));
    CHECK(label_components(m, 18).count == uint32_t(c.n18));
    CHECK(label_components(m, 26).count == uint32_t(c.n26));
  }
}

TEST_CASE("labels are numbered in raster order of first voxels, sizes per label", "[core][ccl]") {
  // A U shape in one slice: row y=0 has voxels x=0 and x=2, row y=1 joins them (x=0..2). Under any
  // connectivity it is one component of 5 voxels; a lone voxel at (0,0,2) is label 2 (size 1).
  Geometry g;
  g.dims = {3, 2, 3};
  Mask m(g);
  m(0, 0, 0) = m(2, 0, 0) = 1;
  m(0, 1, 0) = m(1, 1, 0) = m(2, 1, 0) = 1;
  m(0, 0, 2) = 1;
  for (int conn : {6, 18, 26}) {
    const Components c = label_components(m, conn);
    REQUIRE(c.count == 2);
    CHECK(c.labels(0, 0, 0) == 1);
    CHECK(c.labels(2, 0, 0) == 1);
    CHECK(c.labels(0, 0, 2) == 2);
    CHECK(c.labels(1, 0, 0) == 0);
    const auto& s = c.sizes;
    REQUIRE(s.size() == 3);
    CHECK(s[1] == 5);
    CHECK(s[2] == 1);
  }
}

TEST_CASE("empty and full masks, bad connectivity", "[core][ccl]") {
  Geometry g;
  g.dims = {4, 3, 2};
  const Mask empty(g);
  CHECK(label_components(empty, 26).count == 0);
  const Mask full(g, 1);
  const Components c = label_components(full, 6);
  CHECK(c.count == 1);
  CHECK(c.sizes[1] == 24);
  CHECK_THROWS_WITH(label_components(full, 8), Catch::Contains("connectivity") && Catch::Contains("8"));
  const Mask none;  // zero voxels
  CHECK(label_components(none, 26).count == 0);
}

TEST_CASE("same partition as scipy.ndimage.label on random volumes", "[core][ccl][ref]") {
  // Reference: scipy.ndimage.label with generate_binary_structure(3, 1|2|3) (Debian python3-scipy).
  // Rows are scanned 64 voxels at a time: nx = 37 (one partial chunk), 128 (runs open at a chunk
  // end and at the row end) and 131 (two chunks and a tail); with and without a part mask (ROI:
  // scipy labels mask AND roi); with the AVX2 and the generic run extraction.
  const int conn = GENERATE(6, 18, 26);
  const double p = GENERATE(0.2, 0.5);
  const auto dims = GENERATE(std::array<int64_t, 3>{37, 29, 23}, std::array<int64_t, 3>{128, 9, 7},
                             std::array<int64_t, 3>{131, 11, 6});
  const bool with_roi = GENERATE(false, true);
  const Simd simd = GENERATE(Simd::avx2, Simd::generic);
  Geometry g;
  g.dims = dims;  // unequal dims catch axis mix-ups
  const Mask m = random_mask(g, p, unsigned(conn * 100 + int(p * 10) + int(dims[0])));
  const Mask roi = random_mask(g, 0.8, 99);
  Mask both = m;
  if (with_roi)
    for (int64_t i = 0; i < m.size(); ++i) both[i] = uint8_t(m[i] && roi[i]);
  pbtest::TempDir d;
  write_raw(AnyVolume(both), d / "m.raw");
  const auto r = pbtest::run_ref_script("metrics_ccl.py", d / "m.raw" + " " + std::to_string(dims[0]) + " " +
                                                              std::to_string(dims[1]) + " " + std::to_string(dims[2]) +
                                                              " " + std::to_string(conn) + " " + d / "ref.raw");
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  const auto j = nlohmann::json::parse(r.out);
  std::vector<uint32_t> ref(size_t(m.size()));
  {
    std::ifstream f(d / "ref.raw", std::ios::binary);
    f.read(reinterpret_cast<char*>(ref.data()), std::streamsize(ref.size() * 4));
    REQUIRE(f.gcount() == std::streamsize(ref.size() * 4));
  }
  set_simd_cap(simd);
  const Components c = label_components(m, with_roi ? &roi : nullptr, conn);
  set_simd_cap(Simd::avx512);
  INFO("connectivity " << conn << " p " << p << " nx " << dims[0] << " roi " << with_roi << " " << simd_name(simd));
  CHECK(c.count == j["count"].get<uint32_t>());
  CHECK(same_partition(c.labels.data(), ref.data(), m.size()));
  int64_t total = 0;
  for (auto s : c.sizes) total += s;
  CHECK(total == int64_t(ref.size()) - int64_t(std::count(ref.begin(), ref.end(), 0u)));  // all foreground labelled
}

TEST_CASE("large label volumes start at zero and stay zero outside the pores", "[core][ccl]") {
  // Labels of a volume above the huge-page buffer size (core/memory.hpp) are written only where
  // the mask has runs; the rest must read as background. A single voxel, hand-checked.
  Geometry g;
  g.dims = {256, 128, 64};  // 8 MiB of uint32 labels
  Mask m(g, 0);
  m(200, 100, 50) = 1;
  for (int rep = 0; rep < 2; ++rep) {  // the second volume reuses freed memory of the first
    const Components c = label_components(m, 26);
    REQUIRE(c.count == 1);
    CHECK(c.labels(200, 100, 50) == 1);
    CHECK(std::count(c.labels.buffer().begin(), c.labels.buffer().end(), 0u) == c.labels.size() - 1);
  }
}

TEST_CASE("labels do not depend on the thread count", "[core][ccl]") {
  Geometry g;
  g.dims = {40, 30, 50};
  const Mask m = random_mask(g, 0.45, 7);
  const int before = omp_get_max_threads();
  omp_set_num_threads(1);
  const Components one = label_components(m, 26);
  omp_set_num_threads(3);  // more slabs than cores: boundaries are merged in order
  const Components three = label_components(m, 26);
  omp_set_num_threads(before);
  CHECK(one.count == three.count);
  CHECK(one.labels.buffer() == three.labels.buffer());
}
