// The method registry (registry.hpp): parameter parsing and validation against each schema (typed
// values, ranges, the words an Int/Float may be given as, "did you mean"), registration of methods
// and pre-filters, FILTER+METHOD composition (filter parameters prefixed "FILTER."), and the timed
// run with the shared pore-extraction parameter min_pore_voxels.
#include "methods/registry.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <sstream>

#include "core/error.hpp"
#include "core/format.hpp"
#include "core/names.hpp"
#include "methods/composition.hpp"
#include "methods/pores.hpp"

namespace pb {

const char* param_type_name(ParamType t) {
  switch (t) {
    case ParamType::Int: return "int";
    case ParamType::Float: return "float";
    case ParamType::Enum: return "enum";
    case ParamType::Bool: return "bool";
    case ParamType::Text: return "text";
  }
  return "?";
}

namespace {

std::string range_text(const ParamSpec& s) {
  switch (s.type) {
    case ParamType::Int:
    case ParamType::Float: {
      std::string out = "[" + format_number(s.min, 10, nullptr) + ", " + format_number(s.max, 10, nullptr) + "]";
      for (const auto& c : s.choices) out += " or " + c;
      return out;
    }
    case ParamType::Bool: return "true or false";
    case ParamType::Text: return "any text";
    case ParamType::Enum: {
      std::string out;
      for (const auto& c : s.choices) out += (out.empty() ? "" : ", ") + c;
      return "one of " + out;
    }
  }
  return "";
}

}  // namespace

void ParamValues::set(const ParamSpec& s, const std::string& value) {
  auto bad = [&](const std::string& why) {
    return InputError("parameter '" + s.name + "': " + why + " '" + value + "' (" + param_type_name(s.type) +
                      ", allowed " + range_text(s) + (s.unit.empty() ? "" : ", unit " + s.unit) + ")");
  };
  switch (s.type) {
    case ParamType::Int:
    case ParamType::Float: {
      if (std::find(s.choices.begin(), s.choices.end(), value) != s.choices.end()) {
        text_[s.name] = value;
        num_.erase(s.name);
        break;
      }
      char* end = nullptr;
      const double v = std::strtod(value.c_str(), &end);
      if (value.empty() || end != value.c_str() + value.size() || !std::isfinite(v)) throw bad("not a number:");
      if (s.type == ParamType::Int && v != std::floor(v)) throw bad("not a whole number:");
      if (v < s.min || v > s.max) throw bad("value out of range:");
      num_[s.name] = v;
      text_[s.name] = s.type == ParamType::Int ? std::to_string(int64_t(v)) : format_number(v, 10, nullptr);
      break;
    }
    case ParamType::Bool: {
      if (value == "true" || value == "1" || value == "yes") text_[s.name] = "true";
      else if (value == "false" || value == "0" || value == "no") text_[s.name] = "false";
      else throw bad("not a boolean:");
      num_[s.name] = text_[s.name] == "true";
      break;
    }
    case ParamType::Text: {
      if (value.empty()) throw bad("empty text:");
      text_[s.name] = value;
      break;
    }
    case ParamType::Enum: {
      if (std::find(s.choices.begin(), s.choices.end(), value) == s.choices.end()) throw bad("unknown choice");
      text_[s.name] = value;
      break;
    }
  }
}

double ParamValues::num(const std::string& n) const {
  auto it = num_.find(n);
  if (it == num_.end())
    throw std::logic_error("parameter not in schema, or given as a word: " + n);
  return it->second;
}
bool ParamValues::is_word(const std::string& n) const { return text_.count(n) && !num_.count(n); }
int64_t ParamValues::integer(const std::string& n) const { return int64_t(num(n)); }
bool ParamValues::flag(const std::string& n) const { return num(n) != 0; }
const std::string& ParamValues::choice(const std::string& n) const {
  auto it = text_.find(n);
  if (it == text_.end()) throw std::logic_error("parameter not in schema: " + n);
  return it->second;
}

Registry& Registry::instance() {
  static Registry r;
  return r;
}

namespace {

// Methods and pre-filters share one name space ("FILTER+METHOD"): a name taken by either is a
// programming error, whichever registers first.
void check_unregistered(const std::map<std::string, MethodInfo>& methods, const std::map<std::string, FilterInfo>& filters,
                        const std::string& name, const char* kind) {
  if (methods.count(name) || filters.count(name)) {
    std::fprintf(stderr, "porebench: %s '%s' registered twice (methods and pre-filters share one name space)\n", kind,
                 name.c_str());
    std::abort();
  }
}

template <class Info>
const Info* entry(const std::map<std::string, Info>& m, const std::string& name) {
  auto it = m.find(name);
  return it == m.end() ? nullptr : &it->second;
}

}  // namespace

bool Registry::add(MethodInfo m) {
  // Shared pore-extraction parameters, applied by run_method after the method itself.
  m.params.push_back({"min_pore_voxels", ParamType::Int, "1", 1, 1e9, {}, "voxels",
                      "pores (26-connected) smaller than this are dropped as noise specks"});
  check_unregistered(methods_, filters_, m.name, "method");
  methods_.emplace(m.name, std::move(m));
  return true;
}

const MethodInfo* Registry::find(const std::string& name) const { return entry(methods_, name); }

namespace {
std::string join_names(const std::vector<std::string>& names) {
  std::string list;
  for (const auto& n : names) list += (list.empty() ? "" : ", ") + n;
  return list;
}
}  // namespace

const MethodInfo& Registry::get(const std::string& name) const {
  if (const auto* m = find(name)) return *m;
  if (name.find('+') != std::string::npos) return compose(name);
  std::vector<std::string> names, filter_names;
  for (const auto& [n, _] : methods_) names.push_back(n);
  for (const auto& [n, _] : filters_) filter_names.push_back(n);
  if (find_filter(name))
    throw InputError("'" + name + "' is a pre-filter, not a method: compose it with one, e.g. '" + name + "+otsu' (" +
                     kCompositionDoc + ")");
  std::vector<std::string> both = names;
  both.insert(both.end(), filter_names.begin(), filter_names.end());
  std::string near = closest_name(name, both);
  if (find_filter(near)) near += "+METHOD";
  throw InputError("unknown method '" + name + "'" + (near.empty() ? "" : " (did you mean '" + near + "'?)") +
                   "; known methods: " + join_names(names) + "; pre-filters: " + join_names(filter_names) + " (" +
                   kCompositionDoc + ")");
}

bool Registry::add_filter(FilterInfo f) {
  check_unregistered(methods_, filters_, f.name, "filter");
  filters_.emplace(f.name, std::move(f));
  return true;
}

const FilterInfo* Registry::find_filter(const std::string& name) const { return entry(filters_, name); }

std::vector<const FilterInfo*> Registry::filters() const {
  std::vector<const FilterInfo*> out;
  for (const auto& [_, f] : filters_) out.push_back(&f);
  return out;
}

std::vector<std::string> composition_stages(const std::string& name) {
  std::vector<std::string> parts;
  for (size_t b = 0;;) {
    const size_t e = name.find('+', b);
    parts.push_back(name.substr(b, e == std::string::npos ? e : e - b));
    if (e == std::string::npos) break;
    b = e + 1;
  }
  return parts;
}

ParamValues stage_params(const std::vector<ParamSpec>& specs, const std::string& prefix, const ParamValues& all) {
  ParamValues p;
  for (const auto& s : specs) p.set(s, all.text().at(prefix + s.name));
  return p;
}

const MethodInfo& Registry::compose(const std::string& name) const {
  std::lock_guard<std::mutex> lock(composed_mutex_);
  if (auto it = composed_.find(name); it != composed_.end()) return *it->second;
  const std::vector<std::string> parts = composition_stages(name);
  std::vector<std::string> filter_names, method_names;
  for (const auto& [n, _] : filters_) filter_names.push_back(n);
  for (const auto& [n, _] : methods_) method_names.push_back(n);
  std::vector<const FilterInfo*> chain;
  for (size_t i = 0; i + 1 < parts.size(); ++i) {
    const FilterInfo* f = find_filter(parts[i]);
    if (!f) {
      const std::string near = closest_name(parts[i], filter_names);
      throw InputError("unknown pre-filter '" + parts[i] + "' in composition '" + name + "'" +
                       (near.empty() ? "" : " (did you mean '" + near + "'?)") + "; pre-filters: " +
                       join_names(filter_names) + "; syntax: " + kCompositionDoc);
    }
    for (const auto* g : chain)
      if (g == f) throw InputError("pre-filter '" + f->name + "' appears twice in composition '" + name + "'");
    chain.push_back(f);
  }
  const MethodInfo* base = find(parts.back());
  if (!base) {
    const std::string near = closest_name(parts.back(), method_names);
    throw InputError("unknown method '" + parts.back() + "' at the end of composition '" + name + "'" +
                     (near.empty() ? "" : " (did you mean '" + near + "'?)") + "; syntax: " + kCompositionDoc);
  }
  auto m = std::make_unique<MethodInfo>();
  m->name = name;
  m->family = base->family;
  m->doc = base->doc;
  m->citation = base->citation;
  for (const auto* f : chain) {
    m->doc = f->name + " pre-filter, then: " + m->doc;
    m->citation = f->citation + "; " + m->citation;
    for (ParamSpec p : f->params) {
      p.name = f->name + "." + p.name;
      m->params.push_back(std::move(p));
    }
  }
  m->params.insert(m->params.end(), base->params.begin(), base->params.end());
  m->run = [chain, base](const MethodInput& in, const ParamValues& all) {
    VolumeF filtered;
    const VolumeF* cur = &in.volume;
    for (const auto* f : chain) {
      filtered = f->apply(*cur, stage_params(f->params, f->name + ".", all));
      cur = &filtered;
    }
    MethodInput next{*cur, in.roi, VoxelType::f32};
    return base->run(next, stage_params(base->params, "", all));
  };
  return *composed_.emplace(name, std::move(m)).first->second;
}

std::vector<const MethodInfo*> Registry::all() const {
  std::vector<const MethodInfo*> out;
  for (const auto& [_, m] : methods_) out.push_back(&m);
  std::stable_sort(out.begin(), out.end(), [](auto* a, auto* b) { return a->family < b->family; });
  return out;
}

ParamValues parse_params(const MethodInfo& m, const std::vector<std::string>& kvs) {
  std::map<std::string, std::string> given;
  std::vector<std::string> names;
  for (const auto& s : m.params) names.push_back(s.name);
  for (const auto& kv : kvs) {
    const auto eq = kv.find('=');
    if (eq == std::string::npos || eq == 0)
      throw InputError("parameter setting '" + kv + "' for method " + m.name + " is not of the form key=value");
    const std::string key = kv.substr(0, eq);
    if (std::find(names.begin(), names.end(), key) == names.end()) {
      const std::string near = closest_name(key, names);
      std::string list;
      for (const auto& n : names) list += (list.empty() ? "" : ", ") + n;
      throw InputError("unknown parameter '" + key + "' for method " + m.name +
                       (near.empty() ? "" : " (did you mean '" + near + "'?)") +
                       "; parameters: " + (list.empty() ? "none" : list));
    }
    if (given.count(key)) throw InputError("parameter '" + key + "' for method " + m.name + " is given twice");
    given[key] = kv.substr(eq + 1);
  }
  ParamValues p;
  for (const auto& s : m.params) {
    auto it = given.find(s.name);
    if (it == given.end() && s.default_value.empty())
      throw InputError("method " + m.name + ": parameter '" + s.name + "' is required (" + s.doc + ")");
    try {
      p.set(s, it == given.end() ? s.default_value : it->second);
    } catch (const InputError& e) {
      throw InputError("method " + m.name + ": " + e.what());
    }
  }
  return p;
}

MethodOutput run_method(const MethodInfo& m, const ParamValues& p, const MethodInput& in) {
  if (in.volume.empty()) throw InputError("method " + m.name + ": the input volume is empty");
  if (in.roi && !in.roi->geometry().same_dims(in.volume.geometry()))
    throw InputError("method " + m.name + ": ROI mask dims (" + describe(in.roi->geometry()) +
                     ") differ from the volume (" + describe(in.volume.geometry()) + ")");
  const auto t0 = std::chrono::steady_clock::now();
  MethodOutput out = m.run(in, p);
  if (const int64_t min_voxels = p.integer("min_pore_voxels"); min_voxels > 1)
    out.chosen.emplace_back("small_pores_removed", double(remove_small_pores(out.pores, min_voxels)));
  out.runtime_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  if (out.external_runtime_s) out.runtime_s = *out.external_runtime_s;
  return out;
}

}  // namespace pb
