// Path templates and the preflight of the predictions method (see predictions.hpp).
#include "suites/predictions.hpp"

#include <filesystem>
#include <set>

#include "core/error.hpp"
#include "core/io.hpp"
#include "core/io_header.hpp"
#include "core/npy.hpp"
#include "methods/predictions.hpp"
#include "methods/registry.hpp"
#include "suites/datasets.hpp"

namespace fs = std::filesystem;

namespace pb::suite {

namespace {

bool is_predictions(const MethodSpec& m) { return m.name == "predictions"; }

std::string fill(std::string t, const std::string& key, const std::string& value) {
  for (size_t at = t.find(key); at != std::string::npos; at = t.find(key, at + value.size())) t.replace(at, key.size(), value);
  return t;
}

std::string setting(const std::vector<std::string>& kv, const std::string& key, const std::string& fallback) {
  for (const auto& s : kv)
    if (s.compare(0, key.size() + 1, key + "=") == 0) return s.substr(key.size() + 1);
  return fallback;
}

// The geometry a cell's scan will have, when it is known before the run.
bool known_geometry(const Dataset& p, const Variant& v, Geometry& g) {
  if (p.spec->kind == DatasetSpec::synthetic) {
    if (!v.reference && p.recipe.pose_for(v.projections)) return false;  // posed scans: checked when the cell runs
    g.dims = p.recipe.dims;
    g.spacing_mm = {p.recipe.voxel_mm(), p.recipe.voxel_mm(), p.recipe.voxel_mm()};
    return true;
  }
  if (p.spec->read.raw) {
    g.dims = p.spec->read.raw->dims;
    g.spacing_mm = p.spec->read.raw->spacing_mm;
    return true;
  }
  if (!has_checked_header(v.path)) return false;
  const VolumeHeader h = check_volume_file(v.path);
  g.dims = h.dims;
  g.spacing_mm = p.spec->read.spacing_mm ? *p.spec->read.spacing_mm : h.spacing_mm;
  return true;
}

}  // namespace

std::vector<std::string> cell_settings(const MethodSpec& m, size_t g, const std::string& dataset,
                                       const std::string& scan, const std::string& suite_path) {
  std::vector<std::string> kv = m.grid.point(g);
  if (!is_predictions(m)) return kv;
  for (auto& s : kv) {
    if (s.compare(0, 5, "file=") != 0) continue;
    std::string path = fill(fill(s.substr(5), "{dataset}", dataset), "{scan}", scan);
    if (!path.empty() && !fs::path(path).is_absolute())
      path = (fs::path(suite_path).parent_path() / path).lexically_normal().string();
    s = "file=" + path;
  }
  return kv;
}

void preflight_predictions(const Suite& s) {
  const std::string scratch = (fs::temp_directory_path() / "porebench-preflight").string();  // never written
  std::vector<Dataset> data;
  std::set<std::string> checked;
  for (const auto& m : s.methods) {
    if (!is_predictions(m)) continue;
    if (data.empty())
      for (const auto& d : s.datasets) data.push_back(describe_dataset(d, scratch));
    const MethodInfo& info = Registry::instance().get(m.name);
    for (const auto& p : data)
      for (const auto& v : p.variants)
        for (size_t g = 0; g < m.grid.size(); ++g) {
          const std::vector<std::string> kv = cell_settings(m, g, p.name, v.scan, s.path);
          const ParamValues pv = parse_params(info, kv);
          const std::string file = pv.choice("file");
          const std::string where = "suite " + s.path + ": method '" + m.label + "', dataset '" + p.name + "', scan '" +
                                    v.scan + "': ";
          try {
            const std::string key = file + "|" + pv.choice("kind") + "|" + pv.choice("pore_label");
            if (!checked.insert(key).second) continue;  // another grid point of the same file
            std::error_code ec;
            if (!fs::exists(file, ec))
              throw InputError("prediction file not found: " + file + " (from file = '" + setting(m.grid.point(g), "file", "") + "')");
            AnyVolume a = read_volume(file);
            Geometry scan;
            if (known_geometry(p, v, scan)) {
              if (is_npy_path(file)) adopt_geometry(a, scan);
              scan.origin_mm = a.geometry().origin_mm;  // the scan's origin is known when its cells run
              check_same_geometry(a.geometry(), "prediction " + file, scan, "scan " + v.path);
            }
            check_prediction_values(a, parse_prediction_kind(pv.choice("kind")), pv.integer("pore_label"), file);
            bool found = false;
            read_runtime_sidecar(file, &found);
          } catch (const InputError& e) {
            throw InputError(where + e.what());
          }
        }
  }
}

}  // namespace pb::suite
