// Scoring: hand-computed overlap and matching on tiny volumes, the empty cases of
// metrics/README.md, digital spheres and cubes against analytic volume and surface, scikit-learn
// jaccard_score/f1_score on random masks, z-range and thread-count invariance.
#include <catch2/catch.hpp>
#include <omp.h>

#include <cmath>
#include <map>

#include "core/components.hpp"
#include "core/error.hpp"
#include "core/json.hpp"
#include "metrics/score.hpp"
#include "metrics/score_record.hpp"
#include "tests/helpers.hpp"
#include "tests/metrics_helpers.hpp"

using namespace pb;
using pbtest::ball;
using pbtest::random_mask;

namespace {

// Rows of the matching example (see the test below): a 12 x 1 x 5 volume, pores along x in rows z=1
// and z=3; 0-based x ranges, inclusive.
void set_x(Mask& m, int z, int x0, int x1) {
  for (int x = x0; x <= x1; ++x) m(x, 0, z) = 1;
}

}  // namespace

TEST_CASE("overlap counts and scores of a hand-computed 4 x 2 volume", "[metrics][score]") {
  // ref  row0: 1 1 0 0   row1: 1 0 0 0      pred row0: 1 0 1 0   row1: 1 0 0 0
  // tp = 2 ((0,0), (0,1)), fp = 1 ((2,0)), fn = 1 ((1,0)), tn = 8 - 4 = 4
  // Jaccard = 2 / (2+1+1) = 0.5; Dice = 2*2 / (4+1+1) = 2/3; precision = recall = 2/3;
  // volume similarity = 1 - |fn - fp| / (2tp + fp + fn) = 1; porosity 3/8 = 37.5 % on both sides.
  Geometry g;
  g.dims = {4, 2, 1};
  Mask ref(g), pred(g);
  ref(0, 0, 0) = ref(1, 0, 0) = ref(0, 1, 0) = 1;
  pred(0, 0, 0) = pred(2, 0, 0) = pred(0, 1, 0) = 1;
  const ScoreResult r = score(pred, ref, nullptr);
  CHECK(r.overlap.tp == 2);
  CHECK(r.overlap.fp == 1);
  CHECK(r.overlap.fn == 1);
  CHECK(r.overlap.tn == 4);
  CHECK(r.overlap.jaccard == Approx(0.5));
  CHECK(r.overlap.dice == Approx(2.0 / 3));
  CHECK(r.overlap.precision == Approx(2.0 / 3));
  CHECK(r.overlap.recall == Approx(2.0 / 3));
  CHECK(r.overlap.volume_similarity == Approx(1.0));
  CHECK(r.porosity_ref_pct == Approx(37.5));
  CHECK(r.porosity_bias_pp == Approx(0.0).margin(1e-12));
  // One slice, Jaccard 0.5; the bootstrap needs two defined slices, so the CI is undefined.
  CHECK(r.slice_jaccard_mean == Approx(0.5));
  CHECK(std::isnan(r.slice_jaccard_ci_lo));
}

