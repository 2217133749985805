// The metric table (metrics/metric_table.hpp): every judged metric sits in the score record under
// its block and name, results reading finds it there, criteria accept exactly the table's names and
// list them on a typo, and metrics/METRICS.md is the table's generated text.
// Regenerate METRICS.md after a change of the table:
//   PB_WRITE_METRICS_MD=1 ./build/porebench_tests "[metric-table]"
#include <catch2/catch.hpp>

#include <cstdlib>
#include <set>
#include <sstream>

#include "core/error.hpp"
#include "metrics/metric_table.hpp"
#include "metrics/score.hpp"
#include "suites/results.hpp"
#include "suites/suite.hpp"
#include "tests/helpers.hpp"
#include "tests/metrics_helpers.hpp"

using namespace pb;

namespace {

std::string source_root() { return std::string(PB_TEST_SCRIPTS) + "/../.."; }

}  // namespace

TEST_CASE("metric table: names unique, units in names, every entry described and sourced", "[metrics][metric-table]") {
  std::set<std::string> names;
  for (const auto& m : metric_table()) {
    INFO(m.name);
    CHECK(names.insert(m.name).second);
    const std::string n = m.name, u = m.unit;
    // Units in names (DEVELOPERS.md conventions): a metric with a length or time unit says it.
    if (u == "um" || u == "mm" || u == "pp" || u == "s") CHECK(n.size() > u.size() + 1);
    if (u == "um" || u == "mm" || u == "pp" || u == "s") CHECK(n.substr(n.size() - u.size() - 1) == "_" + u);
    CHECK(std::string(m.definition).size() > 5);
    CHECK(std::string(m.source).size() > 5);
    CHECK(std::string(m.computed_in).size() > 5);
  }
  CHECK(find_metric("jaccard")->better == Better::higher);
  CHECK(find_metric("porosity_bias_pp")->better == Better::toward_zero);
  CHECK(find_metric("ks_distance") == nullptr);  // one spelling: `ks`
  CHECK(find_metric("wasserstein_um") == nullptr);
}

TEST_CASE("metric table: every metric is in the score record under its block and name", "[metrics][metric-table]") {
  const Geometry g = pbtest::cube(24, 0.01);
  const Mask ref = pbtest::random_mask(g, 0.05, 3), pred = pbtest::random_mask(g, 0.05, 4);
  const auto rec = to_json(score(pred, ref, nullptr));
  nlohmann::ordered_json cell = {{"status", "ok"}, {"runtime_s", 1.5}, {"test", rec}};
  for (const auto& m : metric_table()) {
    INFO(m.name);
    if (std::string(m.block) == "cell") {
      CHECK(suite::metric_value(cell, "test", m.name) == 1.5);
      continue;
    }
    if (std::string(m.block) == "probability") continue;  // probability maps only: tests/test_probability.cpp
    REQUIRE(rec.contains(m.block));
    REQUIRE(rec[m.block].contains(m.name));
    if (m.has_ci()) CHECK(rec[m.block].contains(m.ci_key));
    const auto& v = rec[m.block][m.name];
    if (v.is_number()) CHECK(suite::metric_value(cell, "test", m.name) == v.get<double>());
  }
  CHECK(std::isnan(suite::metric_value(cell, "test", "no_such_metric")));
}

TEST_CASE("metric table: criteria take the table's names; a typo lists them", "[metrics][metric-table]") {
  for (const auto& m : metric_table()) {
    const auto s = suite::parse_suite(std::string(pbtest::kSuiteHead) + "[criteria]\nmax_" + m.name + " = 1\n", "t.toml");
    REQUIRE(s.criteria.size() == 1);
    CHECK(s.criteria[0].metric == m.name);
  }
  try {
    suite::parse_suite(std::string(pbtest::kSuiteHead) + "[criteria]\nmax_ks_distance = 0.2\n", "t.toml");
    FAIL("an unknown criterion metric was accepted");
  } catch (const InputError& e) {
    const std::string msg = e.what();
    CHECK_THAT(msg, Catch::Contains("max_ks_distance"));
    CHECK_THAT(msg, Catch::Contains(metric_names_text()));
  }
}

TEST_CASE("metric table: compare's defaults come from the table", "[metrics][metric-table]") {
  const auto tracked = compare_default_metrics();
  CHECK(tracked == std::vector<std::string>{"jaccard", "slice_jaccard_mean", "porosity_bias_pp", "a90_95_um"});
  CHECK(compare_default_tolerances().at("a90_95_um") == 5.0);
  CHECK_THROWS_AS(metric_info("wasserstein_um", "compare"), InputError);
}

TEST_CASE("metric table: metrics/METRICS.md is the generated table", "[metrics][metric-table]") {
  const std::string path = source_root() + "/metrics/METRICS.md";
  const std::string want = metric_table_markdown();
  if (const char* w = std::getenv("PB_WRITE_METRICS_MD"); w && std::string(w) == "1") {
    pbtest::write_file(path, want);
    WARN("wrote " << path);
  }
  INFO("regenerate with PB_WRITE_METRICS_MD=1 ./build/porebench_tests \"[metric-table]\"");
  CHECK(pbtest::read_text(path) == want);
  // Every table row has the header's column count: no unescaped '|' in a cell.
  std::istringstream in(want);
  std::string line;
  size_t header_cols = 0;
  auto columns = [](const std::string& l) {
    size_t n = 0;
    for (size_t i = 0; i < l.size(); ++i) n += l[i] == '|' && (i == 0 || l[i - 1] != '\\');
    return n;
  };
  while (std::getline(in, line)) {
    if (line.rfind("| name", 0) == 0) header_cols = columns(line);
    if (header_cols && line.rfind("|", 0) == 0) CHECK(columns(line) == header_cols);
  }
  CHECK(header_cols == 9);
}
