// Synthetic phantoms: recipe parsing and overrides, pore placement, and the voxel truth against
// hand-computed and analytic volumes.
#include <catch2/catch.hpp>
#include <cmath>

#include "core/error.hpp"
#include "synthetic/phantom.hpp"
#include "synthetic/recipe.hpp"

using namespace pb;
using namespace pb::synth;

namespace {

// A small recipe: 64^3 voxels of 10 um, one cylinder, no pores.
Recipe small_recipe() {
  Recipe r;
  r.name = "test";
  r.dims = {64, 64, 64};
  Shape s;
  s.kind = "cylinder";
  s.radius_mm = 0.25;
  s.height_mm = 0.5;
  r.shapes = {s};
  r.pores.clear();
  return r;
}

int64_t count_label(const Image<uint8_t>& l, uint8_t v) {
  int64_t n = 0;
  for (int64_t i = 0; i < l.size(); ++i) n += l[i] == v;
  return n;
}

}  // namespace

TEST_CASE("recipe: to_toml and parse_recipe round-trip every preset, overrides change one field", "[synth][recipe]") {
  for (const std::string& name : preset_names()) {
    const Recipe r = preset(name);
    CHECK(parse_recipe(to_toml(r), "round trip") == r);
  }
  const Recipe r = apply_overrides(preset("demo-small"),
                                   {"seed=3", "scan.projections=400,200", "pores.0.porosity_pct=2",
                                    "phantom.shape.0.radius_mm=0.3", "scan.filter=hann"});
  CHECK(r.seed == 3);
  CHECK(r.projections == std::vector<int>{400, 200});
  CHECK(r.pores[0].porosity_pct == 2.0);
  CHECK(r.shapes[0].radius_mm == 0.3);
  CHECK(r.filter == "hann");
  CHECK(r.pores[1] == preset("demo-small").pores[1]);
  // Doubles survive the text form exactly (recipe.toml must reproduce a run bit for bit).
  const Recipe q = apply_overrides(small_recipe(), {"phantom.voxel_size_um=10.123456789012345"});
  CHECK(parse_recipe(to_toml(q), "x").voxel_size_um == q.voxel_size_um);
}

TEST_CASE("recipe: unknown keys, bad values and unknown presets name the field", "[synth][recipe]") {
  const Recipe d = preset("demo-small");
  CHECK_THROWS_WITH(apply_overrides(d, {"scan.projektions=3"}), Catch::Contains("scan.projektions") &&
                                                                    Catch::Contains("scan.projections"));
  CHECK_THROWS_WITH(apply_overrides(d, {"scan.projections=0"}), Catch::Contains("scan.projections"));
  CHECK_THROWS_WITH(apply_overrides(d, {"scan.projections=-5"}), Catch::Contains("scan.projections"));
  CHECK_THROWS_WITH(apply_overrides(d, {"scan.i0=0"}), Catch::Contains("scan.i0"));
  CHECK_THROWS_WITH(apply_overrides(d, {"scan.detector_bins=100"}), Catch::Contains("scan.detector_bins") &&
                                                                        Catch::Contains("narrower"));
  CHECK_THROWS_WITH(apply_overrides(d, {"scan.arc_deg=90"}), Catch::Contains("scan.arc_deg"));
  CHECK_THROWS_WITH(apply_overrides(d, {"pores.0.type=crack"}), Catch::Contains("pores.0.type"));
  CHECK_THROWS_WITH(apply_overrides(d, {"phantom.supersampling=2"}), Catch::Contains("phantom.supersampling"));
  CHECK_THROWS_WITH(apply_overrides(d, {"scan.filter=parzen"}), Catch::Contains("scan.filter"));
  CHECK_THROWS_WITH(preset("demo-smal"), Catch::Contains("demo-small"));
  CHECK_THROWS_WITH(parse_recipe("[scan]\nprojections = \"many\"\n", "r.toml"),
                    Catch::Contains("r.toml") && Catch::Contains("scan.projections"));
  CHECK_THROWS_WITH(parse_recipe("seed = \n", "r.toml"), Catch::Contains("r.toml") && Catch::Contains("line 1"));
}

