// The predictions method: segmentations made elsewhere, read per scan from a path template and
// ranked with the other methods of a suite; bad prediction files are exit 2 before any cell runs.
// Analytic case: a prediction equal to the reference scores Jaccard 1 (definition of the Jaccard
// index: |A n B| / |A u B|), a copy with pores dropped and false voxels scores less.
#include <catch2/catch.hpp>

#include <cctype>
#include <cmath>
#include <fstream>
#include <random>

#include "core/error.hpp"
#include "core/json.hpp"
#include "methods/predictions.hpp"
#include "methods/registry.hpp"
#include "tests/helpers.hpp"
#include "tests/json_files.hpp"

using namespace pb;
namespace fs = std::filesystem;
using Json = nlohmann::ordered_json;
using pbtest::read_json;
using pbtest::write_file;

namespace {

// A paired dataset: a 32^3 scan (part: a cylinder of grey 1, air 0, pores 0.1, noise 0.08), its
// part mask and its reference pores (spheres of radius 2.5 voxels, away from every border).
struct Pair {
  pbtest::TempDir d;
  Geometry g = pbtest::cube(32, 0.05);
  Mask part, ref;
  std::vector<std::array<int, 3>> centres;
  Pair() : part(g, 0), ref(g, 0) {
    for (int z = 4; z <= 27; z += 6)
      for (int k = 0; k < 3; ++k) centres.push_back({10 + 6 * k, 12 + 3 * (k % 2) + (z % 4), z});
    VolumeF scan(g, 0.f);
    std::mt19937 rng(7);
    std::normal_distribution<float> noise(0.f, 0.08f);
    for (int z = 0; z < 32; ++z)
      for (int y = 0; y < 32; ++y)
        for (int x = 0; x < 32; ++x) {
          const bool in = (x - 15.5) * (x - 15.5) + (y - 15.5) * (y - 15.5) < 14.0 * 14.0;
          bool pore = false;
          for (const auto& c : centres)
            pore = pore || (x - c[0]) * (x - c[0]) + (y - c[1]) * (y - c[1]) + (z - c[2]) * (z - c[2]) <= 6.25;
          part(x, y, z) = in;
          ref(x, y, z) = in && pore;
          scan(x, y, z) = (in ? (pore ? 0.1f : 1.f) : 0.f) + noise(rng);
        }
    write_volume(scan, d / "scan.mha");
    write_volume(part, d / "part.mha");
    write_volume(ref, d / "ref.mha");
  }
  std::string suite(const std::string& methods) const {
    return "[suite]\nname = \"preds\"\n[[dataset]]\nname = \"pair\"\nkind = \"paired\"\nscan = \"scan.mha\"\n"
           "reference_mask = \"ref.mha\"\npart_mask = \"part.mha\"\n" + methods +
           "[calibration]\nfraction = 0.4\ngap_slices = 2\n";
  }
};

// The rank of `method` in summary.md's table (0 when absent).
int rank_in_summary(const std::string& path, const std::string& method) {
  std::ifstream f(path);
  std::string line;
  while (std::getline(f, line)) {
    const std::string cell = " | " + method + " | ";
    const auto at = line.find(cell);
    if (line.rfind("| ", 0) == 0 && line.size() > 2 && std::isdigit(static_cast<unsigned char>(line[2])) &&
        at != std::string::npos)
      return std::atoi(line.c_str() + 2);
  }
  return 0;
}

}  // namespace