TEST_CASE("matching rules on a hand-built example", "[metrics][score]") {
  // z=1: ref A x0-3, B x6, C x8-10;   pred P1 x0-1, P4 x5, P2 x8, P3 x10
  // z=3: ref D x0-1, E x3-4;          pred P5 x0-4
  // coverage:0.5: A covered 2/4 = 0.5 (hit), B 0/1 (miss), C 2/3 (hit), D and E 1 (hit) -> 4 hits;
  // false calls: P4; split: C (P2, P3); merged: P5 (D, E).
  // IoU: (A,P1) = 2/(4+2-2) = 0.5; (C,P2) = (C,P3) = 1/3; (D,P5) = (E,P5) = 2/(2+5-2) = 0.4.
  Geometry g;
  g.dims = {12, 1, 5};
  g.spacing_mm = {0.1, 0.1, 0.1};
  Mask ref(g), pred(g);
  set_x(ref, 1, 0, 3), set_x(ref, 1, 6, 6), set_x(ref, 1, 8, 10), set_x(ref, 3, 0, 1), set_x(ref, 3, 3, 4);
  set_x(pred, 1, 0, 1), set_x(pred, 1, 5, 5), set_x(pred, 1, 8, 8), set_x(pred, 1, 10, 10), set_x(pred, 3, 0, 4);
  ScoreOptions o;
  o.bootstrap_samples = 0;
  ScoreResult r = score(pred, ref, nullptr, o);
  REQUIRE(r.pores_ref.size() == 5);
  REQUIRE(r.pores_pred.size() == 5);
  CHECK(r.hits == 4);
  CHECK(r.misses == 1);
  CHECK_FALSE(r.pores_ref[1].matched);  // B
  CHECK(r.false_calls == 1);
  CHECK(r.split == 1);
  CHECK(r.merged == 1);
  // 1 false call in 60 voxels of 0.001 mm^3 = 6e-5 cm^3 -> 16666.7 per cm^3.
  CHECK(r.false_calls_per_cm3 == Approx(1 / 6e-5));
  CHECK(r.pores_ref[0].best_iou == Approx(0.5));
  CHECK(r.pores_ref[3].best_iou == Approx(0.4));

  o.match = parse_match_rule("any");
  CHECK(score(pred, ref, nullptr, o).hits == 4);
  o.match = parse_match_rule("coverage:0.6");  // A drops out (0.5 < 0.6)
  CHECK(score(pred, ref, nullptr, o).hits == 3);
  o.match = parse_match_rule("iou:0.5");  // only (A,P1)
  CHECK(score(pred, ref, nullptr, o).hits == 1);
  // iou:0.3 greedy: (A,P1) 0.5; then 0.4 ties by ref label: (D,P5), so E loses P5; (C,P2) 1/3.
  o.match = parse_match_rule("iou:0.3");
  r = score(pred, ref, nullptr, o);
  CHECK(r.hits == 3);
  CHECK(r.pores_ref[3].matched);
  CHECK_FALSE(r.pores_ref[4].matched);
  CHECK(r.pores_ref[2].matched);

  CHECK_THROWS_AS(parse_match_rule("coverage:1.5"), InputError);
  CHECK_THROWS_WITH(parse_match_rule("overlap"), Catch::Contains("overlap") && Catch::Contains("coverage:F"));
}

TEST_CASE("empty cases are defined as documented in metrics/README.md", "[metrics][score]") {
  Geometry g = pbtest::cube(12, 0.02);
  const Mask none(g);
  const Mask some = ball(g, 5.5, 5.5, 5.5, 3);
  ScoreOptions o;
  o.bootstrap_samples = 50;

  SECTION("both empty: ratios undefined, counts zero") {
    const ScoreResult r = score(none, none, nullptr, o);
    CHECK(std::isnan(r.overlap.jaccard));
    CHECK(std::isnan(r.overlap.dice));
    CHECK(std::isnan(r.overlap.precision));
    CHECK(std::isnan(r.overlap.recall));
    CHECK(std::isnan(r.overlap.volume_similarity));
    CHECK(r.porosity_ref_pct == 0);
    CHECK(r.porosity_bias_pp == 0);
    CHECK(std::isnan(r.porosity_rel_bias));
    CHECK(r.hits == 0);
    CHECK(r.false_calls == 0);
    CHECK(r.false_calls_per_cm3 == 0);
    CHECK_FALSE(r.pod.estimable);
    CHECK(r.pod.reason == "no targets");
    CHECK(std::isnan(r.sizes.ks));
    CHECK(std::isnan(r.surface.hd95_mm));
    CHECK(std::isnan(r.slice_jaccard_mean));
    const auto j = to_json(r);
    CHECK(j["overlap"]["jaccard"].is_null());
    CHECK(j["pod"]["a90_um"].is_null());
    CHECK(j["surface"]["assd_mm"].is_null());
  }
  SECTION("empty reference: Jaccard, Dice, precision 0; recall undefined; all pred pores false calls") {
    const ScoreResult r = score(some, none, nullptr, o);
    CHECK(r.overlap.jaccard == 0);
    CHECK(r.overlap.dice == 0);
    CHECK(r.overlap.precision == 0);
    CHECK(std::isnan(r.overlap.recall));
    CHECK(r.overlap.volume_similarity == 0);
    CHECK(std::isnan(r.porosity_rel_bias));
    CHECK(r.false_calls == 1);
    CHECK(std::isnan(r.sizes.ks));
    CHECK(std::isnan(r.surface.hd95_mm));
  }
  SECTION("empty prediction: precision undefined, recall 0, every ref pore missed, POD not estimable") {
    const ScoreResult r = score(none, some, nullptr, o);
    CHECK(r.overlap.jaccard == 0);
    CHECK(std::isnan(r.overlap.precision));
    CHECK(r.overlap.recall == 0);
    CHECK(r.misses == 1);
    CHECK(r.porosity_rel_bias == Approx(-1));
    CHECK_FALSE(r.pod.estimable);
    CHECK(r.pod.reason == "all targets missed");
    CHECK(std::isnan(r.surface.assd_mm));
  }
  SECTION("empty ROI: porosity and false-call rate undefined") {
    const Mask roi(g);
    const ScoreResult r = score(some, some, &roi, o);
    CHECK(r.roi_voxels == 0);
    CHECK(std::isnan(r.porosity_ref_pct));
    CHECK(std::isnan(r.false_calls_per_cm3));
    CHECK(r.pores_ref.empty());
  }
}