TEST_CASE("truth: a box with faces on voxel boundaries has exactly its voxel count", "[synth][phantom]") {
  // Hand count: 40 x 30 x 20 voxels of 10 um = 24000 material voxels, nothing else.
  // The volume is 64^3 with its centre on a voxel corner, so an even box edge ends on voxel faces.
  Recipe r = small_recipe();
  r.shapes[0].kind = "box";
  r.shapes[0].size_mm = {0.40, 0.30, 0.20};
  const Phantom ph = build_phantom(r);
  const Truth t = rasterize_truth(ph, 4);
  CHECK(count_label(t.labels, 1) == 24000);
  CHECK(count_label(t.labels, 2) == 0);
  CHECK(ph.part_volume_mm3 == Approx(0.4 * 0.3 * 0.2));
  int64_t part = 0;
  for (int64_t i = 0; i < t.part.size(); ++i) part += t.part[i];
  CHECK(part == 24000);
}

TEST_CASE("truth: cylinder and bore areas match pi r^2 h within the discretisation error", "[synth][phantom]") {
  // Analytic: V = pi (R^2 - r^2) h. Misclassified voxels straddle the curved surface, so the error
  // is bounded by the wall area times one voxel; the majority rule makes it cancel on average.
  Recipe r = small_recipe();
  r.shapes[0].kind = "gear-blank";
  r.shapes[0].radius_mm = 0.28;
  r.shapes[0].bore_radius_mm = 0.09;
  r.shapes[0].height_mm = 0.40;
  const Phantom ph = build_phantom(r);
  const Truth t = rasterize_truth(ph, 4);
  const double v_mm3 = M_PI * (0.28 * 0.28 - 0.09 * 0.09) * 0.40, voxel_mm3 = 1e-6;
  const double wall_mm2 = 2 * M_PI * (0.28 + 0.09) * 0.40;
  const double got = double(count_label(t.labels, 1)) * voxel_mm3;
  CHECK(std::abs(got - v_mm3) < wall_mm2 * 0.01);          // bound: wall area x voxel size
  CHECK(std::abs(got - v_mm3) / v_mm3 < 0.005);            // and far better in practice
  CHECK(t.labels(32, 32, 32) == 0);                         // the bore is air
  CHECK(t.labels(32 + 18, 32, 32) == 1);                    // the wall (0.18 mm from the axis) is material
}

TEST_CASE("pores: gas sphere volumes on the voxel grid match the analytic list", "[synth][phantom]") {
  Recipe r = small_recipe();
  PorePopulation gas;
  gas.porosity_pct = 3.0;
  gas.median_diameter_um = 60;
  gas.spread = 0.25;
  gas.min_diameter_um = 40;
  r.pores = {gas};
  const Phantom ph = build_phantom(r);
  REQUIRE(ph.pores.size() > 10);
  CHECK(ph.porosity_pct() == Approx(3.0).epsilon(0.021));  // placement stops within 2 % of the target
  const Truth t = rasterize_truth(ph, 4);
  const double voxel_mm3 = 1e-6;
  double analytic = 0, bound = 0;
  for (const Pore& p : ph.pores) {
    CHECK(p.type == "gas");
    CHECK(ph.part_sdf(p.centre_mm) < -p.bounding_radius_mm());  // closed: fully inside the part
    analytic += p.volume_mm3();
    bound += 4 * M_PI * p.semi_axes_mm[0] * p.semi_axes_mm[0] * 0.010;  // surface area x voxel
  }
  const double got = double(count_label(t.labels, 2)) * voxel_mm3;
  INFO("voxel pore volume " << got << " mm3, analytic " << analytic << " mm3");
  CHECK(std::abs(got - analytic) < bound);
  // Spheres of 4-8 voxels: the majority rule over 4^3 samples keeps the summed volume within 3 %
  // (errors cancel between pores; a bound from the lattice-point problem, not a published value).
  CHECK(std::abs(got - analytic) / analytic < 0.03);
}

