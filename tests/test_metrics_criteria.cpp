// Criteria judged on confidence bounds, suite validation of [scoring], and compare's meaning of
// a90/95 bounds and of runs with nothing in common (issues 11 and 18), on hand-made cells.
#include <catch2/catch.hpp>

#include <cmath>

#include "core/error.hpp"
#include "report/compare.hpp"
#include "suites/results.hpp"
#include "suites/suite.hpp"
#include "tests/metrics_helpers.hpp"

using namespace pb;
using Json = nlohmann::ordered_json;

namespace {

suite::Suite parse(const std::string& body, const std::string& suite_table = "") {
  return suite::parse_suite(suite_table + pbtest::kSuiteHead + body, "t.toml");
}

// A chosen test cell as the runner writes it, with the figures the issue reports for region-grow
// at 100 projections: pooled Jaccard 0.632, slice-bootstrap interval 0.42-0.57.
Json cell(double jaccard, double lo, double hi) {
  return {{"id", "c1"}, {"dataset", "d"}, {"scan", "s"}, {"method", "m"}, {"grid_index", 0}, {"status", "ok"},
          {"test", {{"overlap", {{"jaccard", jaccard}, {"jaccard_ci95", {lo, hi}}}}, {"pores", {{"hits", 40}}}}}};
}

}  // namespace

TEST_CASE("criteria on the CI bound: lower for min_, upper for max_; the record says which", "[metrics][criteria]") {
  // Hand-made cell (issue 11): jaccard 0.632 with 95 % CI 0.42-0.57 passes min_jaccard = 0.6 on
  // the value and fails it on the CI lower bound.
  const auto on_value = parse("[criteria]\nmin_jaccard = 0.6\n").criteria;
  const auto on_ci = parse("[criteria]\nmin_jaccard = { value = 0.6, on = \"ci\" }\n").criteria;
  REQUIRE(on_ci[0].on == suite::Criterion::on_ci);
  const std::vector<Json> cells{cell(0.632, 0.42, 0.57)};
  const auto a = suite::select_cells(cells, "jaccard", on_value);
  const auto b = suite::select_cells(cells, "jaccard", on_ci);
  CHECK(a[0].passed);
  CHECK_FALSE(b[0].passed);
  CHECK(b[0].judged[0] == 0.42);
  CHECK_THAT(b[0].verdicts[0].first, Catch::Contains("CI bound"));
  // max_ judges the upper bound, max_abs_ the larger |bound|.
  suite::Criterion c;
  c.metric = "jaccard", c.op = suite::Criterion::at_most, c.value = 0.6, c.on = suite::Criterion::on_ci;
  CHECK(suite::judged_value(cells[0], "test", c) == 0.57);
  c.op = suite::Criterion::abs_at_most;
  CHECK(suite::judged_value(cells[0], "test", c) == 0.57);
  // The criterion round-trips through the record with its basis.
  const auto back = suite::criteria_from_json(suite::criteria_to_json(on_ci));
  CHECK(back[0].on == suite::Criterion::on_ci);
  CHECK(suite::criteria_to_json(on_ci)[0]["on"] == "ci");
  CHECK_FALSE(suite::criteria_to_json(on_value)[0].contains("on"));
  // A record whose comparison is none of the three (a fuzzer finding: it was cast to the enum
  // unchecked) is refused as an edited record, naming the field and value.
  auto edited = suite::criteria_to_json(on_value);
  edited[0]["op"] = 7;
  CHECK_THROWS_WITH(pb::reading_records("results.json", [&] { return suite::criteria_from_json(edited); }),
                    Catch::Contains("results.json") && Catch::Contains("criteria[].op is 7"));
}

TEST_CASE("validation suites judge on CI bounds by default", "[metrics][criteria]") {
  const std::string v = "[suite]\nvalidation = true\n\n";
  const auto s = parse("[criteria]\nmin_jaccard = 0.6\nmin_hits = 10\nmax_porosity_bias_pp = { value = 0.3, on = \"value\" }\n", v);
  REQUIRE(s.criteria.size() == 3);
  for (const auto& c : s.criteria) {
    INFO(c.key);
    if (c.metric == "jaccard") CHECK(c.on == suite::Criterion::on_ci);
    if (c.metric == "hits") {  // no interval in the record: judged on the value, and said so
      CHECK(c.on == suite::Criterion::on_value);
      CHECK_THAT(c.on_note, Catch::Contains("no interval"));
    }
    if (c.metric == "porosity_bias_pp") CHECK(c.on == suite::Criterion::on_value);
  }
  // Asking for a CI where there is none is an input error that lists the metrics with one.
  try {
    parse("[criteria]\nmin_hits = { value = 10, on = \"ci\" }\n");
    FAIL("accepted on = ci without an interval");
  } catch (const InputError& e) {
    CHECK_THAT(std::string(e.what()), Catch::Contains("jaccard"));
  }
  CHECK_THROWS_AS(parse("[criteria]\nmin_jaccard = { value = 0.6, on = \"bound\" }\n"), InputError);
}

