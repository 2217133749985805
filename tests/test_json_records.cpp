// Records read back from files (suite.json, cells, results.json) with a field missing or of the
// wrong type are bad input (exit 2 naming the file), never undefined behaviour: core/json.hpp turns
// nlohmann's assertions into an exception, and reading_records names the file. The case comes from
// a fuzzer finding (fuzz/fuzz_results.cpp: summary_md on a record without "suite" read through a
// const operator[], an assertion in nlohmann, undefined in a Release build).
#include <catch2/catch.hpp>

#include <filesystem>
#include <fstream>
#include <string>

#include "core/error.hpp"
#include "core/json.hpp"
#include "helpers.hpp"
#include "json_files.hpp"
#include "report/compare.hpp"
#include "report/report.hpp"
#include "suites/preflight.hpp"

namespace {
const std::string kQuick = std::string(PB_SOURCE_DIR) + "/results/reference/quick/results.json";
}

TEST_CASE("a const read of a missing key throws instead of undefined behaviour", "[records]") {
  const nlohmann::ordered_json j = {{"a", 1}};
  CHECK_THROWS_AS(j["b"], pb::JsonPreconditionFailed);
  CHECK(j["a"] == 1);
  // reading_records names the file; nlohmann's own type errors are named the same way.
  CHECK_THROWS_WITH(pb::reading_records("x/results.json", [&] { return j["b"].dump(); }),
                    Catch::Contains("x/results.json") && Catch::Contains("lacks a field"));
  CHECK_THROWS_AS(pb::reading_records("x/results.json", [&] { return j["a"].get<std::string>(); }), pb::InputError);
}

TEST_CASE("the shipped reference record compares; with a cell field removed it is named", "[records]") {
  const auto full = pbtest::read_json(kQuick);
  REQUIRE_NOTHROW(pb::suite::check_run_record(full, kQuick));
  const pb::report::CompareOptions o;
  CHECK_FALSE(pb::reading_records(kQuick, [&] { return pb::report::compare_runs(full, full, o); }).any_regression);
  auto cut = full;
  cut.erase("suite");
  CHECK_THROWS_WITH(pb::suite::check_run_record(cut, "r.json"), Catch::Contains("r.json") && Catch::Contains("'suite'"));
  auto cell_cut = full;
  for (auto& c : cell_cut["cells"]) c.erase("test");
  CHECK_THROWS_AS(pb::reading_records("r.json", [&] { return pb::report::compare_runs(full, cell_cut, o); }),
                  pb::InputError);
  // summary_md needs the run's full record (a regression record lacks its context): named too.
  CHECK_THROWS_WITH(pb::reading_records("r.json", [&] { return pb::report::summary_md(full); }),
                    Catch::Contains("r.json") && Catch::Contains("lacks a field"));
}

TEST_CASE("compare and report name an edited record and exit 2", "[records]") {
  pbtest::TempDir d;
  namespace fs = std::filesystem;
  // compare: the candidate's cells lack "test" (a hand edit); before, undefined behaviour.
  auto rec = pbtest::read_json(kQuick);
  for (auto& c : rec["cells"]) c.erase("test");
  fs::create_directories(d / "base");
  fs::create_directories(d / "cand");
  fs::copy_file(kQuick, d / "base/results.json");
  pbtest::write_file(d / "cand/results.json", rec.dump());
  auto r = pbtest::run_cli("compare " + d / "base" + " " + d / "cand");
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("cand/results.json"));
  // A results.json without its suite block: the top-level check names the field.
  rec.erase("suite");
  pbtest::write_file(d / "cand/results.json", rec.dump());
  r = pbtest::run_cli("compare " + d / "base" + " " + d / "cand");
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("cand/results.json") && Catch::Contains("'suite'"));
}
