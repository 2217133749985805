// porebench methods [--json] | describe METHOD|FILTER|FILTER+METHOD | version: the registry (methods and
// pre-filters), generated from the code.
#include <iostream>
#include <memory>

#include "apps/cli.hpp"
#include "build_info.hpp"
#include "core/context.hpp"
#include "core/json.hpp"
#include "methods/registry.hpp"

namespace pb::cli {
namespace {

// The family under which pre-filters are listed (they compose with any method: kCompositionDoc).
constexpr const char* kFilterFamily = "pre-filter";

nlohmann::ordered_json params_json(const std::vector<ParamSpec>& specs) {
  nlohmann::ordered_json params = nlohmann::ordered_json::array();
  for (const auto& p : specs) {
    nlohmann::ordered_json j = {{"name", p.name}, {"type", param_type_name(p.type)}, {"unit", p.unit}, {"doc", p.doc}};
    j["default"] = p.default_value.empty() ? nlohmann::ordered_json() : nlohmann::ordered_json(p.default_value);
    j["required"] = p.default_value.empty();
    if (p.type == ParamType::Int || p.type == ParamType::Float) {
      j["min"] = std::isfinite(p.min) ? nlohmann::ordered_json(p.min) : nlohmann::ordered_json();
      j["max"] = std::isfinite(p.max) ? nlohmann::ordered_json(p.max) : nlohmann::ordered_json();
    }
    if (!p.choices.empty()) j["choices"] = p.choices;  // Enum values, or words a number may be given as
    params.push_back(j);
  }
  return params;
}

nlohmann::ordered_json method_json(const MethodInfo& m) {
  return {{"name", m.name}, {"family", m.family}, {"doc", m.doc}, {"citation", m.citation}, {"params", params_json(m.params)}};
}

nlohmann::ordered_json filter_json(const FilterInfo& f) {
  return {{"name", f.name}, {"family", kFilterFamily}, {"doc", f.doc}, {"citation", f.citation},
          {"params", params_json(f.params)}, {"usage", f.name + "+METHOD, parameters as " + f.name + ".NAME=value"}};
}

void print_entry(const std::string& name, const std::string& family, const std::string& doc, const std::string& citation,
                 const std::vector<ParamSpec>& params, const std::string& prefix = "") {
  std::cout << name << "  [" << family << "]  " << doc << '\n';
  std::cout << "  citation: " << citation << '\n';
  if (params.empty()) std::cout << "  parameters: none\n";
  for (const auto& p : params) {
    std::cout << "  --set " << prefix << p.name << "=<" << param_type_name(p.type);
    if (p.type != ParamType::Enum)
      for (const auto& c : p.choices) std::cout << "|" << c;
    std::cout << ">";
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

void print_method(const MethodInfo& m) { print_entry(m.name, m.family, m.doc, m.citation, m.params); }

void print_filter(const FilterInfo& f) {
  print_entry(f.name, kFilterFamily, f.doc, f.citation, f.params, f.name + ".");
  std::cout << "  usage: " << f.name << "+METHOD (e.g. " << f.name << "+otsu); " << kCompositionDoc << '\n';
}

Action setup_methods(CLI::App& app) {
  app.description("list the segmentation methods and the pre-filters that compose with them (FILTER+METHOD): names, "
                  "families, docs, citations, parameters");
  auto json = std::make_shared<bool>(false);
  app.add_flag("--json", *json, "machine-readable registry");
  return [json] {
    if (*json) {
      nlohmann::ordered_json out = {{"context", run_context()},
                                    {"methods", nlohmann::ordered_json::array()},
                                    {"filters", nlohmann::ordered_json::array()},
                                    {"composition", kCompositionDoc}};
      for (const auto* m : Registry::instance().all()) out["methods"].push_back(method_json(*m));
      for (const auto* f : Registry::instance().filters()) out["filters"].push_back(filter_json(*f));
      std::cout << out.dump(2) << '\n';
    } else {
      for (const auto* m : Registry::instance().all()) print_method(*m), std::cout << '\n';
      std::cout << "Pre-filters (family " << kFilterFamily << "): " << kCompositionDoc << ", e.g. median+otsu\n\n";
      for (const auto* f : Registry::instance().filters()) print_filter(*f), std::cout << '\n';
    }
    return 0;
  };
}

Action setup_describe(CLI::App& app) {
  app.description("one method, pre-filter or FILTER+METHOD composition in full: doc, citation, parameter schema");
  auto name = std::make_shared<std::string>();
  app.add_option("METHOD", *name, "method, pre-filter, or FILTER+METHOD")->required();
  return [name] {
    if (const FilterInfo* f = Registry::instance().find_filter(*name)) {
      print_filter(*f);
      return 0;
    }
    const MethodInfo& m = Registry::instance().get(*name);
    print_method(m);
    if (name->find('+') != std::string::npos) std::cout << "  composition: " << kCompositionDoc << '\n';
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