TEST_CASE("digital spheres: ESD within the discretisation bound, surface and sphericity near analytic", "[metrics][score]") {
  // Analytic: every voxel whose centre lies within r of the centre is inside the ball of radius
  // r + sqrt(3)/2, and the ball of radius r - sqrt(3)/2 is covered by such voxels, so
  // 2 (r - sqrt(3)/2) <= ESD <= 2 (r + sqrt(3)/2) (voxel units). Surface 4 pi r^2, sphericity 1.
  const double sp = 0.01;  // mm
  const double r = GENERATE(4.3, 7.0, 11.6);
  const Geometry g = pbtest::cube(int64_t(2 * r) + 6, sp);
  const double c = (g.dims[0] - 1) / 2.0 + 0.21;  // off-grid centre
  const Mask m = ball(g, c, c - 0.13, c + 0.07, r);
  const ScoreResult s = score(m, m, nullptr);
  REQUIRE(s.pores_ref.size() == 1);
  const Pore& p = s.pores_ref[0];
  INFO("r " << r << " esd_um " << p.esd_um << " surface_mm2 " << p.surface_mm2 << " sphericity " << p.sphericity);
  CHECK(p.esd_um >= 2 * (r - std::sqrt(3.0) / 2) * sp * 1000);
  CHECK(p.esd_um <= 2 * (r + std::sqrt(3.0) / 2) * sp * 1000);
  // Surface from the 13-direction Crofton estimate: within 2 % of 4 pi r^2 (a face count is ~50 % high).
  // Measured (this test, r = 4.3 / 7 / 11.6): -1.3 %, -0.19 %, -0.003 %; sphericity 1.015, 1.003,
  // 1.001. Held to the 2 % that metrics/score.cpp claims.
  CHECK(p.surface_mm2 == Approx(4 * M_PI * r * r * sp * sp).epsilon(0.02));
  CHECK(p.sphericity == Approx(1.0).epsilon(0.02));
  CHECK_FALSE(p.touches_border);
  for (int i = 0; i < 3; ++i) CHECK(p.centroid_mm[i] == Approx((i == 0 ? c : i == 1 ? c - 0.13 : c + 0.07) * sp).epsilon(0.01));
  CHECK(s.overlap.jaccard == 1);
  CHECK(s.surface.hd95_mm == 0);
}

TEST_CASE("a cube: surface 6 a^2 and sphericity pi^(1/3) 6^(2/3) / 6 = 0.806", "[metrics][score]") {
  // Analytic values for a cube of side a: V = a^3, S = 6 a^2, sphericity = pi^(1/3) (6V)^(2/3) / S.
  Geometry g = pbtest::cube(16, 1.0);
  Mask m(g);
  for (int z = 3; z < 13; ++z)
    for (int y = 3; y < 13; ++y)
      for (int x = 3; x < 13; ++x) m(x, y, z) = 1;
  const Pore p = score(m, m, nullptr).pores_ref.at(0);
  CHECK(p.voxels == 1000);
  // The 13-direction Crofton estimate is exact on average over orientations (spheres above, 1-2 %),
  // but low for planes normal to an axis: there 2 sum_i w_i |n.u_i| is about 0.9 instead of 1, plus
  // an edge term of order 1/a. So the cube is checked to 15 %, where a face count gives 600 exactly.
  CHECK(p.surface_mm2 == Approx(600).epsilon(0.15));
  CHECK(p.surface_mm2 < 600);
  CHECK(p.sphericity == Approx(std::cbrt(M_PI) * std::pow(6.0, 2.0 / 3) / 6).epsilon(0.15));
  CHECK(p.bbox == std::array<int64_t, 6>{3, 3, 3, 12, 12, 12});
}