TEST_CASE("predictions: made elsewhere, ranked with a classical method in one suite", "[predictions][suite]") {
  Pair p;
  // the reference itself (.npy, geometry from the scan) with a runtime sidecar; a noisy copy
  // (two pores dropped, a false blob) as .mha; a probability map tuned over three thresholds
  Mask noisy = p.ref;
  for (int i : {1, 7})
    for (int dz = -3; dz <= 3; ++dz)
      for (int dy = -3; dy <= 3; ++dy)
        for (int dx = -3; dx <= 3; ++dx) noisy(p.centres[i][0] + dx, p.centres[i][1] + dy, p.centres[i][2] + dz) = 0;
  for (int z = 20; z < 23; ++z) noisy(22, 20, z) = noisy(23, 20, z) = 1;
  VolumeF prob(p.g, 0.1f);
  for (int64_t i = 0; i < prob.size(); ++i) prob[i] = p.ref[i] ? 0.8f : 0.1f;
  for (const char* sub : {"preds/pair", "noisy/pair", "prob/pair", "small/pair", "logit/pair", "side/pair"})
    fs::create_directories(p.d.path / sub);
  write_volume(p.ref, p.d / "preds/pair/scan.npy");
  write_file(p.d / "preds/pair/scan.json", "{\"runtime_s\": 2.5}\n");
  fs::create_directories(p.d.path / "noisy/pair");
  write_volume(noisy, p.d / "noisy/pair/scan.mha");
  write_volume(prob, p.d / "prob/pair/scan.npy");
  write_file(p.d / "s.toml", p.suite("[[method]]\nname = \"otsu\"\n"
                                      "[[method]]\nname = \"predictions\"\nlabel = \"truth-copy\"\n"
                                      "params = { file = \"preds/{dataset}/{scan}.npy\" }\n"
                                      "[[method]]\nname = \"predictions\"\nlabel = \"noisy\"\n"
                                      "params = { file = \"noisy/{dataset}/{scan}.mha\", kind = \"mask\" }\n"
                                      "[[method]]\nname = \"predictions\"\nlabel = \"prob\"\n"
                                      "params = { file = \"prob/{dataset}/{scan}.npy\", kind = \"probability\", "
                                      "pore_threshold = [0.05, 0.5, 0.9] }\n"));
  const auto r = pbtest::run_cli("--quiet run " + p.d / "s.toml" + " -o " + p.d / "out");
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  const Json res = read_json(p.d / "out/results.json");
  std::map<std::string, const Json*> chosen;
  for (const auto& s : res["selections"])
    for (const auto& c : res["cells"])
      if (c["id"] == s["chosen_cell"]) chosen[s["method"].get<std::string>()] = &c;
  REQUIRE(chosen.size() == 4);
  for (const auto& [m, c] : chosen) {
    INFO(m);
    CHECK((*c)["status"] == "ok");
  }
  // Jaccard definition: identical masks give 1; the noisy copy lost pores and gained false voxels.
  CHECK((*chosen["truth-copy"])["test"]["overlap"]["jaccard"].get<double>() == 1.0);
  CHECK((*chosen["noisy"])["test"]["overlap"]["jaccard"].get<double>() < 1.0);
  // the probability map: 0.8 on pores, 0.1 elsewhere: 0.5 recovers the reference, 0.05 calls
  // the whole part, 0.9 nothing; the calibration picks 0.5
  CHECK((*chosen["prob"])["params"]["pore_threshold"] == "0.5");
  CHECK((*chosen["prob"])["test"]["overlap"]["jaccard"].get<double>() == 1.0);
  // probability-map metrics for the probability map only (metrics/probability.hpp): every pore
  // voxel (0.8) ranks above every other (0.1), so the average precision is 1 (its definition)
  const Json& pb = (*chosen["prob"])["test"]["probability"];
  CHECK(pb["average_precision"].get<double>() == 1.0);
  CHECK(pb["chosen_threshold"].get<double>() == 0.5);
  CHECK(pb["thresholds"].size() == 19);
  CHECK_FALSE((*chosen["truth-copy"])["test"].contains("probability"));
  // runtime: from the sidecar, or not measured
  CHECK((*chosen["truth-copy"])["runtime_s"].get<double>() == 2.5);
  CHECK((*chosen["noisy"])["runtime_s"].is_null());
  std::ifstream sm(p.d / "out/summary.md");
  std::stringstream summary;
  summary << sm.rdbuf();
  CHECK_THAT(summary.str(), Catch::Contains("not measured"));
  // report.html: the probability-map section with its threshold curve and reliability diagram
  std::ifstream hf(p.d / "out/report.html");
  std::stringstream html;
  html << hf.rdbuf();
  CHECK_THAT(html.str(), Catch::Contains("<h3>Probability maps</h3>"));
  CHECK_THAT(html.str(), Catch::Contains("Reliability (test slices)"));
  CHECK_THAT(html.str(), Catch::Contains("chosen 0.5"));
  const int truth_rank = rank_in_summary(p.d / "out/summary.md", "truth-copy");
  const int noisy_rank = rank_in_summary(p.d / "out/summary.md", "noisy");
  CHECK(truth_rank >= 1);
  CHECK(truth_rank <= 2);  // tied at Jaccard 1 with prob
  CHECK(noisy_rank > truth_rank);
}

