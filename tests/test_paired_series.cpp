// Paired series end to end (issue 12): a registration that fails inside a suite fails that scan's
// cells with the reason while the other scans run; a dose series of real scans is plotted against
// i0 as the suite gives it (not as photons); export-patches takes every scan of a series with its
// own geometry; the mirrored border index shared by inference and export-patches.
#include <catch2/catch.hpp>
#include <filesystem>
#include <sstream>

#include "core/io.hpp"
#include "core/json.hpp"
#include "core/npy.hpp"
#include "methods/neural.hpp"
#include "suites/layout.hpp"
#include "suites/results.hpp"
#include "tests/helpers.hpp"
#include "tests/json_files.hpp"
#include "tests/paired_helpers.hpp"

using namespace pb;
namespace fs = std::filesystem;

namespace {

// 32^3 voxels of 10 um: material 1000, closed pores at 100 spread over z, no fixture markers.
Image<uint16_t> blank() {
  Image<uint16_t> v(Geometry{{32, 32, 32}, {0.01, 0.01, 0.01}, {0, 0, 0}});
  for (int64_t i = 0; i < v.size(); ++i) v[i] = 1000;
  const int balls[][4] = {{8, 8, 5, 2}, {22, 10, 9, 3}, {10, 22, 15, 3}, {22, 22, 20, 2}, {15, 15, 26, 3}};
  for (const auto& b : balls)
    for (int z = 0; z < 32; ++z)
      for (int y = 0; y < 32; ++y)
        for (int x = 0; x < 32; ++x)
          if ((x - b[0]) * (x - b[0]) + (y - b[1]) * (y - b[1]) + (z - b[2]) * (z - b[2]) <= b[3] * b[3]) v(x, y, z) = 100;
  return v;
}

}  // namespace

TEST_CASE("mirror_index reflects past the borders as numpy.pad mode 'reflect'", "[neural][paired]") {
  // numpy 1.24 (/usr/bin/python3): np.pad(np.arange(5), 4, mode='reflect') = [4,3,2,1,0,1,2,3,4,3,2,1,0]
  const int64_t want[13] = {4, 3, 2, 1, 0, 1, 2, 3, 4, 3, 2, 1, 0};
  for (int64_t i = -4; i <= 8; ++i) CHECK(mirror_index(i, 5) == want[i + 4]);
  CHECK(mirror_index(-3, 1) == 0);
}

TEST_CASE("a failed registration in a paired suite fails its scan's cells with the reason; the others run",
          "[paired][suite]") {
  pbtest::TempDir d;
  const Image<uint16_t> v = blank();
  write_volume(v, d / "ref.mha");
  write_volume(v, d / "fast-a.mha");
  write_volume(v, d / "fast-b.mha");
  write_volume(v, d / "fast-c.mha");
  // A dose series at 400 projections; the third scan asks for markers the fixture does not have.
  pbtest::write_file(d / "s.toml",
                     "[suite]\nname = \"series\"\n[[dataset]]\nname = \"blank\"\nkind = \"paired\"\n"
                     "reference_scan = \"ref.mha\"\nreference_method = \"otsu\"\nalign = \"none\"\n"
                     "scans = [ { path = \"fast-a.mha\", projections = 400, i0 = 2.5, label = \"a\" },\n"
                     "          { path = \"fast-b.mha\", projections = 400, i0 = 5.0, label = \"b\" },\n"
                     "          { path = \"fast-c.mha\", projections = 400, i0 = 10.0, label = \"c\", align = \"markers\" } ]\n"
                     "[[method]]\nname = \"otsu\"\n[calibration]\nfraction = 0.3\ngap_slices = 2\n"
                     "[criteria]\nmin_jaccard = 0.5\n");
  const auto r = pbtest::run_cli("run " + (d / "s.toml") + " -o " + (d / "out"));
  INFO(r.out << r.err);
  // README, exit codes: 1 = acceptance criteria not met (the failed scan has no score to meet them).
  CHECK(r.exit_code == 1);
  CHECK_THAT(r.err, Catch::Contains("scan 'c'") && Catch::Contains("registration failed"));
  const auto res = pbtest::read_json((d.path / "out" / "results.json").string());
  REQUIRE(res["cells"].size() == 3);
  for (const auto& c : res["cells"]) {
    INFO(c["scan"]);
    if (c["scan"] == "c") {
      CHECK(c["status"] == "failed");
      CHECK_THAT(c["error"].get<std::string>(), Catch::Contains("registration failed (align = \"markers\")") &&
                                                   Catch::Contains("markers: found 0"));
    } else {
      CHECK(c["status"] == "ok");
      CHECK(suite::metric_value(c, "test", "jaccard") == Approx(1.0));
    }
  }
  const auto& vars = res["datasets"][0]["variants"];
  REQUIRE(vars.size() == 3);
  CHECK_THAT(vars[2]["alignment"]["error"].get<std::string>(), Catch::Contains("markers"));
  // The validation record names the reason in the alignment table.
  CHECK_THAT(pbtest::read_text((d.path / "out" / "validation-record.md").string()),
             Catch::Contains("| c | markers |") && Catch::Contains("registration failed"));
  // The dose axis says what the suite gave (i0 in its own unit), not photons.
  const std::string html = pbtest::read_text((d.path / "out" / "report.html").string());
  CHECK_THAT(html, Catch::Contains("i0 (exposure or dose as given in the suite file)"));
  CHECK(html.find("photons per detector pixel") == std::string::npos);
}

