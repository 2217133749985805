// The registry: every method has a doc, a citation and a valid schema; parameter parsing
// validates types, ranges and names before any work.
#include <catch2/catch.hpp>

#include "core/json.hpp"

#include "core/error.hpp"
#include "methods/registry.hpp"
#include "tests/helpers.hpp"

using namespace pbtest;

using namespace pb;

TEST_CASE("every registered method has doc, citation and a valid schema", "[registry]") {
  const auto all = Registry::instance().all();
  REQUIRE(all.size() >= 2);
  for (const auto* m : all) {
    INFO(m->name);
    CHECK_FALSE(m->name.empty());
    CHECK_FALSE(m->family.empty());
    CHECK_FALSE(m->doc.empty());
    CHECK_FALSE(m->citation.empty());
    CHECK(m->run);
    std::vector<std::string> names;
    for (const auto& p : m->params) {
      INFO(p.name);
      CHECK_FALSE(p.doc.empty());
      CHECK(std::find(names.begin(), names.end(), p.name) == names.end());  // unique
      names.push_back(p.name);
      CHECK(p.min <= p.max);
      if (p.type == ParamType::Enum) CHECK_FALSE(p.choices.empty());
      // Defaults validate against their own schema.
      if (!p.default_value.empty()) {
        ParamValues v;
        CHECK_NOTHROW(v.set(p, p.default_value));
      }
    }
  }
}

TEST_CASE("parameter parsing validates before any work", "[registry]") {
  MethodInfo m;
  m.name = "probe";
  m.params = {{"window", ParamType::Int, "15", 3, 255, {}, "voxels", "window edge"},
              {"k", ParamType::Float, "0.2", -1, 1, {}, "", "weight"},
              {"mode", ParamType::Enum, "fast", -1e300, 1e300, {"fast", "exact"}, "", "mode"},
              {"keep", ParamType::Bool, "false", 0, 1, {}, "", "flag"}};
  const ParamValues p = parse_params(m, {"window=31", "mode=exact", "keep=true"});
  CHECK(p.integer("window") == 31);
  CHECK(p.num("k") == Approx(0.2));
  CHECK(p.choice("mode") == "exact");
  CHECK(p.flag("keep"));
  CHECK_THROWS_WITH(parse_params(m, {"window=2"}), Catch::Contains("'window'") && Catch::Contains("[3, 255]"));
  CHECK_THROWS_WITH(parse_params(m, {"window=3.5"}), Catch::Contains("whole number"));
  CHECK_THROWS_WITH(parse_params(m, {"k=abc"}), Catch::Contains("not a number"));
  CHECK_THROWS_WITH(parse_params(m, {"k=nan"}), Catch::Contains("not a number"));
  CHECK_THROWS_WITH(parse_params(m, {"mode=slow"}), Catch::Contains("fast, exact"));
  CHECK_THROWS_WITH(parse_params(m, {"keep=maybe"}), Catch::Contains("boolean"));
  CHECK_THROWS_WITH(parse_params(m, {"windw=5"}), Catch::Contains("did you mean 'window'"));
  CHECK_THROWS_WITH(parse_params(m, {"window"}), Catch::Contains("key=value"));
  CHECK_THROWS_WITH(parse_params(m, {"k=0.1", "k=0.3"}), Catch::Contains("twice"));
  CHECK_THROWS_AS(Registry::instance().get("no-such-method"), InputError);
}

// Pre-filters are discoverable (issue 10): listed as their own family with doc, citation and
// schema in `methods` (text and JSON), shown by `describe`, and named with the FILTER+METHOD
// syntax in an unknown-method error. The five filters (anisotropic diffusion is named "diffusion") are ours to list.
TEST_CASE("the five pre-filters are listed, described and named in errors, with the composition syntax", "[registry][cli]") {
  const std::vector<std::string> five = {"median", "gaussian", "nlm", "bilateral", "diffusion"};
  std::vector<std::string> names;
  for (const auto* f : Registry::instance().filters()) {
    INFO(f->name);
    CHECK_FALSE(f->doc.empty());
    CHECK_FALSE(f->citation.empty());
    CHECK(f->apply);
    for (const auto& p : f->params) CHECK_FALSE(p.doc.empty());
    names.push_back(f->name);
  }
  for (const auto& n : five) CHECK(std::find(names.begin(), names.end(), n) != names.end());

  const auto json = run_cli("methods --json");
  REQUIRE(json.exit_code == 0);
  const auto j = nlohmann::json::parse(json.out);
  REQUIRE(j["filters"].is_array());
  CHECK(j["filters"].size() == names.size());
  for (const auto& f : j["filters"]) {
    INFO(f.dump());
    CHECK(f["family"] == "pre-filter");
    CHECK_FALSE(f["doc"].get<std::string>().empty());
    CHECK_FALSE(f["citation"].get<std::string>().empty());
    CHECK(f["params"].is_array());
    CHECK(f["usage"].get<std::string>().find("+METHOD") != std::string::npos);
  }
  CHECK(j["composition"].get<std::string>().find("FILTER+METHOD") != std::string::npos);
  // bins=auto is in the schema, with the word listed as a choice.
  for (const auto& m : j["methods"])
    if (m["name"] == "otsu")
      for (const auto& p : m["params"])
        if (p["name"] == "bins") {
          CHECK(p["default"] == "auto");
          CHECK(p["choices"] == nlohmann::json::array({"auto"}));
          CHECK(p["doc"].get<std::string>().find("4096") != std::string::npos);
        }

  const auto text = run_cli("methods");
  REQUIRE(text.exit_code == 0);
  CHECK(text.out.find("FILTER+METHOD") != std::string::npos);
  for (const auto& n : five) CHECK(text.out.find(n + "  [pre-filter]") != std::string::npos);

  const auto median = run_cli("describe median");
  INFO(median.err);
  REQUIRE(median.exit_code == 0);
  CHECK(median.out.find("median  [pre-filter]") != std::string::npos);
  CHECK(median.out.find("--set median.radius=") != std::string::npos);
  CHECK(median.out.find("FILTER+METHOD") != std::string::npos);
  const auto composed = run_cli("describe median+otsu");
  REQUIRE(composed.exit_code == 0);
  CHECK(composed.out.find("FILTER+METHOD") != std::string::npos);

  const auto unknown = run_cli("describe nosuch");
  CHECK(unknown.exit_code == 2);
  CHECK(unknown.err.find("pre-filters: ") != std::string::npos);
  CHECK(unknown.err.find("FILTER+METHOD") != std::string::npos);
  CHECK_THROWS_WITH(Registry::instance().get("median"), Catch::Contains("median+otsu"));
}
