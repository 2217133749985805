// Grey resampling of a paired reference (issue 12) for the references that have no single
// threshold: a STAPLE consensus of raters and a local method. The fast scan lies on another grid
// (10.4 um against the reference's 10 um); the reference scan is resampled linearly onto it and
// the reference made again there. Source of every expected mask: tests/ref/paired_grey_scipy.py
// with /usr/bin/python3 — scipy.ndimage.affine_transform (order 1) for the resampling,
// skimage.filters.threshold_sauvola for the local method, scipy.ndimage.label for the pores, and
// STAPLE's E-step (Warfield, Zou & Wells 2004) with the parameters the record states.
#include <catch2/catch.hpp>

#include "core/io.hpp"
#include "core/json.hpp"
#include "core/resample.hpp"
#include "methods/pores.hpp"
#include "metrics/staple.hpp"
#include "suites/layout.hpp"
#include "tests/helpers.hpp"
#include "tests/json_files.hpp"

using namespace pb;
using Json = nlohmann::ordered_json;
using pbtest::TempDir;

namespace {

// 32^3 voxels of 10 um, material 1000; balls of radius 2-3 voxels at grey 100 (every 5th voxel at
// 200); single voxels at 400 that only a high threshold calls pores.
Image<uint16_t> reference_scan() {
  const Geometry g{{32, 32, 32}, {0.01, 0.01, 0.01}, {0, 0, 0}};
  Image<uint16_t> v(g);
  for (int64_t i = 0; i < v.size(); ++i) v[i] = 1000;
  const int balls[][4] = {{8, 8, 5, 2}, {22, 10, 8, 3}, {10, 22, 15, 3}, {22, 22, 20, 2}, {15, 15, 25, 3}};
  for (const auto& b : balls) {
    int k = 0;
    for (int z = b[2] - b[3]; z <= b[2] + b[3]; ++z)
      for (int y = b[1] - b[3]; y <= b[1] + b[3]; ++y)
        for (int x = b[0] - b[3]; x <= b[0] + b[3]; ++x)
          if ((x - b[0]) * (x - b[0]) + (y - b[1]) * (y - b[1]) + (z - b[2]) * (z - b[2]) <= b[3] * b[3])
            v(x, y, z) = ++k % 5 == 0 ? 200 : 100;
  }
  for (int z = 4; z < 28; z += 5)
    for (int y = 4; y < 28; y += 9) v(27, y, z) = 400;
  return v;
}

const Geometry kFast{{30, 30, 30}, {0.0104, 0.0104, 0.0104}, {0, 0, 0}};

int64_t differing(const Mask& a, const Mask& b) {
  int64_t n = 0;
  for (int64_t i = 0; i < a.size(); ++i) n += a[i] != b[i];
  return n;
}

Mask read_u8(const std::string& path, const Geometry& g) {
  ReadOptions o;
  RawSpec r;
  r.dims = g.dims, r.type = VoxelType::u8, r.spacing_mm = g.spacing_mm;
  o.raw = r;
  return read_volume(path, o).to_mask();
}

}  // namespace

