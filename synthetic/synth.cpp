// The synthetic-scan pipeline: recipe -> phantom -> truth -> scans, and the output folder with its
// manifest. No new physics here (see phantom.cpp, scan.cpp, projector.cpp, fbp.cpp); conventions: truth labels 0
// background, 1 material, 2 closed pore; scans in mu (1/mm) unless uint16 is asked for.
#include "synthetic/synth.hpp"

#include <chrono>
#include <cmath>
#include <filesystem>
#include <map>
#include <sstream>

#include "core/context.hpp"
#include "core/error.hpp"
#include "core/io.hpp"
#include "core/sha256.hpp"

namespace pb::synth {

namespace {
void say(const std::function<void(const std::string&)>& f, const std::string& m) {
  if (f) f(m);
}
double seconds_since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}
}  // namespace

SynthResult synthesize(const Recipe& r, const std::function<void(const std::string&)>& progress) {
  validate(r);
  if (!r.poses.empty())
    throw InputError("recipe: scan.pose is written by porebench synth only (the in-memory scans of a suite are "
                     "scored on the phantom's grid); remove [[scan.pose]] here");
  SynthResult out{r, build_phantom(r), {}, {}};
  say(progress, "phantom: " + std::to_string(out.phantom.pores.size()) + " pores");
  out.truth = rasterize_truth(out.phantom, r.supersampling);
  const auto specs = scan_list(r);
  // Group by projection count so that the transmission of a slice is computed once per count.
  std::map<int, std::vector<size_t>> by_count;
  for (size_t i = 0; i < specs.size(); ++i) by_count[specs[i].projections].push_back(i);
  out.scans.resize(specs.size());
  for (auto& [n, idx] : by_count) {
    std::vector<ScanSpec> group;
    for (size_t i : idx) group.push_back(specs[i]);
    say(progress, "scan: " + std::to_string(n) + " projections");
    auto vols = simulate_scans(out.phantom, r, group);
    for (size_t j = 0; j < idx.size(); ++j) out.scans[idx[j]] = {specs[idx[j]], std::move(vols[j])};
  }
  return out;
}

double uint16_full_scale(const Recipe& r) {
  return r.uint16_full_scale_mu > 0 ? r.uint16_full_scale_mu : 2.0 * r.material_mu();
}

AnyVolume stored_scan(const VolumeF& mu, const Recipe& r) {
  if (r.output_type == "float32") return AnyVolume(mu);
  const double fs = uint16_full_scale(r);
  Image<uint16_t> u(mu.geometry());
  for (int64_t i = 0; i < mu.size(); ++i) u[i] = uint16_t(std::lround(std::clamp(double(mu[i]) * 65535.0 / fs, 0.0, 65535.0)));
  return AnyVolume(std::move(u));
}

namespace {

// A posed scan's phantom and recipe (voxel size), its truth written in the scan's frame
// (truth-labels-<N>p.mha, part-mask-<N>p.mha) and the manifest's pose block.
template <class Path, class Record>
std::pair<std::pair<Phantom, Recipe>, nlohmann::ordered_json> write_posed_truth(
    const Phantom& ph, const Recipe& r, const ScanPose& pose, int n, const Path& path, const WriteOptions& wo,
    const Record& record) {
  size_t index = 0;
  while (&r.poses[index] != &pose) ++index;
  Recipe rp = r;
  if (pose.voxel_size_um > 0) rp.voxel_size_um = pose.voxel_size_um;
  Phantom posed = posed_phantom(ph, pose, rp.voxel_mm(), "scan.pose." + std::to_string(index));
  const std::string suffix = "-" + std::to_string(n) + "p.mha";
  {
    const Truth truth = rasterize_truth(posed, r.supersampling);
    write_volume(truth.labels, path("truth-labels" + suffix), wo);
    write_volume(truth.part, path("part-mask" + suffix), wo);
  }
  record("truth-labels" + suffix, "truth-labels-posed", {{"projections", n}});
  record("part-mask" + suffix, "part-mask-posed", {{"projections", n}});
  const double th = pose.rotation_deg[2] * M_PI / 180, c = std::cos(th), s = std::sin(th);
  nlohmann::ordered_json block{
      {"rotation_deg", pose.rotation_deg},
      {"translation_mm", pose.translation_mm},
      {"voxel_size_um", rp.voxel_size_um},
      {"phantom_to_scan",
       {{"rotation", {{c, -s, 0.0}, {s, c, 0.0}, {0.0, 0.0, 1.0}}},
        {"translation_mm", pose.translation_mm},
        {"convention", "x_scan_mm = rotation * x_phantom_mm + translation_mm; x_mm = origin_mm + index * spacing_mm "
                       "in each file's header (truth-labels.mha: phantom frame; this scan: scan frame)"}}},
      {"truth_labels", "truth-labels" + suffix},
      {"part_mask", "part-mask" + suffix}};
  return {{std::move(posed), std::move(rp)}, std::move(block)};
}

}  // namespace

