// Shared pore extraction: air connected to the volume border, or to the outside of the part mask,
// is background; enclosed air is pores. Hand-made volumes with the counts worked out in comments.
#include <catch2/catch.hpp>

#include <algorithm>

#include "methods/pores.hpp"
#include "methods/registry.hpp"
#include "tests/helpers.hpp"
#include "tests/metrics_helpers.hpp"

using namespace pb;

TEST_CASE("enclosed air is a pore, air open to the border is not", "[pores]") {
  // 9^3 volume: material everywhere except
  //  - a closed 1x1x1 cavity at (4,4,4)                 -> pore (1 voxel)
  //  - a channel along x at y=2,z=2 from x=0 to x=5      -> open to the border, background
  //  - a 2x1x1 cavity at (6..7, 6, 6), touching nothing  -> pore (2 voxels)
  //  - a voxel (2,6,6) diagonal-only to the channel? no: it is 4 voxels away -> pore (1)
  VolumeF v(pbtest::cube(9), 100.f);
  v(4, 4, 4) = 0;
  for (int x = 0; x <= 5; ++x) v(x, 2, 2) = 0;
  v(6, 6, 6) = v(7, 6, 6) = 0;
  v(2, 6, 6) = 0;
  Mask m = air_below(v, 50, nullptr);
  CHECK(count_nonzero(m) == 1 + 6 + 2 + 1);
  const int64_t part = air_to_pores(m, nullptr);
  CHECK(count_nonzero(m) == 4);
  CHECK(m(4, 4, 4) == 1);
  CHECK(m(0, 2, 2) == 0);
  CHECK(m(5, 2, 2) == 0);
  CHECK(part == 9 * 9 * 9 - 6);  // everything but the open channel
}

TEST_CASE("background leaks only through faces (6-connectivity)", "[pores]") {
  // A cavity touching the border channel only along an edge stays a pore.
  VolumeF v(pbtest::cube(7), 100.f);
  for (int x = 0; x <= 3; ++x) v(x, 2, 2) = 0;  // channel from the border
  v(4, 3, 3) = 0;                               // edge-neighbour of (3,2,2)... differs in x,y,z: corner only
  Mask m = air_below(v, 50, nullptr);
  air_to_pores(m, nullptr);
  CHECK(count_nonzero(m) == 1);
  CHECK(m(4, 3, 3) == 1);
}

TEST_CASE("with a part mask, air reaching the outside of the mask is background", "[pores]") {
  // 8^3 all air below threshold. Part mask: the cube [2,6)^3 (64 voxels).
  //  - no solid at all: every air voxel in the mask touches the outside through faces
  //    eventually, so no pores.
  VolumeF v(pbtest::cube(8), 0.f);
  Mask roi(pbtest::cube(8), 0);
  for (int z = 2; z < 6; ++z)
    for (int y = 2; y < 6; ++y)
      for (int x = 2; x < 6; ++x) roi(x, y, z) = 1;
  Mask m = air_below(v, 50, &roi);
  CHECK(count_nonzero(m) == 64);
  air_to_pores(m, &roi);
  CHECK(count_nonzero(m) == 0);
  // Now material in the mask's shell (the 56 outer voxels of the 4^3 cube) encloses 2^3 = 8 air voxels.
  for (int z = 2; z < 6; ++z)
    for (int y = 2; y < 6; ++y)
      for (int x = 2; x < 6; ++x)
        if (x == 2 || x == 5 || y == 2 || y == 5 || z == 2 || z == 5) v(x, y, z) = 100;
  m = air_below(v, 50, &roi);
  const int64_t part = air_to_pores(m, &roi);
  CHECK(count_nonzero(m) == 8);
  CHECK(part == 64);
}

TEST_CASE("NaN is never air", "[pores]") {
  VolumeF v(pbtest::cube(3), std::numeric_limits<float>::quiet_NaN());
  CHECK(count_nonzero(air_below(v, 1e30, nullptr)) == 0);
}