TEST_CASE("pores touching the volume or ROI border are flagged", "[metrics][score]") {
  Geometry g = pbtest::cube(10);
  Mask m(g), roi(g, 1);
  m(0, 4, 4) = 1;                 // on the volume border
  m(5, 5, 5) = 1;                 // inside; ROI hole next to it below
  m(7, 2, 7) = 1;                 // inside, nothing near
  roi(5, 5, 4) = 0;
  const ScoreResult r = score(m, m, &roi);
  REQUIRE(r.pores_ref.size() == 3);
  // Raster order (z slowest): label 1 = (0,4,4), 2 = (5,5,5), 3 = (7,2,7).
  CHECK(r.pores_ref[0].touches_border);
  CHECK(r.pores_ref[1].touches_border);
  CHECK_FALSE(r.pores_ref[2].touches_border);
}

TEST_CASE("Jaccard, Dice, precision and recall agree with scikit-learn", "[metrics][score][ref]") {
  // Reference: sklearn.metrics jaccard_score, f1_score, precision_score, recall_score (Debian python3-sklearn).
  Geometry g;
  g.dims = {31, 27, 19};
  const Mask ref = random_mask(g, 0.3, 11);
  Mask pred = ref;
  std::mt19937_64 rng(5);
  std::bernoulli_distribution flip(0.2);
  for (int64_t i = 0; i < pred.size(); ++i)
    if (flip(rng)) pred[i] = !pred[i];
  pbtest::TempDir d;
  write_raw(AnyVolume(pred), d / "p.raw");
  write_raw(AnyVolume(ref), d / "r.raw");
  const auto out = pbtest::run_ref_script("metrics_overlap.py", d / "p.raw" + " " + d / "r.raw");
  INFO(out.err);
  REQUIRE(out.exit_code == 0);
  const auto j = nlohmann::json::parse(out.out);
  ScoreOptions o;
  o.surface_distances = false;
  const ScoreResult r = score(pred, ref, nullptr, o);
  CHECK(r.overlap.jaccard == Approx(j["jaccard"].get<double>()).epsilon(1e-12));
  CHECK(r.overlap.dice == Approx(j["dice"].get<double>()).epsilon(1e-12));
  CHECK(r.overlap.precision == Approx(j["precision"].get<double>()).epsilon(1e-12));
  CHECK(r.overlap.recall == Approx(j["recall"].get<double>()).epsilon(1e-12));
}

TEST_CASE("a z-range scores like the cropped volumes; results do not depend on threads", "[metrics][score]") {
  Geometry g;
  g.dims = {24, 20, 30};
  const Mask ref = random_mask(g, 0.08, 3), pred = random_mask(g, 0.08, 4);
  ScoreOptions o;
  o.z_begin = 7, o.z_end = 19;
  const ScoreResult a = score(pred, ref, nullptr, o);
  Geometry gc = g;
  gc.dims[2] = 12;
  Mask pc(gc), rc(gc);
  std::copy(pred.slice(7), pred.slice(19), pc.data());
  std::copy(ref.slice(7), ref.slice(19), rc.data());
  ScoreOptions oc;
  const ScoreResult b = score(pc, rc, nullptr, oc);
  CHECK(a.overlap.tp == b.overlap.tp);
  CHECK(a.overlap.fp == b.overlap.fp);
  CHECK(a.pores_ref.size() == b.pores_ref.size());
  CHECK(a.hits == b.hits);
  CHECK(a.pores_ref.at(0).bbox[2] == b.pores_ref.at(0).bbox[2] + 7);  // bbox in input indices
  CHECK(a.slice_jaccard.size() == 12);
  CHECK_THROWS_AS(score(pred, ref, nullptr, [] { ScoreOptions x; x.z_end = 99; return x; }()), InputError);

  const int before = omp_get_max_threads();
  omp_set_num_threads(1);
  const auto j1 = to_json(score(pred, ref, nullptr)).dump();
  omp_set_num_threads(3);
  const auto j3 = to_json(score(pred, ref, nullptr)).dump();
  omp_set_num_threads(before);
  CHECK(j1 == j3);
}