TEST_CASE("grey resampling for a consensus and a local-method reference, against scipy and scikit-image",
          "[paired][suite][staple][resample]") {
  TempDir d;
  const Image<uint16_t> ref = reference_scan();
  write_volume(ref, d / "ref.mha");
  write_raw(AnyVolume(AnyVolume(ref).to_float()), d / "ref.raw");
  // The fast scan's content does not enter the reference; its grid does.
  write_volume(resample_linear(AnyVolume(ref).to_float(), kFast, SimilarityTransform()), d / "fast.mha");
  const std::string scans = "align = \"none\"\nscans = [ { path = \"fast.mha\", projections = 400, label = \"fast\" } ]\n";
  pbtest::write_file(d / "s.toml",
                     "[suite]\nname = \"grey\"\n"
                     "[[dataset]]\nname = \"consensus\"\nkind = \"paired\"\nreference_scan = \"ref.mha\"\n"
                     "reference_consensus = [ { name = \"manual\", label = \"low\", params = { threshold = 150 } },\n"
                     "  { name = \"manual\", label = \"mid\", params = { threshold = 300 } },\n"
                     "  { name = \"manual\", label = \"high\", params = { threshold = 550 } } ]\n" + scans +
                     "[[dataset]]\nname = \"local\"\nkind = \"paired\"\nreference_scan = \"ref.mha\"\n"
                     "reference_method = \"sauvola\"\nreference_params = [\"window=7\", \"k=0.2\", \"r=450\"]\n" + scans +
                     "[[method]]\nname = \"otsu\"\n[calibration]\nfraction = 0.3\ngap_slices = 2\n");
  const auto run = pbtest::run_cli("run " + (d / "s.toml") + " -o " + (d / "out"));
  INFO(run.out << run.err);
  REQUIRE(run.exit_code <= 1);
  const Json res = suite::read_json_file((d.path / "out" / "results.json").string());
  const std::string scale = "1.04";  // 0.0104 / 0.01: fast index i samples reference index 1.04 i

  SECTION("consensus: each rater re-applied on the resampled scan, fused by STAPLE's fitted rule") {
    const Json& ds = res["datasets"][0];
    const Json& cs = ds["reference"]["consensus"];
    CHECK_THAT(ds["reference"]["resample"].get<std::string>(), Catch::StartsWith("grey:") && Catch::Contains("STAPLE's rule"));
    CHECK_THAT(ds["variants"][0]["alignment"]["resampled"]["mask"].get<std::string>(),
               Catch::Contains("grey resampled (linear)") && Catch::Contains("re-applied there at threshold 550"));
    std::string p, q;
    for (const auto& r : cs["raters"]) {
      p += (p.empty() ? "" : ",") + std::to_string(r["sensitivity"].get<double>());
      q += (q.empty() ? "" : ",") + std::to_string(r["specificity"].get<double>());
    }
    // std::to_string keeps 6 decimals: enough here, every W is far from 0.5 unless raters disagree
    // 2:1, where the fitted rule and the majority agree.
    const auto py = pbtest::run_ref_script("paired_grey_scipy.py", d / "ref.raw" + " 32 32 32 30 30 30 " + scale + " " +
                                                                     (d / "want.raw") + " manual:150 manual:300 manual:550 --fuse " +
                                                                     p + " " + q + " " + std::to_string(cs["prior"].get<double>()));
    INFO(py.err);
    REQUIRE(py.exit_code == 0);
    const Json want_rec = Json::parse(py.out);
    const Mask want = read_u8(d / "want.raw", kFast);
    const Mask got = read_volume((d.path / "out/data/consensus/reference-pores-fast.mha").string()).to_mask();
    REQUIRE(got.geometry().dims == kFast.dims);
    CHECK(want_rec["pore_voxels"].get<int64_t>() > 100);
    // ITK interpolates in float, scipy in double: only voxels within 1e-3 of a threshold may differ.
    CHECK(differing(got, want) <= want_rec["near_threshold"].get<int64_t>());
    // And it is not what nearest neighbour on the consensus gives.
    const Mask nearest = resample_nearest(read_volume((d.path / "out/data/consensus/reference-pores.mha").string()).to_mask(),
                                          kFast, SimilarityTransform());
    CHECK(differing(nearest, want) > 10);
    // The validation record says what was done, not "nearest neighbour".
    const std::string record = pbtest::read_text((d.path / "out" / "validation-record.md").string());
    CHECK_THAT(record, Catch::Contains("where that grid or pose differs from the reference's: grey: the reference scan "
                                       "resampled linearly") && Catch::Contains("sauvola re-run there"));
  }
  SECTION("local method: sauvola re-run on the resampled scan") {
    const Json& ds = res["datasets"][1];
    CHECK_THAT(ds["reference"]["resample"].get<std::string>(), Catch::StartsWith("grey:") && Catch::Contains("sauvola re-run"));
    const auto py = pbtest::run_ref_script("paired_grey_scipy.py", d / "ref.raw" + " 32 32 32 30 30 30 " + scale + " " +
                                                                     (d / "want.raw") + " sauvola:7:0.2:450");
    INFO(py.err);
    REQUIRE(py.exit_code == 0);
    const Mask want = read_u8(d / "want.raw", kFast);
    const Mask got = read_volume((d.path / "out/data/local/reference-pores-fast.mha").string()).to_mask();
    REQUIRE(got.geometry().dims == kFast.dims);
    const int64_t pores = count_nonzero(want);
    CHECK(pores > 100);
    // Sauvola's window statistics in float against double (as tests/test_local.cpp): >= 99.9 % of
    // the voxels agree, and at most 2 % of the pore voxels differ.
    const int64_t diff = differing(got, want);
    CHECK(double(diff) <= 0.001 * double(got.size()));
    CHECK(double(diff) <= 0.02 * double(pores));
  }
}

TEST_CASE("staple_fuse is STAPLE's E-step: it reproduces the consensus with STAPLE's own parameters", "[staple]") {
  // Source: Warfield, Zou & Wells (2004), the E-step for W; the analytic case: three raters over a
  // known truth with disjoint errors (every voxel has a 2:1 majority for the truth), parameters as
  // the M-step gives them (the shares of marked truth and unmarked background voxels).
  const Geometry g{{20, 20, 20}, {1, 1, 1}, {0, 0, 0}};
  Mask truth(g), a(g), b(g), c(g);
  for (int64_t i = 0; i < truth.size(); ++i) truth[i] = (i / 7) % 3 == 0;
  for (int64_t i = 0; i < truth.size(); ++i) a[i] = b[i] = c[i] = truth[i];
  int64_t t = count_nonzero(truth), a_miss = 0, c_false = 0;
  for (int64_t i = 0; i < truth.size(); i += 11) {
    if (truth[i] && i % 2) a[i] = 0, ++a_miss;
    if (!truth[i] && i % 2 == 0) c[i] = 1, ++c_false;
  }
  const double n = double(truth.size());
  const Mask fused = staple_fuse({&a, &b, &c}, {1.0 - double(a_miss) / double(t), 1.0, 1.0},
                                 {1.0, 1.0, 1.0 - double(c_false) / (n - double(t))},
                                 double(count_nonzero(a) + count_nonzero(b) + count_nonzero(c)) / (3 * n));
  CHECK(differing(fused, truth) == 0);
  const StapleResult st = staple({&a, &b, &c}, {"a", "b", "c"});
  const Mask again = staple_fuse({&a, &b, &c}, st.sensitivity, st.specificity, st.prior);
  CHECK(differing(again, st.consensus) == 0);
}
