#pragma once
// Reports of a suite run, all rendered from the one results record (results.json): the tidy CSV,
// the Markdown summary, scan-recipe advice, and the documents (report.html with inline SVG, slice
// montages, validation-record.md).
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

// For each dataset and method over a projection (or dose) series: the fewest projections (lowest
// dose) from which on every scan meets the criteria, and the time (dose) saving factor against
// the reference recipe.
Json scan_recipe_advice(const Json& results);

// report.html, montage PNGs and validation-record.md into out_dir.
void write_documents(const Json& results, const std::string& out_dir);

// A name made safe for file names: every character other than [A-Za-z0-9._-] becomes '_'. The
// runner names cell and montage files with it; the pages link to them with it.
std::string file_token(std::string s);

// Formats a metric value for tables: "0.873", "n/a" for null.
std::string fmt(const Json& v, int digits = 3);

}  // namespace pb::report
