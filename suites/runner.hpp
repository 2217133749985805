#pragma once
// The suite runner: expands a suite into cells (dataset scan x method x parameter set), runs each
// cell (segment the whole scan inside the part mask, score the calibration and the test slices),
// writes each cell atomically to DIR/cells/, then selects tuned parameters on the calibration
// slices, judges the acceptance criteria on the test slices and writes the results and reports.
// Cells are independent files: a run can resume, and shards (--shard K/N) can run apart — on a
// cluster's job scheduler, one shard per job — and be merged by a final `--resume` run.
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "suites/suite.hpp"

namespace pb::suite {

struct RunOptions {
  std::string out_dir;
  bool resume = false;
  int shard_index = 0, shard_count = 1;  // run cells with index % count == index (0-based)
  bool progress_bar = false;             // a live bar with ETA (terminal) or plain log lines
  bool quiet = false;
};

struct RunSummary {
  int cells_total = 0, cells_run = 0, cells_skipped = 0, cells_failed = 0;
  bool complete = false;   // every cell of the suite is present in DIR/cells
  bool criteria_met = true;
};

// Runs the suite; throws InputError on bad input (before any cell runs where it can be known).
RunSummary run_suite(const Suite& s, const RunOptions& o);

// Reads DIR/cells and the suite record in DIR, selects, judges and writes results.json,
// results.csv, summary.md, validation-record.md, report.html and montages. Returns whether every
// criterion passed.
bool write_results(const std::string& out_dir);

}  // namespace pb::suite
