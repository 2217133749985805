#pragma once
// The writers of a run's results share one interface (as google/benchmark's reporters do): each
// renders the one results record into its file(s) in the run folder. write_results assembles the
// record from DIR/suite.json and DIR/cells (selection of tuned parameters, criteria verdicts,
// scan-recipe advice) and hands it to every reporter in turn. A new output is a new Reporter in
// standard_reporters(), nothing else; the list of files a run writes comes from the reporters.
#include <memory>
#include <string>
#include <vector>

#include "report/report.hpp"

namespace pb::report {

class Reporter {
 public:
  virtual ~Reporter() = default;
  // The files it writes, relative to the run folder, e.g. {"results.csv"}; folders end with '/'.
  virtual std::vector<std::string> files() const = 0;
  // Writes them (atomically: nothing half-written looks complete).
  virtual void write(const Json& results, const std::string& out_dir) const = 0;
};

// results.json, results.csv, summary.md, validation-record.md, report.html (with montages/).
const std::vector<std::unique_ptr<Reporter>>& standard_reporters();

// The files of the standard reporters, in order: "results.json, results.csv, ...".
std::string report_files_text();

// The results record of a complete run folder (every cell present): the suite record, the run
// context, the selections with their verdicts, the advice, criteria_met and the cells.
Json assemble_results(const std::string& out_dir);

// assemble_results, then every standard reporter, results.json last (an earlier results.json is
// removed first): results.json present means every file of the pass is complete. Returns the
// record it wrote (its "criteria_met" says whether every criterion passed).
Json write_results(const std::string& out_dir);

}  // namespace pb::report
