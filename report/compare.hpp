#pragma once
// Regression gate between two runs of the same suite (a base and a candidate, e.g. before and
// after a model or method update): per dataset, scan and method, the delta of each tracked metric
// on the test slices. Slice Jaccard gets a paired percentile-bootstrap 95 % CI over the test
// slices (Efron & Tibshirani 1993, ch. 13); other metrics are whole-volume figures compared by
// tolerance. A metric regresses when it is worse by more than its tolerance and, where a CI
// exists, the CI lies entirely on the worse side.
#include <map>
#include <string>
#include <vector>

#include "core/json.hpp"
#include "metrics/metric_table.hpp"

namespace pb::report {

struct CompareOptions {
  // Defaults from the metric table (metrics/metric_table.cpp): tracked metrics and tolerances.
  std::vector<std::string> metrics = compare_default_metrics();
  std::map<std::string, double> tolerance = compare_default_tolerances();
  int bootstrap_samples = 2000;
  uint64_t seed = 7;
};

struct MetricDelta {
  std::string dataset, scan, method, metric;
  double base = 0, cand = 0, delta = 0;  // delta = cand - base (for porosity bias: |cand| - |base|)
  double ci_lo = 0, ci_hi = 0;           // NaN when no per-slice values
  std::string verdict;                   // better, worse, no difference, undefined
  bool regression = false;
};

struct CompareResult {
  std::vector<MetricDelta> rows;
  std::vector<std::string> unmatched;  // selections present on one side only
  bool any_regression = false;
};

CompareResult compare_runs(const nlohmann::ordered_json& base, const nlohmann::ordered_json& cand, const CompareOptions& o);
std::string compare_markdown(const CompareResult& r, const std::string& base_dir, const std::string& cand_dir,
                             const CompareOptions& o);

}  // namespace pb::report
