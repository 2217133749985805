// validation-record.md of a suite run.
#include <map>
#include <sstream>

#include "report/report.hpp"
#include "suites/results.hpp"

namespace pb::report {

std::string validation_record_md(const Json& r) {
  std::ostringstream md;
  const Json& ctx = r["context"];
  md << "# Validation record — " << r["suite"]["name"].get<std::string>() << "\n\n";
  md << "> **Caution.** " << kCaution << "\n\n";
  md << "## 1. Identification\n\n";
  md << "| field | value |\n|---|---|\n";
  md << "| tool | porebench " << ctx["version"].get<std::string>() << " |\n";
  md << "| source revision | " << ctx["git_hash"].get<std::string>() << " |\n";
  md << "| run at (UTC) | " << ctx["time_utc"].get<std::string>() << " |\n";
  md << "| host | " << ctx["host"].get<std::string>() << ", " << ctx["threads"].get<int>() << " threads |\n";
  for (auto it = ctx["dependencies"].begin(); it != ctx["dependencies"].end(); ++it)
    md << "| dependency " << it.key() << " | " << it.value().get<std::string>() << " |\n";
  md << "| suite file | " << r["suite"]["path"].get<std::string>() << " |\n";
  md << "| suite sha256 | " << r["suite_sha256"].get<std::string>() << " |\n\n";
  md << "## 2. Inputs\n\n";
  for (const auto& d : r["datasets"]) {
    md << "### " << d["name"].get<std::string>() << " (" << d["kind"].get<std::string>() << ")\n\n";
    if (d["kind"] == "synthetic") {
      md << "Reference: " << d["reference"].get<std::string>() << ". Recipe sha256 " << d["recipe_sha256"].get<std::string>() << ".\n\n";
      md << "| file | sha256 |\n|---|---|\n";
      const Json& files = d["manifest"].contains("files") ? d["manifest"]["files"] : Json::object();
      for (auto it = files.begin(); it != files.end(); ++it) {
        const Json& f = it.value();
        md << "| " << (f.is_object() && f.contains("file") ? f["file"].get<std::string>() : it.key()) << " | "
           << (f.is_object() && f.contains("sha256") ? f["sha256"].get<std::string>() : f.is_string() ? f.get<std::string>() : "") << " |\n";
      }
    } else {
      md << "| file | sha256 |\n|---|---|\n| " << d["scan"].get<std::string>() << " | " << d["scan_sha256"].get<std::string>() << " |\n";
      const Json& ref = d["reference"];
      if (ref.contains("mask")) md << "| " << ref["mask"].get<std::string>() << " (reference mask) | " << ref["sha256"].get<std::string>() << " |\n";
      else md << "| " << ref["scan"].get<std::string>() << " (reference scan, segmented by " << ref["method"].get<std::string>()
              << ") | " << ref["sha256"].get<std::string>() << " |\n";
    }
    md << "\nSlices: calibration " << d["slices"]["calibration"][0] << "–" << d["slices"]["calibration"][1].get<int>() - 1
       << ", gap " << d["slices"]["gap"] << ", test " << d["slices"]["test"][0] << "–" << d["slices"]["test"][1].get<int>() - 1
       << " (z, voxel indices).\n\n";
  }
  md << "## 3. Methods\n\n| label | method | family | citation | parameter grid |\n|---|---|---|---|---|\n";
  for (const auto& m : r["methods"]) {
    std::string grid;
    for (auto it = m["grid"].begin(); it != m["grid"].end(); ++it) {
      std::string vals;
      for (const auto& v : it.value()) vals += (vals.empty() ? "" : ", ") + v.get<std::string>();
      grid += (grid.empty() ? "" : "; ") + it.key() + " ∈ {" + vals + "}";
    }
    md << "| " << m["label"].get<std::string>() << " | " << m["name"].get<std::string>() << " | " << m["family"].get<std::string>()
       << " | " << m["citation"].get<std::string>() << " | " << (grid.empty() ? "defaults" : grid) << " |\n";
  }
  md << "\n## 4. Metric definitions\n\n"
        "- Jaccard = TP/(TP+FP+FN) (Jaccard 1901); Dice = 2TP/(2TP+FP+FN) (Dice 1945); computed over voxels inside "
        "the part mask and the test slices. Slice Jaccard: mean over test slices with a percentile bootstrap 95 % CI "
        "(Efron & Tibshirani 1993).\n"
        "- Porosity = pore voxels / part voxels; bias = predicted − reference, in percentage points (pp).\n"
        "- Pores: 3D connected components (connectivity " << r["scoring"]["connectivity"] << "); matching rule "
     << r["scoring"]["match"].get<std::string>() << "; ESD = (6V/π)^(1/3).\n"
        "- Probability of detection: hit/miss logit model on ln(ESD) fitted by maximum likelihood; a90 and the upper "
        "one-sided 95 % profile-likelihood bound a90/95 (MIL-HDBK-1823A; ASTM E2862).\n"
        "- Size distributions: Kolmogorov–Smirnov distance and Wasserstein-1 distance of ESD; surface distances "
        "HD95 and ASSD in mm.\n"
        "- Tuned methods: parameters chosen by " << r["calibration"]["objective"].get<std::string>()
     << " on the calibration slices; every figure in section 5 is on the held-out test slices.\n\n";
  md << "## 5. Results and criteria\n\n";
  const auto cells = cells_by_id(r);
  md << "| dataset | scan | method | chosen parameters | Jaccard | slice Jaccard 95 % CI | porosity bias (pp) | a90/95 (µm) | verdict |\n";
  md << "|---|---|---|---|---:|---|---:|---:|---|\n";
  for (const auto& s : r["selections"]) {
    const Json& c = *cells.at(s["chosen_cell"]);
    const std::string p = params_text(c["params"]);
    md << "| " << s["dataset"].get<std::string>() << " | " << s["scan"].get<std::string>() << " | " << s["method"].get<std::string>()
       << " | " << p << " | ";
    if (c["status"] != "ok") {
      md << "failed | | | | FAIL: " << c["error"].get<std::string>() << " |\n";
      continue;
    }
    const Json& t = c["test"];
    md << fmt(t["overlap"]["jaccard"]) << " | " << fmt(t["slices"]["jaccard_ci95"][0]) << "–" << fmt(t["slices"]["jaccard_ci95"][1])
       << " | " << fmt(t["porosity"]["porosity_bias_pp"]) << " | " << fmt(t["pod"]["a90_95_um"]) << " | ";
    std::string v;
    for (const auto& e : s["verdicts"]) v += (v.empty() ? "" : "; ") + e["criterion"].get<std::string>() + (e["passed"].get<bool>() ? " pass" : " FAIL");
    md << (v.empty() ? "no criteria" : v) << " |\n";
  }
  md << "\nOverall: " << (r["criteria_met"].get<bool>() ? "every declared criterion is met" : "at least one declared criterion is NOT met") << ".\n\n";
  md << "## 6. Review and sign-off\n\n"
        "| role | name | signature | date |\n|---|---|---|---|\n"
        "| prepared by | | | |\n| reviewed by (qualified person) | | | |\n| approved by | | | |\n\n"
        "Remarks of the reviewer:\n\n\n";
  return md.str();
}

}  // namespace pb::report
