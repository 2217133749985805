// validation-record.md of a suite run.
#include <map>
#include <vector>
#include <sstream>

#include "core/format.hpp"
#include "report/report.hpp"
#include "suites/results.hpp"

namespace pb::report {

// Paired datasets: how the reference was brought onto each fast scan (suites/paired.hpp).
static std::string paired_alignment_md(const Json& d) {
  if (!d.contains("variants")) return "";
  std::ostringstream md;
  // How the reference is made on a fast grid that differs: the record's own words (suites/paired.cpp).
  const Json& ref = d.value("reference", Json::object());
  const std::string how = ref.contains("resample") && ref["resample"].is_string()
                              ? ref["resample"].get<std::string>()
                              : "its pores resampled by nearest neighbour";
  md << "\nThe reference is scored on each fast scan's grid (the grid the decision is about), under the registration "
        "below; where that grid or pose differs from the reference's: "
     << md_cell(how) << ".\n\n"
        "| scan | align | method | converged | rotation (°) | translation (mm) | scale | marker RMS (mm) | residual shift (voxel) | note |\n"
        "|---|---|---|---|---|---|---|---|---|---|\n";
  auto n3 = [](const Json& a) {
    std::ostringstream s;
    s.precision(4);
    s << "(" << a[0].get<double>() << ", " << a[1].get<double>() << ", " << a[2].get<double>() << ")";
    return s.str();
  };
  for (const auto& v : d["variants"]) {
    const Json& a = v.value("alignment", Json::object());
    md << "| " << md_cell(v["scan"].get<std::string>()) << " | " << a.value("align", std::string("?")) << " | ";
    const Json& r = a.contains("registration") ? a["registration"] : Json();
    if (r.is_object()) {
      std::ostringstream s;
      s.precision(4);
      s << r["method"].get<std::string>() << " (" << r["dof"].get<std::string>() << ") | " << (r["converged"].get<bool>() ? "yes" : "no") << " | "
        << r["transform"]["rotation_deg"].get<double>() << " | " << n3(r["transform"]["translation_mm"]) << " | "
        << r["transform"]["scale"].get<double>() << " | ";
      if (r["markers"]["rms_mm"].is_number()) s << r["markers"]["rms_mm"].get<double>();
      else s << "no markers";
      s << " | – | ";
      md << s.str();
    } else {
      md << "– | – | – | – | – | – | ";
      if (a.contains("shift_check") && a["shift_check"].is_object()) {
        std::ostringstream s;
        s.precision(3);
        s << a["shift_check"]["magnitude_voxel"].get<double>();
        md << s.str() << " | ";
      } else {
        md << "– | ";
      }
    }
    std::string note = a.contains("error") ? a["error"].get<std::string>() : "";
    for (const auto& w : v.value("warnings", Json::array())) note += (note.empty() ? "" : "; ") + w.get<std::string>();
    md << md_cell(note) << " |\n";
  }
  md << "\n";
  return md.str();
}

// A consensus reference: its raters with their STAPLE performance estimates (suites/paired.hpp).
static std::string consensus_md(const Json& ref) {
  if (!ref.is_object() || !ref.contains("consensus")) return "";
  const Json& c = ref["consensus"];
  std::ostringstream md;
  md << "\nThe reference is a consensus: each rater below segmented the reference scan, and STAPLE (" << c["source"].get<std::string>()
     << ") combined them over " << c["over"].get<std::string>() << "; its pores are the voxels with W >= "
     << format_number(c["threshold"].get<double>(), 3) << " (" << c["pore_voxels"] << " voxels, prior "
     << format_number(c["prior"].get<double>(), 4) << ", " << c["iterations"] << " iterations, "
     << (c["converged"].get<bool>() ? "converged" : "NOT converged") << "). Every rater's method is marked "
     << "\"reference rater\" in the rankings: it is scored partly against its own output.\n\n";
  md << "| rater | method | parameters | pore voxels | STAPLE sensitivity | STAPLE specificity |\n|---|---|---|---:|---:|---:|\n";
  for (const auto& r : c["raters"])
    md << md_row({r["label"].get<std::string>(), r["method"].get<std::string>(), r["given"].get<std::string>(),
                  std::to_string(r["pore_voxels"].get<int64_t>()), format_number(r["sensitivity"].get<double>(), 6),
                  format_number(r["specificity"].get<double>(), 8)});
  for (const auto& w : c.value("warnings", Json::array())) md << "\nWarning: " << md_cell(w.get<std::string>()) << "\n";
  md << "\n";
  return md.str();
}

// Title, caution, decision and intended use.
static std::string record_head_md(const Json& r) {
  std::ostringstream md;
  md << "# Validation record — " << r["suite"]["name"].get<std::string>() << "\n\n";
  md << "> **Caution.** " << kCaution << "\n\n";
  md << decision_md(r);
  md << "**Overall:** " << verdict_headline(r) << "\n\n";
  md << "**Intended use.** This record documents a trial of CT pore-segmentation methods on the datasets in section 2, "
        "scored against their references on held-out test slices, to support the choice of a segmentation method and a "
        "scan recipe";
  if (!r["suite"]["description"].get<std::string>().empty()) md << " for: " << r["suite"]["description"].get<std::string>();
  md << ". It is evidence for a qualification by qualified personnel; it is not itself a qualification of an inspection, "
        "a part or a machine.\n\n";
  return md.str();
}

// Section 1: the tool, the run and the suite that made the record.
static std::string identification_md(const Json& r) {
  std::ostringstream md;
  const Json& ctx = r["context"];
  md << "## 1. Identification\n\n";
  md << "| field | value |\n|---|---|\n";
  md << "| tool | porebench " << ctx["version"].get<std::string>() << " |\n";
  md << "| source revision | " << ctx["git_hash"].get<std::string>() << " |\n";
  md << "| run at (UTC) | " << ctx["time_utc"].get<std::string>() << " |\n";
  md << "| host | " << ctx["host"].get<std::string>() << ", " << ctx["threads"].get<int>() << " threads |\n";
  for (auto it = ctx["dependencies"].begin(); it != ctx["dependencies"].end(); ++it)
    md << "| dependency " << it.key() << " | " << md_cell(it.value().get<std::string>()) << " |\n";
  md << "| suite file | " << md_cell(r["suite"]["path"].get<std::string>()) << " |\n";
  md << "| suite sha256 | " << r["suite_sha256"].get<std::string>() << " |\n\n";
  return md.str();
}

// Section 2, one dataset: its files with their hashes (and a paired reference's consensus and
// alignment), and its slice split.
static std::string dataset_inputs_md(const Json& d) {
  std::ostringstream md;
  md << "### " << d["name"].get<std::string>() << " (" << d["kind"].get<std::string>() << ")\n\n";
  if (d["kind"] == "synthetic") {
    md << "Reference: " << d["reference"].get<std::string>() << ". Recipe sha256 " << d["recipe_sha256"].get<std::string>() << ".\n\n";
    md << "| file | sha256 |\n|---|---|\n";
    const Json& files = d["manifest"].contains("files") ? d["manifest"]["files"] : Json::object();
    for (auto it = files.begin(); it != files.end(); ++it) {
      const Json& f = it.value();
      md << "| " << md_cell(f.is_object() && f.contains("file") ? f["file"].get<std::string>() : it.key()) << " | "
         << (f.is_object() && f.contains("sha256") ? f["sha256"].get<std::string>() : f.is_string() ? f.get<std::string>() : "") << " |\n";
    }
  } else {
    md << "| file | sha256 |\n|---|---|\n";
    const Json& ref = d["reference"];
    if (ref.contains("mask")) md << "| " << md_cell(ref["mask"].get<std::string>()) << " (reference mask) | " << ref["sha256"].get<std::string>() << " |\n";
    else if (ref.contains("consensus"))
      md << "| " << md_cell(ref["scan"].get<std::string>()) << " (reference scan, STAPLE consensus of "
         << ref["consensus"]["raters"].size() << " raters) | " << ref["sha256"].get<std::string>() << " |\n";
    else md << "| " << md_cell(ref["scan"].get<std::string>()) << " (reference scan, segmented by " << md_cell(ref["method"].get<std::string>())
            << ") | " << ref["sha256"].get<std::string>() << " |\n";
    if (!d.contains("variants")) md << "| " << md_cell(d["scan"].get<std::string>()) << " | " << d["scan_sha256"].get<std::string>() << " |\n";
    else for (const auto& v : d["variants"])
      md << "| " << md_cell(v["path"].get<std::string>()) << " (" << md_cell(v["scan"].get<std::string>()) << ") | "
         << v.value("sha256", std::string()) << " |\n";
    md << consensus_md(ref);
    md << paired_alignment_md(d);
  }
  md << "\nSlices: calibration " << d["slices"]["calibration"][0] << "–" << d["slices"]["calibration"][1].get<int>() - 1
     << ", gap " << d["slices"]["gap"] << ", test " << d["slices"]["test"][0] << "–" << d["slices"]["test"][1].get<int>() - 1
     << " (z, voxel indices).\n\n";
  return md.str();
}

// Section 2: every dataset.
static std::string inputs_md(const Json& r) {
  std::ostringstream md;
  md << "## 2. Inputs\n\n";
  for (const auto& d : r["datasets"]) md << dataset_inputs_md(d);
  return md.str();
}

// Section 3: the methods and their parameter grids.
static std::string methods_md(const Json& r) {
  std::ostringstream md;
  md << "## 3. Methods\n\n| label | method | family | citation | parameter grid |\n|---|---|---|---|---|\n";
  for (const auto& m : r["methods"]) {
    std::string grid;
    for (auto it = m["grid"].begin(); it != m["grid"].end(); ++it) {
      std::string vals;
      for (const auto& v : it.value()) vals += (vals.empty() ? "" : ", ") + v.get<std::string>();
      grid += (grid.empty() ? "" : "; ") + it.key() + " ∈ {" + vals + "}";
    }
    md << md_row({m["label"].get<std::string>(), m["name"].get<std::string>(), m["family"].get<std::string>(),
                  m["citation"].get<std::string>(), grid.empty() ? "defaults" : grid});
  }
  return md.str();
}

// Section 4: what each figure means, with its source.
static std::string definitions_md(const Json& r) {
  std::ostringstream md;
  md << "\n## 4. Metric definitions\n\n"
        "- Jaccard = TP/(TP+FP+FN) (Jaccard 1901); Dice = 2TP/(2TP+FP+FN) (Dice 1945); computed over voxels inside "
        "the part mask and the test slices. Slice Jaccard: mean over test slices with a percentile bootstrap 95 % CI "
        "(Efron & Tibshirani 1993).\n"
        "- Porosity = pore voxels / part voxels; bias = predicted − reference, in percentage points (pp).\n"
        "- Pores: 3D connected components (connectivity " << r["scoring"]["connectivity"] << "); matching rule "
     << r["scoring"]["match"].get<std::string>() << ", " << hit_cap_text(r["scoring"]) << "; ESD = (6V/π)^(1/3).\n"
        "- Probability of detection: hit/miss logit model on ln(ESD) fitted by maximum likelihood; a90 and the upper "
        "one-sided 95 % profile-likelihood bound a90/95 (MIL-HDBK-1823A; ASTM E2862).\n"
        "- Size distributions: Kolmogorov–Smirnov distance and Wasserstein-1 distance of ESD; surface distances "
        "HD95 and ASSD in mm.\n"
        "- Tuned methods: parameters chosen by " << r["calibration"]["objective"].get<std::string>()
     << " on the calibration slices; every figure in section 5 is on the held-out test slices.\n\n";
  return md.str();
}

// A table row of a failed cell: its leading cells, `first` and three empty cells, then why.
static std::string failed_cell_row(std::vector<std::string> row, const char* first, const std::string& why) {
  for (const char* v : {first, "", "", ""}) row.push_back(v);
  row.push_back(why);
  return md_row(row);
}

// Section 5: the chosen cell of every selection with its criteria verdicts.
static std::string results_md(const Json& r) {
  std::ostringstream md;
  md << "## 5. Results and criteria\n\n";
  const auto cells = cells_by_id(r);
  md << "| dataset | scan | method | chosen parameters | Jaccard | slice Jaccard 95 % CI | porosity bias (pp) | a90/95 (µm) | verdict |\n";
  md << "|---|---|---|---|---:|---|---:|---:|---|\n";
  for (const auto& s : r["selections"]) {
    const Json& c = *cells.at(s["chosen_cell"]);
    const std::string p = params_text(c["params"]);
    std::vector<std::string> row = {s["dataset"].get<std::string>(), s["scan"].get<std::string>(), s["method"].get<std::string>(), p};
    if (c["status"] != "ok") {
      md << failed_cell_row(row, "failed", "FAIL: " + c["error"].get<std::string>());
      continue;
    }
    const Json& t = c["test"];
    for (const std::string& v : {fmt(t["overlap"]["jaccard"]), fmt(t["slices"]["jaccard_ci95"][0]) + "–" + fmt(t["slices"]["jaccard_ci95"][1]),
                                 fmt(t["porosity"]["porosity_bias_pp"]), a9095_text(t)})
      row.push_back(v);
    std::string v;  // each criterion with the value judged: the point value, or the CI bound named
    for (const auto& e : judged_verdicts(r, s, &c)) v += (v.empty() ? "" : "; ") + judged_text(e) + (e.passed ? " pass" : " FAIL");
    row.push_back(v.empty() ? "no criteria" : v);
    md << md_row(row);
  }
  md << "\nOverall: " << verdict_headline(r) << "\n\n";
  return md.str();
}

// Section 5, POD and false calls per method, and the warnings of the selected cells.
static std::string pod_and_warnings_md(const Json& r) {
  std::ostringstream md;
  const auto cells = cells_by_id(r);
  // POD with a90/95 and the false-call rate per method: read together (a detection bought with
  // false calls is not a detection).
  md << "### POD and false calls per method (test slices)\n\n";
  md << "| dataset | scan | method | hits / targets | a90 (µm) | a90/95 (µm) | false calls (part / per cm³ / per target) | why n/a |\n";
  md << "|---|---|---|---:|---:|---:|---:|---|\n";
  std::vector<std::string> warnings;
  for (const auto& s : r["selections"]) {
    const Json& c = *cells.at(s["chosen_cell"]);
    std::vector<std::string> row = {s["dataset"].get<std::string>(), s["scan"].get<std::string>(), s["method"].get<std::string>()};
    if (c["status"] != "ok") {
      md << failed_cell_row(row, "", "cell failed: " + c["error"].get<std::string>());
      continue;
    }
    const Json& t = c["test"];
    row.push_back(fmt(t["pod"]["n_hits"]) + " / " + fmt(t["pod"]["n_targets"]));
    row.push_back(a90_text(t));
    row.push_back(a9095_text(t));
    row.push_back(false_calls_text(t));
    row.push_back(a9095_reason(t));
    md << md_row(row);
    if (c.contains("warnings"))
      for (const auto& w : c["warnings"])
        warnings.push_back(s["dataset"].get<std::string>() + " / " + s["scan"].get<std::string>() + " / " + s["method"].get<std::string>() +
                           ": " + w.get<std::string>());
  }
  md << "\nA value is n/a when it is not defined for the cell: the reason is given (e.g. no POD fit when every or no "
        "target is hit, or too few targets); it is never replaced by a number.\n\n";
  md << "### Method warnings\n\n";
  if (warnings.empty()) md << "None of the selected cells reported a warning.\n\n";
  for (const auto& w : warnings) md << "- " << w << "\n";
  if (!warnings.empty()) md << "\n";
  return md.str();
}

// Section 5, where the criteria come from.
static std::string criteria_source_md(const Json& r) {
  std::ostringstream md;
  md << "### Where the criteria come from\n\n";
  if (r["criteria"].empty()) md << "The suite declares no acceptance criteria.\n\n";
  else {
    md << "Declared in the `[criteria]` section of the suite file " << r["suite"]["path"].get<std::string>() << " (sha256 "
       << r["suite_sha256"].get<std::string>() << "), judged on the held-out test slices of each selected cell:";
    for (const auto& c : r["criteria"]) md << " `" << c["text"].get<std::string>() << "`" << (c.contains("on_note") ? " (" + c["on_note"].get<std::string>() + ")" : "");
    md << ". A criterion marked \"95 % CI bound\" is judged on the bound of its 95 % confidence interval (the lower "
          "bound for a minimum, the upper for a maximum, the bound of larger magnitude for a limit on |value|), the others "
          "on the value; the verdict column of section 5 gives the value judged, and for a bound the point value beside it. "
          "The limits of porebench's built-in demo suites are invented for the demo scenario; for a real qualification "
          "they come from the part specification, the applicable standards and local codes, set by qualified personnel.\n\n";
  }
  return md.str();
}

// Section 6: the sign-off table.
static std::string sign_off_md() {
  std::ostringstream md;
  md << "## 6. Review and sign-off\n\n"
        "| role | name | signature | date |\n|---|---|---|---|\n"
        "| prepared by | | | |\n| reviewed by (qualified person) | | | |\n| approved by | | | |\n\n"
        "Remarks of the reviewer:\n\n\n";
  return md.str();
}

std::string validation_record_md(const Json& r) {
  return record_head_md(r) + identification_md(r) + inputs_md(r) + methods_md(r) + definitions_md(r) + results_md(r) +
         pod_and_warnings_md(r) + criteria_source_md(r) + sign_off_md();
}

}  // namespace pb::report