TEST_CASE("mismatched geometry is an input error naming the field", "[metrics][score]") {
  Geometry a = pbtest::cube(8), b = a;
  b.dims[2] = 9;
  CHECK_THROWS_WITH(score(Mask(a), Mask(b), nullptr), Catch::Contains("dims along z"));
  b = a;
  b.spacing_mm[0] = 2;
  CHECK_THROWS_WITH(score(Mask(a), Mask(b), nullptr), Catch::Contains("spacing along x"));
}

TEST_CASE("pore geometry and pair overlaps equal their per-voxel definitions", "[metrics][score]") {
  // Scoring works on runs (interval overlaps); this recomputes every quantity voxel by voxel from
  // the definitions in metrics/score.hpp, on the label volumes (labels checked against scipy in
  // test_metrics_ccl.cpp). Rows wider than 64 voxels and a part mask with holes included. 1 and 3
  // threads: pores crossing a thread's first slice are summed apart and added in afterwards.
  const int conn = GENERATE(6, 18, 26);
  const int threads = GENERATE(1, 3);
  Geometry g;
  g.dims = {70, 23, 17};
  g.spacing_mm = {0.01, 0.012, 0.015};
  const Mask ref = random_mask(g, 0.25, unsigned(conn)), pred = random_mask(g, 0.25, unsigned(conn + 1));
  const Mask roi = random_mask(g, 0.95, 17);
  ScoreOptions o;
  o.connectivity = conn;
  o.surface_distances = false;
  const int before = omp_get_max_threads();
  omp_set_num_threads(threads);
  const ScoreResult r = score(pred, ref, &roi, o);
  omp_set_num_threads(before);
  const Components cr = label_components(ref, &roi, conn), cp = label_components(pred, &roi, conn);
  REQUIRE(r.pores_ref.size() == cr.count);
  REQUIRE(r.pores_pred.size() == cp.count);

  std::vector<std::array<int, 3>> dirs;  // documented order of the 13 directions
  for (int dz = -1; dz <= 1; ++dz)
    for (int dy = -1; dy <= 1; ++dy)
      for (int dx = -1; dx <= 1; ++dx) {
        const int first = dz != 0 ? dz : (dy != 0 ? dy : dx);
        if (first > 0) dirs.push_back({dx, dy, dz});
      }
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2];
  auto inside = [&](int64_t x, int64_t y, int64_t z) { return x >= 0 && y >= 0 && z >= 0 && x < nx && y < ny && z < nz; };
  auto check_side = [&](const Components& c, const Buffer<Pore>& pores, const char* side) {
    struct Want {
      int64_t n = 0, sx = 0, sy = 0, sz = 0;
      std::array<int64_t, 6> bbox{INT64_MAX, INT64_MAX, INT64_MAX, -1, -1, -1};
      std::array<int64_t, 13> cross{};
      bool touch = false;
    };
    std::vector<Want> w(size_t(c.count) + 1);
    for (int64_t z = 0; z < nz; ++z)
      for (int64_t y = 0; y < ny; ++y)
        for (int64_t x = 0; x < nx; ++x) {
          const uint32_t l = c.labels(x, y, z);
          if (!l) continue;
          Want& a = w[l];
          ++a.n, a.sx += x, a.sy += y, a.sz += z;
          const int64_t p[3] = {x, y, z};
          for (int i = 0; i < 3; ++i) a.bbox[size_t(i)] = std::min(a.bbox[size_t(i)], p[i]), a.bbox[size_t(i) + 3] = std::max(a.bbox[size_t(i) + 3], p[i]);
          for (size_t k = 0; k < 13; ++k)
            for (int s = -1; s <= 1; s += 2) {
              const int64_t qx = x + s * dirs[k][0], qy = y + s * dirs[k][1], qz = z + s * dirs[k][2];
              if (!inside(qx, qy, qz) || c.labels(qx, qy, qz) != l) ++a.cross[k];
            }
          const int64_t f[6][3] = {{-1, 0, 0}, {1, 0, 0}, {0, -1, 0}, {0, 1, 0}, {0, 0, -1}, {0, 0, 1}};
          for (const auto& d : f) {
            const int64_t qx = x + d[0], qy = y + d[1], qz = z + d[2];
            if (!inside(qx, qy, qz) || !roi(qx, qy, qz)) a.touch = true;
          }
        }
    int bad = 0;
    for (uint32_t l = 1; l <= c.count && bad < 5; ++l) {
      const Pore& p = pores[l - 1];
      const Want& a = w[l];
      INFO(side << " label " << l << " connectivity " << conn << " threads " << threads);
      const bool ok = p.voxels == a.n && p.crossings == a.cross && p.touches_border == a.touch &&
                      p.bbox == a.bbox &&
                      p.centroid_mm[0] == Approx(g.spacing_mm[0] * double(a.sx) / double(a.n)) &&
                      p.centroid_mm[1] == Approx(g.spacing_mm[1] * double(a.sy) / double(a.n)) &&
                      p.centroid_mm[2] == Approx(g.spacing_mm[2] * double(a.sz) / double(a.n));
      CHECK(ok);
      bad += !ok;
    }
  };
  check_side(cr, r.pores_ref, "ref");
  check_side(cp, r.pores_pred, "pred");

  // Pair overlaps and per-slice counts, voxel by voxel.
  std::map<std::pair<uint32_t, uint32_t>, int64_t> pairs;
  std::vector<int64_t> tp(size_t(nz), 0), fp(size_t(nz), 0), fn(size_t(nz), 0);
  for (int64_t z = 0; z < nz; ++z)
    for (int64_t y = 0; y < ny; ++y)
      for (int64_t x = 0; x < nx; ++x) {
        const uint32_t a = cr.labels(x, y, z), b = cp.labels(x, y, z);
        if (a && b) ++pairs[{a, b}], ++tp[size_t(z)];
        if (!a && b) ++fp[size_t(z)];
        if (a && !b) ++fn[size_t(z)];
      }
  REQUIRE(r.pairs.size() == pairs.size());
  size_t k = 0;
  for (const auto& [key, v] : pairs) {
    CHECK(r.pairs[k].ref == key.first);
    CHECK(r.pairs[k].pred == key.second);
    CHECK(r.pairs[k].voxels == v);
    ++k;
  }
  CHECK(r.slice_tp == tp);
  CHECK(r.slice_fp == fp);
  CHECK(r.slice_fn == fn);
}

