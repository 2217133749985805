// Suite files: TOML (toml++), validated key by key with positions in messages.
#include "suites/suite.hpp"

#include <cmath>
#include <filesystem>
#include <set>
#include <sstream>
#include <toml++/toml.h>

#include "core/error.hpp"
#include "core/names.hpp"
#include "core/toml_keys.hpp"
#include "core/sha256.hpp"
#include "core/text_file.hpp"
#include "metrics/metric_table.hpp"
#include "methods/registry.hpp"
#include "suites/paired.hpp"

namespace fs = std::filesystem;

namespace pb::suite {

size_t ParamGrid::size() const {
  size_t n = 1;
  for (const auto& [_, values] : axes) n *= values.size();
  return n;
}

std::vector<std::string> ParamGrid::point(size_t i) const {
  // The last axis varies fastest.
  std::vector<std::string> out(axes.size());
  for (size_t a = axes.size(); a-- > 0;) {
    const auto& [key, values] = axes[a];
    out[a] = key + "=" + values[i % values.size()];
    i /= values.size();
  }
  return out;
}

ScoreOptions Scoring::options() const {
  ScoreOptions o;
  o.connectivity = connectivity;
  o.match = parse_match_rule(match, "[scoring] match");
  o.bins_per_decade = bins_per_decade;
  o.bootstrap_samples = bootstrap_samples;
  o.max_volume_ratio = max_volume_ratio;
  return o;
}

bool Criterion::passes(double x) const {
  if (!std::isfinite(x)) return false;
  switch (op) {
    case at_least: return x >= value;
    case at_most: return x <= value;
    case abs_at_most: return std::abs(x) <= value;
  }
  return false;
}

std::string Criterion::text() const {
  std::ostringstream s;
  s << (op == abs_at_most ? "|" + metric + "|" : metric) << (op == at_least ? " >= " : " <= ") << value;
  if (on == on_ci) s << " (95 % CI bound)";
  return s.str();
}

namespace {

class Reader {
 public:
  Reader(std::string path) : path_(std::move(path)) {}

  [[noreturn]] void fail(const toml::source_region& at, const std::string& msg) const {
    std::ostringstream s;
    s << "suite " << path_;
    if (at.begin.line) s << ":" << at.begin.line << ":" << at.begin.column;
    s << ": " << msg;
    throw InputError(s.str());
  }

  void check_keys(const toml::table& t, const std::vector<std::string>& allowed, const std::string& where) const {
    if (const auto u = first_unknown_key(t, allowed))  // core/toml_keys.hpp, shared with the recipe reader
      fail(u->where, "unknown key '" + u->key + "' in " + where + (u->near.empty() ? "" : " (did you mean '" + u->near + "'?)"));
  }

  std::string str(const toml::table& t, const std::string& key, const std::string& where, const std::string& def = "",
                  bool required = false) const {
    const toml::node* n = t.get(key);
    if (!n) {
      if (required) fail(t.source(), "missing key '" + key + "' in " + where);
      return def;
    }
    if (!n->is_string()) fail(n->source(), "key '" + key + "' in " + where + " must be a string");
    return std::string(*n->value<std::string_view>());
  }

  double num(const toml::table& t, const std::string& key, const std::string& where, double def, double lo,
             double hi) const {
    const toml::node* n = t.get(key);
    if (!n) return def;
    if (!n->is_number()) fail(n->source(), "key '" + key + "' in " + where + " must be a number");
    const double v = *n->value<double>();
    if (!(v >= lo && v <= hi)) {
      std::ostringstream s;
      s << "key '" << key << "' in " << where << " = " << v << " is out of range [" << lo << ", " << hi << "]";
      fail(n->source(), s.str());
    }
    return v;
  }

  // A scalar as the text our parameter parser takes.
  std::string scalar_text(const toml::node& n, const std::string& what) const {
    if (auto s = n.value_exact<std::string>()) return *s;
    if (auto i = n.value_exact<int64_t>()) return std::to_string(*i);
    if (auto d = n.value_exact<double>()) {
      std::ostringstream s;
      s.precision(12);
      s << *d;
      return s.str();
    }
    if (auto b = n.value_exact<bool>()) return *b ? "true" : "false";
    fail(n.source(), what + " must be a string, number or boolean (or a list of them)");
  }