TEST_CASE("pores: placement is deterministic from the seed and depends on it", "[synth][phantom]") {
  Recipe r = preset("demo-small");
  const Phantom a = build_phantom(r), b = build_phantom(r);
  REQUIRE(a.pores.size() == b.pores.size());
  for (size_t i = 0; i < a.pores.size(); ++i) CHECK(a.pores[i].centre_mm == b.pores[i].centre_mm);
  r.seed += 1;
  const Phantom c = build_phantom(r);
  CHECK(c.pores[0].centre_mm != a.pores[0].centre_mm);
}

TEST_CASE("pores: lack-of-fusion voids are flat, lie on layers; clusters gather; open pores are air", "[synth][phantom]") {
  Recipe r = small_recipe();
  r.shapes[0].radius_mm = 0.28;
  r.shapes[0].height_mm = 0.56;
  PorePopulation lof;
  lof.type = "lack-of-fusion";
  lof.porosity_pct = 0.5;
  lof.median_diameter_um = 100;
  lof.spread = 0.2;
  lof.thickness_um = 20;
  lof.layer_um = 40;
  PorePopulation cl;
  cl.type = "cluster";
  cl.porosity_pct = 0.5;
  cl.median_diameter_um = 30;
  cl.spread = 0.1;
  cl.pores_per_cluster = 6;
  cl.cluster_radius_um = 80;
  cl.open_count = 3;
  r.pores = {lof, cl};
  const Phantom ph = build_phantom(r);
  const double bottom = -0.28;
  int n_lof = 0, n_open = 0;
  for (const Pore& p : ph.pores) {
    if (p.type == "lack-of-fusion") {
      ++n_lof;
      CHECK(p.semi_axes_mm[2] == Approx(0.010));
      CHECK(p.semi_axes_mm[0] > 3 * p.semi_axes_mm[2]);
      const double layers = (p.centre_mm[2] - bottom) / 0.040;
      CHECK(std::abs(layers - std::round(layers)) < 1e-9);
    }
    if (p.open) {
      ++n_open;
      CHECK(std::abs(ph.part_sdf(p.centre_mm)) <= 0.5 * p.bounding_radius_mm());
    }
  }
  CHECK(n_lof > 0);
  CHECK(n_open == 3);
  // Cluster pores sit near other cluster pores: median nearest-neighbour distance below the
  // cluster radius (a uniform placement of this many pores would be several times sparser).
  std::vector<double> nn;
  for (const Pore& p : ph.pores) {
    if (p.type != "cluster" || p.open) continue;
    double best = 1e9;
    for (const Pore& q : ph.pores)
      if (&q != &p && q.type == "cluster" && !q.open)
        best = std::min(best, std::hypot(p.centre_mm[0] - q.centre_mm[0], p.centre_mm[1] - q.centre_mm[1],
                                         p.centre_mm[2] - q.centre_mm[2]));
    nn.push_back(best);
  }
  REQUIRE(nn.size() > 5);
  std::nth_element(nn.begin(), nn.begin() + nn.size() / 2, nn.end());
  CHECK(nn[nn.size() / 2] < 0.080);
  // Open pores are carved out of the part: their centres are background in the truth.
  const Truth t = rasterize_truth(ph, 4);
  for (const Pore& p : ph.pores) {
    if (!p.open) continue;
    int64_t idx[3];
    for (int i = 0; i < 3; ++i) idx[i] = std::llround((p.centre_mm[i] - ph.grid.origin_mm[i]) / 0.010);
    CHECK(t.labels(idx[0], idx[1], idx[2]) == 0);
  }
}

TEST_CASE("pores: an impossible porosity says what was reached", "[synth][phantom]") {
  Recipe r = small_recipe();
  PorePopulation gas;
  gas.porosity_pct = 35;
  gas.median_diameter_um = 150;
  gas.spread = 0.1;
  r.pores = {gas};
  r.placement_budget = 3000;
  CHECK_THROWS_WITH(build_phantom(r), Catch::Contains("pores.0") && Catch::Contains("reached") &&
                                          Catch::Contains("35"));
  // A part that does not fit the volume is refused with the axis named.
  Recipe big = small_recipe();
  big.shapes[0].radius_mm = 0.4;
  CHECK_THROWS_WITH(build_phantom(big), Catch::Contains("phantom.shape.0") && Catch::Contains("along x"));
}
