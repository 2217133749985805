// A consensus reference in a paired suite (issue 11): several raters segment the high-quality
// scan, STAPLE (Warfield, Zou & Wells 2004, "Simultaneous truth and performance level estimation
// (STAPLE)", IEEE Trans. Med. Imaging 23(7):903-921) combines them, and the consensus is the
// reference. The case has a known answer: the reference scan is built from a known truth so that
// three manual thresholds give raters whose flipped voxels are known and never shared by two
// raters (the majority is always right). The consensus is then the truth, W is 0 or 1 everywhere,
// and the paper's M-step (p_j = sum_{D_ij=1} W_i / sum W_i, q_j = sum_{D_ij=0} (1-W_i) / sum (1-W_i);
// equation numbers not given: from memory of the paper) makes each rater's sensitivity the share of truth voxels it marks and its
// specificity the share of non-truth voxels it leaves: known analytically from the counts.
#include <catch2/catch.hpp>

#include "core/io.hpp"
#include "core/json.hpp"
#include "suites/layout.hpp"
#include "tests/helpers.hpp"
#include "tests/json_files.hpp"
#include "tests/paired_helpers.hpp"

using namespace pb;
using Json = nlohmann::ordered_json;
using pbtest::run_cli, pbtest::TempDir;
namespace fs = std::filesystem;

namespace {

// 32^3 voxels of 10 um, material at grey 1000. Truth pores: balls of radius 2-3 voxels spread over
// z, grey 100, except every 5th truth voxel of each ball, grey 200 (missed by the "low" rater,
// threshold 150). Single material voxels at grey 400, away from the pores and the border, are
// called pores by the "high" rater only (threshold 550). The "mid" rater (300) is the truth.
struct Case {
  Image<uint16_t> scan;
  Mask truth;
  int64_t truth_voxels = 0, missed_by_low = 0, false_by_high = 0;
};
Case make_case() {
  Case c;
  const Geometry g{{32, 32, 32}, {0.01, 0.01, 0.01}, {0, 0, 0}};
  c.scan = Image<uint16_t>(g);
  c.truth = Mask(g);
  for (int64_t i = 0; i < c.scan.size(); ++i) c.scan[i] = 1000;
  const int balls[][4] = {{8, 8, 4, 2}, {22, 10, 8, 3}, {10, 22, 15, 3}, {22, 22, 20, 2}, {15, 15, 26, 3}, {8, 24, 27, 2}};
  for (const auto& b : balls) {
    int k = 0;
    for (int z = b[2] - b[3]; z <= b[2] + b[3]; ++z)
      for (int y = b[1] - b[3]; y <= b[1] + b[3]; ++y)
        for (int x = b[0] - b[3]; x <= b[0] + b[3]; ++x)
          if ((x - b[0]) * (x - b[0]) + (y - b[1]) * (y - b[1]) + (z - b[2]) * (z - b[2]) <= b[3] * b[3]) {
            c.truth(x, y, z) = 1;
            ++c.truth_voxels;
            const bool missed = ++k % 5 == 0;
            c.scan(x, y, z) = missed ? 200 : 100;
            c.missed_by_low += missed;
          }
  }
  for (int z = 3; z < 30; z += 4)
    for (int y = 3; y < 30; y += 9)
      for (int x = 28; x < 30; ++x) {
        if (c.truth(x, y, z)) continue;
        c.scan(x, y, z) = 400;
        ++c.false_by_high;
      }
  return c;
}

const std::string kRaters =
    "reference_consensus = [ { name = \"manual\", label = \"low\", params = { threshold = 150 } },\n"
    "                        { name = \"manual\", label = \"mid\", params = { threshold = 300 } },\n"
    "                        { name = \"manual\", label = \"high\", params = { threshold = 550 } } ]\n";

}  // namespace

