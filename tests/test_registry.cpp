// The registry: every method has a doc, a citation and a valid schema; parameter parsing
// validates types, ranges and names before any work.
#include <catch2/catch.hpp>

#include "core/error.hpp"
#include "methods/registry.hpp"

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
