#pragma once
// The method registry. Every segmentation method describes itself (name, family, one-line doc,
// citation, typed parameter schema) and registers itself from its own file with
// PB_REGISTER_METHOD; nothing central lists methods. Parameters arrive as "key=value" strings and
// are validated against the schema before any work; errors name the parameter, the value and the
// allowed range. Convention for every method: pores are dark (air is below the threshold).
#include <functional>
#include <limits>
#include <map>
#include <memory>
#include <mutex>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "core/volume.hpp"

namespace pb {

enum class ParamType { Int, Float, Enum, Bool, Text };  // Text: a free string (e.g. a model card path)
const char* param_type_name(ParamType t);

struct ParamSpec {
  std::string name;
  ParamType type = ParamType::Float;
  std::string default_value;  // empty = required
  double min = -std::numeric_limits<double>::infinity();
  double max = std::numeric_limits<double>::infinity();
  std::vector<std::string> choices;  // Enum: the values; Int/Float: words accepted besides a number (e.g. "auto")
  std::string unit;                  // "grey", "voxels", "mm", "%", "" ...
  std::string doc;
};

// Validated parameter values of one method run: every schema parameter has a value.
class ParamValues {
 public:
  double num(const std::string& name) const;       // Int or Float
  int64_t integer(const std::string& name) const;  // Int
  bool flag(const std::string& name) const;         // Bool
  const std::string& choice(const std::string& name) const;  // Enum, or the canonical text of any parameter
  bool is_word(const std::string& name) const;               // Int/Float given as one of its words
  const std::map<std::string, std::string>& text() const { return text_; }  // canonical strings
  void set(const ParamSpec& spec, const std::string& value);  // validates; throws InputError

 private:
  std::map<std::string, std::string> text_;
  std::map<std::string, double> num_;
};

struct MethodInput {
  const VolumeF& volume;
  const Mask* roi = nullptr;  // part mask: only voxels inside are classified; outside is background
  VoxelType stored_type = VoxelType::f32;  // voxel type on disk (integer data: mind histogram resolution)
};

struct MethodOutput {
  Mask pores;                                         // 1 = pore
  int64_t part_voxels = 0;                            // material + pores inside the ROI (porosity denominator)
  std::vector<std::pair<std::string, double>> chosen;  // what the method decided, e.g. threshold (grey)
  std::vector<std::string> warnings;                  // degenerate input and the like
  VolumeF probability;                                // pore probability map, when the method makes one (neural)
  double runtime_s = 0;                               // wall time of the run, set by run_method
  // A runtime measured elsewhere (predictions: from a sidecar; NaN = not measured): when set,
  // run_method reports it as runtime_s instead of its own timing.
  std::optional<double> external_runtime_s;
};

struct SlabMethod;  // methods/slab_method.hpp

struct MethodInfo {
  std::string name, family, doc, citation;
  std::vector<ParamSpec> params;
  std::function<MethodOutput(const MethodInput&, const ParamValues&)> run;
  // The same method on a volume read by slabs (methods/slab_method.hpp), set beside run by a family
  // whose method can stream; null for a method that cannot (segment refuses it above --memory-limit).
  std::shared_ptr<const SlabMethod> slabs;
};

// A pre-filter (denoising before segmentation). Composes with any method by the syntax
// "FILTER+METHOD" (chains allowed: "median+gaussian+otsu"); the composed method's parameters are
// the filters' parameters prefixed with "FILTER." plus the method's own, e.g.
//   porebench segment median+sauvola scan.mha --set median.radius=2 --set window=31
struct FilterInfo {
  std::string name, doc, citation;
  std::vector<ParamSpec> params;
  std::function<VolumeF(const VolumeF&, const ParamValues&)> apply;
};

inline constexpr const char* kCompositionDoc =
    "FILTER+METHOD applies the pre-filter, then the method (chains allowed: f1+f2+method); "
    "filter parameters are set as FILTER.name=value, method parameters as name=value";

class Registry {
 public:
  static Registry& instance();
  bool add(MethodInfo m);  // returns true; aborts on a duplicate name (a programming error)
  bool add_filter(FilterInfo f);
  const MethodInfo* find(const std::string& name) const;
  // A registered method or a composition "FILTER+...+METHOD"; throws InputError naming what is
  // unknown and listing the known names.
  const MethodInfo& get(const std::string& name) const;
  std::vector<const MethodInfo*> all() const;  // registered methods, sorted by family, then name
  const FilterInfo* find_filter(const std::string& name) const;
  std::vector<const FilterInfo*> filters() const;

 private:
  const MethodInfo& compose(const std::string& name) const;
  std::map<std::string, MethodInfo> methods_;
  std::map<std::string, FilterInfo> filters_;
  mutable std::map<std::string, std::unique_ptr<MethodInfo>> composed_;
  mutable std::mutex composed_mutex_;
};

// Parses "key=value" strings against the schema; unset parameters take their defaults.
ParamValues parse_params(const MethodInfo& m, const std::vector<std::string>& key_values);

// Runs and times a method; checks the input first (non-empty volume, ROI geometry).
MethodOutput run_method(const MethodInfo& m, const ParamValues& p, const MethodInput& in);

#define PB_CONCAT_INNER(a, b) a##b
#define PB_CONCAT(a, b) PB_CONCAT_INNER(a, b)
// Registers a MethodInfo at static-initialisation time: PB_REGISTER_METHOD(make_info());
#define PB_REGISTER_METHOD(...) \
  static const bool PB_CONCAT(pb_registered_, __LINE__) = ::pb::Registry::instance().add(__VA_ARGS__)
#define PB_REGISTER_FILTER(...) \
  static const bool PB_CONCAT(pb_registered_filter_, __LINE__) = ::pb::Registry::instance().add_filter(__VA_ARGS__)

}  // namespace pb
