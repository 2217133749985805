// The command line: bad input gives exit code 2, a message naming the file/field/value, and no
// output file; good input writes the mask and a JSON record with the documented keys.
#include <catch2/catch.hpp>
#include <cmath>

#include "core/io.hpp"
#include "core/json.hpp"
#include "tests/helpers.hpp"

using namespace pb;
using pbtest::run_cli;
using pbtest::TempDir;
namespace fs = std::filesystem;

namespace {

// A 24^3 block of material (grey 100) in air (grey 0) with a 4^3 internal pore (grey 10).
VolumeF block_with_pore() {
  VolumeF v(pbtest::cube(24, 0.01));
  for (int64_t z = 2; z < 22; ++z)
    for (int64_t y = 2; y < 22; ++y)
      for (int64_t x = 2; x < 22; ++x) v(x, y, z) = 100;
  for (int64_t z = 10; z < 14; ++z)
    for (int64_t y = 10; y < 14; ++y)
      for (int64_t x = 10; x < 14; ++x) v(x, y, z) = 10;
  return v;
}

void expect_bad_input(const std::string& args, const std::vector<std::string>& words, const std::string& out) {
  INFO("porebench " << args);
  const auto r = run_cli(args);
  INFO("stderr: " << r.err);
  CHECK(r.exit_code == 2);
  for (const auto& w : words) CHECK_THAT(r.err, Catch::Contains(w));
  CHECK_FALSE(fs::exists(out));
}

}  // namespace

TEST_CASE("segment writes the pore mask and the JSON record", "[cli]") {
  TempDir d;
  write_volume(block_with_pore(), d / "scan.mha");
  const auto r = run_cli("segment otsu " + (d / "scan.mha") + " -o " + (d / "pores.mha") + " --json " + (d / "r.json"));
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  const auto j = nlohmann::json::parse(std::ifstream(d / "r.json"));
  for (const char* key : {"context", "method", "params", "chosen", "runtime_s", "voxels", "pore_voxels"})
    CHECK(j.contains(key));
  // Hand count: the pore is 4^3 = 64 voxels, the part 20^3 = 8000 voxels.
  CHECK(j["pore_voxels"] == 64);
  CHECK(j["part_voxels"] == 8000);
  CHECK(j["voxels"] == 24 * 24 * 24);
  CHECK(j["porosity_pct"].get<double>() == Approx(0.8));
  // Otsu on two grey levels 10/100 (and 0) puts the threshold between the pore and the material.
  const double t = j["chosen"]["threshold"];
  CHECK(t > 10);
  CHECK(t < 100);
  const AnyVolume m = read_volume(d / "pores.mha");
  CHECK(m.type() == VoxelType::u8);
  CHECK(m.geometry().spacing_mm[0] == Approx(0.01));
}

TEST_CASE("manual threshold and a part mask (ROI)", "[cli]") {
  TempDir d;
  write_volume(block_with_pore(), d / "scan.mha");
  auto run = [&](int64_t zmax) {
    // Part mask: the material block [2,22)^3, cut at z < zmax.
    Mask roi(pbtest::cube(24, 0.01));
    for (int64_t z = 2; z < zmax; ++z)
      for (int64_t y = 2; y < 22; ++y)
        for (int64_t x = 2; x < 22; ++x) roi(x, y, z) = 1;
    write_volume(roi, d / "roi.mha");
    const auto r = run_cli("segment manual " + (d / "scan.mha") + " -o " + (d / "p.mha") +
                           " --set threshold=50 --roi " + (d / "roi.mha") + " --json " + (d / "r.json"));
    INFO(r.err);
    REQUIRE(r.exit_code == 0);
    return nlohmann::json::parse(std::ifstream(d / "r.json"));
  };
  const auto whole = run(22);
  CHECK(whole["pore_voxels"] == 64);    // the 4^3 pore
  CHECK(whole["part_voxels"] == 8000);  // the 20^3 mask
  CHECK(whole["chosen"]["threshold"] == 50.0);
  // A mask that cuts through the pore (z < 12) opens it to the outside of the part: by the
  // documented convention it is then background, like a pore cut by the part surface.
  CHECK(run(12)["pore_voxels"] == 0);
}

