// What every report shares: the caution, number and parameter text, the cells by id.
#include "core/format.hpp"
#include "report/report.hpp"

namespace pb::report {

const char* const kCaution =
    "porebench supports, and does not replace, qualification of the inspection to the applicable standards "
    "and local codes, and the judgement of qualified personnel. Porosity results can decide whether a "
    "safety-relevant part ships.";

std::string fmt(const Json& v, int digits) { return v.is_number() ? format_number(v.get<double>(), digits) : "n/a"; }

std::map<std::string, const Json*> cells_by_id(const Json& results) {
  std::map<std::string, const Json*> m;
  for (const auto& c : results["cells"]) m[c["id"].get<std::string>()] = &c;
  return m;
}

const Json* method_entry(const Json& results, const std::string& label) {
  for (const auto& m : results["methods"])
    if (m.value("label", "") == label) return &m;
  return nullptr;
}

std::string params_text(const Json& params, const std::string& sep, const Json* method) {
  std::string out;
  for (auto it = params.begin(); it != params.end(); ++it) {
    if (method && !(method->contains("grid") && (*method)["grid"].contains(it.key()))) continue;
    out += (out.empty() ? "" : sep) + it.key() + "=" + (it.value().is_string() ? it.value().get<std::string>() : it.value().dump());
  }
  return out.empty() && method ? "defaults" : out;
}

}  // namespace pb::report
