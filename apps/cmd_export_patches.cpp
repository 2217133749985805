// porebench export-patches SUITE -o DIR: training data for a segmentation model from the
// CALIBRATION slices of a suite's datasets only (never the test slices, which judge the model):
// for each dataset and scan (every fast scan of a paired series, read with its own geometry, the
// reference registered onto it as in a run), tiles of the scan (with `slices` adjacent z-slices as
// context) and of the reference pore mask, as .npy arrays, listed in DIR/index.csv (written last).
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
#include "core/npy.hpp"
#include "methods/neural.hpp"
#include "suites/datasets.hpp"
#include "suites/layout.hpp"
#include "suites/paired.hpp"
#include "suites/suite.hpp"

namespace pb::cli {
namespace {

namespace fs = std::filesystem;

// A dataset made ready as a suite run makes it (suites/datasets.hpp): synthesised, or for a paired
// dataset every fast scan of the series with its own geometry, the reference brought onto its grid
// and its own calibration slices. A paired dataset needs a reference_mask (training on one
// method's segmentation would teach that method).
suite::Dataset prepare(const suite::DatasetSpec& d, const suite::Calibration& c, const std::string& out) {
  if (d.kind != suite::DatasetSpec::synthetic && d.reference_mask.empty())
    throw InputError("dataset '" + d.name + "': export-patches needs a reference_mask for a paired dataset");
  suite::Dataset p = suite::describe_dataset(d, out);
  suite::prepare_dataset(p, c, out, [](const std::string& m) { log("porebench: " + m); });
  return p;
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
      if (spec.kind == suite::DatasetSpec::paired) suite::preflight_paired(spec);  // every file, before any work
    }
    for (const auto& spec : s.datasets) {
      const suite::Dataset d = prepare(spec, s.calibration, a->out);
      nlohmann::ordered_json drec = {{"name", d.name}, {"calibration_slices", {d.cal_begin, d.cal_end}},
                                     {"scans", nlohmann::ordered_json::array()}};
      for (const auto& v : d.variants) {
        const bool want = a->scans == "all" ? true : a->scans == "sparse" ? !v.reference
                          : ("," + a->scans + ",").find("," + v.scan + ",") != std::string::npos;
        if (!want) continue;
        if (!v.error.empty()) {  // e.g. a registration that failed: no reference on this scan
          log("porebench: warning: dataset '" + d.name + "', scan '" + v.scan + "' skipped: " + v.error);
          drec["scans"].push_back({{"scan", v.scan}, {"path", v.path}, {"skipped", v.error}});
          continue;
        }
        const Mask ref = read_volume(v.ref_mask_path).to_mask();
        const Mask part = v.part_mask_path.empty() ? Mask() : read_volume(v.part_mask_path).to_mask();
        const int64_t nx = ref.nx(), ny = ref.ny(), nz = ref.nz();
        // Patch positions: this scan's calibration slices only, every N-th, tiles inside the part.
        struct Pos { int64_t z, y, x; };
        std::vector<Pos> pos;
        for (int64_t z = v.split.cal_begin; z < v.split.cal_end; z += a->every)
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
        if (pos.empty()) continue;
        const VolumeF scan = read_volume(v.path, v.read).to_float();  // the file's own geometry (raw, spacing_mm)
        if (!scan.geometry().same_dims(ref.geometry()))
          throw InputError("dataset '" + d.name + "': scan " + v.path + " and reference " + v.ref_mask_path + " differ in dims");
        std::vector<float> xs(pos.size() * size_t(ns * t * t));
        std::vector<uint8_t> ms(pos.size() * size_t(t * t));
        for (size_t k = 0; k < pos.size(); ++k) {
          const Pos& p = pos[k];
          for (int64_t c = 0; c < ns; ++c) {
            const int64_t z = mirror_index(p.z + c - ns / 2, nz);  // methods/neural.hpp, as inference pads
            for (int64_t j = 0; j < t; ++j)
              for (int64_t i = 0; i < t; ++i) xs[(k * size_t(ns) + size_t(c)) * size_t(t * t) + size_t(j * t + i)] = scan(p.x + i, p.y + j, z);
          }
          for (int64_t j = 0; j < t; ++j)
            for (int64_t i = 0; i < t; ++i) ms[k * size_t(t * t) + size_t(j * t + i)] = ref(p.x + i, p.y + j, p.z) ? 1 : 0;
        }
        const std::string stem = suite::file_token(d.name) + "-" + suite::file_token(v.scan);
        write_npy_array(xs.data(), VoxelType::f32, {int64_t(pos.size()), ns, t, t}, (fs::path(a->out) / (stem + "-scans.npy")).string());
        write_npy_array(ms.data(), VoxelType::u8, {int64_t(pos.size()), t, t}, (fs::path(a->out) / (stem + "-masks.npy")).string());
        for (size_t k = 0; k < pos.size(); ++k) {
          int64_t pores = 0;
          for (int64_t i = 0; i < t * t; ++i) pores += ms[k * size_t(t * t) + size_t(i)];
          index << d.name << ',' << v.scan << ',' << v.projections << ',' << stem << "-scans.npy," << stem << "-masks.npy,"
                << k << ',' << pos[k].z << ',' << pos[k].y << ',' << pos[k].x << ',' << pores << '\n';
        }
        total += int64_t(pos.size());
        drec["scans"].push_back({{"scan", v.scan}, {"path", v.path}, {"projections", v.projections},
                                 {"calibration_slices", {v.split.cal_begin, v.split.cal_end}}, {"patches", pos.size()}});
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