TEST_CASE("bad input: exit 2, a clear message, no output file", "[cli]") {
  TempDir d;
  const VolumeF v = block_with_pore();
  write_volume(v, d / "scan.mha");
  const std::string out = d / "pores.mha";
  const std::string scan = d / "scan.mha";

  SECTION("missing file") { expect_bad_input("segment otsu " + (d / "nope.mha") + " -o " + out, {"not found", "nope.mha"}, out); }
  SECTION("truncated raw") {
    write_raw(AnyVolume(v), d / "v.raw");  // 24^3 * 4 bytes
    expect_bad_input("segment otsu " + (d / "v.raw") + " -o " + out +
                         " --raw-dims 24,24,25 --raw-type float32 --spacing 0.01,0.01,0.01",
                     {"truncated", "v.raw", "57600", "55296"}, out);
  }
  SECTION("dims that do not match the file size") {
    write_raw(AnyVolume(v), d / "v.raw");
    expect_bad_input("info " + (d / "v.raw") + " --raw-dims 24,24,20 --raw-type float32 --spacing 1,1,1",
                     {"larger than its geometry", "v.raw"}, out);
  }
  SECTION("unsupported voxel type") {
    write_raw(AnyVolume(v), d / "v.raw");
    expect_bad_input("segment otsu " + (d / "v.raw") + " -o " + out +
                         " --raw-dims 24,24,24 --raw-type complex64 --spacing 1,1,1",
                     {"unsupported voxel type", "complex64"}, out);
  }
  SECTION("NaN voxels are rejected with their count, unless allowed") {
    VolumeF n = v;
    n(1, 1, 1) = NAN;
    n(5, 5, 5) = NAN;
    write_volume(n, d / "nan.mha");
    expect_bad_input("segment otsu " + (d / "nan.mha") + " -o " + out,
                     {"2 non-finite voxels (2 NaN, 0 +Inf, 0 -Inf)", "nan.mha", "--allow-nonfinite"}, out);
    for (const char* flag : {" --allow-nonfinite", " --allow-nan"}) {  // --allow-nan: the old name
      const auto r = run_cli("segment otsu " + (d / "nan.mha") + " -o " + out + flag);
      CHECK(r.exit_code == 0);
      CHECK(fs::exists(out));
      fs::remove(out);
    }
  }
  SECTION("+Inf and -Inf voxels are refused too (they crashed the histogram), and read as NaN when allowed") {
    VolumeF n = v;
    n(1, 1, 1) = INFINITY;
    n(2, 2, 2) = -INFINITY;
    write_volume(n, d / "inf.mha");
    expect_bad_input("segment otsu " + (d / "inf.mha") + " -o " + out, {"1 +Inf", "1 -Inf", "inf.mha"}, out);
    expect_bad_input("info " + (d / "inf.mha"), {"2 non-finite voxels"}, out);
    const auto r = run_cli("info " + (d / "inf.mha") + " --allow-nonfinite");
    CHECK(r.exit_code == 0);
    CHECK_THAT(r.out, Catch::Contains("2 non-finite voxels (0 NaN, 1 +Inf, 1 -Inf), all read as NaN"));
  }
  SECTION("an empty part mask (ROI) is named as such") {
    write_volume(Mask(v.geometry(), 0), d / "roi0.mha");
    expect_bad_input("segment otsu " + scan + " -o " + out + " --roi " + (d / "roi0.mha"), {"roi0.mha", "is empty"}, out);
  }
  SECTION("a truncated MetaImage is refused with both sizes, and no mask is written") {
    const auto size = fs::file_size(scan);
    fs::resize_file(scan, size - 1000);
    expect_bad_input("segment otsu " + scan + " -o " + out + " --json " + (d / "p.json"),
                     {"scan.mha", "is truncated", "55296"}, out);
    CHECK_FALSE(fs::exists(d / "p.json"));
  }
  SECTION("unknown method") { expect_bad_input("segment otsuu " + scan + " -o " + out, {"unknown method 'otsuu'", "otsu"}, out); }
  SECTION("unknown parameter") {
    expect_bad_input("segment otsu " + scan + " -o " + out + " --set bin=12", {"unknown parameter 'bin'", "bins"}, out);
  }
  SECTION("out-of-range parameter") {
    expect_bad_input("segment otsu " + scan + " -o " + out + " --set bins=1", {"'bins'", "'1'", "[2, 65536]"}, out);
  }
  SECTION("required parameter missing") {
    expect_bad_input("segment manual " + scan + " -o " + out, {"'threshold' is required"}, out);
  }
  SECTION("mismatched pair geometry") {
    write_volume(Mask(pbtest::cube(20, 0.01), 1), d / "roi.mha");
    expect_bad_input("segment otsu " + scan + " -o " + out + " --roi " + (d / "roi.mha"),
                     {"geometry mismatch", "scan.mha", "roi.mha", "dims along x"}, out);
  }
  SECTION("unwritable output folder") {
    const std::string bad = d / "no-such-folder/pores.mha";
    expect_bad_input("segment otsu " + scan + " -o " + bad, {"output folder does not exist", "no-such-folder"}, bad);
  }
  SECTION("unsupported output format") {
    const std::string bad = d / "pores.png";
    expect_bad_input("segment otsu " + scan + " -o " + bad, {"unsupported extension", ".png"}, bad);
  }
  SECTION("usage errors are exit 2 too") { expect_bad_input("segment otsu", {"required"}, out); }
}

TEST_CASE("methods --json is valid JSON listing every registered method", "[cli]") {
  const auto r = run_cli("methods --json");
  REQUIRE(r.exit_code == 0);
  const auto j = nlohmann::json::parse(r.out);
  REQUIRE(j["methods"].is_array());
  bool has_otsu = false;
  for (const auto& m : j["methods"]) {
    has_otsu |= m["name"] == "otsu";
    CHECK_FALSE(m["doc"].get<std::string>().empty());
    CHECK_FALSE(m["citation"].get<std::string>().empty());
  }
  CHECK(has_otsu);
  CHECK(run_cli("describe otsu").out.find("Otsu N. (1979)") != std::string::npos);
  CHECK(run_cli("describe nosuch").exit_code == 2);
}

TEST_CASE("info reports geometry, statistics and hashes", "[cli]") {
  TempDir d;
  write_volume(block_with_pore(), d / "scan.mha");
  const auto r = run_cli("info " + (d / "scan.mha"));
  REQUIRE(r.exit_code == 0);
  CHECK_THAT(r.out, Catch::Contains("24 x 24 x 24 voxels"));
  CHECK_THAT(r.out, Catch::Contains("float32"));
  CHECK_THAT(r.out, Catch::Contains("0.24 x 0.24 x 0.24 mm"));
  CHECK_THAT(r.out, Catch::Contains("max 100"));
  CHECK_THAT(r.out, Catch::Contains("sha256"));
}