TEST_CASE("noise cannot buy hits: the volume-ratio cap of the hit rule", "[metrics][score][hit-rule]") {
  // Eight balls of radius 3 voxels; the prediction is the reference plus dense Bernoulli noise
  // (p = 0.3, above the 26-neighbour site-percolation threshold of about 0.1 on the cubic lattice:
  // Stauffer & Aharony, Introduction to Percolation Theory, table 2, from memory), so one predicted
  // component spans the volume and overlaps every ball. Without the cap every ball is a hit; with
  // the default cap (10x) none is, and the spanning component is a false call.
  const Geometry g = pbtest::cube(48, 0.01);
  Mask ref(g);
  for (int k = 0; k < 8; ++k) {
    const Mask b = ball(g, 10 + 24 * (k & 1), 10 + 24 * ((k >> 1) & 1), 10 + 24 * ((k >> 2) & 1), 3);
    for (int64_t i = 0; i < ref.size(); ++i) ref[i] |= b[i];
  }
  Mask pred = random_mask(g, 0.3, 11);
  for (int64_t i = 0; i < ref.size(); ++i) pred[i] |= ref[i];
  ScoreOptions o;
  o.bootstrap_samples = 0;
  o.surface_distances = false;
  o.max_volume_ratio = 0;  // the old rule
  const ScoreResult old_rule = score(pred, ref, nullptr, o);
  CHECK(old_rule.hits == 8);
  o.max_volume_ratio = ScoreOptions{}.max_volume_ratio;
  REQUIRE(o.max_volume_ratio == 10);
  const ScoreResult capped = score(pred, ref, nullptr, o);
  CHECK(capped.hits == 0);
  CHECK(capped.misses == 8);
  CHECK(capped.oversized_false_calls >= 1);
  CHECK(capped.false_calls >= old_rule.false_calls + 1);
  CHECK(capped.false_calls_per_target == Approx(double(capped.false_calls) / 8));

  // A faithful but generous prediction (every ball dilated by one voxel: (4/3)^3 = 2.4x the volume)
  // keeps every hit and makes no false call.
  Mask dil(g);
  for (int k = 0; k < 8; ++k) {
    const Mask b = ball(g, 10 + 24 * (k & 1), 10 + 24 * ((k >> 1) & 1), 10 + 24 * ((k >> 2) & 1), 4);
    for (int64_t i = 0; i < dil.size(); ++i) dil[i] |= b[i];
  }
  const ScoreResult generous = score(dil, ref, nullptr, o);
  CHECK(generous.hits == 8);
  CHECK(generous.false_calls == 0);
  CHECK(std::isfinite(generous.false_calls_per_cm3));
}

