#pragma once
// Reading results: the value of a named metric from a cell record, the selection of tuned
// parameter sets, and the criteria verdicts. Shared by the runner, the reports and `compare`.
#include <string>
#include <vector>

#include "core/json.hpp"
#include "suites/suite.hpp"

namespace pb::suite {

using Json = nlohmann::ordered_json;

// Value of `metric` (a name in metric_table(), metrics/metric_table.hpp) in a cell's score block
// ("test" or "calibration"), or in the cell itself for block "cell"; NaN when the cell failed, the
// name is not in the table, or the metric is undefined (null).
double metric_value(const Json& cell, const std::string& part, const std::string& metric);

// A (dataset, scan, method label) group of cells and the one chosen for it.
struct Selection {
  std::string dataset, scan, method;
  int projections = 0, reference_projections = 0;
  double i0 = 0;
  size_t chosen = 0;        // index into cells
  std::vector<size_t> cells;  // indices into the cell list, grid order
  bool tuned = false;
  bool failed = false;      // the chosen cell failed
  std::vector<std::pair<std::string, bool>> verdicts;  // criterion text (says "95 % CI bound" when on it), passed
  std::vector<double> judged;                          // per criterion: the value judged (point or CI bound)
  bool passed = true;
};

// Groups cells and picks, for tuned methods, the parameter set with the best calibration
// objective (NaN ranks last; ties go to the first grid point); judges criteria on the test part.
std::vector<Selection> select_cells(const std::vector<Json>& cells, const std::string& objective,
                                    const std::vector<Criterion>& criteria);

// The value a criterion judges in a cell's part: the metric, or its CI bound (Criterion::on).
double judged_value(const Json& cell, const std::string& part, const Criterion& c);

std::vector<Criterion> criteria_from_json(const Json& j);
Json criteria_to_json(const std::vector<Criterion>& c);

}  // namespace pb::suite

namespace pb::suite {
// The results of a run without what varies from run to run or machine to machine (context block,
// runtimes, memory, file paths) and without calibration blocks: the committed reference record
// that the regression test compares a fresh run of the quick suite against.
Json regression_record(const Json& results);
}  // namespace pb::suite
