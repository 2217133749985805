// Paired real scans in a suite (issue 12): a series of fast scans against one reference, each with
// its own geometry, registered and resampled onto the fast scan's grid; bad entries refused at the
// preflight. The end-to-end case uses posed synthetic scans (known transform) read as if they were
// real files (no truth is handed to the suite).
#include <Eigen/Dense>
#include <catch2/catch.hpp>
#include <fstream>

#include "core/error.hpp"
#include "core/io.hpp"
#include "core/json.hpp"
#include "suites/layout.hpp"
#include "suites/preflight.hpp"
#include "suites/results.hpp"
#include "suites/suite.hpp"
#include "tests/helpers.hpp"
#include "tests/paired_helpers.hpp"

using namespace pb;
using pbtest::run_cli;
using pbtest::TempDir;
using Json = nlohmann::ordered_json;
namespace fs = std::filesystem;

namespace {

void write_file(const std::string& path, const std::string& text) { write_text_atomic(path, text); }
Json read_json(const fs::path& path) { return suite::read_json_file(path.string()); }  // suites/layout.hpp

// A small gear blank (56^3 voxels of 16 um) with gas pores and four dense reference spheres on
// the fixture around it (common practice, no source): the reference at 1200 projections, fast
// scans at 400 and 200. With `posed`, the part is re-mounted for the fast scans: shifted by
// (1, -3, 2.5) voxels and turned 1.5 degrees about z (an ordinary re-mount, issue 12).
std::string recipe(bool posed) {
  std::string r = R"(name = "paired-test"
seed = 11
[phantom]
dims = [56, 56, 56]
voxel_size_um = 16.0
material = "pa-gf30"
[[phantom.shape]]
kind = "gear-blank"
radius_mm = 0.36
bore_radius_mm = 0.10
height_mm = 0.70
[[phantom.marker]]
centre_mm = [0.30, 0.30, -0.25]
radius_mm = 0.04
[[phantom.marker]]
centre_mm = [-0.32, 0.28, 0.05]
radius_mm = 0.04
[[phantom.marker]]
centre_mm = [0.31, -0.30, 0.28]
radius_mm = 0.04
[[phantom.marker]]
centre_mm = [-0.29, -0.31, -0.12]
radius_mm = 0.04
[[pores]]
type = "gas"
porosity_pct = 2.0
median_diameter_um = 70.0
spread = 0.3
min_diameter_um = 40.0
[scan]
projections = [400, 200]
reference_projections = 1200
i0 = [200000.0]
)";
  if (posed)
    r += "[[scan.pose]]\nprojections = 0\ntranslation_mm = [0.016, -0.048, 0.040]\nrotation_deg = [0.0, 0.0, 1.5]\n";
  return r;
}

std::string paired_suite(const fs::path& data, const std::string& align, const std::string& transform = "",
                         const std::string& resample = "grey") {
  const std::string tr = transform.empty() ? "" : ", transform = \"" + transform + "\"";
  return "[suite]\nname = \"paired-" + align + "\"\n"
         "[[dataset]]\nname = \"blank\"\nkind = \"paired\"\nreference_resample = \"" + resample + "\"\n"
         "reference_scan = \"" + (data / "reference-scan.mha").string() + "\"\n"
         "reference_method = \"otsu\"\nreference_projections = 1200\n"
         "part_mask = \"" + (data / "part-mask.mha").string() + "\"\n"
         + (transform.empty() ? "align = \"" + align + "\"\n" : std::string()) +
         "scans = [ { path = \"" + (data / "scan-400p.mha").string() + "\", projections = 400" + tr + " },\n"
         "          { path = \"" + (data / "scan-200p.mha").string() + "\", projections = 200, label = \"fast-200p\"" + tr + " } ]\n"
         "[[method]]\nname = \"otsu\"\n"
         "[calibration]\nfraction = 0.3\ngap_slices = 2\n"
         "[criteria]\nmin_jaccard = 0.3\n";
}

// Test-slice metric of the otsu cell of each scan.
std::map<std::string, double> metric_by_scan(const Json& res, const std::string& metric) {
  std::map<std::string, double> m;
  for (const auto& c : res["cells"]) {
    REQUIRE(c["status"] == "ok");
    m[c["scan"].get<std::string>()] = suite::metric_value(c, "test", metric);
  }
  return m;
}

}  // namespace