TEST_CASE("a bad volume-ratio cap is an input error naming the field", "[metrics][score][hit-rule]") {
  ScoreOptions o;
  o.max_volume_ratio = 0.5;
  try {
    o.validate();
    FAIL("accepted max_volume_ratio 0.5");
  } catch (const InputError& e) {
    CHECK_THAT(std::string(e.what()), Catch::Contains("max_volume_ratio"));
  }
}

TEST_CASE("score_record labels integer inputs slab by slab like score() on whole masks (issue 16)", "[metrics][score]") {
  // Reference: score() on masks made voxel by voxel by the rules of metrics/mask_input.hpp (its
  // figures are checked against scipy/scikit-learn above and in test_metrics_*.cpp). The record
  // converts the inputs a few slices at a time (RunCollector), reads a uint8 part mask in place and
  // releases pred and ref once labelled. Inputs: pred uint16 label volume (pores = 7), ref synthetic
  // truth labels 0/1/2 (pores = 2), a part mask of 0/255 (uint8) or 0/1 (int16); z ranges; 1 and 3
  // threads. Slabs hold 64 slices: the 300-slice volume crosses slab faces.
  const int nz = GENERATE(19, 300);
  const int threads = GENERATE(1, 3);
  Geometry g;
  g.dims = {70, 61, nz};
  g.spacing_mm = {0.01, 0.012, 0.015};
  const Mask a = random_mask(g, 0.2, 31), b = random_mask(g, 0.2, 32), part = random_mask(g, 0.9, 33);
  int64_t pred_voxels = 0;
  for (int64_t i = 0; i < a.size(); ++i) pred_voxels += a[i];
  Image<uint16_t> pv(g);
  Image<uint8_t> rv(g), ov8(g);
  Image<int16_t> ov16(g);
  for (int64_t i = 0; i < pv.size(); ++i) {
    pv[i] = a[i] ? 7 : uint16_t(3 * (i % 2));
    rv[i] = b[i] ? 2 : 1;
    ov8[i] = part[i] ? 255 : 0;
    ov16[i] = part[i];
  }
  ScoreArgs args;
  args.bootstrap = 100;
  args.pred_label = "7";
  const int before = omp_get_max_threads();
  omp_set_num_threads(threads);
  for (const std::string z : {"", "2:17"}) {
    for (int roi_kind = 0; roi_kind < 3; ++roi_kind) {
      INFO("slices " << nz << ", threads " << threads << ", z range '" << z << "', roi " << roi_kind);
      args.z_range = z;
      const ScoreSetup s = score_setup(args);
      const AnyVolume o8(ov8), o16(ov16);
      const ScoreInput roi_in{roi_kind == 1 ? view_of(o8) : view_of(o16), "part", "part", {}};
      int released = 0;
      const AnyVolume p(pv), r(rv);
      const ScoreRecord rec = score_record(s, {view_of(p), "pred", "pred", [&] { ++released; }},
                                           {view_of(r), "ref", "ref", [&] { ++released; }},
                                           roi_kind ? &roi_in : nullptr, false);
      CHECK(released == 2);
      const ScoreResult want = score(a, b, roi_kind ? &part : nullptr, s.options);
      CHECK(rec.pred_how == "label volume: pores = voxels equal to 7 (--pred-label), " + std::to_string(pred_voxels) + " voxels");
      CHECK(to_json(rec.result).dump() == to_json(want).dump());
    }
  }
  omp_set_num_threads(before);
}
