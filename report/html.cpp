// report.html: one self-contained page (inline CSS and SVG, no scripts) rendered from the results
// record, and the slice montages it shows (montages/<dataset>__<scan>.png). Every figure uses the
// selected cell of each method (tuned methods: the parameter set chosen on the calibration slices)
// scored on the held-out test slices. Undefined values are shown as "n/a" and never plotted.
#include <algorithm>
#include <cmath>
#include <filesystem>
#include <map>
#include <set>
#include <sstream>

#include "core/format.hpp"
#include "core/io.hpp"
#include "methods/registry.hpp"
#include "metrics/pod.hpp"
#include "report/html.hpp"
#include "report/probability_html.hpp"
#include "report/montage.hpp"
#include "report/report.hpp"
#include "report/svg.hpp"
#include "suites/layout.hpp"
#include "suites/results.hpp"

namespace fs = std::filesystem;

namespace pb::report {

namespace {

using svg::escape;

// Method colours: Paul Tol's "muted" qualitative scheme (Tol 2021, SRON/EPS/TN/09-002), distinct
// for colour-blind readers; every series also has its own marker shape.
const char* const kMethodColours[] = {"#332288", "#CC6677", "#117733", "#DDAA33", "#88CCEE",
                                      "#882255", "#44AA99", "#999933", "#AA4499", "#555555"};
// Scans in the size-distribution panels: black for the reference recipe, then Okabe & Ito colours.
const char* const kScanColours[] = {"#000000", "#0072B2", "#E69F00", "#CC79A7", "#009E73", "#D55E00", "#56B4E9"};

// A method keeps its colour from report to report: its place in the registry (Registry::all(),
// by family then name) picks the colour; a composition "F+M" is M's place shifted by its filters'
// places. When two methods of one report land on one colour, the later takes the next free one
// (the first 9 colours; the grey is for unknown methods). The marker shape follows the colour.
std::map<std::string, size_t> method_colour_slots(const Json& results) {
  const auto all = Registry::instance().all();
  const auto filters = Registry::instance().filters();
  auto place = [&](const std::string& part) -> size_t {
    for (size_t i = 0; i < all.size(); ++i)
      if (all[i]->name == part) return i;
    for (size_t i = 0; i < filters.size(); ++i)
      if (filters[i]->name == part) return 3 * (i + 1);
    return 0;
  };
  constexpr size_t kSlots = 9;
  std::map<std::string, size_t> slots;
  std::vector<bool> used(kSlots, false);
  for (const auto& m : results["methods"]) {
    const std::string name = m.value("name", m.value("label", ""));
    size_t want = 0;
    for (size_t a = 0, b; a <= name.size(); a = b + 1) {
      b = name.find('+', a);
      if (b == std::string::npos) b = name.size();
      want += place(name.substr(a, b - a));
    }
    want %= kSlots;
    for (size_t k = 0; k < kSlots && used[want]; ++k) want = (want + 1) % kSlots;
    used[want] = true;
    if (std::all_of(used.begin(), used.end(), [](bool u) { return u; })) used.assign(kSlots, false);
    slots.emplace(m["label"].get<std::string>(), want);
  }
  return slots;
}

}  // namespace

std::map<std::string, std::string> method_colours(const Json& results) {
  std::map<std::string, std::string> out;
  for (const auto& [label, slot] : method_colour_slots(results)) out[label] = kMethodColours[slot];
  return out;
}

namespace {

std::string join(const std::vector<std::string>& v, const std::string& sep) {
  std::string out;
  for (size_t i = 0; i < v.size(); ++i) out += (i ? sep : "") + v[i];
  return out;
}

double num(const Json& j) { return j.is_number() ? j.get<double>() : NAN; }
std::string str(const Json& j) { return j.is_string() ? j.get<std::string>() : j.is_null() ? "" : j.dump(); }
std::string f3(double v) { return format_number(v, 3); }
// A plot axis with its label, on a log scale when said.
svg::Axis axis(std::string label, bool log = false) {
  svg::Axis a;
  a.label = std::move(label);
  a.log = log;
  return a;
}

struct Page {
  const Json& r;
  std::map<std::string, const Json*> cells;  // by id
  std::map<std::string, size_t> method_index;
  int ids = 0;
  std::string next_id(const std::string& what) { return what + "-" + std::to_string(++ids); }
  std::string colour(const std::string& method) const {
    auto it = method_index.find(method);
    return kMethodColours[(it == method_index.end() ? 9 : it->second) % 10];
  }
  svg::Marker marker(const std::string& method) const {
    auto it = method_index.find(method);
    return svg::marker_for(it == method_index.end() ? 0 : it->second);
  }
  const Json* cell(const Json& selection) const {
    auto it = cells.find(selection["chosen_cell"].get<std::string>());
    return it == cells.end() ? nullptr : it->second;
  }
};

// The series axis of a dataset: projections, or dose at fixed projections (as scan_recipe_advice).
// A scan belongs on the axis when its other setting is the series' one: a reference scan taken
// with more projections is not a point of a dose series (it would sit above a series point).
struct SeriesAxis {
  bool by_dose = false;
  bool usable = false;  // at least two scans on the axis
  double reference = NAN, fixed = NAN;  // the reference recipe's axis value; the series' other setting
  bool user_units = false;  // a paired dataset: i0 is the exposure or dose the suite file gives, in its own unit
  std::string unit;          // that unit when the suite file names it (i0_unit)
  std::string label() const {
    if (!by_dose) return "projections";
    if (!user_units) return "dose I0 (photons per detector pixel)";
    return unit.empty() ? "i0 (exposure or dose as given in the suite file)" : "i0 (" + unit + ")";
  }
  double of(const Json& s) const { return by_dose ? num(s["i0"]) : num(s["projections"]); }
  bool on_axis(const Json& s) const {
    const double x = of(s), other = by_dose ? num(s["projections"]) : num(s["i0"]);
    return std::isfinite(x) && x > 0 && (!std::isfinite(fixed) || other == fixed);
  }
};

SeriesAxis series_axis(const Json& d) {
  SeriesAxis a;
  std::set<double> proj, dose, all;
  for (const auto& v : d["variants"]) {
    if (v.value("reference", false)) continue;
    proj.insert(num(v["projections"]));
    dose.insert(num(v["i0"]));
  }
  a.by_dose = proj.size() == 1 && dose.size() > 1;
  a.user_units = d.value("kind", std::string()) == "paired";  // synthetic i0 is the simulation's photon count
  if (a.user_units && d.contains("i0_unit") && d["i0_unit"].is_string()) a.unit = d["i0_unit"].get<std::string>();
  if (a.by_dose) a.fixed = *proj.begin();
  else if (dose.size() == 1) a.fixed = *dose.begin();
  for (const auto& v : d["variants"]) {
    if (v.value("reference", false)) a.reference = a.of(v);
    if (a.on_axis(v)) all.insert(a.of(v));
  }
  if (!d["variants"].empty()) {
    const Json& v0 = d["variants"][0];
    if (!std::isfinite(a.reference)) a.reference = a.by_dose ? num(v0["reference_i0"]) : num(v0["reference_projections"]);
  }
  a.usable = all.size() >= 2;
  return a;
}

std::vector<std::string> dataset_scans(const Json& d) {
  std::vector<std::string> s;
  for (const auto& v : d["variants"]) s.push_back(v["scan"]);
  return s;
}

// The selections of one dataset, by scan then method label.
std::map<std::string, std::map<std::string, const Json*>> selections_of(const Page& p, const std::string& dataset) {
  std::map<std::string, std::map<std::string, const Json*>> out;
  for (const auto& s : p.r["selections"])
    if (s["dataset"] == dataset) out[s["scan"]][s["method"]] = &s;
  return out;
}

std::vector<std::string> method_labels(const Page& p) {
  std::vector<std::string> m;
  for (const auto& e : p.r["methods"]) m.push_back(e["label"]);
  return m;
}

std::string figure(const std::string& svg_text, const std::string& caption = "") {
  return "<figure>" + svg_text + (caption.empty() ? "" : "<figcaption>" + caption + "</figcaption>") + "</figure>\n";
}

// Panels side by side with the caption of the whole below them.
std::string panel_grid(const std::string& figures, const std::string& caption) {
  return "<div class=\"grid\">" + figures + "</div>\n<p class=\"caption\">" + caption + "</p>\n";
}

// Why a POD figure is undefined, for the n/a notes.
std::string pod_reason(const Json& cell, const std::string& metric) {
  if (cell.value("status", "") != "ok") return "cell failed";
  const Json& p = cell["test"]["pod"];
  if (!p.value("estimable", false)) return str(p["reason"]);
  if (metric == "a90_95_um" && p.contains("a90_95_reason")) return str(p["a90_95_reason"]);
  return "";
}

// ---- sections ---------------------------------------------------------------------------------

// The decision box: the recommended method and scan recipe with the reasons, or that no
// combination meets the criteria with the nearest miss (report/decision.cpp decides).
std::string decision_box(const Json& r) {
  std::ostringstream h;
  bool any = false;
  for (const auto& d : r["decision"]) any = any || d["status"] == "recommended";
  h << "<div class=\"decision " << (any ? "pass" : "fail") << "\" id=\"decision\"><strong>Decision.</strong>";
  for (const auto& d : r["decision"]) {
    h << "<p>" << (r["decision"].size() > 1 ? "<em>" + escape(str(d["dataset"])) + ":</em> " : "") << escape(str(d["text"]));
    if (d["status"] == "recommended") {
      h << "<br>Method <strong>" << escape(str(d["method"])) << "</strong>, scan recipe <strong>" << escape(str(d["scan"]))
        << "</strong> (" << str(d["projections"]) << " projections";
      if (d.contains("time_saving_factor")) h << ", " << f3(num(d["time_saving_factor"])) << "× faster than the reference recipe";
      h << ").</p><ul>";
      for (const auto& e : d["reasons"]) h << "<li>" << escape(str(e)) << "</li>";
      h << "</ul>";
    } else if (d.contains("nearest_miss")) {
      const Json& n = d["nearest_miss"];
      h << "<br>Nearest miss: " << escape(str(n["method"])) << " on " << escape(str(n["scan"])) << ", failing:</p><ul>";
      for (const auto& e : n["failed"]) h << "<li>" << escape(str(e)) << "</li>";
      h << "</ul>";
    } else {
      h << "</p>";
    }
  }
  h << "</div>\n";
  return h.str();
}

std::string header(const Page& p) {
  const Json& r = p.r;
  const Json& ctx = r["context"];
  std::ostringstream h;
  h << "<header><h1>porebench report: " << escape(str(r["suite"]["name"])) << "</h1>\n" << decision_box(r);
  if (!str(r["suite"]["description"]).empty()) h << "<p class=\"lead\">" << escape(str(r["suite"]["description"])) << "</p>\n";
  h << "<div class=\"caution\" role=\"note\"><strong>Caution.</strong> " << escape(kCaution) << "</div>\n";
  size_t n_pass = 0;
  for (const auto& s : r["selections"]) n_pass += s.value("passed", false);
  const char* tone = r["criteria"].empty() ? "none" : r.value("criteria_met", false) ? "pass" : n_pass > 0 ? "some" : "fail";
  h << "<div class=\"verdict " << tone << "\">" << escape(verdict_headline(r));
  if (!r["criteria"].empty()) {
    h << " Criteria (on the held-out test slices):";
    for (const auto& c : r["criteria"]) h << " <code>" << escape(str(c["text"])) << "</code>";
    if (std::any_of(r["criteria"].begin(), r["criteria"].end(), [](const Json& c) { return c.value("on", "") == "ci"; }))
      h << " Criteria marked “95 % CI bound” are judged on the bound of the 95 % interval (lower for a minimum, upper for a "
           "maximum); the tables give the bound judged and the point value.";
  }
  h << "</div>\n<table class=\"meta\">";
  auto row = [&](const std::string& k, const std::string& v) { h << "<tr><th>" << escape(k) << "</th><td>" << escape(v) << "</td></tr>"; };
  row("tool", "porebench " + str(ctx["version"]) + " (source revision " + str(ctx["git_hash"]) + ")");
  row("run at (UTC)", str(ctx["time_utc"]));
  row("host", str(ctx["host"]) + ", " + str(ctx["threads"]) + " threads");
  row("suite file", str(r["suite"]["path"]));
  row("suite sha256", str(r["suite_sha256"]));
  row("calibration", "parameters tuned by " + str(r["calibration"]["objective"]) + " on the lowest " +
                         f3(100 * num(r["calibration"]["fraction"])) + " % of the part's slices, gap of " +
                         str(r["calibration"]["gap_slices"]) + " slices, scored on the slices above");
  row("scoring", "match rule " + str(r["scoring"]["match"]) + ", connectivity " + str(r["scoring"]["connectivity"]) + ", " +
                     hit_cap_text(r["scoring"]) + ", " + str(r["scoring"]["bins_per_decade"]) + " size bins per decade");
  h << "</table>\n<p class=\"links\">Files of this run: <a href=\"validation-record.md\">validation-record.md</a> · "
       "<a href=\"summary.md\">summary.md</a> · <a href=\"results.csv\">results.csv</a> · <a href=\"results.json\">results.json</a></p>\n";
  h << "<nav><strong>Contents:</strong> ";
  int k = 0;
  for (const auto& d : r["datasets"])
    h << "<a href=\"#ds-" << k++ << "\">" << escape(str(d["name"])) << "</a> · ";
  h << "<a href=\"#advice\">scan-recipe advice</a> · <a href=\"#failed\">failed cells</a> · <a href=\"#definitions\">definitions</a></nav>\n";
  h << "</header>\n";
  return h.str();
}

std::string summary_tables(Page& p, const Json& d) {
  std::ostringstream h;
  auto by_scan = selections_of(p, d["name"]);
  for (const auto& scan : dataset_scans(d)) {
    std::vector<const Json*> sels;
    for (const auto& [m, s] : by_scan[scan]) sels.push_back(s);
    auto jac = [&](const Json* s) {
      const Json* c = p.cell(*s);
      const double v = c ? suite::metric_value(*c, "test", "jaccard") : NAN;
      return std::isfinite(v) ? v : -1.0;
    };
    std::stable_sort(sels.begin(), sels.end(), [&](const Json* a, const Json* b) { return jac(a) > jac(b); });
    h << "<h4>" << escape(scan) << "</h4>\n<table class=\"data\"><thead><tr><th>rank</th><th>method</th><th>parameters</th>"
         "<th>Jaccard</th><th>slice Jaccard (95 % CI)</th><th>porosity bias (pp)</th><th>a90 (µm)</th><th>a90/95 (µm)</th>"
         "<th>false calls (part / per cm³ / per target)</th><th>runtime (s)</th><th>criteria</th></tr></thead><tbody>\n";
    int rank = 0;
    for (const Json* s : sels) {
      const Json* c = p.cell(*s);
      h << "<tr><td class=\"n\">" << ++rank << "</td><td><span class=\"sw\" style=\"background:" << p.colour(str((*s)["method"])) << "\"></span>"
        << escape(str((*s)["method"])) << [&] { const std::string role = reference_role(p.r, *s); return role.empty() ? role : " <small>(" + escape(role) + ")</small>"; }() << "</td><td>" << (c ? escape(params_text((*c)["params"], ", ", method_entry(p.r, str((*s)["method"])))) : "") << ((*s).value("tuned", false) ? " (tuned)" : "");
      if (c && c->contains("warnings"))
        for (const auto& w : (*c)["warnings"]) h << "<br><small class=\"warn\">method warning: " << escape(str(w)) << "</small>";
      h << "</td>";
      if (!c || c->value("status", "") != "ok") {
        h << "<td colspan=\"7\" class=\"na\">failed: " << escape(c ? str((*c)["error"]) : "cell missing") << "</td><td class=\"fail\">FAIL</td></tr>\n";
        continue;
      }
      const Json& t = (*c)["test"];
      h << "<td class=\"n\">" << fmt(t["overlap"]["jaccard"]) << "</td><td class=\"n\">" << fmt(slice_jaccard_mean(t)) << " ("
        << fmt(t["slices"]["jaccard_ci95"][0]) << "–" << fmt(t["slices"]["jaccard_ci95"][1]) << ")</td><td class=\"n\">"
        << fmt(t["porosity"]["porosity_bias_pp"]) << "</td><td class=\"n\">" << escape(a90_text(t)) << "</td><td class=\"n\">" << escape(a9095_text(t))
        << "</td><td class=\"n\">" << escape(false_calls_text(t)) << "</td><td class=\"n\">" << runtime_text(*c) << "</td>";
      if ((*s)["verdicts"].empty()) h << "<td>none set</td>";
      else {
        h << "<td class=\"" << ((*s).value("passed", false) ? "pass" : "fail") << "\">" << ((*s).value("passed", false) ? "pass" : "FAIL");
        // Each criterion that failed or was judged on a CI bound, with the value judged.
        for (const auto& v : judged_verdicts(p.r, *s, c))
          if (v.on_ci || !v.passed)
            h << "<br><small" << (v.on_ci ? " class=\"ci\"" : "") << ">" << escape(judged_text(v)) << (v.passed ? " pass" : " FAIL") << "</small>";
        h << "</td>";
      }
      h << "</tr>\n";
    }
    h << "</tbody></table>\n";
  }
  return h.str();
}

// Each metric against the series axis, one line per method.
std::string metric_series(Page& p, const Json& d) {
  const SeriesAxis ax = series_axis(d);
  if (!ax.usable)
    return "<p class=\"note\">No series: fewer than two scans of this dataset differ only in " + ax.label() +
           ". See the tables above.</p>\n";
  struct MetricPlot {
    const char* metric;
    const char* title;
    const char* y_label;
  };
  const MetricPlot plots[] = {{"jaccard", "Jaccard", "Jaccard"},
                              {"porosity_bias_pp", "Porosity bias", "bias (pp)"},
                              {"a90_95_um", "a90/95", "a90/95 (µm)"},
                              {"false_calls_per_cm3", "False calls", "false calls per cm³"}};
  auto by_scan = selections_of(p, d["name"]);
  std::vector<double> ticks;
  std::vector<std::string> off_axis;
  for (const auto& v : d["variants"]) {
    if (ax.on_axis(v)) ticks.push_back(ax.of(v));
    else off_axis.push_back(str(v["scan"]) + " (" + str(v["projections"]) + " projections, I0 " + format_number(num(v["i0"])) + ")");
  }
  std::string figures;
  for (const auto& mp : plots) {
    svg::Plot pl(p.next_id("series"), 600, 320, std::string(mp.title) + " vs " + ax.label());
    pl.x = axis(ax.label(), true);
    pl.x.ticks = ticks;
    pl.y.label = mp.y_label;
    pl.y.include_zero = std::string(mp.metric) != "jaccard" && std::string(mp.metric) != "a90_95_um";
    if (std::string(mp.metric) == "jaccard") pl.y.lo = 0, pl.y.hi = 1;
    svg::Style ref_style;
    ref_style.color = "#777777";
    ref_style.dashed = true;
    ref_style.width = 1;
    pl.vline(ax.reference, ref_style, ax.by_dose ? "reference dose" : "reference recipe");
    if (!off_axis.empty()) pl.note("not on this axis, see the tables: " + join(off_axis, ", "));
    if (std::string(mp.metric) == "a90_95_um" &&
        std::none_of(p.r["criteria"].begin(), p.r["criteria"].end(), [](const Json& c) { return c["metric"] == "false_calls_per_cm3"; }))
      pl.note("no false-call criterion declared: read a90/95 together with the false calls (noise buys detections)");
    std::map<std::string, std::vector<std::string>> missing;  // reason -> "method at x"
    std::vector<double> extra_x, extra_y, bound_x, bound_y;  // a90/95 read outside the data / all-hit bounds
    for (const auto& m : method_labels(p)) {
      std::vector<std::pair<double, double>> pts;
      for (const auto& scan : dataset_scans(d)) {
        auto it = by_scan[scan].find(m);
        if (it == by_scan[scan].end() || !ax.on_axis(*it->second)) continue;
        const Json* c = p.cell(*it->second);
        const double xv = ax.of(*it->second);
        double yv = c ? suite::metric_value(*c, "test", mp.metric) : NAN;
        // Noise buys detections: an a90/95 of a cell whose false calls exceed a false-call
        // criterion is not drawn, so that a noisy method cannot look best in this panel.
        if (std::string(mp.metric) == "a90_95_um" && c && std::isfinite(yv)) {
          const double fc = suite::metric_value(*c, "test", "false_calls_per_cm3");
          for (const auto& cr : p.r["criteria"])
            if (cr["metric"] == "false_calls_per_cm3" && !(fc <= num(cr["value"]))) {
              yv = NAN;
              missing["false calls above the criterion " + str(cr["text"]) + ": detections bought with noise"].push_back(
                  m + " at " + format_number(xv));
              break;
            }
          if (!std::isfinite(yv)) {
            pts.push_back({xv, yv});
            continue;
          }
        }
        if (!std::isfinite(yv)) {
          const bool pod_metric = std::string(mp.metric).rfind("a9", 0) == 0;
          const std::string why = !c ? "cell missing" : c->value("status", "") != "ok" ? "cell failed"
                                  : pod_metric ? pod_reason(*c, mp.metric) : "not defined";
          missing[why.empty() ? "not defined" : why].push_back(m + " at " + format_number(xv));
        }
        if (std::string(mp.metric) == "a90_95_um" && c && std::isfinite(yv)) {
          const Json& pod = (*c)["test"]["pod"];
          if (pod.value("a90_95_relation", "") == "<=") bound_x.push_back(xv), bound_y.push_back(yv);
          else if (pod.value("a90_95_extrapolated", false)) extra_x.push_back(xv), extra_y.push_back(yv);
        }
        pts.push_back({xv, yv});
      }
      std::sort(pts.begin(), pts.end(), [](auto& a, auto& b) { return a.first < b.first; });
      std::vector<double> xs, ys;
      for (auto& q : pts) xs.push_back(q.first), ys.push_back(q.second);
      svg::Style st;
      st.color = p.colour(m);
      st.marker = p.marker(m);
      pl.line(m, xs, ys, st);
    }
    // Marks over the method markers: an extrapolated a90/95 (below the smallest reference pore)
    // and the all-hit bound "a90/95 <= smallest pore" are not values of the same kind.
    svg::Style mark;
    mark.color = "#000000";
    mark.width = 0;
    mark.marker_size = 7;
    if (!extra_x.empty()) {
      mark.marker = svg::Marker::cross;
      mark.series = "a90_95-extrapolated";
      pl.line("extrapolated (below the smallest pore)", extra_x, extra_y, mark);
    }
    if (!bound_x.empty()) {
      mark.marker = svg::Marker::triangle;
      mark.series = "a90_95-bound";
      pl.line("≤ bound (every pore hit)", bound_x, bound_y, mark);
    }
    svg::Style crit;
    crit.color = "#B00000";
    crit.dashed = true;
    crit.width = 1.2;
    for (const auto& c : p.r["criteria"]) {
      if (c["metric"] != mp.metric) continue;
      const double v = num(c["value"]);
      pl.hline(v, crit, "criterion " + str(c["text"]));
      if (c["op"].get<int>() == 2) pl.hline(-v, crit, "");
    }
    for (const auto& [why, list] : missing) pl.note("n/a, not plotted (" + why + "): " + join(list, ", "));
    figures += figure(pl.render());
  }
  return panel_grid(figures, "Selected cell of each method on each scan, test slices. The dashed grey line is the "
       "reference recipe; red dashed lines are acceptance criteria. A line breaks where a value is not defined.");
}

std::string bias_bars(Page& p, const Json& d) {
  auto by_scan = selections_of(p, d["name"]);
  const auto scans = dataset_scans(d);
  std::vector<svg::BarSeries> series;
  for (const auto& m : method_labels(p)) {
    svg::BarSeries s{m, p.colour(m), {}};
    for (const auto& scan : scans) {
      auto it = by_scan[scan].find(m);
      const Json* c = it == by_scan[scan].end() ? nullptr : p.cell(*it->second);
      s.values.push_back(c ? suite::metric_value(*c, "test", "porosity_bias_pp") : NAN);
    }
    series.push_back(s);
  }
  std::vector<std::pair<double, std::string>> refs;
  for (const auto& c : p.r["criteria"])
    if (c["metric"] == "porosity_bias_pp") {
      refs.push_back({num(c["value"]), "criterion " + str(c["text"])});
      if (c["op"].get<int>() == 2) refs.push_back({-num(c["value"]), ""});
    }
  const double width = std::max(600.0, 110.0 * double(scans.size()) + 120);
  return figure(svg::bar_chart(p.next_id("bias"), std::min(width, 1180.0), 320, "Porosity bias by scan and method (test slices)",
                               scans, series, "porosity bias (pp)", refs),
                "Predicted minus reference porosity in percentage points; n/a marks a failed or undefined cell.");
}

std::string pod_panel(Page& p, const Json& sel, const Json* c) {
  const std::string m = str(sel["method"]);
  return pod_panel_svg(p.next_id("pod"), m, p.colour(m), c);
}

std::string pod_section(Page& p, const Json& d) {
  std::ostringstream h;
  auto by_scan = selections_of(p, d["name"]);
  for (const auto& scan : dataset_scans(d)) {
    h << "<h4>POD on " << escape(scan) << "</h4>\n<div class=\"grid\">";
    for (const auto& m : method_labels(p)) {
      auto it = by_scan[scan].find(m);
      if (it == by_scan[scan].end()) continue;
      h << figure(pod_panel(p, *it->second, p.cell(*it->second)));
    }
    h << "</div>\n";
  }
  h << "<p class=\"caption\">Hit/miss POD against ESD of the reference pores in the test slices: the maximum-likelihood fit "
       "(line), its one-sided 95 % lower likelihood-ratio bound (shaded from the bound up to the fit, edge drawn), "
       "the binned empirical POD with Clopper-Pearson 95 % intervals (points and bars), a90 (dashed) and a90/95 (solid). "
       "a90/95 is where the band's lower edge crosses POD 0.9: both are the same profile-likelihood construction. Left of "
       "the dotted line (the smallest reference pore) the fit is extrapolated; a90 or a90/95 there is marked so.</p>\n";
  return h.str();
}

std::string sizes_section(Page& p, const Json& d) {
  std::string figures;
  auto by_scan = selections_of(p, d["name"]);
  const auto scans = dataset_scans(d);
  for (const auto& m : method_labels(p)) {
    svg::Plot pl(p.next_id("esd"), 360, 270, m);
    pl.x = axis("ESD (µm)", true);
    pl.y = axis("pores per bin", true);  // log: false calls of a few voxels would otherwise flatten the reference
    bool ref_drawn = false;
    std::vector<std::string> missing;
    for (size_t k = 0; k < scans.size(); ++k) {
      auto it = by_scan[scans[k]].find(m);
      const Json* c = it == by_scan[scans[k]].end() ? nullptr : p.cell(*it->second);
      if (!c || c->value("status", "") != "ok") {
        missing.push_back(scans[k]);
        continue;
      }
      const Json& sz = (*c)["test"]["sizes"];
      std::vector<double> edges, ref, pred;
      for (const auto& e : sz["edges_um"]) edges.push_back(num(e));
      for (const auto& e : sz["count_ref"]) ref.push_back(num(e));
      for (const auto& e : sz["count_pred"]) pred.push_back(num(e));
      if (edges.size() != pred.size() + 1) {
        missing.push_back(scans[k]);
        continue;
      }
      if (!ref_drawn) {
        svg::Style rs;
        rs.color = "#9a9a9a";
        rs.opacity = 0.45;
        pl.steps("reference", edges, ref, rs, true);
        ref_drawn = true;
      }
      svg::Style s;
      s.color = kScanColours[k % 7];
      s.width = 1.6;
      s.dashed = k % 2 == 1;
      pl.steps(scans[k] + " (KS " + f3(num(sz["ks"])) + ")", edges, pred, s, false);
    }
    if (!ref_drawn) pl.note("no size distribution: every cell of this method failed");
    else if (!missing.empty()) pl.note("not shown (cell failed): " + join(missing, ", "));
    figures += figure(pl.render());
  }
  return panel_grid(figures, "Equivalent spherical diameter ESD = (6V/π)^(1/3) of the predicted pores (lines, one "
       "per scan) over that of the reference pores (grey), on the shared log-spaced bins of the scoring; test slices. "
       "KS: Kolmogorov–Smirnov distance.");
}

std::string pareto_section(Page& p, const Json& d) {
  std::string figures;
  auto by_scan = selections_of(p, d["name"]);
  for (const auto& scan : dataset_scans(d)) {
    svg::Plot pl(p.next_id("pareto"), 600, 320, "Runtime vs Jaccard: " + scan);
    pl.x = axis("runtime (s)", true);
    pl.y = axis("Jaccard");
    struct Pt {
      double t, j;
      std::string m;
    };
    std::vector<Pt> pts;
    std::vector<std::string> missing;
    for (const auto& m : method_labels(p)) {
      auto it = by_scan[scan].find(m);
      if (it == by_scan[scan].end()) continue;
      const Json* c = p.cell(*it->second);
      const double t = c ? suite::metric_value(*c, "test", "runtime_s") : NAN;
      const double j = c ? suite::metric_value(*c, "test", "jaccard") : NAN;
      svg::Style st;
      st.color = p.colour(m);
      st.marker = p.marker(m);
      st.width = 0;
      st.marker_size = 5;
      pl.line(m, {t}, {j}, st);
      if (std::isfinite(t) && t > 0 && std::isfinite(j)) pts.push_back({t, j, m});
      else missing.push_back(m);
    }
    std::vector<std::pair<double, double>> tq;
    for (const auto& q : pts) tq.push_back({q.t, q.j});
    std::vector<double> fx, fy;
    for (size_t i : pareto_front(tq)) {
      if (!fx.empty()) fx.push_back(pts[i].t), fy.push_back(fy.back());  // staircase: across, then up
      fx.push_back(pts[i].t), fy.push_back(pts[i].j);
      pl.text(pts[i].t, pts[i].j, pts[i].m);
    }
    svg::Style fs;
    fs.color = "#000000";
    fs.width = 1.2;
    fs.dashed = true;
    fs.marker = svg::Marker::none;
    pl.line("Pareto front", fx, fy, fs);
    if (!missing.empty()) pl.note("n/a, not plotted: " + join(missing, ", "));
    figures += figure(pl.render());
  }
  return panel_grid(figures, "Method runtime (segmentation only, this host) against test Jaccard. The dashed staircase "
       "joins the Pareto-optimal methods (no other method is both faster and better); they are labelled.");
}

std::string montage_section(Page& p, const Json& d, const std::string& out_dir) {
  std::ostringstream h;
  auto by_scan = selections_of(p, d["name"]);
  const fs::path dir(out_dir);
  fs::create_directories(dir / "montages");
  h << "<p class=\"legend\">Colour scheme <strong>" << kOverlaySchemeName << "</strong> (Okabe &amp; Ito colour-blind-safe palette):";
  for (const OverlayColour* c : {&kOverlayFound, &kOverlayExtra, &kOverlayMissed})
    h << " <span class=\"sw\" style=\"background:" << c->hex << "\"></span>" << escape(c->role) << ";";
  h << " other voxels: the grey scan slice, dimmed in the method tiles.</p>\n";
  // The pixel size of the slice (x spacing of a scored cell of this dataset) for the scale bar.
  double pixel_um = NAN;
  for (const auto& c : p.r["cells"])
    if (c["dataset"] == d["name"] && c.value("status", "") == "ok" && c["test"].contains("spacing_mm")) {
      pixel_um = 1000 * num(c["test"]["spacing_mm"][0]);
      break;
    }
  for (const auto& v : d["variants"]) {
    const std::string scan = str(v["scan"]);
    std::vector<MontageTile> tiles;
    for (const auto& m : method_labels(p)) {
      auto it = by_scan[scan].find(m);
      if (it == by_scan[scan].end()) continue;
      const Json* c = p.cell(*it->second);
      MontageTile t;
      t.label = m;
      if (c && c->value("status", "") == "ok" && c->contains("montage_slice_png"))
        t.mask_png = (dir / str((*c)["montage_slice_png"])).string();
      else
        t.note = "cell failed";
      tiles.push_back(t);
    }
    const std::string rel = "montages/" + suite::file_token(str(d["name"])) + "__" + suite::file_token(scan) + ".png";
    // Paired series: each scan has its own grid, so its own reference slice (suites/paired.hpp).
    const Json& ref_png = v.contains("montage_reference_png") ? v["montage_reference_png"] : d["montage_reference_png"];
    const Json& slices = v.contains("slices") ? v["slices"] : d["slices"];
    write_montage((dir / str(v["montage_png"])).string(), (dir / str(ref_png)).string(),
                  scan, tiles, (dir / rel).string(), pixel_um);
    h << "<figure class=\"montage\"><img src=\"" << escape(rel) << "\" alt=\"slice montage of " << escape(scan)
      << "\"><figcaption>" << escape(scan) << ", slice z = " << str(slices["montage_z"])
      << " (the test slice with the most reference pore voxels): scan (scale bar in µm"
      << (std::isfinite(pixel_um) ? ", pixel " + format_number(pixel_um, 3) + " µm" : std::string(", pixel size unknown: no bar"))
      << "), reference, then each method's selected cell.</figcaption></figure>\n";
  }
  return h.str();
}

std::string dataset_section(Page& p, const Json& d, int k, const std::string& out_dir) {
  std::ostringstream h;
  h << "<section id=\"ds-" << k << "\"><h2>Dataset " << escape(str(d["name"])) << "</h2>\n<p>" << escape(str(d["kind"]))
    << " dataset; reference: ";
  if (d["reference"].is_string()) h << escape(str(d["reference"]));
  else if (d["reference"].contains("mask")) h << "mask " << escape(str(d["reference"]["mask"]));
  else if (d["reference"].contains("consensus")) h << "scan " << escape(str(d["reference"]["scan"])) << ", " << escape(consensus_text(d["reference"]));
  else h << "scan " << escape(str(d["reference"]["scan"])) << " segmented by " << escape(str(d["reference"]["method"]));
  const Json& sl = d["slices"];
  h << ". Calibration slices z " << str(sl["calibration"][0]) << "–" << num(sl["calibration"][1]) - 1 << ", gap " << str(sl["gap"])
    << ", test slices z " << str(sl["test"][0]) << "–" << num(sl["test"][1]) - 1 << ".</p>\n";
  h << "<h3>Methods ranked by test Jaccard</h3>\n" << summary_tables(p, d);
  h << "<h3>Metrics across the scan series</h3>\n" << metric_series(p, d);
  h << "<h3>Porosity bias</h3>\n" << bias_bars(p, d);
  h << "<h3>Probability of detection</h3>\n" << pod_section(p, d);
  h << "<h3>Pore-size distributions</h3>\n" << sizes_section(p, d);
  h << "<h3>Runtime and quality</h3>\n" << pareto_section(p, d);
  if (const std::string prob = probability_section_html(p.r, d); !prob.empty())  // report/probability_html
    h << "<h3>Probability maps</h3>\n" << prob;
  h << "<h3>Slice montages</h3>\n" << montage_section(p, d, out_dir);
  h << "</section>\n";
  return h.str();
}

std::string advice_section(const Page& p) {
  std::ostringstream h;
  h << "<section id=\"advice\"><h2>Scan-recipe advice</h2>\n";
  if (p.r["advice"].empty()) {
    h << "<p>No projection or dose series with at least two scans besides the reference: no advice.</p></section>\n";
    return h.str();
  }
  h << "<table class=\"data\"><thead><tr><th>dataset</th><th>method</th><th>series</th><th>cheapest scan meeting every "
       "criterion</th><th>saving vs the reference recipe</th></tr></thead><tbody>\n";
  for (const auto& a : p.r["advice"]) {
    h << "<tr><td>" << escape(str(a["dataset"])) << "</td><td>" << escape(str(a["method"])) << "</td><td>" << escape(str(a["axis"]))
      << "</td>";
    if (a["scan"].is_null()) {
      h << "<td class=\"na\">" << escape(str(a["note"])) << "</td><td>n/a</td></tr>\n";
      continue;
    }
    h << "<td>" << escape(str(a["scan"]));
    if (a.contains("projections")) h << " (" << str(a["projections"]) << " of " << str(a["reference_projections"]) << " projections)";
    if (a.contains("i0")) h << " (I0 " << f3(num(a["i0"])) << ")";
    h << "</td><td>";
    if (a.contains("time_saving_factor")) h << f3(num(a["time_saving_factor"])) << "× scan time";
    else if (a.contains("dose_saving_factor")) h << f3(num(a["dose_saving_factor"])) << "× dose";
    else h << "n/a";
    h << "</td></tr>\n";
  }
  h << "</tbody></table>\n<p class=\"caption\">The cheapest scan of the series from which every dearer scan also meets the "
       "criteria. Scan time is taken to scale with the number of projections (common practice, no source).</p></section>\n";
  return h.str();
}

std::string failed_section(const Page& p) {
  std::ostringstream h;
  h << "<section id=\"failed\"><h2>Failed cells</h2>\n";
  int n = 0;
  std::ostringstream rows;
  for (const auto& c : p.r["cells"]) {
    if (c.value("status", "") == "ok") continue;
    ++n;
    rows << "<tr><td>" << escape(str(c["id"])) << "</td><td>" << escape(params_text(c["params"])) << "</td><td>"
         << escape(str(c["error"])) << "</td></tr>\n";
  }
  if (n == 0) h << "<p>No cell failed (" << p.r["cells"].size() << " cells).</p>";
  else
    h << "<p>" << n << " of " << p.r["cells"].size() << " cells failed; the run went on without them.</p><table class=\"data\">"
      << "<thead><tr><th>cell</th><th>parameters</th><th>error</th></tr></thead><tbody>\n" << rows.str() << "</tbody></table>";
  h << "</section>\n";
  return h.str();
}

const char* const kStyle = R"css(
body{font-family:"DejaVu Sans",Arial,sans-serif;margin:0 auto;max-width:1240px;padding:12px 20px;color:#222;background:#fff}
h1{font-size:24px;margin:8px 0}h2{font-size:20px;border-bottom:2px solid #ccc;margin-top:32px}h3{font-size:16px;margin-top:22px}
h4{font-size:14px;margin:14px 0 6px}
.lead{font-size:15px;color:#333}
.caution{border:3px solid #B00000;background:#fff3f0;padding:10px 14px;margin:10px 0;font-size:15px}
.verdict{padding:8px 14px;margin:8px 0;font-weight:bold}.verdict.pass{background:#e6f4ea;border-left:6px solid #117733}
.verdict.fail{background:#fdecea;border-left:6px solid #B00000}.verdict.some{background:#fff8e1;border-left:6px solid #DDAA33}
.verdict.none{background:#f4f4f4;border-left:6px solid #777}
.decision{border:2px solid #333;padding:8px 14px;margin:10px 0;font-size:15px}.decision.pass{background:#eef7f0}
.decision.fail{background:#fdf0ee}.decision ul{margin:4px 0}
table{border-collapse:collapse;margin:6px 0;font-size:12.5px}th,td{border:1px solid #ccc;padding:3px 7px;text-align:left;vertical-align:top}
td.n{text-align:right}table.meta th{background:#f4f4f4}thead th{background:#f0f0f0}
td.pass{color:#0b5d1e;font-weight:bold}small.warn{color:#8a4b00}td.fail{color:#a00000;font-weight:bold}td.na{color:#666}
.sw{display:inline-block;width:12px;height:12px;margin:0 5px 0 2px;vertical-align:-1px;border:1px solid #666}
.grid{display:flex;flex-wrap:wrap;gap:8px}figure{margin:4px}figcaption,.caption{font-size:12px;color:#444;max-width:1200px}
figure.montage img{max-width:100%;border:1px solid #ccc;image-rendering:pixelated}
nav{margin:10px 0;font-size:13px}.links{font-size:13px}.note{color:#555}code{background:#f4f4f4;padding:0 3px}
)css";

}  // namespace

std::string pod_panel_svg(const std::string& id, const std::string& method, const std::string& colour, const Json* c) {
  svg::Plot pl(id, 360, 270, method);
  pl.x = axis("ESD (µm)", true);
  pl.y = axis("POD");
  pl.y.lo = 0, pl.y.hi = 1;
  if (!c || c->value("status", "") != "ok") {
    pl.note("cell failed: " + (c ? str((*c)["error"]) : std::string("missing")));
    return pl.render();
  }
  const Json& pod = (*c)["test"]["pod"];
  double lo = INFINITY, hi = 0;
  std::vector<double> bx, by, blo, bhi;
  for (const auto& b : pod["bins"]) {
    if (b.value("n", 0) <= 0) continue;
    lo = std::min(lo, num(b["lo_um"])), hi = std::max(hi, num(b["hi_um"]));
    bx.push_back(std::sqrt(num(b["lo_um"]) * num(b["hi_um"])));
    by.push_back(num(b["pod"]));
    blo.push_back(num(b["ci95"][0]));
    bhi.push_back(num(b["ci95"][1]));
  }
  const double a90 = num(pod["a90_um"]), a9095 = num(pod["a90_95_um"]), smallest = num(pod["smallest_target_um"]);
  const bool bound = pod.value("a90_95_relation", "") == "<=";
  const bool a90_extra = pod.value("a90_extrapolated", false), a9095_extra = pod.value("a90_95_extrapolated", false);
  for (double v : {a90, a9095})
    if (std::isfinite(v) && v > 0) lo = std::min(lo, v), hi = std::max(hi, v);
  if (!(lo < hi)) {
    pl.note("no reference pores in the test slices: POD not defined");
    return pl.render();
  }
  pl.x.lo = lo / 1.15, pl.x.hi = hi * 1.15;
  svg::Style s90;
  s90.color = "#999999";
  s90.width = 1;
  s90.dashed = true;
  s90.series = "pod-0.9";
  pl.hline(0.9, s90, "POD 0.9", true);
  const double b0 = num(pod["b0"]), b1 = num(pod["b1"]);
  const PodLink link = parse_pod_link(str(pod["link"]));
  if (pod.value("estimable", false) && std::isfinite(b0) && std::isfinite(b1)) {
    // The one band: the one-sided 95 % lower likelihood-ratio bound the score record holds
    // (pod.band), shaded up to the fit; its lower edge crosses 0.9 at a90/95.
    std::vector<double> bs, bpod, blower;
    if (pod.contains("band") && pod["band"].contains("points"))
      for (const auto& q : pod["band"]["points"]) bs.push_back(num(q[0])), bpod.push_back(num(q[1])), blower.push_back(num(q[2]));
    pl.band("one-sided 95 % lower bound (likelihood ratio)", bs, blower, bpod, colour, 0.18, "pod-band");
    svg::Style edge;
    edge.color = colour;
    edge.marker = svg::Marker::none;
    edge.width = 0.9;
    edge.series = "pod-band-lower";
    pl.line("", bs, blower, edge);
    std::vector<double> xs, ys;
    const int n = 160;
    for (int i = 0; i <= n; ++i) {
      const double a = pl.x.lo * std::pow(pl.x.hi / pl.x.lo, double(i) / n);
      xs.push_back(a);
      ys.push_back(pod_curve(link, b0, b1, a));
    }
    svg::Style cs;
    cs.color = colour;
    cs.marker = svg::Marker::none;
    cs.width = 2;
    cs.series = "pod-fit";
    pl.line(std::string(pod_link_name(link)) + " fit", xs, ys, cs);
  }
  if (std::isfinite(smallest) && smallest > 0) {
    svg::Style sm;
    sm.color = "#777777";
    sm.width = 0.8;
    sm.dashed = true;
    sm.series = "smallest-target";
    pl.vline(smallest, sm, "smallest pore");
  }
  pl.error_bars(bx, blo, bhi, "#444444");
  svg::Style ps;
  ps.color = "#444444";
  ps.width = 0;
  ps.marker = svg::Marker::circle;
  ps.marker_size = 3.2;
  pl.line("binned POD, Clopper-Pearson 95 %", bx, by, ps);
  svg::Style v90 = s90;
  v90.color = colour;
  v90.series = "a90";
  svg::Style v95;
  v95.color = colour;
  v95.width = 1.6;
  v95.marker = svg::Marker::none;
  v95.series = "a90_95";
  if (std::isfinite(a90)) {
    pl.vline(a90, v90);
    auto s = v90;
    s.marker = svg::Marker::none;
    pl.line(a90_extra ? "a90 (extrapolated: below the smallest pore)" : "a90", {}, {}, s);
  }
  if (std::isfinite(a9095)) {
    pl.vline(a9095, v95);
    pl.line(bound ? "a90/95 ≤ (every pore hit: a bound)" : a9095_extra ? "a90/95 (extrapolated: below the smallest pore)" : "a90/95",
            {}, {}, v95);
  }
  std::string t = "a90 = " + f3(a90) + " µm" + (a90_extra ? " (extrapolated)" : "") + ", a90/95 = " + f3(a9095) + " µm" +
                  (a9095_extra ? " (extrapolated)" : "");
  if (bound) t = "every reference pore hit: no POD fit; a90/95 ≤ " + f3(a9095) + " µm (the smallest pore; no data below it)";
  else if (!pod.value("estimable", false)) t = "no POD fit: " + str(pod["reason"]) + "; a90 and a90/95 n/a";
  else if (!std::isfinite(a9095) && pod.contains("a90_95_reason")) t += " (" + str(pod["a90_95_reason"]) + ")";
  t += "; " + str(pod["n_hits"]) + " of " + str(pod["n_targets"]) + " reference pores hit.";
  pl.note(t);
  for (const auto& w : pod["warnings"])
    if (str(w) != str(pod.value("a90_95_reason", Json()))) pl.note("warning: " + str(w));
  return pl.render();
}

std::vector<size_t> pareto_front(const std::vector<std::pair<double, double>>& runtime_quality) {
  // Sweep by runtime (ties: better quality first) and keep each point that raises the best quality.
  std::vector<size_t> order;
  for (size_t i = 0; i < runtime_quality.size(); ++i)
    if (std::isfinite(runtime_quality[i].first) && std::isfinite(runtime_quality[i].second)) order.push_back(i);
  std::stable_sort(order.begin(), order.end(), [&](size_t a, size_t b) {
    const auto &pa = runtime_quality[a], &pb = runtime_quality[b];
    return pa.first < pb.first || (pa.first == pb.first && pa.second > pb.second);
  });
  std::vector<size_t> front;
  double best = -INFINITY;
  for (size_t i : order)
    if (runtime_quality[i].second > best) front.push_back(i), best = runtime_quality[i].second;
  return front;
}

void write_html_and_montages(const Json& results, const std::string& out_dir) {
  Page p{results, cells_by_id(results), {}, 0};
  p.method_index = method_colour_slots(results);
  std::ostringstream h;
  h << "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>porebench report: "
    << escape(str(results["suite"]["name"])) << "</title>\n<style>" << kStyle << "</style></head>\n<body>\n";
  h << header(p);
  int k = 0;
  for (const auto& d : results["datasets"]) h << dataset_section(p, d, k++, out_dir);
  h << advice_section(p) << failed_section(p);
  h << "<section id=\"definitions\"><h2>Definitions</h2><p>Jaccard = TP/(TP+FP+FN) over part voxels of the test slices; "
       "porosity bias = predicted − reference porosity (pp); pores are 3D connected components; a90/95 is the upper one-sided "
       "95 % bound of the size detected with probability 0.9 (hit/miss POD, MIL-HDBK-1823A); false calls are predicted pores "
       "matching no reference pore, per cm³ of part. Full definitions, references and sign-off fields: "
       "<a href=\"validation-record.md\">validation-record.md</a>.</p>\n<p class=\"caption\">Written by porebench "
    << escape(str(results["context"]["version"])) << " (" << escape(str(results["context"]["git_hash"])) << ") at "
    << escape(str(results["context"]["time_utc"])) << ".</p></section>\n</body></html>\n";
  write_text_atomic((fs::path(out_dir) / "report.html").string(), h.str());
}

}  // namespace pb::report
