#pragma once
// The suite runner: expands a suite into cells (dataset scan x method x parameter set), runs each
// cell (segment the whole scan inside the part mask, score the calibration and the test slices)
// and writes each cell atomically to DIR/cells/, beside the suite record DIR/suite.json. Selecting
// tuned parameters, judging criteria and writing the reports is report/'s job (report/writer.hpp),
// once every cell is present.
// Cells are independent files: a run can resume, and shards (--shard K/N) can run apart — on a
// cluster's job scheduler, one shard per job — and be merged by a final `--resume` run. Only the
// datasets that have cells to run are prepared (synthesised, masks read, montages drawn).
#include <functional>
#include <string>

#include "suites/suite.hpp"

namespace pb::suite {

struct RunOptions {
  std::string out_dir;
  bool resume = false;
  int shard_index = 0, shard_count = 1;  // run cells with index % count == index (0-based)
  bool progress_bar = false;             // a live bar with ETA (terminal) or plain log lines
  bool quiet = false;
  std::function<void(const std::string&)> log;  // progress of dataset preparation (synthesis); may be empty
};

struct RunSummary {
  int cells_total = 0, cells_run = 0, cells_skipped = 0, cells_failed = 0;
  int datasets_prepared = 0;  // datasets set up by this run (the others had no cell to run)
  bool complete = false;      // every cell of the suite is present in DIR/cells
};

// Runs the suite; throws InputError on bad input (before any cell runs where it can be known).
RunSummary run_suite(const Suite& s, const RunOptions& o);

}  // namespace pb::suite
