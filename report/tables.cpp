// Tables of a suite run: the tidy CSV, the Markdown summary and the scan-recipe advice.
#include <cmath>
#include <map>
#include <set>
#include <sstream>

#include "core/format.hpp"
#include "metrics/metric_table.hpp"
#include "report/report.hpp"
#include "suites/results.hpp"
#include "suites/suite.hpp"

namespace pb::report {

const char* const kCsvColumns = "dataset,scan,projections,i0,method,method_name,family,grid_index,params,selected,part,metric,value";

namespace {

std::string csv_field(const std::string& s) {
  if (s.find_first_of(",\"\n") == std::string::npos) return s;
  std::string out = "\"";
  for (char c : s) out += c == '"' ? std::string("\"\"") : std::string(1, c);
  return out + "\"";
}

std::string num_text(double v) { return format_number(v, 10, ""); }

std::set<std::string> selected_ids(const Json& results) {
  std::set<std::string> ids;
  for (const auto& s : results["selections"]) ids.insert(s["chosen_cell"].get<std::string>());
  return ids;
}

}  // namespace

std::string results_csv(const Json& results) {
  std::ostringstream out;
  out << kCsvColumns << '\n';
  const auto chosen = selected_ids(results);
  for (const auto& c : results["cells"]) {
    const std::string head = csv_field(c["dataset"]) + "," + csv_field(c["scan"]) + "," +
                             std::to_string(c["projections"].get<int>()) + "," + num_text(c["i0"].get<double>()) + "," +
                             csv_field(c["method"]) + "," + csv_field(c["method_name"]) + "," + csv_field(c["family"]) +
                             "," + std::to_string(c["grid_index"].get<int>()) + "," + csv_field(params_text(c["params"], ";")) +
                             "," + (chosen.count(c["id"]) ? "true" : "false");
    out << head << ",run,runtime_s," << num_text(suite::metric_value(c, "test", "runtime_s")) << '\n';
    out << head << ",run,peak_rss_mib," << (c.contains("peak_rss_mib") ? num_text(c["peak_rss_mib"].get<double>()) : "") << '\n';
    for (const char* part : {"calibration", "test"})
      for (const auto& m : metric_table()) {
        const std::string metric = m.name;
        if (metric == "runtime_s") continue;
        out << head << "," << part << "," << metric << "," << num_text(suite::metric_value(c, part, metric)) << '\n';
      }
  }
  return out.str();
}

Json scan_recipe_advice(const Json& results) {
  // Group the selections by dataset and method; a series is the non-reference scans.
  std::map<std::pair<std::string, std::string>, std::vector<const Json*>> groups;
  for (const auto& s : results["selections"]) groups[{s["dataset"], s["method"]}].push_back(&s);
  std::map<std::string, const Json*> dataset_records;
  for (const auto& d : results["datasets"]) dataset_records[d["name"]] = &d;
  Json out = Json::array();
  for (auto& [key, sels] : groups) {
    const Json* d = dataset_records[key.first];
    if (!d) continue;  // synthetic and paired series alike (projections per scan from the suite)
    // Which axis varies: projections, or dose at fixed projections.
    std::set<int> projections;
    std::set<double> doses;
    int ref_proj = 0;
    double ref_i0 = 0;
    std::vector<const Json*> series;
    for (const auto& v : (*d)["variants"]) {
      ref_proj = v["reference_projections"];
      ref_i0 = v["reference_i0"];
    }
    for (const Json* s : sels) {
      bool reference = false;
      for (const auto& v : (*d)["variants"])
        if (v["scan"] == (*s)["scan"]) reference = v["reference"];
      if (reference) continue;
      series.push_back(s);
      projections.insert((*s)["projections"].get<int>());
      doses.insert((*s)["i0"].get<double>());
    }
    if (series.size() < 2) continue;
    const bool by_dose = projections.size() == 1 && doses.size() > 1;
    // Sort cheapest first; the advice is the cheapest recipe from which on all dearer ones pass.
    std::sort(series.begin(), series.end(), [&](const Json* a, const Json* b) {
      return by_dose ? (*a)["i0"].get<double>() < (*b)["i0"].get<double>()
                     : (*a)["projections"].get<int>() < (*b)["projections"].get<int>();
    });
    const Json* best = nullptr;
    for (auto it = series.rbegin(); it != series.rend(); ++it) {
      if (!(**it)["passed"].get<bool>()) break;
      best = *it;
    }
    Json a = {{"dataset", key.first}, {"method", key.second}, {"axis", by_dose ? "i0" : "projections"}};
    if (best) {
      a["scan"] = (*best)["scan"];
      if (by_dose) {
        a["i0"] = (*best)["i0"];
        a["dose_saving_factor"] = ref_i0 / (*best)["i0"].get<double>();
      } else {
        a["projections"] = (*best)["projections"];
        a["reference_projections"] = ref_proj;
        // Scan time scales with the number of projections (common practice, no source).
        a["time_saving_factor"] = double(ref_proj) / (*best)["projections"].get<double>();
      }
    } else {
      a["scan"] = nullptr;
      a["note"] = "no scan of the series meets every criterion";
    }
    out.push_back(a);
  }
  return out;
}

std::string summary_md(const Json& results) {
  std::ostringstream md;
  md << "# porebench summary: " << results["suite"]["name"].get<std::string>() << "\n\n";
  if (!results["suite"]["description"].get<std::string>().empty())
    md << results["suite"]["description"].get<std::string>() << "\n\n";
  md << decision_md(results);
  md << "> " << kCaution << "\n\n";
  md << "Tool " << results["context"]["version"].get<std::string>() << " (" << results["context"]["git_hash"].get<std::string>()
     << "), suite sha256 " << results["suite_sha256"].get<std::string>().substr(0, 16) << "…, "
     << "tuning objective " << results["calibration"]["objective"].get<std::string>() << " on calibration slices; "
     << "all figures below are on held-out test slices.\n\n";
  const auto cell_by_id = cells_by_id(results);
  std::vector<std::string> order;
  std::map<std::string, std::vector<const Json*>> by_scan;
  for (const auto& s : results["selections"]) {
    const std::string k = s["dataset"].get<std::string>() + " / " + s["scan"].get<std::string>();
    if (!by_scan.count(k)) order.push_back(k);
    by_scan[k].push_back(&s);
  }
  for (const auto& k : order) {
    auto& v = by_scan[k];
    std::stable_sort(v.begin(), v.end(), [&](const Json* a, const Json* b) {
      const double ja = suite::metric_value(*cell_by_id.at((*a)["chosen_cell"]), "test", "jaccard");
      const double jb = suite::metric_value(*cell_by_id.at((*b)["chosen_cell"]), "test", "jaccard");
      return (std::isfinite(ja) ? ja : -1) > (std::isfinite(jb) ? jb : -1);
    });
    md << "## " << k << "\n\n";
    md << "| rank | method | parameters | Jaccard | slice Jaccard (95 % CI) | porosity bias (pp) | a90 (µm) | a90/95 (µm) | false calls (part / per cm³ / per target) | runtime (s) | criteria |\n";
    md << "|---:|---|---|---:|---|---:|---:|---:|---:|---:|---|\n";
    int rank = 0;
    std::vector<std::string> warnings;
    for (const Json* s : v) {
      const Json& c = *cell_by_id.at((*s)["chosen_cell"]);
      md << "| " << ++rank << " | " << md_cell((*s)["method"].get<std::string>()) << [&] { const std::string role = reference_role(results, *s); return role.empty() ? role : " (" + role + ")"; }() << " | ";
      md << md_cell(params_text(c["params"], ", ", method_entry(results, (*s)["method"]))) << ((*s)["tuned"].get<bool>() ? " (tuned)" : "");
      if (c.contains("warnings"))
        for (const auto& w : c["warnings"]) {
          warnings.push_back((*s)["method"].get<std::string>() + ": " + w.get<std::string>());
          md << " (warning W" << warnings.size() << ")";
        }
      md << " | ";
      if (c["status"] != "ok") {
        md << "failed: " << md_cell(c["error"].get<std::string>()) << " | | | | | | | FAIL |\n";
        continue;
      }
      const Json& t = c["test"];
      md << fmt(t["overlap"]["jaccard"]) << " | " << fmt(slice_jaccard_mean(t)) << " (" << fmt(t["slices"]["jaccard_ci95"][0])
         << "–" << fmt(t["slices"]["jaccard_ci95"][1]) << ") | " << fmt(t["porosity"]["porosity_bias_pp"]) << " | "
         << md_cell(a90_text(t)) << " | " << md_cell(a9095_text(t)) << " | " << false_calls_text(t)
         << " | " << runtime_text(c) << " | ";
      if ((*s)["verdicts"].empty()) md << "none set";
      else {
        // The verdict, then each criterion that failed or was judged on a CI bound, with the value judged.
        md << ((*s)["passed"].get<bool>() ? "pass" : "FAIL");
        std::string detail;
        for (const auto& v : judged_verdicts(results, *s, &c))
          if (v.on_ci || !v.passed) detail += (detail.empty() ? ": " : "; ") + judged_text(v) + (v.passed ? " pass" : " FAIL");
        md << md_cell(detail);
      }
      md << " |\n";
    }
    md << "\n";
    if (!warnings.empty()) {
      md << "Method warnings:\n\n";
      for (size_t i = 0; i < warnings.size(); ++i) md << "- W" << i + 1 << " " << warnings[i] << "\n";
      md << "\n";
    }
  }
  if (!results["advice"].empty()) {
    md << "## Scan-recipe advice\n\n| dataset | method | cheapest scan meeting the criteria | saving vs reference |\n|---|---|---|---:|\n";
    for (const auto& a : results["advice"]) {
      md << "| " << md_cell(a["dataset"].get<std::string>()) << " | " << md_cell(a["method"].get<std::string>()) << " | ";
      if (a["scan"].is_null()) {
        md << a["note"].get<std::string>() << " | |\n";
        continue;
      }
      md << a["scan"].get<std::string>() << " | ";
      if (a.contains("time_saving_factor")) md << fmt(a["time_saving_factor"]) << "x time";
      else md << fmt(a["dose_saving_factor"]) << "x dose";
      md << " |\n";
    }
    md << "\nScan time is taken to scale with the number of projections (common practice, no source).\n\n";
  }
  md << "Criteria: ";
  if (results["criteria"].empty()) md << "none declared.\n";
  for (const auto& c : results["criteria"]) md << "`" << c["text"].get<std::string>() << "`; ";
  md << "\n\nOverall: " << verdict_headline(results) << "\n";
  return md.str();
}

}  // namespace pb::report