  std::vector<std::string> string_list(const toml::table& t, const std::string& key, const std::string& where) const {
    std::vector<std::string> out;
    const toml::node* n = t.get(key);
    if (!n) return out;
    if (n->is_string()) return {std::string(*n->value<std::string_view>())};
    const toml::array* a = n->as_array();
    if (!a) fail(n->source(), "key '" + key + "' in " + where + " must be a list");
    for (const auto& e : *a) out.push_back(scalar_text(e, "an entry of '" + key + "'"));
    return out;
  }

  const std::string& path() const { return path_; }

 private:
  std::string path_;
};

std::string resolve(const std::string& base_dir, const std::string& p) {
  if (p.empty() || fs::path(p).is_absolute()) return p;
  return (fs::path(base_dir) / p).lexically_normal().string();
}

DatasetSpec parse_dataset(const Reader& rd, const toml::table& t, const std::string& base, size_t index) {
  DatasetSpec d;
  const std::string where0 = "[[dataset]] #" + std::to_string(index + 1);
  d.name = rd.str(t, "name", where0, "", true);
  const std::string where = "[[dataset]] '" + d.name + "'";
  const std::string kind = rd.str(t, "kind", where, "synthetic");
  if (kind == "synthetic") {
    d.kind = DatasetSpec::synthetic;
    rd.check_keys(t, {"name", "kind", "preset", "recipe", "set"}, where);
    d.preset = rd.str(t, "preset", where);
    d.recipe = resolve(base, rd.str(t, "recipe", where));
    if (d.preset.empty() == d.recipe.empty()) rd.fail(t.source(), where + ": give exactly one of 'preset' and 'recipe'");
    if (const toml::node* s = t.get("set")) {
      const toml::table* st = s->as_table();
      if (!st) rd.fail(s->source(), "key 'set' in " + where + " must be a table of recipe overrides");
      // Nested tables flatten to dotted keys: set = { scan = { projections = [400, 200] } }.
      std::function<void(const toml::table&, const std::string&)> walk = [&](const toml::table& tb, const std::string& prefix) {
        for (auto&& [k, v] : tb) {
          const std::string key = prefix + std::string(k.str());
          if (const toml::table* sub = v.as_table()) {
            walk(*sub, key + ".");
          } else if (const toml::array* arr = v.as_array()) {
            std::string joined;
            for (const auto& e : *arr) joined += (joined.empty() ? "" : ",") + rd.scalar_text(e, "'" + key + "'");
            d.overrides.push_back(key + "=" + joined);
          } else {
            d.overrides.push_back(key + "=" + rd.scalar_text(v, "'" + key + "'"));
          }
        }
      };
      walk(*st, "");
    }
  } else if (kind == "paired") {
    // Real scans: one reference, a series of fast scans, per-file geometry (suites/paired.cpp).
    parse_paired_dataset(t, base, where, [&](const toml::source_region& at, const std::string& m) { rd.fail(at, m); }, d);
  } else {
    rd.fail(t.get("kind")->source(), where + ": kind must be 'synthetic' or 'paired', got '" + kind + "'");
  }
  return d;
}

MethodSpec parse_method(const Reader& rd, const toml::table& t, size_t index) {
  MethodSpec m;
  const std::string where0 = "[[method]] #" + std::to_string(index + 1);
  rd.check_keys(t, {"name", "label", "params"}, where0);
  m.name = rd.str(t, "name", where0, "", true);
  m.label = rd.str(t, "label", where0, m.name);
  const std::string where = "[[method]] '" + m.label + "'";
  const MethodInfo* info = nullptr;
  try {
    info = &Registry::instance().get(m.name);
  } catch (const InputError& e) {
    rd.fail(t.get("name")->source(), e.what());
  }
  if (const toml::node* p = t.get("params")) {
    const toml::table* pt = p->as_table();
    if (!pt) rd.fail(p->source(), "'params' in " + where + " must be a table");
    for (auto&& [k, v] : *pt) {
      std::vector<std::string> values;
      if (const toml::array* a = v.as_array()) {
        if (a->empty()) rd.fail(v.source(), "empty grid for parameter '" + std::string(k.str()) + "' in " + where);
        for (const auto& e : *a) values.push_back(rd.scalar_text(e, "parameter '" + std::string(k.str()) + "'"));
      } else {
        values.push_back(rd.scalar_text(v, "parameter '" + std::string(k.str()) + "'"));
      }
      m.grid.axes.emplace_back(std::string(k.str()), values);
    }
  }
  // Every grid point must validate now, not halfway through a run.
  if (m.grid.size() > 10000) rd.fail(t.source(), where + ": the parameter grid has " + std::to_string(m.grid.size()) + " points (at most 10000)");
  for (size_t i = 0; i < m.grid.size(); ++i) {
    try {
      parse_params(*info, m.grid.point(i));
    } catch (const InputError& e) {
      rd.fail(t.get("params") ? t.get("params")->source() : t.source(), where + ": " + e.what());
    }
  }
  return m;
}

}  // namespace

Suite parse_suite(const std::string& text, const std::string& path) {
  Reader rd(path);
  toml::table root;
  try {
    root = toml::parse(text, path);
  } catch (const toml::parse_error& e) {
    rd.fail(e.source(), std::string(e.description()));
  }
  const std::string base = fs::path(path).parent_path().string();
  rd.check_keys(root, {"suite", "dataset", "method", "calibration", "scoring", "criteria"}, "the suite");
  Suite s;
  s.path = path;
  s.text_sha256 = sha256_hex(text.data(), text.size());
  if (const toml::table* t = root["suite"].as_table()) {
    rd.check_keys(*t, {"name", "description", "validation"}, "[suite]");
    if (const toml::node* v = t->get("validation")) {
      if (!v->is_boolean()) rd.fail(v->source(), "key 'validation' in [suite] must be true or false");
      s.validation = *v->value<bool>();
    }
    s.name = rd.str(*t, "name", "[suite]");
    s.description = rd.str(*t, "description", "[suite]");
  }
  if (s.name.empty()) s.name = fs::path(path).stem().string();
  const toml::array* ds = root["dataset"].as_array();
  if (!ds || ds->empty()) rd.fail(root.source(), "the suite declares no [[dataset]]");
  std::set<std::string> names;
  for (size_t i = 0; i < ds->size(); ++i) {
    const toml::table* t = ds->get(i)->as_table();
    if (!t) rd.fail(ds->get(i)->source(), "[[dataset]] entries must be tables");
    s.datasets.push_back(parse_dataset(rd, *t, base, i));
    if (!names.insert(s.datasets.back().name).second)
      rd.fail(t->source(), "dataset name '" + s.datasets.back().name + "' is used twice");
  }
  const toml::array* ms = root["method"].as_array();
  if (!ms || ms->empty()) rd.fail(root.source(), "the suite declares no [[method]]");
  names.clear();
  for (size_t i = 0; i < ms->size(); ++i) {
    const toml::table* t = ms->get(i)->as_table();
    if (!t) rd.fail(ms->get(i)->source(), "[[method]] entries must be tables");
    s.methods.push_back(parse_method(rd, *t, i));
    if (!names.insert(s.methods.back().label).second)
      rd.fail(t->source(), "method label '" + s.methods.back().label + "' is used twice: give one a 'label'");
  }
  if (const toml::table* t = root["calibration"].as_table()) {
    rd.check_keys(*t, {"objective", "fraction", "gap_slices"}, "[calibration]");
    s.calibration.objective = rd.str(*t, "objective", "[calibration]", "jaccard");
    static const std::vector<std::string> objectives = {"jaccard", "dice", "recall", "precision"};
    if (std::find(objectives.begin(), objectives.end(), s.calibration.objective) == objectives.end())
      rd.fail(t->get("objective")->source(), "[calibration] objective must be one of jaccard, dice, recall, precision");
    s.calibration.fraction = rd.num(*t, "fraction", "[calibration]", 0.4, 0.05, 0.9);
    s.calibration.gap_slices = int(rd.num(*t, "gap_slices", "[calibration]", 4, 0, 1000));
  }
  if (const toml::table* t = root["scoring"].as_table()) {
    rd.check_keys(*t, {"match", "connectivity", "bins_per_decade", "bootstrap_samples", "max_volume_ratio"}, "[scoring]");
    s.scoring.match = rd.str(*t, "match", "[scoring]", "coverage:0.5");
    try {
      parse_match_rule(s.scoring.match, "[scoring] match");
    } catch (const InputError& e) {
      rd.fail(t->get("match")->source(), e.what());
    }
    s.scoring.connectivity = int(rd.num(*t, "connectivity", "[scoring]", 26, 6, 26));
    if (s.scoring.connectivity != 6 && s.scoring.connectivity != 18 && s.scoring.connectivity != 26)
      rd.fail(t->get("connectivity")->source(), "[scoring] connectivity must be 6, 18 or 26");
    s.scoring.bins_per_decade = int(rd.num(*t, "bins_per_decade", "[scoring]", 10, 1, 100));
    s.scoring.bootstrap_samples = int(rd.num(*t, "bootstrap_samples", "[scoring]", 1000, 100, 100000));
    s.scoring.max_volume_ratio = rd.num(*t, "max_volume_ratio", "[scoring]", s.scoring.max_volume_ratio, 0, 1e9);
    if (s.scoring.max_volume_ratio > 0 && s.scoring.max_volume_ratio < 1)
      rd.fail(t->get("max_volume_ratio")->source(), "[scoring] max_volume_ratio must be 0 (no cap) or >= 1");
  }
  if (const toml::table* t = root["criteria"].as_table()) {
    std::vector<std::string> valid;
    for (const auto& m : metric_table())
      for (const char* p : {"min_", "max_", "max_abs_"}) valid.push_back(p + std::string(m.name));
    for (auto&& [k, v] : *t) {
      const std::string key(k.str());
      Criterion c;
      c.key = key;
      std::string metric;
      if (key.rfind("max_abs_", 0) == 0) c.op = Criterion::abs_at_most, metric = key.substr(8);
      else if (key.rfind("min_", 0) == 0) c.op = Criterion::at_least, metric = key.substr(4);
      else if (key.rfind("max_", 0) == 0) c.op = Criterion::at_most, metric = key.substr(4);
      if (!find_metric(metric)) {
        const std::string near = closest_name(key, valid);
        rd.fail(k.source(), "criterion '" + key + "' names no known metric" + (near.empty() ? "" : " (did you mean '" + near + "'?)") +
                                "; criteria are min_<metric>, max_<metric> or max_abs_<metric> with <metric> one of: " +
                                metric_names_text() + " (metrics/METRICS.md)");
      }
      c.metric = metric;
      // A number, or { value = N, on = "value" | "ci" }.
      const toml::node* val = &v;
      std::string on = s.validation ? "ci" : "value";
      bool asked = false;
      if (const toml::table* ct = v.as_table()) {
        rd.check_keys(*ct, {"value", "on"}, "criterion '" + key + "'");
        val = ct->get("value");
        if (!val) rd.fail(ct->source(), "criterion '" + key + "' needs 'value'");
        if (ct->get("on")) {
          on = rd.str(*ct, "on", "criterion '" + key + "'");
          asked = true;
          if (on != "value" && on != "ci")
            rd.fail(ct->get("on")->source(), "criterion '" + key + "': on = '" + on + "' must be \"value\" or \"ci\"");
        }
      }
      if (!val->is_number()) rd.fail(val->source(), "criterion '" + key + "' must be a number (or { value = N, on = \"ci\" })");
      c.value = *val->value<double>();
      if (!std::isfinite(c.value)) rd.fail(val->source(), "criterion '" + key + "' must be a finite number");
      if (on == "ci" && !find_metric(metric)->has_ci()) {
        std::string with_ci;
        for (const auto& m : metric_table())
          if (m.has_ci()) with_ci += (with_ci.empty() ? "" : ", ") + std::string(m.name);
        if (asked)
          rd.fail(k.source(), "criterion '" + key + "': on = \"ci\" but the record has no interval for '" + metric +
                                  "' (metrics with one: " + with_ci + ")");
        on = "value";
        c.on_note = "judged on the value: no interval for this metric";
      }
      c.on = on == "ci" ? Criterion::on_ci : Criterion::on_value;
      s.criteria.push_back(c);
    }
  }
  return s;
}

Suite load_suite(const std::string& path) { return parse_suite(read_text_file(path, "suite file"), path); }

}  // namespace pb::suite
