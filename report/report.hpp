#pragma once
// Reports of a suite run, all rendered from the one results record (results.json): the tidy CSV,
// the Markdown summary, scan-recipe advice, the validation record and report.html (html.hpp).
// The reporters that write them into the run folder: reporter.hpp. report/ reads suites/' records;
// suites/ never includes report/.
#include <map>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

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

// Formats a metric value for tables: "0.873", "n/a" for null (core/format.hpp).
std::string fmt(const Json& v, int digits = 3);

// The cells of a results record by id.
std::map<std::string, const Json*> cells_by_id(const Json& results);

// A cell's parameters as "key=value" joined by `sep`. With `method` (an entry of results
// "methods"), only the parameters the suite set for it are shown, and "defaults" when it set none
// (the full set is in results.csv and the validation record).
std::string params_text(const Json& params, const std::string& sep = ", ", const Json* method = nullptr);

// The entry of results["methods"] with this label (nullptr if none).
const Json* method_entry(const Json& results, const std::string& label);

}  // namespace pb::report
