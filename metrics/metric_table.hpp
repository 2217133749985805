#pragma once
// The one table of metrics that can be judged: each metric's name (with its unit), which way is
// better, whether the record carries a confidence interval for it, where in the score record it
// lives (block of to_json, metrics/score_json.cpp) and where it is computed, a one-line definition
// and its published source. Criteria in suites (min_/max_/max_abs_<name>), the keys of the score
// record, the CSV rows, compare's tracked metrics and the report's definitions all take names and
// directions from here; metrics/METRICS.md is generated from it (tests/test_metrics_table.cpp).
#include <map>
#include <string>
#include <string_view>
#include <vector>

namespace pb {

enum class Better {
  higher,      // e.g. jaccard
  lower,       // e.g. false_calls_per_cm3
  toward_zero  // a signed bias: |x| is what counts (compare takes |cand| - |base|)
};
const char* better_name(Better b);  // "higher", "lower", "closer to 0"

struct MetricInfo {
  const char* name;        // the one spelling: criterion suffix, JSON key in `block`, CSV metric column
  const char* unit;        // "" for a ratio or a count; also the suffix of the name (_um, _mm, _pp, ...)
  Better better;
  const char* block;       // block of the score record holding it ("overlap", ...); "cell" = the suite cell
  const char* ci_key;      // key in `block` of its 95 % interval [lo, hi] (null ends allowed); "" = none
  const char* computed_in; // file (and phase) that computes it
  const char* definition;  // one line
  const char* source;      // published source, or "common practice, no source"
  // `porebench compare`: tracked by default, and how much worse is still no regression (in the
  // metric's unit; for toward_zero metrics a rise of |x|). Values are ours, for the demo suites.
  bool compare_default = false;
  double compare_tolerance = 0;
  bool has_ci() const { return ci_key[0] != '\0'; }
};

// Every judged metric, in the order of the score record.
const std::vector<MetricInfo>& metric_table();

// The entry of `name`, or nullptr.
const MetricInfo* find_metric(std::string_view name);

// The entry of `name`; an unknown name is an InputError that lists every valid name
// ("<what>: unknown metric 'x' (did you mean 'y'?); valid: a, b, ...").
const MetricInfo& metric_info(std::string_view name, const std::string& what);

// compare's defaults: the tracked metrics and every metric's tolerance, from the table.
std::vector<std::string> compare_default_metrics();
std::map<std::string, double> compare_default_tolerances();

// "jaccard, dice, ..." in table order.
std::string metric_names_text();

// Markdown: the criterion names and the table (name, unit, better, CI, where, definition, source).
// metrics/METRICS.md is this text; a test keeps the two equal.
std::string metric_table_markdown();

}  // namespace pb