TEST_CASE("predictions: a missing file, other geometry or a probability outside [0, 1] is exit 2 before any cell",
          "[predictions][suite]") {
  Pair p;
  auto expect_refused = [&](const std::string& params, const std::string& fragment) {
    write_file(p.d / "bad.toml",
               p.suite("[[method]]\nname = \"otsu\"\n[[method]]\nname = \"predictions\"\nparams = { " + params + " }\n"));
    const auto r = pbtest::run_cli("--quiet run " + p.d / "bad.toml" + " -o " + p.d / "bad-out");
    INFO(params << "\n" << r.err);
    CHECK(r.exit_code == 2);
    CHECK_THAT(r.err, Catch::Contains(fragment));
    CHECK_FALSE(fs::exists(p.d.path / "bad-out" / "cells"));  // nothing ran
  };
  expect_refused("file = \"none/{dataset}/{scan}.mha\"", (p.d.path / "none/pair/scan.mha").string());
  for (const char* sub : {"small/pair", "logit/pair", "side/pair"}) fs::create_directories(p.d.path / sub);
  Geometry small = pbtest::cube(30, 0.05);
  write_volume(Mask(small, 0), p.d / "small/pair/scan.mha");
  expect_refused("file = \"small/{dataset}/{scan}.mha\"", "geometry mismatch");
  VolumeF logit(p.g, 0.2f);
  logit(5, 5, 5) = 1.5f;
  write_volume(logit, p.d / "logit/pair/scan.nii.gz");
  expect_refused("file = \"logit/{dataset}/{scan}.nii.gz\", kind = \"probability\"", "outside [0, 1]");
  expect_refused("file = \"logit/{dataset}/{scan}.nii.gz\", kind = \"probability\"",
                 (p.d.path / "logit/pair/scan.nii.gz").string());
  write_volume(p.ref, p.d / "side/pair/scan.mha");
  write_file(p.d / "side/pair/scan.json", "{\"runtime_s\": -1}");
  expect_refused("file = \"side/{dataset}/{scan}.mha\"", "runtime_s");
}

TEST_CASE("predictions: segment reads a label volume and keeps a probability map", "[predictions]") {
  Geometry g = pbtest::cube(12, 0.1);
  VolumeF scan(g, 1.f);
  Image<uint16_t> labels(g, 1);
  for (int z = 4; z < 7; ++z)
    for (int y = 4; y < 7; ++y)
      for (int x = 4; x < 7; ++x) labels(x, y, z) = 3;
  labels(0, 0, 0) = 3;  // touches the border: background by the shared pore extraction
  pbtest::TempDir d;
  write_volume(labels, d / "labels.mha");
  const MethodInfo& m = Registry::instance().get("predictions");
  const MethodOutput out =
      run_method(m, parse_params(m, {"file=" + d / "labels.mha", "kind=label", "pore_label=3"}), MethodInput{scan});
  CHECK(out.pores.size() == 12 * 12 * 12);
  int64_t n = 0;
  for (int64_t i = 0; i < out.pores.size(); ++i) n += out.pores[i];
  CHECK(n == 27);  // the 3^3 cube; the border voxel is open to the outside (methods/pores.hpp)
  CHECK(std::isnan(out.runtime_s));  // no sidecar: not measured
  CHECK(out.probability.empty());
  try {
    run_method(m, parse_params(m, {"file=" + d / "labels.mha", "kind=label", "pore_label=9"}), MethodInput{scan});
    FAIL("no error");
  } catch (const InputError& e) {
    CHECK_THAT(e.what(), Catch::Contains("pore_label = 9"));
  }
}
