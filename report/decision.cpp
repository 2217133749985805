// The decision of a run (see report.hpp, decide): per dataset, the fastest scan recipe on which a
// method meets every criterion on the held-out test slices, and the best such method; or that no
// combination does, with the nearest miss.
#include <algorithm>
#include <cmath>
#include <map>

#include "core/format.hpp"
#include "report/report.hpp"
#include "suites/results.hpp"

namespace pb::report {

namespace {

// A criterion with the test-slice value it was judged on for one cell: "jaccard >= 0.6: 0.713", or
// on a CI bound "jaccard >= 0.6 (95 % CI bound): CI lower bound 0.42 (value 0.632)".
std::string verdict_text(const Json& crit, const suite::Criterion& c, const Json* cell) {
  JudgedVerdict v;
  v.criterion = crit["text"].get<std::string>();
  v.on_ci = c.on == suite::Criterion::on_ci;
  v.bound = c.op == suite::Criterion::at_least ? "lower" : c.op == suite::Criterion::at_most ? "upper" : "larger |bound|";
  v.judged = cell ? suite::judged_value(*cell, "test", c) : NAN;
  v.value = cell ? suite::metric_value(*cell, "test", c.metric) : NAN;
  return judged_text(v);
}

// The value a criterion judges for a cell (the point value or its CI bound; NaN without a cell).
double judged(const suite::Criterion& c, const Json* cell) { return cell ? suite::judged_value(*cell, "test", c) : NAN; }

// How far a value is from passing, relative to the limit (0 when it passes; 1 when undefined).
double shortfall(const Json& crit, double v) {
  if (!std::isfinite(v)) return 1;
  const double limit = crit["value"].get<double>();
  const int op = crit["op"].get<int>();
  const double x = op == 2 ? std::abs(v) : v;
  const double miss = op == 0 ? limit - x : x - limit;
  return miss <= 0 ? 0 : miss / std::max(std::abs(limit), 1e-12);
}

}  // namespace

Json decide(const Json& results) {
  const auto cells = cells_by_id(results);
  const Json& criteria = results["criteria"];
  const auto parsed = suite::criteria_from_json(criteria);  // same order as `criteria`
  Json out = Json::array();
  for (const auto& d : results["datasets"]) {
    const std::string name = d["name"];
    Json dec = {{"dataset", name}};
    // Recipes by cost: fewer projections first, then lower dose (scan time and dose grow with
    // them; common practice, no source).
    struct Candidate {
      const Json* sel;
      const Json* cell;
      double jaccard;
    };
    std::vector<Candidate> all;
    for (const auto& s : results["selections"])
      if (s["dataset"] == name) {
        const auto it = cells.find(s["chosen_cell"].get<std::string>());
        const Json* c = it == cells.end() ? nullptr : it->second;
        all.push_back({&s, c, c ? suite::metric_value(*c, "test", "jaccard") : NAN});
      }
    if (criteria.empty()) {
      dec["status"] = "no_criteria";
      dec["text"] = "No acceptance criteria declared: nothing is recommended.";
      out.push_back(dec);
      continue;
    }
    auto cheaper = [](const Candidate& a, const Candidate& b) {
      const int pa = (*a.sel)["projections"], pb = (*b.sel)["projections"];
      if (pa != pb) return pa < pb;
      const double ia = (*a.sel)["i0"], ib = (*b.sel)["i0"];
      if (ia != ib) return ia < ib;
      const double ja = std::isfinite(a.jaccard) ? a.jaccard : -1, jb = std::isfinite(b.jaccard) ? b.jaccard : -1;
      return ja > jb;  // on one recipe, the best method first
    };
    std::stable_sort(all.begin(), all.end(), cheaper);
    auto values = [&](const Candidate& c, bool failed_only) {
      Json list = Json::array();
      for (size_t i = 0; i < parsed.size(); ++i)
        if (!failed_only || shortfall(criteria[i], judged(parsed[i], c.cell)) > 0)
          list.push_back(verdict_text(criteria[i], parsed[i], c.cell));
      return list;
    };
    const Candidate* best = nullptr;
    for (const auto& c : all)
      if ((*c.sel).value("passed", false) && !(*c.sel)["verdicts"].empty()) {
        best = &c;
        break;
      }
    double ref_proj = NAN;
    for (const auto& v : d["variants"]) ref_proj = v.value("reference_projections", 0);
    if (best) {
      const Json& s = *best->sel;
      dec["status"] = "recommended";
      dec["method"] = s["method"];
      dec["scan"] = s["scan"];
      dec["projections"] = s["projections"];
      dec["i0"] = s["i0"];
      dec["reasons"] = values(*best, false);
      if (ref_proj > 0 && s["projections"].get<double>() > 0) dec["time_saving_factor"] = ref_proj / s["projections"].get<double>();
      Json others = Json::array();
      for (const auto& c : all)
        if (&c != best && (*c.sel)["scan"] == s["scan"] && (*c.sel).value("passed", false)) others.push_back((*c.sel)["method"]);
      dec["also_passing_on_this_scan"] = others;
      dec["text"] = "Recommended: " + s["method"].get<std::string>() + " on " + s["scan"].get<std::string>() +
                    " — the fastest scan recipe on which a method meets every criterion on the held-out test slices" +
                    (others.empty() ? "" : "; the best by test Jaccard of the methods that do") + ".";
    } else {
      // The nearest miss: fewest failed criteria, then the smallest summed relative shortfall.
      const Candidate* near = nullptr;
      std::pair<int, double> near_key{1 << 30, INFINITY};
      for (const auto& c : all) {
        int n = 0;
        double sum = 0;
        for (size_t i = 0; i < parsed.size(); ++i) {
          const double f = shortfall(criteria[i], judged(parsed[i], c.cell));
          n += f > 0;
          sum += f;
        }
        if (std::make_pair(n, sum) < near_key) near_key = {n, sum}, near = &c;
      }
      dec["status"] = "none";
      dec["text"] = "No combination of method and scan recipe meets every criterion on the held-out test slices.";
      if (near) {
        dec["nearest_miss"] = {{"method", (*near->sel)["method"]}, {"scan", (*near->sel)["scan"]},
                               {"failed", values(*near, true)}, {"values", values(*near, false)}};
      }
    }
    out.push_back(dec);
  }
  return out;
}

}  // namespace pb::report