TEST_CASE("min_pore_voxels drops noise specks, reported as chosen", "[pores]") {
  // Two enclosed cavities in a 12^3 block: 1 voxel at (3,3,3) and 2x2x2 = 8 voxels at (7..8)^3.
  VolumeF v(pbtest::cube(12), 100.f);
  v(3, 3, 3) = 0;
  for (int z = 7; z < 9; ++z)
    for (int y = 7; y < 9; ++y)
      for (int x = 7; x < 9; ++x) v(x, y, z) = 0;
  const MethodInfo& m = Registry::instance().get("manual");
  const MethodOutput all = run_method(m, parse_params(m, {"threshold=50"}), MethodInput{v});
  CHECK(count_nonzero(all.pores) == 9);
  const MethodOutput big = run_method(m, parse_params(m, {"threshold=50", "min_pore_voxels=2"}), MethodInput{v});
  CHECK(count_nonzero(big.pores) == 8);
  CHECK(big.chosen.back() == std::make_pair(std::string("small_pores_removed"), 1.0));
  // A cut-off above both sizes leaves none.
  CHECK(count_nonzero(run_method(m, parse_params(m, {"threshold=50", "min_pore_voxels=9"}), MethodInput{v}).pores) == 0);
}

TEST_CASE("pores equal a breadth-first flood fill from the outside through air", "[pores]") {
  // The definition computed directly: seed every air voxel on the volume border and every voxel
  // outside the part mask, grow through 6-neighbours that are air or outside; what stays unreached
  // of the air is pores, and the part is the ROI minus the reached voxels. Random volumes, rows
  // wider than 64 voxels.
  const bool with_roi = GENERATE(false, true);
  Geometry g;
  g.dims = {70, 19, 13};
  const Mask air0 = pbtest::random_mask(g, 0.45, 5), roi_all = pbtest::random_mask(g, 0.9, 6);
  Mask air = air0;
  if (with_roi)
    for (int64_t i = 0; i < air.size(); ++i) air[i] = air[i] && roi_all[i];
  const Mask* roi = with_roi ? &roi_all : nullptr;
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2];
  auto open = [&](int64_t i) { return air[i] || (roi && !roi_all[i]); };
  std::vector<uint8_t> reached(size_t(air.size()), 0);
  std::vector<int64_t> queue;
  for (int64_t z = 0; z < nz; ++z)
    for (int64_t y = 0; y < ny; ++y)
      for (int64_t x = 0; x < nx; ++x) {
        const int64_t i = air.index(x, y, z);
        const bool border = x == 0 || y == 0 || z == 0 || x == nx - 1 || y == ny - 1 || z == nz - 1;
        if (open(i) && (border || (roi && !roi_all[i]))) reached[size_t(i)] = 1, queue.push_back(i);
      }
  for (size_t h = 0; h < queue.size(); ++h) {
    const int64_t i = queue[h], x = i % nx, y = (i / nx) % ny, z = i / (nx * ny);
    const int64_t d[6][3] = {{-1, 0, 0}, {1, 0, 0}, {0, -1, 0}, {0, 1, 0}, {0, 0, -1}, {0, 0, 1}};
    for (const auto& e : d) {
      const int64_t qx = x + e[0], qy = y + e[1], qz = z + e[2];
      if (qx < 0 || qy < 0 || qz < 0 || qx >= nx || qy >= ny || qz >= nz) continue;
      const int64_t q = air.index(qx, qy, qz);
      if (!reached[size_t(q)] && open(q)) reached[size_t(q)] = 1, queue.push_back(q);
    }
  }
  int64_t part = 0, pores = 0;
  Mask want(g);
  for (int64_t i = 0; i < air.size(); ++i) {
    want[i] = air[i] && !reached[size_t(i)];
    pores += want[i];
    part += (!roi || roi_all[i]) && !reached[size_t(i)];
  }
  REQUIRE(pores > 0);  // the case is not trivial
  Mask got = air;
  CHECK(air_to_pores(got, roi) == part);
  CHECK(got.buffer() == want.buffer());
  // The same rule with the ROI given as the runs of the voxels outside it, collected slab by slab as
  // a volume read by slabs gives them (methods/streaming.cpp), against the same flood fill.
  Mask open_mask(g), out_of_roi(g);
  for (int64_t i = 0; i < air.size(); ++i) open_mask[i] = open(i), out_of_roi[i] = roi && !roi_all[i];
  const LabelRuns c = label_runs(open_mask, nullptr, 6);
  RunCollector q(g);
  for (int64_t z = 0; z < nz; z += 4) q.add(out_of_roi.slice(z), std::min<int64_t>(4, nz - z));
  const std::vector<uint8_t> outside = outside_components(c, q.finish(6));
  CHECK(outside == outside_components(c, roi ? roi->data() : nullptr));
  CHECK(part_voxels(c, outside) == part);
  const Image<uint32_t> labels = label_volume(c);
  Mask by_runs(g);
  for (int64_t i = 0; i < air.size(); ++i) by_runs[i] = air[i] && !outside[labels[i]];
  CHECK(by_runs.buffer() == want.buffer());
}
