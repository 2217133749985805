#pragma once
// Reports of a suite run, all rendered from the one results record (results.json): the tidy CSV,
// the Markdown summary, scan-recipe advice, the validation record and report.html (html.hpp).
// The reporters that write them into the run folder: reporter.hpp. report/ reads suites/' records;
// suites/ never includes report/.
#include <cmath>
#include <map>
#include <string>
#include <vector>

#include "core/json.hpp"

namespace pb::report {

using Json = nlohmann::ordered_json;

// The caution every report carries.
extern const char* const kCaution;

// One row per cell, score part and metric: dataset, scan, projections, i0, method, method_name,
// family, grid_index, params, selected, part, metric, value (empty for undefined).
std::string results_csv(const Json& results);
extern const char* const kCsvColumns;

// Per dataset and scan: the methods ranked by test Jaccard with key metrics and CIs; the advice.
std::string summary_md(const Json& results);

// validation-record.md: identification, inputs, methods, definitions, results and verdicts, sign-off.
std::string validation_record_md(const Json& results);

// For each dataset and method over a projection (or dose) series: the fewest projections (lowest
// dose) from which on every scan meets the criteria, and the time (dose) saving factor against
// the reference recipe.
Json scan_recipe_advice(const Json& results);

// The decision of a run, one entry per dataset: "status" "recommended" (method, scan, projections,
// i0, reasons = each criterion with the test value it was judged on (its CI bound, named, with the
// point value beside it, for criteria on the interval), time_saving_factor, also_passing_on_this_scan):
// the fastest scan recipe (fewest projections, then lowest dose) on which a method meets every
// criterion on the held-out test slices, and of the methods that do there the best by test
// Jaccard; "none" with the nearest miss (fewest failed criteria, then the smallest relative
// shortfall); "no_criteria". "text" says it in one sentence.
Json decide(const Json& results);

// The decision box (Markdown) that opens summary.md and the validation record.
std::string decision_md(const Json& results);

// The headline verdict: every combination of method and scan meets every criterion / N of M do /
// none does / no criteria declared.
std::string verdict_headline(const Json& results);

// Formats a metric value for tables: "0.873", "n/a" for null (core/format.hpp).
std::string fmt(const Json& v, int digits = 3);
// A cell's runtime_s: "not measured" when the cell has none (predictions without a sidecar).
std::string runtime_text(const Json& cell);

// Text made safe for one cell of a Markdown table: '|' escaped as "\|", line breaks as spaces
// (GitHub Flavored Markdown spec 0.29, section 4.10 "Tables": a pipe in a cell is escaped with '\').
std::string md_cell(const std::string& s);

// One Markdown table row "| a | b |\n", every cell through md_cell.
std::string md_row(const std::vector<std::string>& cells);

// Score-record readers shared by the tables (t = a cell's "test" block):
// a90 as shown: "12.5", "4.95 (extrapolated)" below the smallest reference pore, "n/a";
std::string a90_text(const Json& t);
// a90/95 as shown: "61.2", "≤ 30.5 (every target hit)" for a bound, "(extrapolated)" flagged;
std::string a9095_text(const Json& t);
// false calls "N / X per cm³ / Y per target" (per target = false calls / reference pores);
std::string false_calls_text(const Json& t);
// the mean slice Jaccard (either key name of the score record).
const Json& slice_jaccard_mean(const Json& t);
// why a90/95 is n/a ("" when defined).
std::string a9095_reason(const Json& t);

// The hit rule's volume cap of a record's "scoring" block in words ("hit rule capped at 10x the
// reference pore's volume (max_volume_ratio)", "no hit-rule volume cap", or that it is not recorded).
std::string hit_cap_text(const Json& scoring);

// A selection's verdicts with what was judged, one per criterion of the record (in order): the
// criterion text, passed (the record's verdict), whether it was judged on the 95 % CI bound and
// which ("lower" for min_, "upper" for max_, "larger |bound|" for max_abs_), the value judged (the
// bound, or the point value) and the point value, both from the test part of `cell` (NaN without).
struct JudgedVerdict {
  std::string criterion;
  bool passed = false, on_ci = false;
  std::string bound;
  double judged = NAN, value = NAN;
};
std::vector<JudgedVerdict> judged_verdicts(const Json& results, const Json& selection, const Json* cell);
// "jaccard >= 0.6: 0.713", or on a bound "jaccard >= 0.6 (95 % CI bound): CI lower bound 0.42 (value 0.632)".
std::string judged_text(const JudgedVerdict& v);

// How the selection's method took part in its dataset's paired reference (a reference scan segmented
// by method X favours X: it is scored against its own output): "the reference's own method", or
// "reference rater" when it is one of the raters of a consensus reference (suites/paired.hpp);
// "" otherwise.
std::string reference_role(const Json& results, const Json& selection);

// A consensus reference in one line: "STAPLE consensus (W >= 0.5, 12 iterations) of 3 raters on the
// reference scan: otsu (sensitivity 0.981, specificity 0.9995), ..." (suites/paired.hpp).
std::string consensus_text(const Json& reference);

// The cells of a results record by id.
std::map<std::string, const Json*> cells_by_id(const Json& results);

// A cell's parameters as "key=value" joined by `sep`. With `method` (an entry of results
// "methods"), only the parameters the suite set for it are shown, and "defaults" when it set none
// (the full set is in results.csv and the validation record).
std::string params_text(const Json& params, const std::string& sep = ", ", const Json* method = nullptr);

// The entry of results["methods"] with this label (nullptr if none).
const Json* method_entry(const Json& results, const std::string& label);

}  // namespace pb::report