TEST_CASE("a STAPLE consensus reference in a paired suite: known sensitivities, raters marked in the rankings",
          "[paired][suite][staple]") {
  TempDir d;
  const Case c = make_case();
  REQUIRE(c.missed_by_low > 0);
  REQUIRE(c.false_by_high > 0);
  write_volume(c.scan, d / "ref.mha");
  write_text_atomic(d / "s.toml",
                    "[suite]\nname = \"consensus\"\n[[dataset]]\nname = \"blank\"\nkind = \"paired\"\n"
                    "reference_scan = \"ref.mha\"\nreference_projections = 3000\n" + kRaters +
                    "align = \"none\"\nscans = [ { path = \"ref.mha\", projections = 400, label = \"fast\" } ]\n"
                    "[[method]]\nname = \"manual\"\nparams = { threshold = [150, 300, 550] }\n"
                    "[[method]]\nname = \"otsu\"\n"
                    "[calibration]\nfraction = 0.3\ngap_slices = 2\n[criteria]\nmin_jaccard = 0.5\n");
  const auto r = run_cli("run " + (d / "s.toml") + " -o " + (d / "out"));
  INFO(r.out << r.err);
  REQUIRE(r.exit_code <= 1);
  const Json res = suite::read_json_file((d.path / "out" / "results.json").string());
  const Json& ref = res["datasets"][0]["reference"];
  REQUIRE(ref.contains("consensus"));
  const Json& cs = ref["consensus"];
  CHECK(cs["method"] == "STAPLE");
  CHECK(cs["converged"] == true);
  CHECK(cs["iterations"].get<int>() > 0);
  CHECK(cs["pore_voxels"].get<int64_t>() == c.truth_voxels);
  REQUIRE(cs["raters"].size() == 3);
  // Analytic sensitivities and specificities (Warfield, Zou & Wells 2004, the M-step with W = truth).
  const double n = double(c.scan.size()), t = double(c.truth_voxels);
  const double p[3] = {1.0 - double(c.missed_by_low) / t, 1.0, 1.0};
  const double q[3] = {1.0, 1.0, 1.0 - double(c.false_by_high) / (n - t)};
  for (size_t i = 0; i < 3; ++i) {
    INFO("rater " << cs["raters"][i]["label"]);
    CHECK(cs["raters"][i]["sensitivity"].get<double>() == Approx(p[i]).margin(1e-6));
    CHECK(cs["raters"][i]["specificity"].get<double>() == Approx(q[i]).margin(1e-7));
  }
  CHECK(cs["raters"][0]["pore_voxels"].get<int64_t>() == c.truth_voxels - c.missed_by_low);
  CHECK(cs["raters"][2]["pore_voxels"].get<int64_t>() == c.truth_voxels + c.false_by_high);
  // The consensus written as the reference is the truth, voxel for voxel.
  const Mask written = read_volume((d.path / "out" / "data" / "blank" / "reference-pores.mha").string()).to_mask();
  CHECK(std::equal(written.data(), written.data() + written.size(), c.truth.data()));
  // suite.json keeps the same record.
  const Json sj = suite::read_json_file((d.path / "out" / "suite.json").string());
  CHECK(sj["datasets"][0]["reference"]["consensus"]["raters"][1]["label"] == "mid");
  // The tuned manual threshold meets the truth exactly (threshold 300 = the "mid" rater).
  int mid_cells = 0;
  for (const auto& cell : res["cells"])
    if (cell["method"] == "manual" && cell["params"]["threshold"] == "300") {
      ++mid_cells;
      CHECK(suite::metric_value(cell, "test", "jaccard") == Approx(1.0));
    }
  CHECK(mid_cells == 1);
  // Rankings mark the rater's method, not the other; the record shows the raters.
  const std::string summary = pbtest::read_text((d.path / "out" / "summary.md").string());
  CHECK_THAT(summary, Catch::Contains("| manual (reference rater) |"));
  CHECK(summary.find("otsu (reference rater)") == std::string::npos);
  CHECK_THAT(pbtest::read_text((d.path / "out" / "report.html").string()), Catch::Contains("STAPLE consensus"));
  const std::string record = pbtest::read_text((d.path / "out" / "validation-record.md").string());
  CHECK_THAT(record, Catch::Contains("STAPLE consensus of 3 raters"));
  CHECK_THAT(record, Catch::Contains("| high | manual | threshold=550 |"));
}

TEST_CASE("reference_consensus: bad entries are exit 2 naming the suite file, field and value", "[paired][suite]") {
  TempDir d;
  write_volume(Image<uint16_t>(pbtest::cube(8, 0.01)), d / "ref.mha");
  auto suite_with = [](const std::string& body) {
    return "[[dataset]]\nname = \"p\"\nkind = \"paired\"\nreference_scan = \"ref.mha\"\n" + body +
           "scans = [ \"ref.mha\" ]\n[[method]]\nname = \"otsu\"\n";
  };
  auto expect = [&](const std::string& body, const std::vector<std::string>& words) {
    pbtest::expect_suite_refused(d / "s.toml", suite_with(body), words);
  };
  expect("reference_consensus = [ \"otsu\" ]\n", {"reference_consensus", "at least two", "1 entry"});
  expect("reference_method = \"otsu\"\nreference_consensus = [ \"otsu\", \"sauvola\" ]\n", {"reference_consensus", "not both"});
  expect("reference_consensus = [ \"otsu\", \"otsuu\" ]\n", {"reference_consensus[2]", "otsuu"});
  expect("reference_consensus = [ \"otsu\", { name = \"manual\", params = { threshold = [100, 200] } } ]\n",
         {"reference_consensus[2]", "threshold", "not a grid"});
  expect("reference_consensus = [ \"otsu\", { method = \"sauvola\" } ]\n", {"reference_consensus[2]", "unknown key 'method'"});
  expect("reference_consensus = [ \"otsu\", \"otsu\" ]\n", {"reference_consensus[2]", "'otsu' is used twice"});
  expect("reference_consensus = [ \"otsu\", { name = \"sauvola\", params = { window = -3 } } ]\n", {"reference_consensus[2]", "window"});
  // Through the CLI: exit 2 before any work, no run folder written.
  write_text_atomic(d / "s.toml", suite_with("reference_consensus = [ \"otsu\" ]\n"));
  const auto r = run_cli("run " + (d / "s.toml") + " -o " + (d / "out"));
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("s.toml") && Catch::Contains("reference_consensus"));
  CHECK_FALSE(fs::exists(d.path / "out" / "results.json"));
}
