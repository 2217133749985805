// Probability-map plots of report.html (see probability_html.hpp).
#include "report/probability_html.hpp"

#include <cmath>
#include <map>
#include <sstream>

#include "core/format.hpp"
#include "report/html.hpp"
#include "report/svg.hpp"

namespace pb::report {

namespace {

double num_of(const Json& v) { return v.is_number() ? v.get<double>() : NAN; }

std::vector<double> nums(const Json& a) {
  std::vector<double> out;
  for (const auto& v : a) out.push_back(num_of(v));
  return out;
}

}  // namespace

std::string probability_section_html(const Json& results, const Json& dataset) {
  const std::string name = dataset["name"].get<std::string>();
  std::map<std::string, const Json*> by_id;
  for (const auto& c : results["cells"]) by_id[c["id"].get<std::string>()] = &c;
  // scan -> (method, chosen cell) with a probability block on the test slices
  std::map<std::string, std::vector<std::pair<std::string, const Json*>>> scans;
  for (const auto& s : results["selections"]) {
    if (s["dataset"] != name) continue;
    auto it = by_id.find(s["chosen_cell"].get<std::string>());
    if (it == by_id.end() || it->second->value("status", "") != "ok") continue;
    const Json& c = *it->second;
    if (!c.contains("test") || !c["test"].contains("probability")) continue;
    scans[s["scan"].get<std::string>()].push_back({s["method"].get<std::string>(), &c});
  }
  if (scans.empty()) return "";
  const auto colours = method_colours(results);
  auto colour = [&](const std::string& m) {
    auto it = colours.find(m);
    return it == colours.end() ? std::string("#333333") : it->second;
  };
  std::ostringstream h;
  int plot = 0;
  for (const auto& [scan, list] : scans) {
    h << "<h4>" << svg::escape(scan) << "</h4>\n<table class=\"data\"><thead><tr><th>method</th><th>threshold</th>"
      << "<th>average precision</th><th>Brier score</th><th>ECE</th></tr></thead><tbody>\n";
    for (const auto& [m, c] : list) {
      const Json& b = (*c)["test"]["probability"];
      h << "<tr><td>" << svg::escape(m) << "</td><td class=\"n\">" << fmt(b["chosen_threshold"]) << "</td><td class=\"n\">"
        << fmt(b["average_precision"]) << "</td><td class=\"n\">" << fmt(b["brier_score"]) << "</td><td class=\"n\">"
        << fmt(b["ece"]) << "</td></tr>\n";
    }
    h << "</tbody></table>\n";
    svg::Plot curve("prob-thr-" + std::to_string(++plot), 460, 300, "Jaccard across thresholds (test slices)");
    curve.x.label = "pore threshold (probability)";
    curve.x.lo = 0, curve.x.hi = 1;
    curve.y.label = "Jaccard (voxelwise)";
    curve.y.lo = 0, curve.y.hi = 1;
    svg::Plot rel("prob-rel-" + std::to_string(plot), 460, 300, "Reliability (test slices)");
    rel.x.label = "mean predicted probability";
    rel.x.lo = 0, rel.x.hi = 1;
    rel.y.label = "fraction of reference pore voxels";
    rel.y.lo = 0, rel.y.hi = 1;
    svg::Style diag;
    diag.dashed = true;
    diag.marker = svg::Marker::none;
    diag.color = "#999999";
    diag.width = 1;
    rel.line("perfect calibration", {0, 1}, {0, 1}, diag);
    size_t k = 0;
    for (const auto& [m, c] : list) {
      const Json& b = (*c)["test"]["probability"];
      svg::Style st;
      st.color = colour(m);
      st.marker = svg::marker_for(k++);
      st.marker_size = 3;
      curve.line(m, nums(b["thresholds"]), nums(b["jaccard_at"]), st);
      svg::Style mark = st;
      mark.dashed = true;
      mark.width = 1;
      curve.vline(num_of(b["chosen_threshold"]), mark, "chosen " + format_number(num_of(b["chosen_threshold"]), 3));
      std::vector<double> xs, ys;
      for (const auto& bin : b["reliability"]) xs.push_back(num_of(bin["mean_predicted"])), ys.push_back(num_of(bin["fraction_positive"]));
      rel.line(m, xs, ys, st);
    }
    curve.note("voxelwise on the probability map inside the part, before the shared pore extraction");
    rel.note(list.empty() ? "" : (*list.front().second)["test"]["probability"].value("ece_binning", ""));
    h << "<figure>" << curve.render() << "</figure>\n<figure>" << rel.render() << "</figure>\n";
  }
  return h.str();
}

}  // namespace pb::report
