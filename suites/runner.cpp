// The suite runner (see runner.hpp). One cell at a time, each method parallel inside (OpenMP),
// so results do not depend on scheduling; each cell file is written atomically.
#include "suites/runner.hpp"

#include <chrono>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <sstream>

#include "core/error.hpp"
#include "core/format.hpp"
#include "core/histogram.hpp"
#include "core/io.hpp"
#include "core/sha256.hpp"
#include "core/text_file.hpp"
#include "methods/registry.hpp"
#include "metrics/probability.hpp"
#include "metrics/score.hpp"
#include "suites/datasets.hpp"
#include "suites/layout.hpp"
#include "suites/predictions.hpp"
#include "suites/preflight.hpp"
#include "suites/results.hpp"

namespace fs = std::filesystem;

namespace pb::suite {

namespace {

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

struct CellPlan {
  size_t index;
  const Dataset* data;
  const Variant* variant;
  const MethodSpec* method;
  size_t grid_index;
  std::string id, file;
};

struct Loaded {  // the volumes of the current dataset variant, kept between cells
  std::string scan_path, masks;  // the scan file, and the reference|part mask files it is scored with
  VolumeF scan;
  VoxelType stored = VoxelType::f32;
  Mask part, ref;
  bool has_part = false;
};

// ---- phases of run_suite ----------------------------------------------------------------------

// The output folder holds nothing, or cells of this very suite and --resume was given. Returns
// the suite record of the earlier run (null if none).
Json check_output_folder(const Suite& s, const RunOptions& o) {
  const fs::path dir(o.out_dir);
  prepare_output_folder(o.out_dir);
  // Temporaries of a killed run (harden) — not by a shard: another shard, perhaps on another
  // machine whose processes this one cannot see, may be writing them.
  if (o.resume && o.shard_count <= 1) remove_stale_partials(o.out_dir);
  fs::create_directories(dir / "cells");
  check_writable((dir / "results.json").string());
  const std::string suite_json = (dir / "suite.json").string();
  if (!fs::exists(suite_json)) return Json();
  Json prev = read_json_file(suite_json);
  if (prev.value("suite_sha256", "") != s.text_sha256)
    throw InputError("output folder " + o.out_dir + " holds a run of another suite (or an edited one): use another -o");
  if (!o.resume && !fs::is_empty(dir / "cells"))
    throw InputError("output folder " + o.out_dir + " already holds cells of this suite: pass --resume to continue it, or use another -o");
  return prev;
}

std::vector<CellPlan> plan_cells(const Suite& s, const std::vector<Dataset>& data) {
  std::vector<CellPlan> plan;
  for (const auto& p : data)
    for (const auto& v : p.variants)
      for (const auto& m : s.methods)
        for (size_t g = 0; g < m.grid.size(); ++g) {
          CellPlan c{plan.size(), &p, &v, &m, g, "", ""};
          c.id = p.name + "/" + v.scan + "/" + m.label + "/" + std::to_string(g);
          c.file = file_token(p.name) + "__" + file_token(v.scan) + "__" + file_token(m.label) + "__g" + std::to_string(g);
          plan.push_back(c);
        }
  return plan;
}

// The datasets that have cells to run are prepared; the others keep the earlier run's record
// (or are prepared when it has none).
int prepare_needed(std::vector<Dataset>& data, const std::vector<const CellPlan*>& todo, const Json& prev, const Suite& s,
                   const RunOptions& o) {
  int n = 0;
  // Shards of one run (cluster array tasks) start together: one prepares a dataset, the others wait
  // and then find it prepared (synthesis is skipped when the recipe and manifest match).
  const WaitLock prepare_lock((fs::path(o.out_dir) / ".porebench-prepare.lock").string());
  for (auto& p : data) {
    bool needed = std::any_of(todo.begin(), todo.end(), [&](const CellPlan* c) { return c->data == &p; });
    if (!needed && prev.is_object() && prev.contains("datasets")) {
      const Json* rec = nullptr;
      for (const auto& d : prev["datasets"])
        if (d.value("name", "") == p.name) rec = &d;
      if (rec) p.record = *rec;
      needed = !rec;
    }
    if (!needed) continue;
    prepare_dataset(p, s.calibration, o.out_dir, o.quiet ? LogFn() : o.log);
    ++n;
  }
  return n;
}

// The suite record: all that the reports need besides the cells.
void write_suite_record(const Suite& s, const std::vector<Dataset>& data, const std::string& path) {
  const std::string text = read_text_file(s.path, "suite file");
  if (sha256_hex(text.data(), text.size()) != s.text_sha256)
    throw InputError("suite file " + s.path + " changed while the run was starting; run again");
  Json rec;
  rec["suite"] = {{"name", s.name}, {"description", s.description}, {"path", s.path}, {"validation", s.validation}};
  rec["suite_sha256"] = s.text_sha256;
  rec["suite_text"] = text;
  rec["calibration"] = {{"objective", s.calibration.objective}, {"fraction", s.calibration.fraction},
                        {"gap_slices", s.calibration.gap_slices}};
  // Everything of the scoring that can change a verdict: the hit rule (match, connectivity, volume
  // cap), the intervals criteria on CI bounds read (bootstrap samples and seed), the POD link.
  const ScoreOptions so = s.scoring.options();
  rec["scoring"] = {{"match", s.scoring.match}, {"connectivity", s.scoring.connectivity},
                    {"bins_per_decade", s.scoring.bins_per_decade}, {"bootstrap_samples", s.scoring.bootstrap_samples},
                    {"max_volume_ratio", so.max_volume_ratio}, {"bootstrap_seed", so.seed},
                    {"pod_link", pod_link_name(so.pod_link)}};
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
  write_text_atomic(path, rec.dump(1) + "\n");
}

Json run_cell(const CellPlan& c, const Suite& s, Loaded& cache, const std::string& out_dir) {
  Json cell;
  cell["id"] = c.id;
  cell["suite_sha256"] = s.text_sha256;  // report refuses a folder that mixes runs (suites/preflight)
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
  // a predictions method's file template filled for this cell (suites/predictions)
  const ParamValues params =
      parse_params(info, cell_settings(*c.method, c.grid_index, c.data->name, c.variant->scan, s.path));
  cell["params"] = params.text();
  try {
    const Variant& v = *c.variant;
    if (!v.error.empty()) throw InputError(v.error);  // e.g. a failed registration: reported, not scored
    if (cache.masks != v.ref_mask_path + "|" + v.part_mask_path) {
      cache = Loaded{};
      cache.masks = v.ref_mask_path + "|" + v.part_mask_path;
      cache.ref = read_volume(v.ref_mask_path).to_mask();
      cache.has_part = !v.part_mask_path.empty();
      if (cache.has_part) cache.part = read_volume(v.part_mask_path).to_mask();
    }
    if (cache.scan_path != v.path) {
      const AnyVolume a = read_volume(v.path, v.read);
      check_same_geometry(a.geometry(), v.path, cache.ref.geometry(), v.ref_mask_path);
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
    ScoreOptions so = s.scoring.options();
    so.z_begin = v.split.cal_begin;
    so.z_end = v.split.cal_end;
    cell["calibration"] = to_json(score(out.pores, cache.ref, roi, so));
    so.z_begin = v.split.test_begin;
    so.z_end = v.split.test_end;
    cell["test"] = to_json(score(out.pores, cache.ref, roi, so));
    if (!out.probability.empty()) {  // probability-map metrics at the method's threshold (metrics/probability)
      double t = 0.5;
      for (const auto& [k, v] : out.chosen)
        if (k == "pore_threshold") t = v;
      cell["calibration"]["probability"] =
          to_json(probability_metrics(out.probability, cache.ref, roi, c.data->cal_begin, c.data->cal_end, t));
      cell["test"]["probability"] =
          to_json(probability_metrics(out.probability, cache.ref, roi, c.data->test_begin, c.data->test_end, t));
    }
    const std::string png = "cells/" + c.file + ".png";
    write_mask_png(out.pores, v.split.montage_z, (fs::path(out_dir) / png).string());
    cell["montage_slice_png"] = png;
    cell["status"] = "ok";
  } catch (const std::exception& e) {
    // A failing cell is recorded with its error; the run goes on.
    cell["status"] = "failed";
    cell["error"] = e.what();
  }
  return cell;
}

void show_progress(const RunOptions& o, size_t done, size_t total, double eta, const CellPlan& c, const Json& cell) {
  if (o.quiet) return;
  if (o.progress_bar) {
    const int width = 28, fill = int(width * double(done) / double(total));
    std::cerr << "\r[" << std::string(size_t(fill), '#') << std::string(size_t(width - fill), '.') << "] " << done << "/"
              << total << " cells  ETA " << format_duration(eta) << "  " << c.id << "\033[K" << std::flush;
  } else {
    std::cerr << "porebench: cell " << done << "/" << total << " " << c.id << ": " << cell["status"].get<std::string>()
              << (cell["status"] == "ok" ? "" : " (" + cell["error"].get<std::string>() + ")") << ", ETA "
              << format_duration(eta) << '\n';
  }
}

void run_cells(const std::vector<const CellPlan*>& todo, const Suite& s, const RunOptions& o, RunSummary& sum) {
  const fs::path dir(o.out_dir);
  Loaded cache;
  const auto t0 = std::chrono::steady_clock::now();
  for (size_t i = 0; i < todo.size(); ++i) {
    const CellPlan& c = *todo[i];
    const Json cell = run_cell(c, s, cache, o.out_dir);
    write_text_atomic((dir / "cells" / (c.file + ".json")).string(), cell.dump(1) + "\n");
    ++sum.cells_run;
    if (cell["status"] != "ok") ++sum.cells_failed;
    const double el = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    show_progress(o, i + 1, todo.size(), el / double(i + 1) * double(todo.size() - i - 1), c, cell);
  }
  if (o.progress_bar && !o.quiet && !todo.empty()) std::cerr << '\n';
}

}  // namespace

RunSummary run_suite(const Suite& s, const RunOptions& o) {
  RunSummary sum;
  preflight(s);  // every value, file and scan checked before any work (suites/preflight)
  const fs::path dir(o.out_dir);
  const Json prev = check_output_folder(s, o);
  std::vector<Dataset> data;
  data.reserve(s.datasets.size());  // cells point into it
  for (const auto& d : s.datasets) data.push_back(describe_dataset(d, o.out_dir));
  const std::vector<CellPlan> plan = plan_cells(s, data);
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
  sum.datasets_prepared = prepare_needed(data, todo, prev, s, o);
  write_suite_record(s, data, (dir / "suite.json").string());
  if (!todo.empty()) {  // an earlier pass's results.json no longer describes the folder: it goes first
    std::error_code ec;
    fs::remove(dir / "results.json", ec);
    if (ec) throw InputError("cannot remove the earlier " + (dir / "results.json").string() + ": " + ec.message());
  }
  run_cells(todo, s, o, sum);
  size_t present = 0;
  for (const auto& c : plan) present += fs::exists(dir / "cells" / (c.file + ".json"));
  sum.complete = present == plan.size();
  return sum;
}

}  // namespace pb::suite