TEST_CASE("a posed synthetic pair read as real files: registered Jaccard and hits match the aligned control",
          "[paired][suite]") {
  TempDir d;
  write_file(d / "posed.toml", recipe(true));
  const auto syn = run_cli("--quiet synth " + (d / "posed.toml") + " -o " + (d / "posed"));
  INFO(syn.err);
  REQUIRE(syn.exit_code == 0);
  // The aligned control: the same files with the exact transform the synthesis used (fast-scan mm
  // -> reference mm = the inverse of phantom -> scan; the reference scan is never posed), resampled
  // the same way: what a perfect registration would give.
  const Json manifest = read_json(d.path / "posed" / "manifest.json");
  Eigen::Matrix3d R;
  Eigen::Vector3d t;
  for (const auto& f : manifest["files"])
    if (f["file"] == "scan-400p.mha")
      for (int r = 0; r < 3; ++r) {
        for (int k = 0; k < 3; ++k) R(r, k) = f["pose"]["phantom_to_scan"]["rotation"][r][k].get<double>();
        t[r] = f["pose"]["phantom_to_scan"]["translation_mm"][r].get<double>();
      }
  const Eigen::Matrix3d Ri = R.transpose();
  const Eigen::Vector3d ti = -(Ri * t);
  Json T = {{"rotation", Json::array()}, {"translation_mm", {ti[0], ti[1], ti[2]}}, {"scale", 1.0}};
  for (int r = 0; r < 3; ++r) T["rotation"].push_back({Ri(r, 0), Ri(r, 1), Ri(r, 2)});
  write_file(d / "known.json", T.dump());
  write_file(d / "control-suite.toml", paired_suite(d.path / "posed", "none", (d.path / "known.json").string()));
  write_file(d / "auto-suite.toml", paired_suite(d.path / "posed", "auto"));
  write_file(d / "none-suite.toml", paired_suite(d.path / "posed", "none"));
  Json res[3];
  const char* names[3] = {"control", "auto", "none"};
  for (int i = 0; i < 3; ++i) {
    const auto r = run_cli("run " + (d / (std::string(names[i]) + "-suite.toml")) + " -o " + (d / (std::string("out-") + names[i])));
    INFO(names[i] << ": " << r.out << r.err);
    REQUIRE(r.exit_code <= 1);  // 1: a criterion failed (align = none is expected to)
    res[i] = read_json(d.path / (std::string("out-") + names[i]) / "results.json");
    // Two scans of the series, one method; the reference segmented once.
    REQUIRE(res[i]["cells"].size() == 2);
    if (i == 2) CHECK_THAT(r.err, Catch::Contains("align = \"auto\""));  // the shift alarm names the fix
  }
  const auto jc = metric_by_scan(res[0], "jaccard"), ja = metric_by_scan(res[1], "jaccard"), jn = metric_by_scan(res[2], "jaccard");
  const auto hc = metric_by_scan(res[0], "hits"), ha = metric_by_scan(res[1], "hits"), hn = metric_by_scan(res[2], "hits");
  for (const char* scan : {"scan-400p", "fast-200p"}) {
    INFO(scan << ": Jaccard control " << jc.at(scan) << ", registered " << ja.at(scan) << ", unregistered " << jn.at(scan)
              << "; hits " << hc.at(scan) << " / " << ha.at(scan) << " / " << hn.at(scan));
    // Goal of issue 12: Jaccard after registration within 2 % of the aligned control.
    CHECK(std::abs(ja.at(scan) - jc.at(scan)) <= 0.02 * jc.at(scan));
    CHECK(std::abs(ha.at(scan) - hc.at(scan)) <= std::max(1.0, 0.05 * hc.at(scan)));
    CHECK(jn.at(scan) < 0.5 * jc.at(scan));
    CHECK(hn.at(scan) < 0.5 * hc.at(scan));
  }
  // The registration record: converged, the known rotation (1.5 degrees about z) recovered.
  const Json& ds = res[1]["datasets"][0];
  REQUIRE(ds["variants"].size() == 2);
  for (const auto& v : ds["variants"]) {
    const Json& reg = v["alignment"]["registration"];
    REQUIRE(reg.is_object());
    CHECK(reg["converged"] == true);
    INFO("rotation found " << reg["transform"]["rotation_deg"].get<double>() << " deg");
    CHECK(reg["transform"]["rotation_deg"].get<double>() == Approx(1.5).margin(0.1));  // issue 12: below 0.1 degree
  }
  CHECK(res[0]["datasets"][0]["variants"][0]["alignment"]["registration"]["method"] == "given");
  for (const auto& v : res[2]["datasets"][0]["variants"]) {
    CHECK(v["alignment"]["shift_check"]["magnitude_voxel"].get<double>() > 0.5);
    REQUIRE(v["warnings"].size() == 1);
    CHECK_THAT(v["warnings"][0].get<std::string>(), Catch::Contains("align = \"auto\""));
  }
  // The reference on the fast grid: the grey reference resampled and re-thresholded at the
  // threshold otsu chose (the default) is closer to the synthetic truth (exact, closed pores = label
  // 2 of the posed scan's truth labels) than the reference pores resampled by nearest neighbour.
  write_file(d / "mask-suite.toml", paired_suite(d.path / "posed", "auto", "", "mask"));
  const auto rm = run_cli("run " + (d / "mask-suite.toml") + " -o " + (d / "out-mask"));
  REQUIRE(rm.exit_code <= 1);
  auto ref_jaccard = [&](const std::string& out) {
    const auto r = run_cli("score --pred " + (d.path / out / "data" / "blank" / "reference-pores-scan-400p.mha").string() +
                           " --ref " + (d.path / "posed" / "truth-labels-400p.mha").string() + " --ref-label 2 --roi " +
                           (d.path / "posed" / "part-mask-400p.mha").string() + " --json " + (d.path / (out + ".json")).string());
    REQUIRE(r.exit_code == 0);
    return read_json(d.path / (out + ".json"))["overlap"]["jaccard"].get<double>();
  };
  const double grey = ref_jaccard("out-auto"), nn = ref_jaccard("out-mask");
  INFO("reference against the truth: grey " << grey << ", nearest neighbour " << nn);
  CHECK(grey > nn);
  CHECK_THAT(ds["reference"]["resample"].get<std::string>(), Catch::Contains("grey") && Catch::Contains("threshold"));
  // Real series get the scan-recipe advice (projections from the entries).
  REQUIRE(res[1]["advice"].size() == 1);
  CHECK(res[1]["advice"][0]["axis"] == "projections");
  // The validation record shows the registration.
  std::ifstream f(d.path / "out-auto" / "validation-record.md");
  std::stringstream ss;
  ss << f.rdbuf();
  CHECK_THAT(ss.str(), Catch::Contains("| scan-400p | auto |"));
}

