#include "suites/results.hpp"

#include <cmath>
#include <map>
#include <tuple>

namespace pb::suite {

namespace {
double num(const Json& j) { return j.is_number() ? j.get<double>() : NAN; }
}  // namespace

double metric_value(const Json& cell, const std::string& part, const std::string& m) {
  if (cell.value("status", "") != "ok") return NAN;
  if (m == "runtime_s") return num(cell["runtime_s"]);
  if (!cell.contains(part)) return NAN;
  const Json& s = cell[part];
  if (m == "jaccard" || m == "dice" || m == "precision" || m == "recall") return num(s["overlap"][m]);
  if (m == "porosity_bias_pp" || m == "porosity_rel_bias") return num(s["porosity"][m]);
  if (m == "a50_um" || m == "a90_um" || m == "a90_95_um") return num(s["pod"][m]);
  if (m == "false_calls_per_cm3" || m == "misses" || m == "hits" || m == "merged" || m == "split") return num(s["pores"][m]);
  if (m == "ks_distance") return num(s["sizes"]["ks"]);
  if (m == "wasserstein_um") return num(s["sizes"]["wasserstein1_um"]);
  if (m == "hd95_mm" || m == "assd_mm") return num(s["surface"][m]);
  if (m == "slice_jaccard_mean") return num(s["slices"]["jaccard_mean"]);
  return NAN;
}

std::vector<Selection> select_cells(const std::vector<Json>& cells, const std::string& objective,
                                    const std::vector<Criterion>& criteria) {
  std::vector<Selection> out;
  std::map<std::tuple<std::string, std::string, std::string>, size_t> index;
  for (size_t i = 0; i < cells.size(); ++i) {
    const Json& c = cells[i];
    const auto key = std::make_tuple(c["dataset"].get<std::string>(), c["scan"].get<std::string>(),
                                     c["method"].get<std::string>());
    auto it = index.find(key);
    if (it == index.end()) {
      Selection s;
      s.dataset = std::get<0>(key);
      s.scan = std::get<1>(key);
      s.method = std::get<2>(key);
      s.projections = c.value("projections", 0);
      s.reference_projections = c.value("reference_projections", 0);
      s.i0 = c.value("i0", 0.0);
      it = index.emplace(key, out.size()).first;
      out.push_back(s);
    }
    out[it->second].cells.push_back(i);
  }
  for (auto& s : out) {
    std::sort(s.cells.begin(), s.cells.end(),
              [&](size_t a, size_t b) { return cells[a]["grid_index"].get<int>() < cells[b]["grid_index"].get<int>(); });
    s.tuned = s.cells.size() > 1;
    s.chosen = s.cells.front();
    if (s.tuned) {
      double best = -INFINITY;
      for (size_t i : s.cells) {
        const double v = metric_value(cells[i], "calibration", objective);
        if (std::isfinite(v) && v > best) best = v, s.chosen = i;
      }
    }
    s.failed = cells[s.chosen].value("status", "") != "ok";
    for (const auto& c : criteria) {
      const bool ok = c.passes(metric_value(cells[s.chosen], "test", c.metric));
      s.verdicts.emplace_back(c.text(), ok);
      s.passed = s.passed && ok;
    }
    if (s.failed) s.passed = false;
  }
  return out;
}

Json criteria_to_json(const std::vector<Criterion>& cs) {
  Json a = Json::array();
  for (const auto& c : cs) a.push_back({{"key", c.key}, {"metric", c.metric}, {"op", int(c.op)}, {"value", c.value}, {"text", c.text()}});
  return a;
}

std::vector<Criterion> criteria_from_json(const Json& j) {
  std::vector<Criterion> out;
  for (const auto& e : j) {
    Criterion c;
    c.key = e["key"];
    c.metric = e["metric"];
    c.op = Criterion::Op(e["op"].get<int>());
    c.value = e["value"];
    out.push_back(c);
  }
  return out;
}

}  // namespace pb::suite

namespace pb::suite {

namespace {
void strip(Json& j) {
  static const std::vector<std::string> volatile_keys = {"context", "runtime_s", "peak_rss_mib", "time_utc", "data_dir",
                                                         "path", "suite_text", "manifest", "calibration"};
  if (j.is_object()) {
    for (const auto& k : volatile_keys)
      if (j.contains(k) && !(k == "calibration" && j[k].contains("objective"))) j.erase(k);
    for (auto& [k, v] : j.items()) strip(v);
  } else if (j.is_array()) {
    for (auto& v : j) strip(v);
  }
}
}  // namespace

Json regression_record(const Json& results) {
  Json r = results;
  strip(r);
  return r;
}

}  // namespace pb::suite
