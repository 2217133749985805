// porebench synth: the output contract (files, manifest hashes, recipe.toml that reproduces the
// run), bit-identical output for any --threads, and exit code 2 with the field named on bad input.
#include <catch2/catch.hpp>
#include <cmath>
#include <nlohmann/json.hpp>
#include <sstream>

#include "core/io.hpp"
#include "core/sha256.hpp"
#include "tests/helpers.hpp"

using pbtest::run_cli;
using pbtest::TempDir;
namespace fs = std::filesystem;

namespace {
// demo-small made cheaper for tests: 48^3 voxels of 20 um, few projections.
const std::string kSmall =
    "synth --preset demo-small --set phantom.dims=48,48,48 --set phantom.voxel_size_um=20 "
    "--set scan.reference_projections=90 --projections 40,20";

nlohmann::json manifest(const std::string& dir) {
  std::ifstream f(dir + "/manifest.json");
  return nlohmann::json::parse(f);
}
}  // namespace

TEST_CASE("synth writes the output contract with hashes that match the files", "[synth][cli]") {
  TempDir d;
  const auto r = run_cli(kSmall + " -o " + d / "out");
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  for (const char* f : {"truth-labels.mha", "part-mask.mha", "reference-scan.mha", "scan-40p.mha", "scan-20p.mha",
                        "pores.csv", "recipe.toml", "manifest.json"})
    CHECK(fs::exists(d.path / "out" / f));
  const auto m = manifest(d / "out");
  REQUIRE(m["files"].size() == 7);
  for (const auto& f : m["files"]) CHECK(f["sha256"] == pb::sha256_file(d / ("out/" + f["file"].get<std::string>())));
  const pb::AnyVolume truth = pb::read_volume(d / "out/truth-labels.mha");
  CHECK(truth.type() == pb::VoxelType::u8);
  CHECK(truth.geometry().spacing_mm[0] == Approx(0.020));
  const pb::AnyVolume scan = pb::read_volume(d / "out/scan-20p.mha");
  CHECK(scan.type() == pb::VoxelType::f32);
  CHECK(scan.geometry().dims == truth.geometry().dims);
  // pores.csv: a header and one row per pore listed in the manifest.
  std::ifstream csv(d / "out/pores.csv");
  std::string header, line;
  std::getline(csv, header);
  CHECK(header.rfind("id,type,", 0) == 0);
  CHECK(header.find("volume_mm3") != std::string::npos);
  CHECK(header.find("esd_um") != std::string::npos);
  CHECK(header.find("inside_part") != std::string::npos);
  size_t rows = 0;
  while (std::getline(csv, line)) rows += !line.empty();
  CHECK(rows == m["files"][2]["pores"].get<size_t>());
}

TEST_CASE("synth is bit-identical for any --threads, and recipe.toml reproduces it", "[synth][cli]") {
  TempDir d;
  REQUIRE(run_cli("--threads 1 " + kSmall + " -o " + d / "a").exit_code == 0);
  REQUIRE(run_cli("--threads 2 " + kSmall + " -o " + d / "b").exit_code == 0);
  REQUIRE(run_cli("--threads 2 synth " + d / "a/recipe.toml" + " -o " + d / "c").exit_code == 0);
  const auto a = manifest(d / "a"), b = manifest(d / "b"), c = manifest(d / "c");
  REQUIRE(a["files"].size() == b["files"].size());
  REQUIRE(a["files"].size() == c["files"].size());
  for (size_t i = 0; i < a["files"].size(); ++i) {
    INFO(a["files"][i]["file"]);
    CHECK(a["files"][i]["sha256"] == b["files"][i]["sha256"]);
    CHECK(a["files"][i]["sha256"] == c["files"][i]["sha256"]);
  }
}

