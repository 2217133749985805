// The suite runner (see runner.hpp). One cell at a time, each method parallel inside (OpenMP),
// so results do not depend on scheduling; each cell file is written atomically.
#include "suites/runner.hpp"

#include <unistd.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <map>
#include <opencv2/core.hpp>
#include <opencv2/imgcodecs.hpp>
#include <sstream>

#include "core/context.hpp"
#include "core/error.hpp"
#include "core/histogram.hpp"
#include "core/io.hpp"
#include "core/sha256.hpp"
#include "methods/pores.hpp"
#include "methods/registry.hpp"
#include "metrics/score.hpp"
#include "report/report.hpp"
#include "suites/results.hpp"
#include "synthetic/synth.hpp"

namespace fs = std::filesystem;

namespace pb::suite {

namespace {

// ---- small utilities ------------------------------------------------------------------------

Json read_json(const std::string& path) {
  std::ifstream f(path);
  if (!f) throw InputError("cannot read " + path);
  try {
    return Json::parse(f);
  } catch (const std::exception& e) {
    throw InputError("cannot parse " + path + ": " + e.what());
  }
}

// Peak resident memory since the last reset, in MiB (Linux: /proc/self/status VmHWM, reset by
// writing 5 to /proc/self/clear_refs). -1 where unavailable.
void reset_peak_rss() {
  std::ofstream f("/proc/self/clear_refs");
  if (f) f << "5";
}
double peak_rss_mib() {
  std::ifstream f("/proc/self/status");
  std::string line;
  while (std::getline(f, line))
    if (line.rfind("VmHWM:", 0) == 0) return std::stod(line.substr(6)) / 1024.0;
  return -1;
}

// An 8-bit PNG of slice z: grey values mapped from [lo, hi], or a mask as 0/255.
void write_slice_png(const VolumeF& v, int64_t z, double lo, double hi, const std::string& path) {
  cv::Mat src(int(v.ny()), int(v.nx()), CV_32F, const_cast<float*>(v.slice(z)));
  cv::Mat out;
  const double scale = hi > lo ? 255.0 / (hi - lo) : 1.0;
  src.convertTo(out, CV_8U, scale, -lo * scale);
  AtomicOutput a(path);
  if (!cv::imwrite(a.tmp_path(), out)) throw InputError("cannot write " + path);
  a.commit();
}
void write_mask_png(const Mask& m, int64_t z, const std::string& path) {
  cv::Mat src(int(m.ny()), int(m.nx()), CV_8U, const_cast<uint8_t*>(m.slice(z)));
  cv::Mat out = src * 255;
  AtomicOutput a(path);
  if (!cv::imwrite(a.tmp_path(), out)) throw InputError("cannot write " + path);
  a.commit();
}

// ---- datasets -------------------------------------------------------------------------------

struct Variant {
  std::string scan;       // "reference-scan", "scan-400p", "scan-400p-i0-5000" or "scan"
  std::string path;
  int projections = 0, reference_projections = 0;
  double i0 = 0, reference_i0 = 0;
  bool reference = false;
};

struct Prepared {
  std::string name, ref_mask_path, part_mask_path, data_dir;
  std::vector<Variant> variants;
  int64_t cal_begin = 0, cal_end = 0, test_begin = 0, test_end = 0, montage_z = 0;
  Json record;  // what the results say about the dataset
};

// The z-split: calibration slices at the bottom of the part, a gap, the test slices above.
void split_slices(Prepared& p, const Mask* part, int64_t nz, const Calibration& c) {
  int64_t z0 = 0, z1 = nz - 1;
  if (part) {
    z0 = nz, z1 = -1;
    for (int64_t z = 0; z < nz; ++z) {
      const uint8_t* s = part->slice(z);
      bool any = false;
      for (int64_t i = 0; i < part->geometry().slice_voxels() && !any; ++i) any = s[i] != 0;
      if (any) z0 = std::min(z0, z), z1 = std::max(z1, z);
    }
    if (z1 < z0) throw InputError("dataset '" + p.name + "': the part mask is empty");
  }
  const int64_t span = z1 - z0 + 1;
  p.cal_begin = z0;
  p.cal_end = z0 + std::max<int64_t>(1, int64_t(std::lround(c.fraction * double(span))));
  p.test_begin = p.cal_end + c.gap_slices;
  p.test_end = z1 + 1;
  if (p.test_end - p.test_begin < 1)
    throw InputError("dataset '" + p.name + "': " + std::to_string(span) + " part slices leave no test slices after " +
                     std::to_string(p.cal_end - p.cal_begin) + " calibration slices and a gap of " +
                     std::to_string(c.gap_slices) + "; lower [calibration] fraction or gap_slices");
}

Prepared prepare_synthetic(const DatasetSpec& d, const std::string& out_dir, const RunOptions& o) {
  Prepared p;
  p.name = d.name;
  p.data_dir = (fs::path(out_dir) / "data" / report::file_token(d.name)).string();
  synth::Recipe r = d.preset.empty() ? synth::load_recipe(d.recipe) : synth::preset(d.preset);
  try {
    r = synth::apply_overrides(r, d.overrides);
    synth::validate(r);
  } catch (const InputError& e) {
    throw InputError("dataset '" + d.name + "': " + e.what());
  }
  const std::string recipe_text = synth::to_toml(r);
  const std::string manifest = p.data_dir + "/manifest.json";
  bool fresh = true;
  if (fs::exists(manifest) && fs::exists(p.data_dir + "/recipe.toml")) {
    std::ifstream f(p.data_dir + "/recipe.toml");
    std::stringstream ss;
    ss << f.rdbuf();
    fresh = ss.str() != recipe_text;
  }
  if (fresh) {
    fs::create_directories(p.data_dir);
    if (!o.quiet) std::cerr << "porebench: synthesising dataset '" << d.name << "' into " << p.data_dir << '\n';
    synth::write_synth(r, p.data_dir);
  }
  // The reference for scoring is the exact truth: closed pores (label 2) inside the part.
  p.part_mask_path = p.data_dir + "/part-mask.mha";
  p.ref_mask_path = p.data_dir + "/reference-pores.mha";
  const AnyVolume labels = read_volume(p.data_dir + "/truth-labels.mha");
  const Mask ref = labels.to_mask(2);
  if (fresh || !fs::exists(p.ref_mask_path)) write_volume(ref, p.ref_mask_path, {true});
  const bool dose_series = r.i0.size() > 1;
  for (const auto& s : synth::scan_list(r)) {
    Variant v;
    v.scan = fs::path(s.file_name(dose_series)).stem().string();
    v.path = p.data_dir + "/" + s.file_name(dose_series);
    v.projections = s.projections;
    v.i0 = s.i0;
    v.reference = s.reference;
    v.reference_projections = r.reference_projections;
    v.reference_i0 = r.reference_dose();
    p.variants.push_back(v);
  }
  p.record = {{"name", d.name}, {"kind", "synthetic"}, {"preset", d.preset}, {"recipe", d.recipe},
              {"overrides", d.overrides}, {"data_dir", p.data_dir}, {"reference", "exact truth (closed pores)"},
              {"recipe_sha256", sha256_hex(recipe_text.data(), recipe_text.size())},
              {"manifest", read_json(manifest)}};
  return p;
}

Prepared prepare_paired(const DatasetSpec& d, const std::string& out_dir) {
  Prepared p;
  p.name = d.name;
  p.data_dir = (fs::path(out_dir) / "data" / report::file_token(d.name)).string();
  fs::create_directories(p.data_dir);
  p.part_mask_path = d.part_mask;
  const AnyVolume scan = read_volume(d.scan, d.read);
  Mask part;
  if (!d.part_mask.empty()) {
    const AnyVolume pm = read_volume(d.part_mask);
    check_same_geometry(scan.geometry(), d.scan, pm.geometry(), d.part_mask);
    part = pm.to_mask();
  }
  Json ref_record;
  if (!d.reference_mask.empty()) {
    const AnyVolume rm = read_volume(d.reference_mask);
    check_same_geometry(scan.geometry(), d.scan, rm.geometry(), d.reference_mask);
    p.ref_mask_path = d.reference_mask;
    if (d.reference_label >= 0) {
      p.ref_mask_path = p.data_dir + "/reference-pores.mha";
      write_volume(rm.to_mask(d.reference_label), p.ref_mask_path, {true});
    }
    ref_record = {{"mask", d.reference_mask}, {"label", d.reference_label}, {"sha256", sha256_file(d.reference_mask)}};
  } else {
    // The reference is the high-quality scan segmented by the named method.
    const AnyVolume rs = read_volume(d.reference_scan, d.read);
    check_same_geometry(scan.geometry(), d.scan, rs.geometry(), d.reference_scan);
    const MethodInfo& m = Registry::instance().get(d.reference_method);
    const ParamValues pv = parse_params(m, d.reference_params);
    const VolumeF f = rs.to_float();
    const MethodOutput out = run_method(m, pv, MethodInput{f, part.empty() ? nullptr : &part, rs.type()});
    p.ref_mask_path = p.data_dir + "/reference-pores.mha";
    write_volume(out.pores, p.ref_mask_path, {true});
    Json chosen = Json::object();
    for (const auto& [k, v] : out.chosen) chosen[k] = v;
    ref_record = {{"scan", d.reference_scan}, {"sha256", sha256_file(d.reference_scan)}, {"method", m.name},
                  {"params", pv.text()}, {"chosen", chosen}};
  }
  Variant v;
  v.scan = "scan";
  v.path = d.scan;
  v.projections = d.projections;
  v.reference_projections = d.reference_projections;
  p.variants.push_back(v);
  p.record = {{"name", d.name}, {"kind", "paired"}, {"scan", d.scan}, {"scan_sha256", sha256_file(d.scan)},
              {"part_mask", d.part_mask}, {"reference", ref_record}};
  return p;
}

// ---- cells ------------------------------------------------------------------------------------

struct CellPlan {
  size_t index;
  const Prepared* data;
  const Variant* variant;
  const MethodSpec* method;
  size_t grid_index;
  std::string id, file;
};

struct Loaded {  // the volumes of the current dataset variant, kept between cells
  std::string scan_path, dataset;
  VolumeF scan;
  VoxelType stored = VoxelType::f32;
  Mask part, ref;
  bool has_part = false;
};

Json run_cell(const CellPlan& c, const Suite& s, Loaded& cache, const std::string& out_dir) {
  Json cell;
  cell["id"] = c.id;
  cell["index"] = c.index;
  cell["dataset"] = c.data->name;
  cell["scan"] = c.variant->scan;
  cell["projections"] = c.variant->projections;
  cell["reference_projections"] = c.variant->reference_projections;
  cell["i0"] = c.variant->i0;
  cell["reference_i0"] = c.variant->reference_i0;
  cell["reference_scan"] = c.variant->reference;
  cell["method"] = c.method->label;
  cell["method_name"] = c.method->name;
  cell["grid_index"] = c.grid_index;
  cell["grid_size"] = c.method->grid.size();
  const MethodInfo& info = Registry::instance().get(c.method->name);
  cell["family"] = info.family;
  const ParamValues params = parse_params(info, c.method->grid.point(c.grid_index));
  cell["params"] = params.text();
  try {
    if (cache.dataset != c.data->name) {
      cache = Loaded{};
      cache.dataset = c.data->name;
      cache.ref = read_volume(c.data->ref_mask_path).to_mask();
      cache.has_part = !c.data->part_mask_path.empty();
      if (cache.has_part) cache.part = read_volume(c.data->part_mask_path).to_mask();
    }
    if (cache.scan_path != c.variant->path) {
      const AnyVolume a = read_volume(c.variant->path);
      check_same_geometry(a.geometry(), c.variant->path, cache.ref.geometry(), c.data->ref_mask_path);
      cache.scan = a.to_float();
      cache.stored = a.type();
      cache.scan_path = c.variant->path;
      const Stats st = compute_stats(cache.scan);
      if (st.nan_count) throw InputError("scan " + c.variant->path + " has " + std::to_string(st.nan_count) + " NaN voxels");
    }
    const Mask* roi = cache.has_part ? &cache.part : nullptr;
    reset_peak_rss();
    const MethodOutput out = run_method(info, params, MethodInput{cache.scan, roi, cache.stored});
    Json chosen = Json::object();
    for (const auto& [k, v] : out.chosen) chosen[k] = v;
    cell["chosen"] = chosen;
    cell["warnings"] = out.warnings;
    cell["runtime_s"] = out.runtime_s;
    cell["peak_rss_mib"] = peak_rss_mib();
    ScoreOptions so;
    so.connectivity = s.scoring.connectivity;
    so.match = parse_match_rule(s.scoring.match);
    so.bins_per_decade = s.scoring.bins_per_decade;
    so.bootstrap_samples = s.scoring.bootstrap_samples;
    so.z_begin = c.data->cal_begin;
    so.z_end = c.data->cal_end;
    cell["calibration"] = to_json(score(out.pores, cache.ref, roi, so));
    so.z_begin = c.data->test_begin;
    so.z_end = c.data->test_end;
    cell["test"] = to_json(score(out.pores, cache.ref, roi, so));
    const std::string png = "cells/" + c.file + ".png";
    write_mask_png(out.pores, c.data->montage_z, (fs::path(out_dir) / png).string());
    cell["montage_slice_png"] = png;
    cell["status"] = "ok";
  } catch (const std::exception& e) {
    // A failing cell is recorded with its error; the run goes on.
    cell["status"] = "failed";
    cell["error"] = e.what();
  }
  return cell;
}

std::string format_eta(double s) {
  if (!std::isfinite(s) || s < 0) return "--:--";
  char b[32];
  std::snprintf(b, sizeof(b), "%d:%02d", int(s) / 60, int(s) % 60);
  return b;
}

}  // namespace

RunSummary run_suite(const Suite& s, const RunOptions& o) {
  RunSummary sum;
  const fs::path dir(o.out_dir);
  fs::create_directories(dir / "cells");
  check_writable((dir / "results.json").string());
  const std::string suite_json = (dir / "suite.json").string();
  if (fs::exists(suite_json)) {
    const Json prev = read_json(suite_json);
    if (prev.value("suite_sha256", "") != s.text_sha256)
      throw InputError("output folder " + o.out_dir + " holds a run of another suite (or an edited one): use another -o");
    if (!o.resume && !fs::is_empty(dir / "cells"))
      throw InputError("output folder " + o.out_dir + " already holds cells of this suite: pass --resume to continue it, or use another -o");
  }
  // Datasets first (synthesis, reference segmentation): cells need them.
  std::vector<Prepared> data;
  for (const auto& d : s.datasets) {
    data.push_back(d.kind == DatasetSpec::synthetic ? prepare_synthetic(d, o.out_dir, o) : prepare_paired(d, o.out_dir));
    Prepared& p = data.back();
    const Mask part = p.part_mask_path.empty() ? Mask() : read_volume(p.part_mask_path).to_mask();
    const Mask ref = read_volume(p.ref_mask_path).to_mask();
    split_slices(p, part.empty() ? nullptr : &part, ref.nz(), s.calibration);
    {
      // Montages show the test slice with the most reference pore voxels.
      int64_t best = -1;
      for (int64_t z = p.test_begin; z < p.test_end; ++z) {
        int64_t n = 0;
        const uint8_t* sl = ref.slice(z);
        for (int64_t i = 0; i < ref.geometry().slice_voxels(); ++i) n += sl[i] != 0;
        if (n > best) best = n, p.montage_z = z;
      }
    }
    p.record["slices"] = {{"calibration", {p.cal_begin, p.cal_end}}, {"gap", s.calibration.gap_slices},
                          {"test", {p.test_begin, p.test_end}}, {"montage_z", p.montage_z}};
    // Montage backgrounds: the reference and each scan at the montage slice.
    const std::string ref_png = "data/" + report::file_token(p.name) + "/montage-reference.png";
    write_mask_png(ref, p.montage_z, (dir / ref_png).string());
    p.record["montage_reference_png"] = ref_png;
    Json variants = Json::array();
    for (const auto& v : p.variants) {
      const VolumeF f = read_volume(v.path).to_float();
      const Stats st = compute_stats(f);
      const std::string png = "data/" + report::file_token(p.name) + "/montage-" + report::file_token(v.scan) + ".png";
      write_slice_png(f, p.montage_z, st.min, st.max, (dir / png).string());
      variants.push_back({{"scan", v.scan}, {"path", v.path}, {"projections", v.projections}, {"i0", v.i0},
                          {"reference", v.reference}, {"reference_projections", v.reference_projections},
                          {"reference_i0", v.reference_i0}, {"montage_png", png}});
    }
    p.record["variants"] = variants;
  }
  // The suite record: all that write_results needs besides the cells.
  {
    std::ifstream f(s.path, std::ios::binary);
    std::stringstream ss;
    ss << f.rdbuf();
    Json rec;
    rec["suite"] = {{"name", s.name}, {"description", s.description}, {"path", s.path}};
    rec["suite_sha256"] = s.text_sha256;
    rec["suite_text"] = ss.str();
    rec["calibration"] = {{"objective", s.calibration.objective}, {"fraction", s.calibration.fraction},
                          {"gap_slices", s.calibration.gap_slices}};
    rec["scoring"] = {{"match", s.scoring.match}, {"connectivity", s.scoring.connectivity},
                      {"bins_per_decade", s.scoring.bins_per_decade}, {"bootstrap_samples", s.scoring.bootstrap_samples}};
    rec["criteria"] = criteria_to_json(s.criteria);
    Json methods = Json::array();
    for (const auto& m : s.methods) {
      const MethodInfo& info = Registry::instance().get(m.name);
      Json axes = Json::object();
      for (const auto& [k, v] : m.grid.axes) axes[k] = v;
      methods.push_back({{"label", m.label}, {"name", m.name}, {"family", info.family}, {"doc", info.doc},
                         {"citation", info.citation}, {"grid", axes}, {"grid_size", m.grid.size()}});
    }
    rec["methods"] = methods;
    Json ds = Json::array();
    for (const auto& p : data) ds.push_back(p.record);
    rec["datasets"] = ds;
    write_text_atomic(suite_json, rec.dump(1) + "\n");
  }
  // Expand the cells.
  std::vector<CellPlan> plan;
  for (const auto& p : data)
    for (const auto& v : p.variants)
      for (const auto& m : s.methods)
        for (size_t g = 0; g < m.grid.size(); ++g) {
          CellPlan c{plan.size(), &p, &v, &m, g, "", ""};
          c.id = p.name + "/" + v.scan + "/" + m.label + "/" + std::to_string(g);
          c.file = report::file_token(p.name) + "__" + report::file_token(v.scan) + "__" + report::file_token(m.label) + "__g" + std::to_string(g);
          plan.push_back(c);
        }
  sum.cells_total = int(plan.size());
  std::vector<const CellPlan*> todo;
  for (const auto& c : plan) {
    if (int(c.index % size_t(o.shard_count)) != o.shard_index) continue;
    if (fs::exists(dir / "cells" / (c.file + ".json"))) {
      ++sum.cells_skipped;
      continue;
    }
    todo.push_back(&c);
  }
  Loaded cache;
  const auto t0 = std::chrono::steady_clock::now();
  for (size_t i = 0; i < todo.size(); ++i) {
    const CellPlan& c = *todo[i];
    const Json cell = run_cell(c, s, cache, o.out_dir);
    write_text_atomic((dir / "cells" / (c.file + ".json")).string(), cell.dump(1) + "\n");
    ++sum.cells_run;
    if (cell["status"] != "ok") ++sum.cells_failed;
    const double el = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    const double eta = el / double(i + 1) * double(todo.size() - i - 1);
    if (o.quiet) continue;
    if (o.progress_bar) {
      const int width = 28, fill = int(width * double(i + 1) / double(todo.size()));
      std::cerr << "\r[" << std::string(size_t(fill), '#') << std::string(size_t(width - fill), '.') << "] " << i + 1
                << "/" << todo.size() << " cells  ETA " << format_eta(eta) << "  " << c.id << "\033[K" << std::flush;
    } else {
      std::cerr << "porebench: cell " << i + 1 << "/" << todo.size() << " " << c.id << ": " << cell["status"].get<std::string>()
                << (cell["status"] == "ok" ? "" : " (" + cell["error"].get<std::string>() + ")") << ", ETA "
                << format_eta(eta) << '\n';
    }
  }
  if (o.progress_bar && !o.quiet && !todo.empty()) std::cerr << '\n';
  size_t present = 0;
  for (const auto& c : plan) present += fs::exists(dir / "cells" / (c.file + ".json"));
  sum.complete = present == plan.size();
  if (sum.complete) sum.criteria_met = write_results(o.out_dir);
  return sum;
}

bool write_results(const std::string& out_dir) {
  const fs::path dir(out_dir);
  const Json rec = read_json((dir / "suite.json").string());
  std::vector<Json> cells;
  for (const auto& e : fs::directory_iterator(dir / "cells"))
    if (e.path().extension() == ".json") cells.push_back(read_json(e.path().string()));
  std::sort(cells.begin(), cells.end(), [](const Json& a, const Json& b) { return a["index"] < b["index"]; });
  const auto criteria = criteria_from_json(rec["criteria"]);
  const auto sel = select_cells(cells, rec["calibration"]["objective"], criteria);
  Json results;
  results["context"] = run_context();
  for (auto it = rec.begin(); it != rec.end(); ++it) results[it.key()] = it.value();
  Json js = Json::array();
  bool all_passed = true;
  for (const auto& s : sel) {
    Json verdicts = Json::array();
    for (const auto& [text, ok] : s.verdicts) verdicts.push_back({{"criterion", text}, {"passed", ok}});
    js.push_back({{"dataset", s.dataset}, {"scan", s.scan}, {"method", s.method}, {"projections", s.projections},
                  {"i0", s.i0}, {"tuned", s.tuned}, {"chosen_cell", cells[s.chosen]["id"]},
                  {"chosen_params", cells[s.chosen]["params"]}, {"failed", s.failed}, {"verdicts", verdicts},
                  {"passed", s.passed}});
    all_passed = all_passed && s.passed;
  }
  results["selections"] = js;
  results["advice"] = report::scan_recipe_advice(results);
  results["criteria_met"] = all_passed;
  results["cells"] = cells;
  write_text_atomic((dir / "results.json").string(), results.dump(1) + "\n");
  write_text_atomic((dir / "results.csv").string(), report::results_csv(results));
  write_text_atomic((dir / "summary.md").string(), report::summary_md(results));
  report::write_documents(results, out_dir);
  return all_passed;
}

}  // namespace pb::suite
