// porebench export-patches SUITE -o DIR: training data for a segmentation model from the
// CALIBRATION slices of a suite's datasets only (never the test slices, which judge the model):
// for each dataset and scan, tiles of the scan (with `slices` adjacent z-slices as context) and
// of the reference pore mask, as .npy arrays, listed in DIR/index.csv (written last).
#include <cmath>
#include <fstream>
#include <filesystem>
#include <iostream>
#include <memory>
#include <sstream>

#include "apps/cli.hpp"
#include "core/context.hpp"
#include "core/error.hpp"
#include "core/io.hpp"
#include "core/sha256.hpp"
#include "methods/neural.hpp"
#include "suites/suite.hpp"
#include "synthetic/recipe.hpp"
#include "synthetic/scan.hpp"
#include "synthetic/synth.hpp"

namespace pb::cli {
namespace {

namespace fs = std::filesystem;

std::string token(const std::string& s) {
  std::string t;
  for (char c : s) t += std::isalnum(static_cast<unsigned char>(c)) || c == '-' || c == '_' ? c : '-';
  return t;
}

// A dataset ready for export: its scans, reference and part masks, and calibration slices.
// The split follows the runner's rule (suites/runner.cpp split_slices: calibration slices at the
// bottom of the part, `fraction` of its z-span); to be replaced by suites/datasets when it lands.
struct ExportData {
  std::string name, ref_mask_path, part_mask_path;
  struct Scan { std::string scan, path; int projections = 0; bool reference = false; };
  std::vector<Scan> scans;
  int64_t cal_begin = 0, cal_end = 0;
};

std::string read_text(const std::string& path) {
  std::ifstream f(path);
  std::stringstream ss;
  ss << f.rdbuf();
  return ss.str();
}

ExportData prepare(const suite::DatasetSpec& d, const suite::Calibration& c, const std::string& out) {
  ExportData e;
  e.name = d.name;
  if (d.kind != suite::DatasetSpec::synthetic) {
    if (d.reference_mask.empty())
      throw InputError("dataset '" + d.name + "': export-patches needs a reference_mask for a paired dataset");
    e.ref_mask_path = d.reference_mask;
    e.part_mask_path = d.part_mask;
    e.scans.push_back({"scan", d.scan, d.projections, false});
  } else {
    synth::Recipe r = d.preset.empty() ? synth::load_recipe(d.recipe) : synth::preset(d.preset);
    try {
      r = synth::apply_overrides(r, d.overrides);
      synth::validate(r);
    } catch (const InputError& x) {
      throw InputError("dataset '" + d.name + "': " + x.what());
    }
    const std::string dir = (fs::path(out) / "data" / token(d.name)).string();
    const std::string text = synth::to_toml(r);
    if (!(fs::exists(dir + "/manifest.json") && read_text(dir + "/recipe.toml") == text)) {
      fs::create_directories(dir);
      log("porebench: synthesising dataset '" + d.name + "' into " + dir);
      synth::write_synth(r, dir);
    }
    const bool dose_series = r.i0.size() > 1;
    for (const auto& s : synth::scan_list(r))
      e.scans.push_back({fs::path(s.file_name(dose_series)).stem().string(), dir + "/" + s.file_name(dose_series),
                         s.projections, s.reference});
    e.part_mask_path = dir + "/part-mask.mha";
    e.ref_mask_path = dir + "/reference-pores.mha";
    write_volume(read_volume(dir + "/truth-labels.mha").to_mask(2), e.ref_mask_path, {true});  // closed pores
  }
  const Mask part = e.part_mask_path.empty() ? Mask() : read_volume(e.part_mask_path).to_mask();
  int64_t z0 = 0, z1 = -1;
  const int64_t nz = part.empty() ? read_volume(e.ref_mask_path).geometry().dims[2] : part.nz();
  if (part.empty()) z1 = nz - 1;
  else {
    z0 = nz;
    for (int64_t z = 0; z < nz; ++z)
      for (int64_t i = 0; i < part.geometry().slice_voxels(); ++i)
        if (part.slice(z)[i]) {
          z0 = std::min(z0, z), z1 = std::max(z1, z);
          break;
        }
    if (z1 < z0) throw InputError("dataset '" + d.name + "': the part mask " + e.part_mask_path + " is empty");
  }
  e.cal_begin = z0;
  e.cal_end = z0 + std::max<int64_t>(1, int64_t(std::lround(c.fraction * double(z1 - z0 + 1))));
  return e;
}

int64_t mirror_index(int64_t i, int64_t n) {
  if (n == 1) return 0;
  const int64_t period = 2 * (n - 1);
  i %= period;
  if (i < 0) i += period;
  return i < n ? i : period - i;
}

Action setup_export_patches(CLI::App& app) {
  app.description("write training patches (.npy + index.csv) from the calibration slices of a suite's datasets");
  struct Args {
    std::string suite, out, scans = "sparse";
    int tile = 64, slices = 3, every = 2;
    double min_part = 0.3;
  };
  auto a = std::make_shared<Args>();
  app.add_option("SUITE", a->suite, "suite file (TOML): its datasets and calibration split")->required();
  app.add_option("-o,--output", a->out, "folder to write (created)")->required();
  app.add_option("--tile", a->tile, "patch size in voxels (x and y)")->check(CLI::Range(8, 1024));
  app.add_option("--slices", a->slices, "z-slices per patch, centred (odd; a 2.5D model uses up to this many)")
      ->check(CLI::Range(1, 15));
  app.add_option("--every", a->every, "take every N-th calibration slice")->check(CLI::Range(1, 1000));
  app.add_option("--min-part", a->min_part, "keep a patch when at least this fraction of it is inside the part")
      ->check(CLI::Range(0.0, 1.0));
  app.add_option("--scans", a->scans, "which scans: sparse (all but the reference scan), all, or a comma list of scan names");
  return [a] {
    if (a->slices % 2 == 0) throw InputError("--slices " + std::to_string(a->slices) + " must be odd");
    const suite::Suite s = suite::load_suite(a->suite);
    // The context slices of a calibration slice must not reach the test slices.
    if (a->slices / 2 > s.calibration.gap_slices)
      throw InputError("--slices " + std::to_string(a->slices) + ": the context (" + std::to_string(a->slices / 2) +
                       " slices each side) would reach the test slices; suite " + a->suite + " field [calibration] gap_slices = " +
                       std::to_string(s.calibration.gap_slices));
    fs::create_directories(a->out);
    check_writable((fs::path(a->out) / "index.csv").string());
    std::ostringstream index;
    index << "dataset,scan,projections,scan_file,mask_file,row,z,y,x,pore_voxels\n";
    nlohmann::ordered_json record = {{"context", run_context()}, {"suite", a->suite}, {"suite_sha256", s.text_sha256},
                                     {"tile", a->tile}, {"slices", a->slices}, {"every", a->every},
                                     {"min_part", a->min_part}, {"datasets", nlohmann::ordered_json::array()}};
    int64_t total = 0;
    const int64_t t = a->tile, ns = a->slices;
    for (const auto& spec : s.datasets) {
      const ExportData d = prepare(spec, s.calibration, a->out);
      const Mask ref = read_volume(d.ref_mask_path).to_mask();
      const Mask part = d.part_mask_path.empty() ? Mask() : read_volume(d.part_mask_path).to_mask();
      const int64_t nx = ref.nx(), ny = ref.ny(), nz = ref.nz();
      nlohmann::ordered_json drec = {{"name", d.name}, {"calibration_slices", {d.cal_begin, d.cal_end}},
                                     {"scans", nlohmann::ordered_json::array()}};
      // Patch positions: calibration slices only, every N-th, tiles inside the part.
      struct Pos { int64_t z, y, x; };
      std::vector<Pos> pos;
      for (int64_t z = d.cal_begin; z < d.cal_end; z += a->every)
        for (int64_t y = 0; y + t <= ny; y += t)
          for (int64_t x = 0; x + t <= nx; x += t) {
            int64_t in = t * t;
            if (!part.empty()) {
              in = 0;
              for (int64_t j = 0; j < t; ++j)
                for (int64_t i = 0; i < t; ++i) in += part(x + i, y + j, z) != 0;
            }
            if (double(in) >= a->min_part * double(t * t)) pos.push_back({z, y, x});
          }
      for (const auto& v : d.scans) {
        const bool want = a->scans == "all" ? true : a->scans == "sparse" ? !v.reference
                          : ("," + a->scans + ",").find("," + v.scan + ",") != std::string::npos;
        if (!want || pos.empty()) continue;
        const VolumeF scan = read_volume(v.path).to_float();
        if (!scan.geometry().same_dims(ref.geometry()))
          throw InputError("dataset '" + d.name + "': scan " + v.path + " and reference " + d.ref_mask_path + " differ in dims");
        std::vector<float> xs(pos.size() * size_t(ns * t * t));
        std::vector<uint8_t> ms(pos.size() * size_t(t * t));
        for (size_t k = 0; k < pos.size(); ++k) {
          const Pos& p = pos[k];
          for (int64_t c = 0; c < ns; ++c) {
            const int64_t z = mirror_index(p.z + c - ns / 2, nz);
            for (int64_t j = 0; j < t; ++j)
              for (int64_t i = 0; i < t; ++i) xs[(k * size_t(ns) + size_t(c)) * size_t(t * t) + size_t(j * t + i)] = scan(p.x + i, p.y + j, z);
          }
          for (int64_t j = 0; j < t; ++j)
            for (int64_t i = 0; i < t; ++i) ms[k * size_t(t * t) + size_t(j * t + i)] = ref(p.x + i, p.y + j, p.z) ? 1 : 0;
        }
        const std::string stem = token(d.name) + "-" + token(v.scan);
        write_npy((fs::path(a->out) / (stem + "-scans.npy")).string(), {int64_t(pos.size()), ns, t, t}, xs.data());
        write_npy((fs::path(a->out) / (stem + "-masks.npy")).string(), {int64_t(pos.size()), t, t}, ms.data());
        for (size_t k = 0; k < pos.size(); ++k) {
          int64_t pores = 0;
          for (int64_t i = 0; i < t * t; ++i) pores += ms[k * size_t(t * t) + size_t(i)];
          index << d.name << ',' << v.scan << ',' << v.projections << ',' << stem << "-scans.npy," << stem << "-masks.npy,"
                << k << ',' << pos[k].z << ',' << pos[k].y << ',' << pos[k].x << ',' << pores << '\n';
        }
        total += int64_t(pos.size());
        drec["scans"].push_back({{"scan", v.scan}, {"path", v.path}, {"projections", v.projections}, {"patches", pos.size()}});
      }
      record["datasets"].push_back(drec);
    }
    if (total == 0) throw InputError("suite " + a->suite + ": no patch of the calibration slices qualifies (try a smaller --tile or --min-part)");
    record["patches"] = total;
    write_text_atomic((fs::path(a->out) / "export.json").string(), record.dump(1) + "\n");
    write_text_atomic((fs::path(a->out) / "index.csv").string(), index.str());
    std::cout << "wrote " << total << " patches of the calibration slices to " << a->out << " (index.csv)\n";
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("export-patches", 45, setup_export_patches);

}  // namespace pb::cli
