// porebench score on files: JSON keys and context block, one CSV row per pore, label volumes, and
// bad input (dims or spacing mismatch, bad rule) as exit 2 with nothing written.
#include <catch2/catch.hpp>

#include "core/json.hpp"

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

TEST_CASE("score knows what a mask is: every input kind", "[metrics][cli][mask-input]") {
  // Issue 11: synth's 0/1/2 truth labels, label volumes with separate labels per side, float
  // probability maps, grey scans and impossible labels. The 0.5 default threshold for
  // probabilities is common practice, no source.
  pbtest::TempDir d;
  Geometry g = pbtest::cube(12, 0.05);
  Image<uint8_t> truth(g, 1), mask(g, 0);
  Image<float> prob(g, 0.1f), grey(g, 0);
  Image<uint16_t> scan(g, 0);
  for (int z = 2; z < 5; ++z)
    for (int y = 2; y < 5; ++y)
      for (int x = 2; x < 5; ++x) truth(x, y, z) = 2, mask(x, y, z) = 1, prob(x, y, z) = 0.8f;
  for (int64_t i = 0; i < grey.size(); ++i) grey[i] = 100.0f + float(i % 37), scan[i] = uint16_t(1000 + i % 501);
  truth(0, 0, 0) = 0;  // background present, so all three labels occur
  write_volume(truth, d / "truth-labels.mha");
  write_volume(mask, d / "mask.mha");
  write_volume(prob, d / "prob.mha");
  write_volume(grey, d / "grey.mha");
  write_volume(scan, d / "scan.mha");
  auto run = [&](const std::string& args) { return pbtest::run_cli("score " + args + " --json " + d / "s.json"); };
  auto porosity = [&] {
    std::ifstream js(d / "s.json");
    return nlohmann::ordered_json::parse(js);
  };

  SECTION("synth 0/1/2 labels detected: pores = 2, said on stderr and in the JSON") {
    const auto r = run("--ref " + d / "truth-labels.mha" + " --pred " + d / "mask.mha");
    INFO(r.err);
    REQUIRE(r.exit_code == 0);
    CHECK_THAT(r.err, Catch::Contains("0/1/2"));
    const auto j = porosity();
    CHECK(j["porosity"]["porosity_ref_pct"].get<double>() == Approx(100.0 * 27 / 1728));  // not 100 %
    CHECK(j["overlap"]["jaccard"].get<double>() == 1);
    CHECK_THAT(j["inputs"]["ref"]["read_as"].get<std::string>(), Catch::Contains("pores = label 2"));
  }
  SECTION("separate labels: a label volume against a 0/1 mask") {
    const auto r = run("--ref " + d / "truth-labels.mha" + " --ref-label 2 --pred " + d / "mask.mha");
    REQUIRE(r.exit_code == 0);
    CHECK(porosity()["overlap"]["jaccard"].get<double>() == 1);
  }
  SECTION("float probability map: threshold 0.5 by default, --pred-threshold otherwise") {
    auto r = run("--ref " + d / "mask.mha" + " --pred " + d / "prob.mha");
    INFO(r.err);
    REQUIRE(r.exit_code == 0);
    CHECK(porosity()["overlap"]["jaccard"].get<double>() == 1);
    r = run("--ref " + d / "mask.mha" + " --pred " + d / "prob.mha" + " --pred-threshold 0.05");
    REQUIRE(r.exit_code == 0);
    CHECK(porosity()["porosity"]["porosity_pred_pct"].get<double>() == Approx(100));
  }
  SECTION("a grey scan given as a mask is refused with exit 2, float or integer") {
    auto r = run("--ref " + d / "mask.mha" + " --pred " + d / "grey.mha");
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Catch::Contains("grey scan"));
    CHECK_THAT(r.err, Catch::Contains("grey.mha"));
    r = run("--ref " + d / "scan.mha" + " --pred " + d / "mask.mha");
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Catch::Contains("grey scan"));
    CHECK_FALSE(fs::exists(d / "s.json"));
  }
  SECTION("a label outside the voxel type's range is refused") {
    const auto r = run("--ref " + d / "mask.mha" + " --pred " + d / "mask.mha" + " --pore-label 300");
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Catch::Contains("300"));
    CHECK_THAT(r.err, Catch::Contains("uint8"));
  }
  SECTION("a label on a float map, a threshold on an integer mask: refused") {
    auto r = run("--ref " + d / "mask.mha" + " --pred " + d / "prob.mha" + " --pred-label 1");
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Catch::Contains("--pred-threshold"));
    r = run("--ref " + d / "mask.mha" + " --pred " + d / "mask.mha" + " --pred-threshold 0.3");
    CHECK(r.exit_code == 2);
  }
}
