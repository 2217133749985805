// Reading results (suites/results.hpp): metric values by their name in the metric table
// (metrics/metric_table.hpp), the choice of tuned parameter sets on the calibration slices, criteria
// verdicts on the test slices, and the machine-independent regression record.
#include "suites/results.hpp"

#include <cmath>
#include <map>
#include <tuple>

#include "metrics/metric_table.hpp"

namespace pb::suite {

namespace {
double num(const Json& j) { return j.is_number() ? j.get<double>() : NAN; }
}  // namespace

double metric_value(const Json& cell, const std::string& part, const std::string& m) {
  if (cell.value("status", "") != "ok") return NAN;
  const MetricInfo* info = find_metric(m);
  if (!info) return NAN;
  if (std::string(info->block) == "cell") return cell.contains(m) ? num(cell[m]) : NAN;
  if (!cell.contains(part) || !cell[part].contains(info->block)) return NAN;
  const Json& b = cell[part][info->block];
  return b.contains(m) ? num(b[m]) : NAN;
}

double judged_value(const Json& cell, const std::string& part, const Criterion& c) {
  if (c.on == Criterion::on_value) return metric_value(cell, part, c.metric);
  if (cell.value("status", "") != "ok") return NAN;
  const MetricInfo* info = find_metric(c.metric);
  if (!info || !info->has_ci() || !cell.contains(part) || !cell[part].contains(info->block)) return NAN;
  const Json& b = cell[part][info->block];
  if (!b.contains(info->ci_key) || !b[info->ci_key].is_array() || b[info->ci_key].size() != 2) return NAN;
  const double lo = num(b[info->ci_key][0]), hi = num(b[info->ci_key][1]);
  switch (c.op) {
    case Criterion::at_least: return lo;
    case Criterion::at_most: return hi;
    case Criterion::abs_at_most: return std::max(std::abs(lo), std::abs(hi));
  }
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
      const double judged = judged_value(cells[s.chosen], "test", c);
      const bool ok = c.passes(judged);
      s.verdicts.emplace_back(c.text(), ok);
      s.judged.push_back(judged);
      s.passed = s.passed && ok;
    }
    if (s.failed) s.passed = false;
  }
  return out;
}

Json criteria_to_json(const std::vector<Criterion>& cs) {
  Json a = Json::array();
  for (const auto& c : cs) {
    Json e = {{"key", c.key}, {"metric", c.metric}, {"op", int(c.op)}, {"value", c.value}, {"text", c.text()}};
    // Only when judged on the interval, so that records of value criteria stay as they were.
    if (c.on == Criterion::on_ci) e["on"] = "ci";
    if (!c.on_note.empty()) e["on_note"] = c.on_note;
    a.push_back(e);
  }
  return a;
}

std::vector<Criterion> criteria_from_json(const Json& j) {
  std::vector<Criterion> out;
  for (const auto& e : j) {
    Criterion c;
    c.key = e["key"];
    c.metric = e["metric"];
    const int op = e["op"].get<int>();
    if (op < Criterion::at_least || op > Criterion::abs_at_most)
      throw JsonPreconditionFailed("criteria[].op is " + std::to_string(op) +
                                   ", not a comparison (0: at least, 1: at most, 2: |x| at most)");
    c.op = Criterion::Op(op);
    c.value = e["value"];
    c.on = e.value("on", "value") == "ci" ? Criterion::on_ci : Criterion::on_value;
    c.on_note = e.value("on_note", "");
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
