// porebench methods [--json] | describe METHOD | version: the registry, generated from the code.
#include <iostream>
#include <memory>
#include <nlohmann/json.hpp>

#include "apps/cli.hpp"
#include "build_info.hpp"
#include "core/context.hpp"
#include "methods/registry.hpp"

namespace pb::cli {
namespace {

nlohmann::ordered_json method_json(const MethodInfo& m) {
  nlohmann::ordered_json params = nlohmann::ordered_json::array();
  for (const auto& p : m.params) {
    nlohmann::ordered_json j = {{"name", p.name}, {"type", param_type_name(p.type)}, {"unit", p.unit}, {"doc", p.doc}};
    j["default"] = p.default_value.empty() ? nlohmann::ordered_json() : nlohmann::ordered_json(p.default_value);
    j["required"] = p.default_value.empty();
    if (p.type == ParamType::Int || p.type == ParamType::Float) {
      j["min"] = std::isfinite(p.min) ? nlohmann::ordered_json(p.min) : nlohmann::ordered_json();
      j["max"] = std::isfinite(p.max) ? nlohmann::ordered_json(p.max) : nlohmann::ordered_json();
    }
    if (p.type == ParamType::Enum) j["choices"] = p.choices;
    params.push_back(j);
  }
  return {{"name", m.name}, {"family", m.family}, {"doc", m.doc}, {"citation", m.citation}, {"params", params}};
}

void print_method(const MethodInfo& m, bool full) {
  std::cout << m.name << "  [" << m.family << "]  " << m.doc << '\n';
  if (!full) return;
  std::cout << "  citation: " << m.citation << '\n';
  if (m.params.empty()) std::cout << "  parameters: none\n";
  for (const auto& p : m.params) {
    std::cout << "  --set " << p.name << "=<" << param_type_name(p.type) << ">";
    if (p.type == ParamType::Enum) {
      std::cout << " {";
      for (size_t i = 0; i < p.choices.size(); ++i) std::cout << (i ? "|" : "") << p.choices[i];
      std::cout << "}";
    }
    if (p.default_value.empty()) std::cout << "  (required)";
    else std::cout << "  default " << p.default_value;
    if ((p.type == ParamType::Int || p.type == ParamType::Float) && (std::isfinite(p.min) || std::isfinite(p.max)))
      std::cout << ", range [" << p.min << ", " << p.max << "]";
    if (!p.unit.empty()) std::cout << ", unit " << p.unit;
    std::cout << "\n      " << p.doc << '\n';
  }
}

Action setup_methods(CLI::App& app) {
  app.description("list the segmentation methods: names, families, docs, citations, parameters");
  auto json = std::make_shared<bool>(false);
  app.add_flag("--json", *json, "machine-readable registry");
  return [json] {
    if (*json) {
      nlohmann::ordered_json out = {{"context", run_context()}, {"methods", nlohmann::ordered_json::array()}};
      for (const auto* m : Registry::instance().all()) out["methods"].push_back(method_json(*m));
      std::cout << out.dump(2) << '\n';
    } else {
      for (const auto* m : Registry::instance().all()) print_method(*m, true), std::cout << '\n';
    }
    return 0;
  };
}

Action setup_describe(CLI::App& app) {
  app.description("one method in full: doc, citation, parameter schema");
  auto name = std::make_shared<std::string>();
  app.add_option("METHOD", *name, "method name")->required();
  return [name] {
    print_method(Registry::instance().get(*name), true);
    return 0;
  };
}

Action setup_version(CLI::App& app) {
  app.description("tool version, source revision and dependency versions");
  return [] {
    const auto c = run_context();
    std::cout << "porebench " << build::version << " (" << build::git_hash << ")\n";
    for (const auto& [k, v] : c["dependencies"].items()) std::cout << "  " << k << " " << v.get<std::string>() << '\n';
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("methods", 20, setup_methods);
PB_REGISTER_COMMAND("describe", 21, setup_describe);
PB_REGISTER_COMMAND("version", 90, setup_version);

}  // namespace pb::cli