TEST_CASE("export-patches takes every scan of a paired series with its own geometry", "[paired][neural][cli]") {
  pbtest::TempDir d;
  const Image<uint16_t> v = blank();
  Mask truth(v.geometry());
  for (int64_t i = 0; i < v.size(); ++i) truth[i] = v[i] == 100;
  write_volume(truth, d / "ref-mask.mha");
  write_volume(v, d / "fast-a.mha");
  write_raw(AnyVolume(v), d / "fast-b.raw", true);  // big-endian raw: only its entry's geometry reads it right
  pbtest::write_file(d / "s.toml",
                     "[suite]\nname = \"export\"\n[[dataset]]\nname = \"blank\"\nkind = \"paired\"\n"
                     "reference_mask = \"ref-mask.mha\"\n"
                     "scans = [ { path = \"fast-a.mha\", projections = 400, label = \"a\" },\n"
                     "          { path = \"fast-b.raw\", projections = 200, label = \"b\", spacing_mm = [0.01, 0.01, 0.01], "
                     "raw = { dims = [32, 32, 32], type = \"uint16\", endian = \"big\" } } ]\n"
                     "[[method]]\nname = \"otsu\"\n[calibration]\nfraction = 0.4\ngap_slices = 2\n");
  const auto r = pbtest::run_cli("export-patches " + (d / "s.toml") + " -o " + (d / "p") + " --tile 16 --slices 3 --every 2");
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  std::istringstream idx(pbtest::read_text((d.path / "p" / "index.csv").string()));
  std::map<std::string, int> rows;
  std::string line;
  std::getline(idx, line);
  while (std::getline(idx, line)) rows[line.substr(line.find(',') + 1, 1)]++;
  CHECK(rows["a"] > 0);
  CHECK(rows["b"] == rows["a"]);
  // Same data in both files: the raw scan's patches equal the MetaImage scan's (read with its geometry).
  const NpyArray a = read_npy_array((d.path / "p" / "blank-a-scans.npy").string());
  const NpyArray b = read_npy_array((d.path / "p" / "blank-b-scans.npy").string());
  CHECK(a.shape == b.shape);
  CHECK(a.data == b.data);
}

TEST_CASE("i0_unit labels the dose axis of a paired series; a bad unit is exit 2 naming file, key and value",
          "[paired][suite]") {
  pbtest::TempDir d;
  const Image<uint16_t> v = blank();
  for (const char* f : {"ref.mha", "fast-a.mha", "fast-b.mha"}) write_volume(v, d / f);
  const std::string head = "[suite]\nname = \"dose\"\n[[dataset]]\nname = \"blank\"\nkind = \"paired\"\n"
                           "reference_scan = \"ref.mha\"\nreference_method = \"otsu\"\nalign = \"none\"\n";
  const std::string tail = "[[method]]\nname = \"otsu\"\n[calibration]\nfraction = 0.3\ngap_slices = 2\n";
  auto scans = [](const std::string& a, const std::string& b) {
    return "scans = [ { path = \"fast-a.mha\", projections = 400, label = \"a\"" + a + " },\n"
           "          { path = \"fast-b.mha\", projections = 400, label = \"b\"" + b + " } ]\n";
  };
  pbtest::write_file(d / "s.toml", head + scans(", i0 = 2.5, i0_unit = \"mAs\"", ", i0 = 5.0, i0_unit = \"mAs\"") + tail);
  const auto r = pbtest::run_cli("run " + (d / "s.toml") + " -o " + (d / "out"));
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  const auto res = pbtest::read_json((d.path / "out" / "results.json").string());
  CHECK(res["datasets"][0]["i0_unit"] == "mAs");
  CHECK(res["datasets"][0]["variants"][1]["i0_unit"] == "mAs");
  const std::string html = pbtest::read_text((d.path / "out" / "report.html").string());
  CHECK_THAT(html, Catch::Contains("vs i0 (mAs)"));
  CHECK(html.find("as given in the suite file") == std::string::npos);
  // Refused at parse, naming the suite file, the key and the value.
  pbtest::expect_suite_refused(d / "empty.toml", head + scans(", i0 = 2.5, i0_unit = \"  \"", ", i0 = 5.0") + tail,
                               {"scans[1]", "'i0_unit' = '  ' is empty"});
  pbtest::expect_suite_refused(d / "typo.toml", head + scans(", i0 = 2.5, i0_units = \"mAs\"", "") + tail,
                               {"scans[1]", "unknown key 'i0_units'", "i0_unit"});
  pbtest::expect_suite_refused(d / "alone.toml", head + scans(", i0_unit = \"mAs\"", "") + tail,
                               {"scans[1]", "'i0_unit' = 'mAs' without 'i0'"});
  pbtest::expect_suite_refused(d / "mixed.toml", head + scans(", i0 = 2.5, i0_unit = \"mAs\"", ", i0 = 5.0, i0_unit = \"s\"") + tail,
                               {"scans[2]", "i0_unit = 's'", "i0_unit = 'mAs'", "share one unit"});
  pbtest::expect_suite_refused(d / "number.toml", head + scans(", i0 = 2.5, i0_unit = 5", "") + tail,
                               {"scans[1]", "'i0_unit' must be a string"});
}