nlohmann::ordered_json write_synth(const Recipe& r, const std::string& dir, const WriteSynthOptions& opt) {
  validate(r);
  namespace fs = std::filesystem;
  std::error_code ec;
  fs::create_directories(dir, ec);
  if (ec) throw InputError("output folder " + dir + " cannot be created: " + ec.message());
  const auto path = [&](const std::string& name) { return (fs::path(dir) / name).string(); };
  check_writable(path("manifest.json"));
  const auto t_start = std::chrono::steady_clock::now();
  WriteOptions wo;
  wo.compress = opt.compress;

  nlohmann::ordered_json files = nlohmann::ordered_json::array();
  auto record = [&](const std::string& name, const std::string& kind, nlohmann::ordered_json extra) {
    nlohmann::ordered_json f{{"file", name}, {"kind", kind}, {"sha256", sha256_file(path(name))}};
    for (auto& [k, v] : extra.items()) f[k] = v;
    files.push_back(f);
  };

  const Phantom ph = build_phantom(r);
  for (size_t i = 0; i < r.poses.size(); ++i)  // every posed part fits its scan, before any file is written
    posed_phantom(ph, r.poses[i], r.poses[i].voxel_size_um > 0 ? r.poses[i].voxel_size_um * 1e-3 : r.voxel_mm(),
                  "scan.pose." + std::to_string(i));
  say(opt.progress, "phantom: " + std::to_string(ph.pores.size()) + " pores, porosity " +
                        std::to_string(ph.porosity_pct()) + " % (analytic)");
  auto t0 = std::chrono::steady_clock::now();
  {
    const Truth truth = rasterize_truth(ph, r.supersampling);
    int64_t n_mat = 0, n_pore = 0;
    for (int64_t i = 0; i < truth.labels.size(); ++i) {
      n_mat += truth.labels[i] == 1;
      n_pore += truth.labels[i] == 2;
    }
    write_volume(truth.labels, path("truth-labels.mha"), wo);
    write_volume(truth.part, path("part-mask.mha"), wo);
    say(opt.progress, "truth: " + std::to_string(n_pore) + " pore voxels, " + std::to_string(seconds_since(t0)) + " s");
    record("truth-labels.mha", "truth-labels",
           {{"labels", {{"0", "background"}, {"1", "material"}, {"2", "pore"}}},
            {"material_voxels", n_mat},
            {"pore_voxels", n_pore},
            {"voxel_porosity_pct", 100.0 * double(n_pore) / double(std::max<int64_t>(1, n_mat + n_pore))}});
    record("part-mask.mha", "part-mask", {{"part_voxels", n_mat + n_pore}});
  }
  write_text_atomic(path("pores.csv"), pores_csv(ph));
  record("pores.csv", "pores", {{"pores", ph.pores.size()}});
  write_text_atomic(path("recipe.toml"), to_toml(r));
  record("recipe.toml", "recipe", nlohmann::ordered_json::object());

  const auto specs = scan_list(r);
  const bool dose_series = r.i0.size() > 1;
  // Groups of one projection count and one pose (the reference scan is never posed).
  std::map<std::pair<int, const ScanPose*>, std::vector<size_t>> by_count;
  for (size_t i = 0; i < specs.size(); ++i)
    by_count[{specs[i].projections, specs[i].reference ? nullptr : r.pose_for(specs[i].projections)}].push_back(i);
  // Largest count first: the reference scan is usually the slowest and the most wanted.
  for (auto it = by_count.rbegin(); it != by_count.rend(); ++it) {
    const int n = it->first.first;
    const ScanPose* pose = it->first.second;
    std::vector<ScanSpec> group;
    for (size_t i : it->second) group.push_back(specs[i]);
    t0 = std::chrono::steady_clock::now();
    nlohmann::ordered_json pose_json;
    std::vector<VolumeF> vols;
    if (pose) {
      const auto [posed, block] = write_posed_truth(ph, r, *pose, n, path, wo, record);
      pose_json = block;
      vols = simulate_scans(posed.first, posed.second, group);
    } else {
      vols = simulate_scans(ph, r, group);
    }
    for (size_t j = 0; j < it->second.size(); ++j) {
      const ScanSpec& sp = specs[it->second[j]];
      const std::string name = sp.file_name(dose_series);
      // float32: the scan itself (no copy); uint16: converted; either way released once written.
      if (r.output_type == "float32") write_volume(vols[j], path(name), wo);
      else write_volume(stored_scan(vols[j], r), path(name), wo);
      vols[j] = VolumeF();
      nlohmann::ordered_json extra{{"projections", sp.projections}, {"i0", sp.i0}, {"arc_deg", r.arc_deg},
                                   {"voxel_type", r.output_type}};
      if (r.output_type == "uint16") {
        extra["uint16_full_scale_mu_per_mm"] = uint16_full_scale(r);
        extra["uint16_to_mu"] = "mu_per_mm = value * uint16_full_scale_mu_per_mm / 65535";
      }
      if (pose) extra["pose"] = pose_json;
      record(name, sp.reference ? "reference-scan" : "scan", extra);
    }
    say(opt.progress, "scan: " + std::to_string(n) + " projections x " + std::to_string(group.size()) + " scan(s), " +
                          std::to_string(seconds_since(t0)) + " s");
  }

  nlohmann::ordered_json m;
  m["context"] = run_context();
  m["recipe"] = r.name;
  m["seed"] = r.seed;
  m["geometry"] = {{"dims", r.dims},
                   {"voxel_size_um", r.voxel_size_um},
                   {"beam", "parallel, slice by slice (cone-beam not simulated)"},
                   {"detector_bins", scan_geometry(r, 1).bins}};
  m["material"] = {{"name", r.material}, {"mu_per_mm", r.material_mu()}};
  m["part_volume_mm3"] = ph.part_volume_mm3;
  m["analytic_porosity_pct"] = ph.porosity_pct();
  m["files"] = files;
  m["runtime_s"] = seconds_since(t_start);
  write_text_atomic(path("manifest.json"), m.dump(2) + "\n");
  return m;
}

}  // namespace pb::synth