TEST_CASE("[scoring] match is validated with the suite, naming the key and value", "[metrics][criteria]") {
  // Issue 18: a bad rule failed every cell after synthesis and blamed "--match".
  try {
    parse("[scoring]\nmatch = \"coverage:7\"\n");
    FAIL("accepted coverage:7");
  } catch (const InputError& e) {
    const std::string m = e.what();
    CHECK_THAT(m, Catch::Contains("[scoring] match"));
    CHECK_THAT(m, Catch::Contains("coverage:7"));
    CHECK_THAT(m, Catch::Contains("t.toml:"));
    CHECK(m.find("--match") == std::string::npos);
  }
  CHECK(parse("[scoring]\nmatch = \"iou:0.3\"\nmax_volume_ratio = 4\n").scoring.options().match.kind == MatchRule::iou);
  CHECK(parse("[scoring]\nmax_volume_ratio = 4\n").scoring.options().max_volume_ratio == 4);
  CHECK_THROWS_AS(parse("[scoring]\nmax_volume_ratio = 0.5\n"), InputError);
}

namespace {

// A results record with one chosen cell per (dataset, scan, method) and the given a90/95 figures.
Json run_with(const std::string& dataset, const std::string& method, double a9095, const std::string& relation,
              double jaccard = 0.8) {
  Json c = {{"id", dataset + method}, {"dataset", dataset}, {"scan", "s"}, {"method", method}, {"status", "ok"},
            {"test", {{"overlap", {{"jaccard", jaccard}}},
                      {"slices", {{"slice_jaccard_mean", jaccard}, {"jaccard", Json::array()}}},
                      {"porosity", {{"porosity_bias_pp", 0.1}}},
                      {"pod", {{"a90_95_um", a9095}, {"a90_95_relation", relation}}}}}};
  return {{"cells", {c}}, {"selections", {{{"dataset", dataset}, {"scan", "s"}, {"method", method}, {"chosen_cell", c["id"]}}}}};
}

const report::MetricDelta& row(const report::CompareResult& r, const std::string& metric) {
  for (const auto& d : r.rows)
    if (d.metric == metric) return d;
  throw std::runtime_error("no row " + metric);
}

}  // namespace

TEST_CASE("compare judges a90/95 bounds by meaning and refuses runs with nothing in common", "[metrics][compare]") {
  const report::CompareOptions o;
  SECTION("defined -> bounded (the candidate hits every target): better, never a regression") {
    // Issue 11: a candidate whose Jaccard rose from 0.58 to 0.92 failed the gate as "now undefined".
    const auto r = report::compare_runs(run_with("d", "m", 60.9, "="), run_with("d", "m", 20, "<=", 0.92), o);
    CHECK_FALSE(row(r, "a90_95_um").regression);
    CHECK_THAT(row(r, "a90_95_um").verdict, Catch::StartsWith("better"));
    CHECK_FALSE(r.any_regression);
  }
  SECTION("bounded -> defined above the bound: worse, a regression") {
    const auto r = report::compare_runs(run_with("d", "m", 20, "<="), run_with("d", "m", 60.9, "="), o);
    CHECK(row(r, "a90_95_um").regression);
  }
  SECTION("bounded on both sides: no difference") {
    const auto r = report::compare_runs(run_with("d", "m", 20, "<="), run_with("d", "m", 25, "<="), o);
    CHECK_FALSE(row(r, "a90_95_um").regression);
    CHECK_THAT(row(r, "a90_95_um").verdict, Catch::StartsWith("no difference"));
  }
  SECTION("runs with nothing in common: exit-2 error naming both sides") {
    try {
      report::compare_runs(run_with("gear-blank", "otsu", 50, "="), run_with("bracket", "sauvola", 50, "="), o);
      FAIL("compared zero rows");
    } catch (const InputError& e) {
      const std::string m = e.what();
      CHECK_THAT(m, Catch::Contains("gear-blank"));
      CHECK_THAT(m, Catch::Contains("bracket"));
      CHECK_THAT(m, Catch::Contains("otsu"));
      CHECK_THAT(m, Catch::Contains("sauvola"));
    }
  }
}