namespace pb::report {

std::string decision_md(const Json& results) {
  std::string md = "> **Decision.**";
  for (const auto& d : results["decision"]) {
    md += (results["decision"].size() > 1 ? "\n>\n> *" + d["dataset"].get<std::string>() + ":* " : " ") + d["text"].get<std::string>();
    if (d["status"] == "recommended") {
      md += "\n> Method **" + d["method"].get<std::string>() + "**, scan recipe **" + d["scan"].get<std::string>() + "** (" +
            std::to_string(d["projections"].get<int>()) + " projections";
      if (d.contains("time_saving_factor")) md += ", " + format_number(d["time_saving_factor"].get<double>(), 3) + "x faster than the reference recipe";
      md += "). Why: ";
      std::string r;
      for (const auto& e : d["reasons"]) r += (r.empty() ? "" : "; ") + e.get<std::string>();
      md += r + ".";
    } else if (d.contains("nearest_miss")) {
      const Json& n = d["nearest_miss"];
      std::string f;
      for (const auto& e : n["failed"]) f += (f.empty() ? "" : "; ") + e.get<std::string>();
      md += "\n> Nearest miss: " + n["method"].get<std::string>() + " on " + n["scan"].get<std::string>() + ", failing " + f + ".";
    }
  }
  return md + "\n\n";
}

}  // namespace pb::report

namespace pb::report {

std::string verdict_headline(const Json& results) {
  if (results["criteria"].empty()) return "No acceptance criteria declared: nothing is judged pass or fail.";
  size_t n = 0, pass = 0;
  for (const auto& s : results["selections"]) ++n, pass += s.value("passed", false);
  if (pass == n) return "Every combination of method and scan meets every declared criterion.";
  if (pass == 0) return "NO combination of method and scan meets the declared criteria.";
  return std::to_string(pass) + " of " + std::to_string(n) +
         " combinations of method and scan meet every declared criterion; the others do NOT.";
}

}  // namespace pb::report
