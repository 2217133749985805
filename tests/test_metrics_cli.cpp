// porebench score on files: JSON keys and context block, one CSV row per pore, label volumes, and
// bad input (dims or spacing mismatch, bad rule) as exit 2 with nothing written.
#include <catch2/catch.hpp>

#include <nlohmann/json.hpp>

#include "tests/helpers.hpp"

using namespace pb;
namespace fs = std::filesystem;

namespace {

// Two 2 x 2 x 2 cubes in the reference; the prediction finds the first exactly and misses the
// second, and adds a one-voxel false call. Labels in a uint16 label volume: pores = 3, part = 1.
struct Files {
  pbtest::TempDir d;
  Files() {
    Geometry g = pbtest::cube(12, 0.05);
    Image<uint16_t> ref(g, 1), pred(g, 1);
    for (int z = 2; z < 4; ++z)
      for (int y = 2; y < 4; ++y)
        for (int x = 2; x < 4; ++x) ref(x, y, z) = pred(x, y, z) = 3, ref(x + 5, y + 5, z + 5) = 3;
    pred(9, 2, 9) = 3;
    write_volume(ref, d / "ref.mha");
    write_volume(pred, d / "pred.mha");
    Geometry g2 = g;
    g2.dims[2] = 11;
    write_volume(Image<uint16_t>(g2, 0), d / "short.mha");
    Geometry g3 = g;
    g3.spacing_mm = {0.05, 0.05, 0.06};
    write_volume(Image<uint16_t>(g3, 0), d / "coarse.mha");
  }
};

}  // namespace

TEST_CASE("score writes JSON opening with the context and a CSV row per pore", "[metrics][cli]") {
  Files f;
  const auto r = pbtest::run_cli("score --pred " + f.d / "pred.mha" + " --ref " + f.d / "ref.mha" +
                                 " --pore-label 3 --json " + f.d / "s.json" + " --csv " + f.d / "p.csv");
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  std::ifstream js(f.d / "s.json");
  const auto j = nlohmann::ordered_json::parse(js);
  CHECK(j.begin().key() == "context");
  CHECK(j["inputs"]["pred"]["sha256_voxels"].get<std::string>().size() == 64);
  // tp = 8 voxels (first cube), fn = 8 (second cube), fp = 1, tn = 1728 - 17.
  CHECK(j["overlap"]["tp"] == 8);
  CHECK(j["overlap"]["fn"] == 8);
  CHECK(j["overlap"]["fp"] == 1);
  CHECK(j["overlap"]["tn"] == 1728 - 17);
  CHECK(j["overlap"]["jaccard"].get<double>() == Approx(8.0 / 17));
  CHECK(j["pores"]["pores_ref"] == 2);
  CHECK(j["pores"]["pores_pred"] == 2);
  CHECK(j["pores"]["hits"] == 1);
  CHECK(j["pores"]["false_calls"] == 1);
  CHECK(j["pod"]["estimable"] == false);  // two equal sizes, one hit one miss: no size dependence to fit
  CHECK_THAT(j["pod"]["reason"].get<std::string>(), Catch::Contains("same size"));
  CHECK(j["pod"]["a90_um"].is_null());
  // porosity: 16 of 1728 voxels = 0.9259 %; pred 9 / 1728 = 0.5208 %.
  CHECK(j["porosity"]["porosity_ref_pct"].get<double>() == Approx(100.0 * 16 / 1728));
  CHECK(j["porosity"]["porosity_bias_pp"].get<double>() == Approx(100.0 * (9 - 16) / 1728.0));
  std::ifstream cs(f.d / "p.csv");
  std::string line;
  int rows = 0;
  std::getline(cs, line);
  CHECK(line.rfind("side,label,voxels,volume_mm3,esd_um", 0) == 0);
  while (std::getline(cs, line)) ++rows;
  CHECK(rows == 4);
}

TEST_CASE("score rejects mismatched geometry and bad options with exit 2, writing nothing", "[metrics][cli]") {
  Files f;
  const std::string out = " --json " + f.d / "bad.json";
  auto r = pbtest::run_cli("score --pred " + f.d / "short.mha" + " --ref " + f.d / "ref.mha" + out);
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("dims along z"));
  r = pbtest::run_cli("score --pred " + f.d / "coarse.mha" + " --ref " + f.d / "ref.mha" + out);
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("spacing along z"));
  r = pbtest::run_cli("score --pred " + f.d / "pred.mha" + " --ref " + f.d / "ref.mha" + " --match half" + out);
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("half"));
  r = pbtest::run_cli("score --pred " + f.d / "pred.mha" + " --ref " + f.d / "ref.mha" + " --connectivity 4" + out);
  CHECK(r.exit_code == 2);
  r = pbtest::run_cli("score --pred " + f.d / "pred.mha" + " --ref " + f.d / "ref.mha" + " --z-range 5" + out);
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("--z-range"));
  CHECK_FALSE(fs::exists(f.d / "bad.json"));
}