TEST_CASE("paired suites: bad entries are refused at the preflight naming the suite, field and value", "[paired][suite]") {
  TempDir d;
  Image<uint16_t> v(Geometry{{8, 8, 8}, {0.01, 0.01, 0.01}, {0, 0, 0}});
  write_volume(v, d / "ref.mha");
  write_volume(v, d / "fast.mha");
  write_raw(AnyVolume(v), d / "fast.raw");
  write_volume(v, d / "fast.tif");
  Image<uint8_t> part(Geometry{{9, 8, 8}, {0.01, 0.01, 0.01}, {0, 0, 0}});
  write_volume(part, d / "part9.mha");
  const std::string head = "[[dataset]]\nname = \"p\"\nkind = \"paired\"\nreference_scan = \"ref.mha\"\nreference_method = \"otsu\"\n";
  const std::string tail = "[[method]]\nname = \"otsu\"\n";
  auto expect = [&](const std::string& body, const std::vector<std::string>& words) {
    pbtest::expect_suite_refused(d / "s.toml", head + body + tail, words);
  };
  expect("scans = [ \"fast.mha\", \"nope.mha\" ]\n", {"scans[2]", "file not found", "nope.mha"});
  expect("scans = [ { path = \"fast.mha\", projection = 400 } ]\n", {"unknown key 'projection'", "scans[1]"});
  expect("scans = [ { path = \"fast.raw\", raw = { dims = [8, 8, 8], type = \"uint16\" } } ]\n", {"fast.raw", "spacing_mm"});
  expect("scans = [ { path = \"fast.tif\" } ]\n", {"fast.tif", "spacing_mm"});
  expect("scans = [ { path = \"fast.mha\", spacing_mm = [0.02, 0.02, 0.02] } ]\n", {"conflicting geometry", "fast.mha", "0.02"});
  expect("scans = [ { path = \"fast.mha\", spacing_mm = [0.01, 0.01, 0.01], raw = { dims = [8, 8, 8], type = \"uint16\" } } ]\n",
         {"conflicting geometry", "'raw'", "fast.mha"});
  expect("part_mask = \"part9.mha\"\nscans = [ \"fast.mha\" ]\n", {"part_mask", "conflicting geometry", "part9.mha"});
  expect("align = \"sometimes\"\nscans = [ \"fast.mha\" ]\n", {"sometimes", "auto, markers, intensity, none"});
  expect("scans = [ { path = \"fast.mha\", projections = 400 }, { path = \"fast.mha\", projections = 400 } ]\n",
         {"label 'scan-400p' is used twice"});
  expect("scan = \"fast.mha\"\nscans = [ \"fast.mha\" ]\n", {"exactly one of 'scans'"});
  // A reference mask cannot be registered.
  write_file(d / "m.toml", "[[dataset]]\nname = \"p\"\nkind = \"paired\"\nreference_mask = \"ref.mha\"\nalign = \"auto\"\n"
                           "scans = [ \"fast.mha\" ]\n" + tail);
  CHECK_THROWS_WITH(suite::load_suite(d / "m.toml"), Catch::Contains("needs a 'reference_scan'"));
  // Per-file geometry: a raw scan and a TIFF scan beside an MHA reference, all accepted.
  write_file(d / "ok.toml", head + "scans = [ { path = \"fast.raw\", spacing_mm = [0.01, 0.01, 0.01], raw = { dims = [8, 8, 8], type = \"uint16\" } },\n"
                                   "          { path = \"fast.tif\", spacing_mm = [0.01, 0.01, 0.01], label = \"tif\" } ]\n" + tail);
  const suite::Suite ok = suite::load_suite(d / "ok.toml");
  CHECK_NOTHROW(suite::preflight(ok));
  REQUIRE(ok.datasets[0].scans.size() == 2);
  CHECK(ok.datasets[0].scans[0].label == "scan-1");
  CHECK(ok.datasets[0].scans[1].label == "tif");
  CHECK(ok.datasets[0].scans[0].align == "auto");  // the default with a reference scan
  // The older form still parses: one scan with the dataset's geometry, a series of one.
  write_file(d / "old.toml", head + "scan = \"fast.mha\"\nprojections = 400\n" + tail);
  const suite::Suite old = suite::load_suite(d / "old.toml");
  REQUIRE(old.datasets[0].scans.size() == 1);
  CHECK(old.datasets[0].scans[0].label == "scan");
  CHECK(old.datasets[0].scans[0].projections == 400);
}