TEST_CASE("synth with irregular lack-of-fusion voids: bit-identical for any --threads, volumes in pores.csv",
          "[synth][cli][irregular]") {
  TempDir d;
  const std::string irr = kSmall + " --projections 20 --set pores.1.shape=irregular --set pores.1.porosity_pct=1";
  REQUIRE(run_cli("--threads 1 " + irr + " -o " + d / "a").exit_code == 0);
  REQUIRE(run_cli("--threads 2 " + irr + " -o " + d / "b").exit_code == 0);
  const auto a = manifest(d / "a"), b = manifest(d / "b");
  REQUIRE(a["files"].size() == b["files"].size());
  for (size_t i = 0; i < a["files"].size(); ++i) CHECK(a["files"][i]["sha256"] == b["files"][i]["sha256"]);
  // pores.csv: the lobes column; the closed pores' volume_mm3 sum is the manifest's analytic
  // porosity times the part volume, and esd_um is the diameter of the sphere of that volume.
  std::ifstream csv(d / "a/pores.csv");
  std::string line;
  std::getline(csv, line);
  REQUIRE(line.size() > 6);
  CHECK(line.substr(line.size() - 6) == ",lobes");
  double closed_mm3 = 0;
  int irregular = 0;
  while (std::getline(csv, line)) {
    std::vector<std::string> f;
    std::stringstream ss(line);
    for (std::string c; std::getline(ss, c, ',');) f.push_back(c);
    REQUIRE(f.size() == 14);
    const double v = std::stod(f[10]), esd = std::stod(f[11]);
    CHECK(esd == Approx(1000 * std::cbrt(6 * v / M_PI)).epsilon(1e-7));
    if (f[12] == "true") closed_mm3 += v;
    irregular += f[1] == "lack-of-fusion" && f[13] == "3";
  }
  CHECK(irregular > 0);
  CHECK(100 * closed_mm3 / a["part_volume_mm3"].get<double>() ==
        Approx(a["analytic_porosity_pct"].get<double>()).epsilon(1e-6));
}

TEST_CASE("synth dose series writes one scan per projection count and dose; uint16 output", "[synth][cli]") {
  TempDir d;
  const auto r = run_cli(kSmall + " --projections 20 --i0 10000,40000 --set scan.output_type=uint16 -o " + d / "o");
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK(fs::exists(d.path / "o/scan-20p-i0-10000.mha"));
  CHECK(fs::exists(d.path / "o/scan-20p-i0-40000.mha"));
  CHECK(pb::read_volume(d / "o/scan-20p-i0-10000.mha").type() == pb::VoxelType::u16);
}

TEST_CASE("synth bad input exits 2 naming the field", "[synth][cli]") {
  TempDir d;
  struct Case {
    std::string args, field;
  };
  const Case cases[] = {
      {"--projections 0", "scan.projections"},
      {"--projections -3", "scan.projections"},
      {"--i0 0", "scan.i0"},
      {"--i0 -5", "scan.i0"},
      {"--set scan.detector_bins=50", "scan.detector_bins"},
      {"--set pores.0.porosity_pct=39 --set phantom.placement_budget=2000", "pores.0"},
      {"--set scan.nonsense=1", "scan.nonsense"},
      {"--set phantom.material=unobtainium", "phantom.material"},
      {"--set pores.1.shape=blob", "pores.1.shape"},
      {"--set pores.0.shape=irregular", "pores.0.shape"},
      {"--set pores.1.shape=irregular --set pores.1.lobes=1", "pores.1.lobes"},
      {"--set pores.1.shape=irregular --set pores.1.lobe_scale=1.5", "pores.1.lobe_scale"},
  };
  for (const Case& c : cases) {
    INFO(c.args);
    const auto r = run_cli(kSmall + " " + c.args + " -o " + d / "x");
    CHECK(r.exit_code == 2);
    CHECK(r.err.find(c.field) != std::string::npos);
  }
  const auto r = run_cli("synth --preset no-such-preset -o " + d / "x");
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("demo-small") != std::string::npos);
  CHECK(run_cli("synth " + d / "missing.toml -o " + d / "x").exit_code == 2);
}
