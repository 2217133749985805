// porebench synth: the output contract (files, manifest hashes, recipe.toml that reproduces the
// run), bit-identical output for any --threads, and exit code 2 with the field named on bad input.
#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <fstream>
#include <sstream>

#include "core/io.hpp"
#include "core/json.hpp"
#include "core/sha256.hpp"
#include "synthetic/synth.hpp"
#include "tests/helpers.hpp"

using pbtest::run_cli;
using pbtest::run_shell;
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

TEST_CASE("synth --simd generic: same truth, scans equal to float rounding, level recorded", "[synth][cli]") {
  // The SIMD kernels (core/cpu.hpp) and the portable ones compute the same sums in another order.
  // Tolerance: 1e-5 of the reference scan's grey range (float32 has 24 bits; the FBP adds a few
  // hundred terms per pixel).
  TempDir d;
  REQUIRE(run_cli("--simd generic " + kSmall + " -o " + d / "g").exit_code == 0);
  REQUIRE(run_cli(kSmall + " -o " + d / "a").exit_code == 0);
  const auto g = manifest(d / "g"), a = manifest(d / "a");
  REQUIRE(g["files"].size() == a["files"].size());
  CHECK(g["files"][0]["sha256"] == a["files"][0]["sha256"]);  // truth-labels
  CHECK(g["context"]["simd"] == "generic");
  for (const char* f : {"reference-scan.mha", "scan-20p.mha"}) {
    const pb::Image<float> x = pb::read_volume(d / ("g/" + std::string(f))).to_float();
    const pb::Image<float> y = pb::read_volume(d / ("a/" + std::string(f))).to_float();
    REQUIRE(x.size() == y.size());
    float lo = y[0], hi = y[0], worst = 0;
    for (int64_t i = 0; i < y.size(); ++i) lo = std::min(lo, y[i]), hi = std::max(hi, y[i]);
    for (int64_t i = 0; i < y.size(); ++i) worst = std::max(worst, std::fabs(x[i] - y[i]));
    INFO(f << " worst " << worst << " range " << hi - lo);
    CHECK(worst <= 1e-5f * (hi - lo));
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

TEST_CASE("uint16 scaling: 0 -> 0, full scale -> 65535, half-way rounds up, clipped outside", "[synth][cli][uint16]") {
  // Hand values for full scale 0.125 /mm (exact in binary, as is 0.0625): 0.0625 x 65535 / 0.125 =
  // 32767.5 -> 32768 (round half away from zero); 1e-6 x 65535 / 0.125 = 0.524 -> 1; 0.9e-6 ->
  // 0.472 -> 0; below 0 -> 0; 0.125 -> 65535; above -> 65535.
  pb::synth::Recipe r = pb::synth::preset("demo-small");
  r.output_type = "uint16";
  r.uint16_full_scale_mu = 0.125;
  pb::Geometry g;
  g.dims = {8, 1, 1};
  pb::VolumeF mu(g);
  const float in[8] = {-0.5f, 0.f, 0.9e-6f, 1e-6f, 0.0625f, 0.125f, 0.13f, 7.f};
  const uint16_t want[8] = {0, 0, 0, 1, 32768, 65535, 65535, 65535};
  for (int i = 0; i < 8; ++i) mu[i] = in[i];
  const pb::AnyVolume u = pb::synth::stored_scan(mu, r);
  REQUIRE(u.type() == pb::VoxelType::u16);
  const auto* v = static_cast<const uint16_t*>(u.raw());
  for (int i = 0; i < 8; ++i) CHECK(v[i] == want[i]);
  // The default full scale is twice the material mu (recipe.hpp), here 2 x 0.060 /mm.
  r.uint16_full_scale_mu = 0;
  CHECK(pb::synth::uint16_full_scale(r) == Approx(0.12));
}

TEST_CASE("uint16 scans are round(mu x 65535 / full_scale) of the float32 scan, with the scale and spacing recorded",
          "[synth][cli][uint16]") {
  TempDir d;
  const std::string base = kSmall + " --projections 20";
  REQUIRE(run_cli(base + " -o " + d / "f").exit_code == 0);
  // Default full scale, and one below the material mu (0.060 /mm) so that the material clips.
  for (const std::string fs_arg : {"", " --set scan.uint16_full_scale_mu=0.05"}) {
    INFO("uint16 run" << fs_arg);
    const std::string out = d / (fs_arg.empty() ? "u" : "c");
    REQUIRE(run_cli(base + " --set scan.output_type=uint16" + fs_arg + " -o " + out).exit_code == 0);
    const auto m = manifest(out);
    double fs = 0;
    for (const auto& f : m["files"])
      if (f["file"] == "scan-20p.mha") {
        fs = f["uint16_full_scale_mu_per_mm"].get<double>();
        CHECK(f["uint16_to_mu"].get<std::string>().find("65535") != std::string::npos);
      }
    CHECK(fs == Approx(fs_arg.empty() ? 2 * m["material"]["mu_per_mm"].get<double>() : 0.05));
    for (const char* name : {"scan-20p.mha", "reference-scan.mha"}) {
      INFO(name);
      const pb::AnyVolume fv = pb::read_volume(d / (std::string("f/") + name));
      const pb::AnyVolume uv = pb::read_volume(out + "/" + name);
      REQUIRE(uv.type() == pb::VoxelType::u16);
      REQUIRE(fv.type() == pb::VoxelType::f32);
      // The documented geometry: spacing = voxel_size_um / 1000 = 0.020 mm, voxel centres from
      // -(n - 1) / 2 voxels (phantom.hpp): -23.5 x 0.020 = -0.47 mm.
      for (int i = 0; i < 3; ++i) {
        CHECK(uv.geometry().dims[i] == 48);
        CHECK(uv.geometry().spacing_mm[i] == Approx(0.020));
        CHECK(uv.geometry().origin_mm[i] == Approx(-0.47));
      }
      const auto* mu = static_cast<const float*>(fv.raw());
      const auto* val = static_cast<const uint16_t*>(uv.raw());
      const int64_t n = int64_t(fv.bytes() / sizeof(float));
      int64_t wrong = 0, back_off = 0, low = 0, high = 0;
      for (int64_t i = 0; i < n; ++i) {
        const double x = double(mu[i]) * 65535.0 / fs;
        const int64_t want = std::clamp<int64_t>(std::llround(x), 0, 65535);
        wrong += val[i] != want;
        low += x < 0;
        high += x > 65535;
        // Back to mu (the conversion the manifest states): within half a step when not clipped.
        if (x >= 0 && x <= 65535) back_off += std::abs(val[i] * fs / 65535.0 - double(mu[i])) > 0.5 * fs / 65535.0 * (1 + 1e-9);
      }
      CHECK(wrong == 0);
      CHECK(back_off == 0);
      CHECK(low > 0);  // FBP undershoots in air: those voxels clip to 0
      if (!fs_arg.empty()) CHECK(high > 1000);  // material above 0.05 /mm clips to 65535
    }
  }
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
      {"--set scan.output_type=uint16 --set scan.uint16_full_scale_mu=-0.1", "scan.uint16_full_scale_mu"},
      {"--set scan.output_type=uint8", "scan.output_type"},
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

TEST_CASE("presets are the files synthetic/presets/*.toml, built in, found from any working folder", "[synth][cli]") {
  // Issue 18: the presets moved from strings in recipe.cpp to files embedded at build time.
  const fs::path dir = fs::path(PB_SOURCE_DIR) / "synthetic" / "presets";
  std::vector<std::string> files;
  for (const auto& e : fs::directory_iterator(dir))
    if (e.path().extension() == ".toml") files.push_back(e.path().stem().string());
  std::sort(files.begin(), files.end());
  CHECK(pb::synth::preset_names() == files);
  CHECK(std::find(files.begin(), files.end(), "demo-small") != files.end());
  TempDir d;
  for (const std::string& name : files) {
    INFO(name);
    std::ifstream f(dir / (name + ".toml"));
    std::stringstream text;
    text << f.rdbuf();
    const pb::synth::Recipe from_file = pb::synth::parse_recipe(text.str(), name);
    CHECK(pb::synth::preset(name) == from_file);
    // From a folder that holds nothing, without -o: --print-recipe needs no output folder.
    const auto r = run_shell("cd " + d.path.string() + " && " + PB_CLI_PATH + " synth --preset " + name + " --print-recipe");
    INFO(r.err);
    REQUIRE(r.exit_code == 0);
    CHECK(pb::synth::parse_recipe(r.out, "printed") == from_file);
  }
  const auto r = run_cli("synth --preset demo-small");  // neither -o nor --print-recipe
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("-o") != std::string::npos);
}

namespace {
// Volume (mm3) and centroid (mm, from the file's origin and spacing) of the voxels of a mask file
// whose label equals `label`.
std::pair<double, std::array<double, 3>> label_moments(const std::string& file, int label) {
  const pb::AnyVolume v = pb::read_volume(file);
  const pb::Mask m = v.to_mask(label);
  const pb::Geometry& g = m.geometry();
  double n = 0;
  std::array<double, 3> c{0, 0, 0};
  for (int64_t z = 0; z < g.dims[2]; ++z)
    for (int64_t y = 0; y < g.dims[1]; ++y)
      for (int64_t x = 0; x < g.dims[0]; ++x)
        if (m[(z * g.dims[1] + y) * g.dims[0] + x]) {
          n += 1;
          c[0] += g.origin_mm[0] + double(x) * g.spacing_mm[0];
          c[1] += g.origin_mm[1] + double(y) * g.spacing_mm[1];
          c[2] += g.origin_mm[2] + double(z) * g.spacing_mm[2];
        }
  for (double& v : c) v /= n;
  return {n * g.voxel_volume_mm3(), c};
}
}  // namespace

TEST_CASE("synth scan.pose: a posed fast scan with its truth in the scan's frame and the transform in the manifest",
          "[synth][cli][pose]") {
  // Issue 12. Analytic case: a rigid motion keeps volumes and moves the centroid c to R c + t.
  TempDir d;
  const double th = 10.0 * M_PI / 180, tx = 0.02, ty = -0.04, tz = 0.03;
  const auto r = run_cli(kSmall + " --set scan.pose.0.projections=40 --set scan.pose.0.rotation_deg=0,0,10" +
                         " --set scan.pose.0.translation_mm=0.02,-0.04,0.03 --set scan.pose.0.voxel_size_um=21 -o " +
                         d / "out");
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  const auto m = manifest(d / "out");
  nlohmann::json posed, plain;
  for (const auto& f : m["files"]) {
    if (f["file"] == "scan-40p.mha") posed = f;
    if (f["file"] == "scan-20p.mha") plain = f;
  }
  REQUIRE(posed.contains("pose"));
  CHECK_FALSE(plain.contains("pose"));
  const auto& p = posed["pose"];
  CHECK(p["voxel_size_um"].get<double>() == 21.0);
  CHECK(p["phantom_to_scan"]["rotation"][1][0].get<double>() == Approx(std::sin(th)).margin(1e-15));
  CHECK(p["phantom_to_scan"]["translation_mm"][1].get<double>() == -0.04);
  CHECK(pb::read_volume(d / "out/scan-40p.mha").geometry().spacing_mm[0] == Approx(0.021));
  CHECK(pb::read_volume(d / "out/scan-20p.mha").geometry().spacing_mm[0] == Approx(0.020));
  for (const char* f : {"truth-labels-40p.mha", "part-mask-40p.mha"}) CHECK(fs::exists(d.path / "out" / f));
  // Part and pores: volume kept, centroid moved by the pose (tolerance: a quarter of a voxel and
  // along z, where the flat caps fall on the grid, half a voxel; volumes 2.5 % (part) and 8 % (pores
  // as thin as a voxel): discretisation at 20 vs 21 um, measured 1.2 % and 4 %; common practice, no source).
  for (int label : {1, 2}) {
    INFO("label " << label);
    const auto [v0, c0] = label_moments(d / "out/truth-labels.mha", label);
    const auto [v1, c1] = label_moments(d / "out/truth-labels-40p.mha", label);
    CHECK(v1 == Approx(v0).epsilon(label == 1 ? 0.025 : 0.08));
    CHECK(c1[0] == Approx(std::cos(th) * c0[0] - std::sin(th) * c0[1] + tx).margin(0.005));
    CHECK(c1[1] == Approx(std::sin(th) * c0[0] + std::cos(th) * c0[1] + ty).margin(0.005));
    CHECK(c1[2] == Approx(c0[2] + tz).margin(0.011));  // flat caps on the grid: half a voxel
  }
  // recipe.toml reproduces the pose; tilts and unknown counts are refused naming the key.
  std::ifstream rf(d / "out/recipe.toml");
  std::stringstream rt;
  rt << rf.rdbuf();
  CHECK(pb::synth::parse_recipe(rt.str(), "written").poses.size() == 1);
  const auto tilt = run_cli(kSmall + " --set scan.pose.0.rotation_deg=1,0,0 -o " + d / "x");
  CHECK(tilt.exit_code == 2);
  CHECK(tilt.err.find("scan.pose.0.rotation_deg") != std::string::npos);
  const auto count = run_cli(kSmall + " --set scan.pose.0.projections=55 -o " + d / "x");
  CHECK(count.exit_code == 2);
  CHECK(count.err.find("scan.pose.0.projections") != std::string::npos);
  const auto far = run_cli(kSmall + " --set scan.pose.0.translation_mm=0.3,0,0 -o " + d / "x");
  CHECK(far.exit_code == 2);
  CHECK(far.err.find("scan.pose.0") != std::string::npos);
}