TEST_CASE("TIFF: outputs refused (no z spacing), inputs read at 1 mm warned, -o help lists the formats written",
          "[paired][io]") {
  TempDir d;
  Image<uint16_t> v(Geometry{{8, 8, 8}, {0.01, 0.01, 0.02}, {0, 0, 0}});
  for (int64_t i = 0; i < v.size(); ++i) v[i] = uint16_t(i % 7 == 0 ? 100 : 1000);
  write_volume(v, d / "scan.mha");
  write_volume(v, d / "scan.tif");  // a TIFF input, as a scanner would give it
  // ITK's TIFF keeps no z spacing (measured: written at 0.02 mm, read back at 1 mm): refused as output.
  CHECK(read_volume(d / "scan.tif").geometry().spacing_mm[2] == 1.0);
  auto r = run_cli("segment otsu " + (d / "scan.mha") + " -o " + (d / "pores.tif"));
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("pores.tif") && Catch::Contains("no z spacing"));
  CHECK_FALSE(fs::exists(d.path / "pores.tif"));
  r = run_cli("segment otsu " + (d / "scan.mha") + " -o " + (d / "pores.nii.gz"));
  CHECK(r.exit_code == 0);
  CHECK(read_volume(d / "pores.nii.gz").geometry().spacing_mm[2] == Approx(0.02));
  // A TIFF input without --spacing is read at 1 mm, with a warning naming the fix.
  r = run_cli("info " + (d / "scan.tif"));
  CHECK(r.exit_code == 0);
  CHECK_THAT(r.err, Catch::Contains("scan.tif") && Catch::Contains("--spacing"));
  r = run_cli("info " + (d / "scan.tif") + " --spacing 0.01,0.01,0.02");
  CHECK(r.err.find("warning") == std::string::npos);
  // Help names the formats really written.
  for (const char* cmd : {"segment", "consensus"}) {
    r = run_cli(std::string(cmd) + " --help");
    CHECK_THAT(r.out, Catch::Contains(".nii.gz"));
  }
}
