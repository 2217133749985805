// What every report shares: the caution, number and parameter text, the cells by id.
#include <cmath>

#include "core/format.hpp"
#include "report/report.hpp"
#include "suites/results.hpp"

namespace pb::report {

const char* const kCaution =
    "porebench supports, and does not replace, qualification of the inspection to the applicable standards "
    "and local codes, and the judgement of qualified personnel. Porosity results can decide whether a "
    "safety-relevant part ships.";

std::string fmt(const Json& v, int digits) { return v.is_number() ? format_number(v.get<double>(), digits) : "n/a"; }

std::string runtime_text(const Json& cell) {
  const Json& r = cell.contains("runtime_s") ? cell["runtime_s"] : Json();
  return r.is_number() ? fmt(r) : "not measured";
}

std::string md_cell(const std::string& s) {
  std::string out;
  for (char c : s) {
    if (c == '|') out += "\\|";
    else if (c == '\n' || c == '\r') out += ' ';
    else out += c;
  }
  return out;
}

std::string md_row(const std::vector<std::string>& cells) {
  std::string out = "|";
  for (const auto& c : cells) out += " " + md_cell(c) + " |";
  return out + "\n";
}

std::string a90_text(const Json& t) {
  const Json& pod = t["pod"];
  std::string s = fmt(pod["a90_um"]);
  if (pod["a90_um"].is_number() && pod.value("a90_extrapolated", false)) s += " (extrapolated)";
  return s;
}

std::string a9095_text(const Json& t) {
  const Json& pod = t["pod"];
  if (pod.value("a90_95_relation", "") == "<=") return "≤ " + fmt(pod["a90_95_um"]) + " (every target hit)";
  std::string s = fmt(pod["a90_95_um"]);
  if (pod["a90_95_um"].is_number() && pod.value("a90_95_extrapolated", false)) s += " (extrapolated)";
  return s;
}

std::string false_calls_text(const Json& t) {
  const Json& p = t["pores"];
  Json per_target = p.contains("false_calls_per_target") ? p["false_calls_per_target"] : Json();
  if (per_target.is_null() && p["false_calls"].is_number() && p["pores_ref"].is_number() && p["pores_ref"].get<double>() > 0)
    per_target = p["false_calls"].get<double>() / p["pores_ref"].get<double>();
  return fmt(p["false_calls"]) + " / " + fmt(p["false_calls_per_cm3"]) + " / " + fmt(per_target);
}

const Json& slice_jaccard_mean(const Json& t) {
  const Json& s = t["slices"];
  return s.contains("slice_jaccard_mean") ? s["slice_jaccard_mean"] : s["jaccard_mean"];
}

std::string a9095_reason(const Json& t) {
  const Json& pod = t["pod"];
  if (pod["a90_95_um"].is_number()) return "";
  if (!pod.value("estimable", false)) return pod["reason"].is_string() ? pod["reason"].get<std::string>() : "no POD fit";
  return pod.contains("a90_95_reason") && pod["a90_95_reason"].is_string() ? pod["a90_95_reason"].get<std::string>() : "not defined";
}

std::string hit_cap_text(const Json& scoring) {
  if (!scoring.contains("max_volume_ratio") || !scoring["max_volume_ratio"].is_number())
    return "hit-rule volume cap not recorded (a run of an older porebench)";
  const double cap = scoring["max_volume_ratio"].get<double>();
  if (cap <= 0) return "no hit-rule volume cap";
  return "hit rule capped at " + format_number(cap) + "x the reference pore's volume (max_volume_ratio)";
}

std::vector<JudgedVerdict> judged_verdicts(const Json& results, const Json& selection, const Json* cell) {
  const auto criteria = suite::criteria_from_json(results["criteria"]);
  const Json& verdicts = selection["verdicts"];
  std::vector<JudgedVerdict> out;
  for (size_t i = 0; i < criteria.size() && i < verdicts.size(); ++i) {
    const suite::Criterion& c = criteria[i];
    JudgedVerdict v;
    v.criterion = verdicts[i].value("criterion", c.text());
    v.passed = verdicts[i].value("passed", false);
    v.on_ci = c.on == suite::Criterion::on_ci;
    if (v.on_ci)
      v.bound = c.op == suite::Criterion::at_least ? "lower" : c.op == suite::Criterion::at_most ? "upper" : "larger |bound|";
    v.judged = cell ? suite::judged_value(*cell, "test", c) : NAN;
    v.value = cell ? suite::metric_value(*cell, "test", c.metric) : NAN;
    out.push_back(v);
  }
  return out;
}

std::string judged_text(const JudgedVerdict& v) {
  if (!v.on_ci) return v.criterion + ": " + format_number(v.value, 3);
  const std::string bound = v.bound == "larger |bound|" ? "CI bound of larger magnitude" : "CI " + v.bound + " bound";
  return v.criterion + ": " + bound + " " + format_number(v.judged, 3) + " (value " + format_number(v.value, 3) + ")";
}

std::string reference_role(const Json& results, const Json& selection) {
  const Json* m = method_entry(results, selection["method"].get<std::string>());
  if (!m) return "";
  for (const auto& d : results["datasets"]) {
    if (d["name"] != selection["dataset"] || !d["reference"].is_object()) continue;
    const Json& ref = d["reference"];
    if (ref.contains("method") && ref["method"] == (*m)["name"]) return "the reference's own method";
    if (ref.contains("consensus") && ref["consensus"].contains("raters"))
      for (const auto& r : ref["consensus"]["raters"])
        if (r["method"] == (*m)["name"]) return "reference rater";
    return "";
  }
  return "";
}

std::string consensus_text(const Json& reference) {
  const Json& c = reference["consensus"];
  std::string s = "STAPLE consensus (W >= " + format_number(c.value("threshold", 0.5), 3) + ", " +
                  std::to_string(c.value("iterations", 0)) + " iterations" + (c.value("converged", true) ? "" : ", not converged") +
                  ") of " + std::to_string(c["raters"].size()) + " raters on the reference scan: ";
  bool first = true;
  for (const auto& r : c["raters"]) {
    s += (first ? "" : ", ") + r["label"].get<std::string>() + " (sensitivity " + format_number(r["sensitivity"].get<double>(), 4) +
         ", specificity " + format_number(r["specificity"].get<double>(), 6) + ")";
    first = false;
  }
  return s;
}

std::map<std::string, const Json*> cells_by_id(const Json& results) {
  std::map<std::string, const Json*> m;
  for (const auto& c : results["cells"]) m[c["id"].get<std::string>()] = &c;
  return m;
}

const Json* method_entry(const Json& results, const std::string& label) {
  for (const auto& m : results["methods"])
    if (m.value("label", "") == label) return &m;
  return nullptr;
}

std::string params_text(const Json& params, const std::string& sep, const Json* method) {
  std::string out;
  for (auto it = params.begin(); it != params.end(); ++it) {
    if (method && !(method->contains("grid") && (*method)["grid"].contains(it.key()))) continue;
    out += (out.empty() ? "" : sep) + it.key() + "=" + (it.value().is_string() ? it.value().get<std::string>() : it.value().dump());
  }
  return out.empty() && method ? "defaults" : out;
}

}  // namespace pb::report
