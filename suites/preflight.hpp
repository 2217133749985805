#pragma once
// Checks of a suite and of a run folder made before any work, so that bad input is exit 2 before
// the first cell runs, never exit 1 after it, and a run folder never mixes runs.
#include <string>
#include <vector>

#include "suites/results.hpp"
#include "suites/suite.hpp"

namespace pb::suite {

// The suite file must be a readable regular file (a folder or an unreadable file is named as such),
// then it is parsed (load_suite).
Suite load_suite_checked(const std::string& path);

// Every check that can be made before any work: every value (criteria thresholds finite, the match
// rule), every synthetic dataset's recipe (overrides applied, validated, sizes against the memory
// budget), every paired dataset's files (readable, headers and data sizes checked), every float
// scan finite (read and counted). Throws InputError naming the dataset, file, field and value.
void preflight(const Suite& s);

// The cells of run folder `dir`, each checked: DIR/suite.json and DIR/cells/ exist, every cell
// file parses as a JSON object (the file is named when not), and every cell carries the suite hash
// `suite_sha256` of DIR/suite.json (a cell of another run is refused: the folder mixes runs).
std::vector<Json> load_checked_cells(const std::string& dir, const std::string& suite_sha256);

// The top-level shape write_suite_record gives suite.json (and results.json, which starts with
// it, and a regression record): suite.name/description (suite.path a string if present), suite_sha256, calibration.objective, scoring, criteria,
// methods[].label, datasets[].name. A record edited by hand or written by something else is named
// (InputError naming `path` and the field), not read as garbage. What the renderers read deeper
// is guarded by core/json.hpp (reading_records).
void check_run_record(const Json& rec, const std::string& path);

// DIR/suite.json read and checked (named when missing or not JSON; check_run_record).
Json load_suite_record(const std::string& dir);

}  // namespace pb::suite
