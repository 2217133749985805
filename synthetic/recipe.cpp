// Recipe parsing, overrides, presets (synthetic/presets/*.toml, embedded at build time) and
// validation for synthetic scans. TOML through toml++; every key is checked (unknown keys are errors
// with the closest known key), and to_toml writes every value so that recipe.toml reproduces a run.
// Material attenuation defaults are from memory of the NIST XCOM mass attenuation tables, marked below.
#include "synthetic/recipe.hpp"

#include <algorithm>
#include <cmath>
#include <iomanip>
#include <limits>
#include <sstream>
#include <thread>
#include <toml++/toml.h>

#include "core/error.hpp"
#include "core/format.hpp"
#include "core/memory.hpp"
#include "core/names.hpp"
#include "core/text_file.hpp"
#include "core/toml_keys.hpp"
#include "synthetic/fbp.hpp"
#include "synthetic/presets.hpp"

namespace pb::synth {

bool Shape::operator==(const Shape& o) const {
  return kind == o.kind && centre_mm == o.centre_mm && size_mm == o.size_mm && radius_mm == o.radius_mm &&
         bore_radius_mm == o.bore_radius_mm && height_mm == o.height_mm && angle_deg == o.angle_deg;
}
bool Marker::operator==(const Marker& o) const {
  return centre_mm == o.centre_mm && radius_mm == o.radius_mm && mu_per_mm == o.mu_per_mm;
}
bool PorePopulation::operator==(const PorePopulation& o) const {
  return type == o.type && porosity_pct == o.porosity_pct && median_diameter_um == o.median_diameter_um &&
         spread == o.spread && min_diameter_um == o.min_diameter_um && thickness_um == o.thickness_um &&
         aspect == o.aspect && layer_um == o.layer_um && pores_per_cluster == o.pores_per_cluster &&
         cluster_radius_um == o.cluster_radius_um && open_count == o.open_count && shape == o.shape &&
         lobes == o.lobes && lobe_scale == o.lobe_scale;
}
bool ScanPose::operator==(const ScanPose& o) const {
  return projections == o.projections && translation_mm == o.translation_mm && rotation_deg == o.rotation_deg &&
         voxel_size_um == o.voxel_size_um;
}
const ScanPose* Recipe::pose_for(int n) const {
  for (const ScanPose& p : poses)
    if (p.projections == n || p.projections == 0) return &p;
  return nullptr;
}
bool Recipe::operator==(const Recipe& o) const { return to_toml(*this) == to_toml(o); }

double material_default_mu(const std::string& m) {
  // From memory (NIST XCOM mass attenuation coefficients, mixture rule), not looked up:
  // PA66 with 30 % glass fibre, density 1.36 g/cm3, at 40 keV effective: mu/rho ~ 0.44 cm2/g.
  if (m == "pa-gf30") return 0.060;
  // Aluminium alloy, density 2.7 g/cm3, at 80 keV effective: mu/rho ~ 0.20 cm2/g.
  if (m == "al-alloy") return 0.055;
  throw InputError("recipe: phantom.material '" + m + "' is not known; use pa-gf30, al-alloy, or custom with phantom.mu_per_mm");
}

double Recipe::material_mu() const { return mu_per_mm > 0 ? mu_per_mm : material_default_mu(material); }

double Recipe::reference_dose() const {
  if (reference_i0 > 0) return reference_i0;
  double m = 0;
  for (double v : i0) m = std::max(m, v);
  return m;
}

namespace {

// Reads the keys of one TOML table, remembering which were used, so that unknown keys are errors.
class Reader {
 public:
  Reader(const toml::table& t, std::string prefix, std::string source)
      : t_(t), prefix_(std::move(prefix)), source_(std::move(source)) {}

  std::string key_name(const std::string& k) const { return prefix_.empty() ? k : prefix_ + "." + k; }
  [[noreturn]] void fail(const std::string& k, const std::string& what) const {
    throw InputError(source_ + ": key " + key_name(k) + " " + what);
  }
  const toml::node* node(const std::string& k) {
    known_.push_back(k);
    return t_.get(k);
  }
  void get(const std::string& k, double& out) {
    if (auto* n = node(k)) {
      if (auto v = n->value<double>()) out = *v;
      else fail(k, "must be a number");
      if (!std::isfinite(out)) fail(k, "must be finite");
    }
  }
  template <class I, std::enable_if_t<std::is_integral<I>::value && !std::is_same<I, bool>::value, int> = 0>
  void get(const std::string& k, I& out) {
    if (auto* n = node(k)) out = to_int<I>(k, *n);
  }
  void get(const std::string& k, bool& out) {
    if (auto* n = node(k)) {
      if (auto v = n->value<bool>()) out = *v;
      else fail(k, "must be true or false");
    }
  }
  void get(const std::string& k, std::string& out) {
    if (auto* n = node(k)) {
      if (auto v = n->value<std::string>()) out = *v;
      else fail(k, "must be a string");
    }
  }
  template <class T, size_t N>
  void get(const std::string& k, std::array<T, N>& out) {
    if (auto* n = node(k)) {
      const toml::array* a = n->as_array();
      if (!a || a->size() != N) fail(k, "must be an array of " + std::to_string(N) + " numbers");
      for (size_t i = 0; i < N; ++i) out[i] = element<T>(k, *a->get(i));
    }
  }
  template <class T>
  void get(const std::string& k, std::vector<T>& out) {
    if (auto* n = node(k)) {
      out.clear();
      if (const toml::array* a = n->as_array()) {
        for (size_t i = 0; i < a->size(); ++i) out.push_back(element<T>(k, *a->get(i)));
      } else {
        out.push_back(element<T>(k, *n));
      }
    }
  }
  const toml::array* tables(const std::string& k) {
    auto* n = node(k);
    if (!n) return nullptr;
    const toml::array* a = n->as_array();
    if (!a) fail(k, "must be an array of tables ([[" + key_name(k) + "]])");
    for (size_t i = 0; i < a->size(); ++i)
      if (!a->get(i)->is_table()) fail(k + "." + std::to_string(i), "must be a table");
    return a;
  }
  const toml::table* table(const std::string& k) {
    auto* n = node(k);
    if (!n) return nullptr;
    if (!n->is_table()) fail(k, "must be a table ([" + key_name(k) + "])");
    return n->as_table();
  }
  void finish() const {
    if (const auto u = first_unknown_key(t_, known_))
      fail(u->key, "is not known" + (u->near.empty() ? std::string() : " (did you mean " + key_name(u->near) + "?)"));
  }

 private:
  template <class I>
  I to_int(const std::string& k, const toml::node& n) const {
    // The range test is exact: 2^digits is the first whole number past I's largest (a double
    // holds it exactly), where double(max) of a 64-bit I rounds up to it and would let it through.
    const double past_max = std::ldexp(1.0, std::numeric_limits<I>::digits);
    const double lowest = double(std::numeric_limits<I>::lowest());  // 0 or -2^digits: exact
    if (auto v = n.value_exact<int64_t>()) {
      if constexpr (std::is_signed<I>::value) {
        if (*v < int64_t(std::numeric_limits<I>::lowest()) || *v > int64_t(std::numeric_limits<I>::max()))
          fail(k, "value " + std::to_string(*v) + " is out of range");
      } else if (*v < 0 || uint64_t(*v) > uint64_t(std::numeric_limits<I>::max())) {
        fail(k, "value " + std::to_string(*v) + " is out of range");
      }
      return I(*v);
    }
    const auto f = n.value<double>();
    if (!f || std::floor(*f) != *f) fail(k, "must be an integer");
    if (*f < lowest || *f >= past_max) fail(k, "value " + std::to_string(*f) + " is out of range");
    return I(*f);
  }
  template <class T>
  T element(const std::string& k, const toml::node& n) const {
    if constexpr (std::is_integral<T>::value) {
      return to_int<T>(k, n);
    } else {
      auto v = n.value<double>();
      if (!v || !std::isfinite(*v)) fail(k, "must hold finite numbers");
      return T(*v);
    }
  }
  const toml::table& t_;
  std::string prefix_, source_;
  std::vector<std::string> known_;
};

// Every key of each section, listed once and used both to read and to write, so that the two
// cannot drift apart.
template <class F> void shape_fields(Shape& s, F&& f) {
  f("kind", s.kind), f("centre_mm", s.centre_mm), f("size_mm", s.size_mm), f("radius_mm", s.radius_mm);
  f("bore_radius_mm", s.bore_radius_mm), f("height_mm", s.height_mm), f("angle_deg", s.angle_deg);
}
template <class F> void marker_fields(Marker& m, F&& f) {
  f("centre_mm", m.centre_mm), f("radius_mm", m.radius_mm), f("mu_per_mm", m.mu_per_mm);
}
template <class F> void pore_fields(PorePopulation& q, F&& f) {
  f("type", q.type), f("porosity_pct", q.porosity_pct), f("median_diameter_um", q.median_diameter_um);
  f("spread", q.spread), f("min_diameter_um", q.min_diameter_um), f("thickness_um", q.thickness_um);
  f("aspect", q.aspect), f("layer_um", q.layer_um), f("pores_per_cluster", q.pores_per_cluster);
  f("cluster_radius_um", q.cluster_radius_um), f("open_count", q.open_count);
}
// The lack-of-fusion shape keys: always read, written only when not the defaults, so that the
// recipe.toml of every ellipsoid-only recipe (and its hash in run records) is as before.
template <class F> void pore_shape_fields(PorePopulation& q, F&& f) {
  f("shape", q.shape), f("lobes", q.lobes), f("lobe_scale", q.lobe_scale);
}
bool default_pore_shape(const PorePopulation& q) {
  const PorePopulation d;
  return q.shape == d.shape && q.lobes == d.lobes && q.lobe_scale == d.lobe_scale;
}
template <class F> void phantom_fields(Recipe& r, F&& f) {
  f("dims", r.dims), f("voxel_size_um", r.voxel_size_um), f("material", r.material), f("mu_per_mm", r.mu_per_mm);
  f("supersampling", r.supersampling), f("placement_budget", r.placement_budget);
}
template <class F> void scan_fields(Recipe& r, F&& f) {
  f("projections", r.projections), f("i0", r.i0), f("reference_projections", r.reference_projections);
  f("reference_i0", r.reference_i0), f("arc_deg", r.arc_deg), f("detector_bins", r.detector_bins);
  f("detector_subsamples", r.detector_subsamples), f("detector_blur_um", r.detector_blur_um);
  f("angular_blur", r.angular_blur), f("electronic_noise", r.electronic_noise), f("noise", r.noise);
  f("filter", r.filter), f("output_type", r.output_type), f("uint16_full_scale_mu", r.uint16_full_scale_mu);
}

template <class F> void pose_fields(ScanPose& p, F&& f) {
  f("projections", p.projections), f("translation_mm", p.translation_mm), f("rotation_deg", p.rotation_deg);
  f("voxel_size_um", p.voxel_size_um);
}

// Reads an array of tables [[key]] into items, each through its field list.
template <class T, class Fields>
void read_list(Reader& parent, const std::string& key, const std::string& prefix, const std::string& source,
               std::vector<T>& items, Fields fields) {
  if (const toml::array* a = parent.tables(key)) {
    items.clear();
    for (size_t i = 0; i < a->size(); ++i) {
      Reader rd(*a->get(i)->as_table(), prefix + "." + std::to_string(i), source);
      T item;
      fields(item, [&rd](const char* k, auto& v) { rd.get(k, v); });
      rd.finish();
      items.push_back(item);
    }
  }
}

Recipe from_table(const toml::table& t, const std::string& source) {
  Recipe r;
  Reader top(t, "", source);
  top.get("name", r.name);
  top.get("seed", r.seed);
  if (const toml::table* ph = top.table("phantom")) {
    Reader p(*ph, "phantom", source);
    phantom_fields(r, [&p](const char* k, auto& v) { p.get(k, v); });
    read_list(p, "shape", "phantom.shape", source, r.shapes, [](Shape& s, auto&& f) { shape_fields(s, f); });
    read_list(p, "marker", "phantom.marker", source, r.markers, [](Marker& m, auto&& f) { marker_fields(m, f); });
    p.finish();
  }
  read_list(top, "pores", "pores", source, r.pores, [](PorePopulation& q, auto&& f) {
    pore_fields(q, f);
    pore_shape_fields(q, f);
  });
  if (const toml::table* sc = top.table("scan")) {
    Reader s(*sc, "scan", source);
    scan_fields(r, [&s](const char* k, auto& v) { s.get(k, v); });
    read_list(s, "pose", "scan.pose", source, r.poses, [](ScanPose& p, auto&& f) { pose_fields(p, f); });
    s.finish();
  }
  top.finish();
  validate(r);
  return r;
}

toml::table parse_table(const std::string& text, const std::string& source) {
  try {
    return toml::parse(text, source);
  } catch (const toml::parse_error& e) {
    std::ostringstream os;
    os << source << ": TOML error at line " << e.source().begin.line << ": " << e.description();
    throw InputError(os.str());
  }
}

template <class T, size_t N>
toml::array arr(const std::array<T, N>& a) {
  toml::array out;
  for (auto v : a) out.push_back(v);
  return out;
}
template <class T>
toml::array arr(const std::vector<T>& a) {
  toml::array out;
  for (auto v : a) out.push_back(v);
  return out;
}

// Inserts `value` at a dotted path; numeric parts index arrays of tables (index == size appends).
void insert_path(toml::table& root, const std::string& key, toml::node&& value, const std::string& what) {
  std::vector<std::string> parts;
  std::stringstream ss(key);
  for (std::string p; std::getline(ss, p, '.');) parts.push_back(p);
  if (parts.empty() || std::any_of(parts.begin(), parts.end(), [](auto& p) { return p.empty(); }))
    throw InputError(what + ": key '" + key + "' is malformed");
  toml::node* cur = &root;
  for (size_t i = 0; i + 1 < parts.size(); ++i) {
    const std::string& p = parts[i];
    const bool next_is_index = std::all_of(parts[i + 1].begin(), parts[i + 1].end(), ::isdigit);
    if (toml::table* t = cur->as_table()) {
      if (!t->contains(p)) {
        if (next_is_index) t->insert(p, toml::array{});
        else t->insert(p, toml::table{});
      }
      cur = t->get(p);
    } else if (toml::array* a = cur->as_array()) {
      if (!std::all_of(p.begin(), p.end(), ::isdigit))
        throw InputError(what + ": key '" + key + "': '" + p + "' must be an index");
      const size_t idx = std::stoul(p);
      if (idx > a->size())
        throw InputError(what + ": key '" + key + "': index " + p + " skips entries (there are " +
                         std::to_string(a->size()) + ")");
      if (idx == a->size()) a->push_back(toml::table{});
      cur = a->get(idx);
    } else {
      throw InputError(what + ": key '" + key + "': '" + p + "' is a value, not a section");
    }
  }
  toml::table* t = cur->as_table();
  if (!t) throw InputError(what + ": key '" + key + "' does not name a section entry");
  t->insert_or_assign(parts.back(), std::move(value));
}

}  // namespace

std::vector<std::string> preset_names() {
  std::vector<std::string> names;
  for (const EmbeddedPreset& p : embedded_presets()) names.push_back(p.name);
  return names;
}

Recipe preset(const std::string& name) {
  for (const EmbeddedPreset& p : embedded_presets())
    if (name == p.name) return parse_recipe(p.toml, "preset " + name + " (synthetic/presets/" + name + ".toml)");
  const auto names = preset_names();
  std::string list;
  for (const std::string& n : names) list += (list.empty() ? "" : ", ") + n;
  const std::string near = closest_name(name, names);
  throw InputError("--preset '" + name + "' is not known; presets: " + list +
                   (near.empty() ? "" : " (did you mean " + near + "?)"));
}

Recipe parse_recipe(const std::string& text, const std::string& source) {
  return from_table(parse_table(text, source), source);
}

Recipe load_recipe(const std::string& path) { return parse_recipe(read_text_file(path, "recipe"), "recipe " + path); }

Recipe apply_overrides(const Recipe& r, const std::vector<std::string>& key_values) {
  if (key_values.empty()) return r;
  toml::table t = parse_table(to_toml(r), "recipe");
  for (const std::string& kv : key_values) {
    const auto eq = kv.find('=');
    if (eq == std::string::npos || eq == 0) throw InputError("--set '" + kv + "' must be key=value");
    const std::string key = kv.substr(0, eq);
    std::string val = kv.substr(eq + 1);
    if (val.find(',') != std::string::npos && val.front() != '[' && val.front() != '"') val = "[" + val + "]";
    toml::table one;
    try {
      one = toml::parse("v = " + val);
    } catch (const toml::parse_error&) {
      one = toml::table{{"v", val}};  // a bare string
    }
    insert_path(t, key, std::move(*one.get("v")), "--set " + kv);
  }
  std::ostringstream os;
  os << t;
  return parse_recipe(os.str(), "--set");
}

namespace {
template <class T> void put(toml::table& t, const char* k, const T& v) {
  if constexpr (std::is_same<T, uint64_t>::value) t.insert(k, int64_t(v));
  else if constexpr (std::is_arithmetic<T>::value || std::is_same<T, std::string>::value) t.insert(k, v);
  else t.insert(k, arr(v));
}
struct Writer {
  toml::table& t;
  template <class T> void operator()(const char* k, const T& v) const { put(t, k, v); }
};
}  // namespace

std::string to_toml(const Recipe& recipe) {
  Recipe r = recipe;  // the field lists take non-const references
  toml::table t, ph, sc;
  t.insert("name", r.name);
  t.insert("seed", int64_t(r.seed));
  phantom_fields(r, Writer{ph});
  toml::array shapes, markers, pores;
  for (Shape& s : r.shapes) {
    toml::table e;
    shape_fields(s, Writer{e});
    shapes.push_back(e);
  }
  for (Marker& m : r.markers) {
    toml::table e;
    marker_fields(m, Writer{e});
    markers.push_back(e);
  }
  for (PorePopulation& q : r.pores) {
    toml::table e;
    pore_fields(q, Writer{e});
    if (!default_pore_shape(q)) pore_shape_fields(q, Writer{e});
    pores.push_back(e);
  }
  ph.insert("shape", shapes);
  ph.insert("marker", markers);
  t.insert("phantom", ph);
  t.insert("pores", pores);
  scan_fields(r, Writer{sc});
  if (!r.poses.empty()) {  // written only when present: recipe.toml of unposed recipes is as before
    toml::array poses;
    for (ScanPose& p : r.poses) {
      toml::table e;
      pose_fields(p, Writer{e});
      poses.push_back(e);
    }
    sc.insert("pose", poses);
  }
  t.insert("scan", sc);
  std::ostringstream os;
  os << "# porebench synthetic-scan recipe: reproduces the phantom, its truth and its scans\n" << t << '\n';
  return os.str();
}

void validate(const Recipe& r) {
  auto bad = [](const std::string& key, const std::string& msg) { throw InputError("recipe: " + key + " " + msg); };
  auto num = [](double v) { return format_number(v, 6, nullptr); };
  for (int i = 0; i < 3; ++i)
    if (r.dims[i] < 8 || r.dims[i] > 4096) bad("phantom.dims", "= " + std::to_string(r.dims[i]) + " must be in 8..4096");
  if (!(r.voxel_size_um > 0)) bad("phantom.voxel_size_um", "= " + num(r.voxel_size_um) + " must be > 0");
  if (r.material == "custom") {
    if (!(r.mu_per_mm > 0)) bad("phantom.mu_per_mm", "must be > 0 for material custom");
  } else {
    material_default_mu(r.material);
    if (r.mu_per_mm < 0) bad("phantom.mu_per_mm", "= " + num(r.mu_per_mm) + " must be >= 0 (0 = material default)");
  }
  if (r.supersampling < 4 || r.supersampling > 16)
    bad("phantom.supersampling", "= " + std::to_string(r.supersampling) + " must be in 4..16 (samples per voxel edge)");
  if (r.placement_budget < 1) bad("phantom.placement_budget", "must be >= 1");
  if (r.shapes.empty() || r.shapes.size() > 8)
    bad("phantom.shape", "must list 1 to 8 part shapes (has " + std::to_string(r.shapes.size()) + ")");
  for (size_t i = 0; i < r.shapes.size(); ++i) {
    const Shape& s = r.shapes[i];
    const std::string k = "phantom.shape." + std::to_string(i);
    if (s.kind == "box") {
      for (double v : s.size_mm)
        if (!(v > 0)) bad(k + ".size_mm", "must be three lengths > 0 for a box");
    } else if (s.kind == "cylinder" || s.kind == "gear-blank") {
      if (!(s.radius_mm > 0)) bad(k + ".radius_mm", "= " + num(s.radius_mm) + " must be > 0");
      if (!(s.height_mm > 0)) bad(k + ".height_mm", "= " + num(s.height_mm) + " must be > 0");
      if (s.kind == "gear-blank" && !(s.bore_radius_mm > 0 && s.bore_radius_mm < s.radius_mm))
        bad(k + ".bore_radius_mm", "= " + num(s.bore_radius_mm) + " must be in (0, radius_mm)");
    } else {
      bad(k + ".kind", "= '" + s.kind + "' is not known; kinds: box, cylinder, gear-blank");
    }
  }
  for (size_t i = 0; i < r.markers.size(); ++i) {
    const std::string k = "phantom.marker." + std::to_string(i);
    if (!(r.markers[i].radius_mm > 0)) bad(k + ".radius_mm", "must be > 0");
    if (!(r.markers[i].mu_per_mm > 0)) bad(k + ".mu_per_mm", "must be > 0");
  }
  for (size_t i = 0; i < r.pores.size(); ++i) {
    const PorePopulation& q = r.pores[i];
    const std::string k = "pores." + std::to_string(i);
    if (q.type != "gas" && q.type != "lack-of-fusion" && q.type != "cluster")
      bad(k + ".type", "= '" + q.type + "' is not known; types: gas, lack-of-fusion, cluster");
    if (!(q.porosity_pct >= 0 && q.porosity_pct < 40))
      bad(k + ".porosity_pct", "= " + num(q.porosity_pct) + " must be in [0, 40)");
    if (!(q.median_diameter_um > 0)) bad(k + ".median_diameter_um", "= " + num(q.median_diameter_um) + " must be > 0");
    if (!(q.spread >= 0 && q.spread <= 2)) bad(k + ".spread", "= " + num(q.spread) + " must be in [0, 2]");
    if (q.min_diameter_um < 0) bad(k + ".min_diameter_um", "must be >= 0");
    if (!(q.thickness_um > 0)) bad(k + ".thickness_um", "must be > 0");
    if (!(q.aspect > 0 && q.aspect <= 1)) bad(k + ".aspect", "= " + num(q.aspect) + " must be in (0, 1]");
    if (!(q.layer_um > 0)) bad(k + ".layer_um", "must be > 0");
    if (q.pores_per_cluster < 1) bad(k + ".pores_per_cluster", "must be >= 1");
    if (!(q.cluster_radius_um > 0)) bad(k + ".cluster_radius_um", "must be > 0");
    if (q.open_count < 0) bad(k + ".open_count", "must be >= 0");
    if (q.shape != "ellipsoid" && q.shape != "irregular")
      bad(k + ".shape", "= '" + q.shape + "' is not known; shapes: ellipsoid, irregular");
    if (q.shape == "irregular" && q.type != "lack-of-fusion")
      bad(k + ".shape", "= 'irregular' applies to type lack-of-fusion only (this population is " + q.type + ")");
    if (q.lobes < 2 || q.lobes > 8) bad(k + ".lobes", "= " + std::to_string(q.lobes) + " must be in 2..8");
    if (!(q.lobe_scale > 0 && q.lobe_scale <= 1)) bad(k + ".lobe_scale", "= " + num(q.lobe_scale) + " must be in (0, 1]");
  }
  for (int n : r.projections)
    if (n < 1) bad("scan.projections", "= " + std::to_string(n) + " must be >= 1");
  if (r.reference_projections < 1)
    bad("scan.reference_projections", "= " + std::to_string(r.reference_projections) + " must be >= 1");
  if (r.i0.empty()) bad("scan.i0", "must hold at least one photon count");
  for (double v : r.i0)
    if (!(v > 0)) bad("scan.i0", "= " + num(v) + " must be > 0 (photons per bin and projection)");
  if (r.reference_i0 < 0) bad("scan.reference_i0", "= " + num(r.reference_i0) + " must be > 0 (or 0 = largest i0)");
  if (r.arc_deg != 180 && r.arc_deg != 360) bad("scan.arc_deg", "= " + num(r.arc_deg) + " must be 180 or 360");
  const double diag = std::sqrt(double(r.dims[0] * r.dims[0] + r.dims[1] * r.dims[1]));
  if (r.detector_bins != 0 && r.detector_bins < int(std::ceil(diag)) + 2)
    bad("scan.detector_bins", "= " + std::to_string(r.detector_bins) + " is narrower than the slice diagonal: needs >= " +
                                  std::to_string(int(std::ceil(diag)) + 2) + " (or 0 = automatic)");
  if (r.detector_subsamples < 1 || r.detector_subsamples > 8)
    bad("scan.detector_subsamples", "= " + std::to_string(r.detector_subsamples) + " must be in 1..8");
  if (r.detector_blur_um < 0) bad("scan.detector_blur_um", "must be >= 0");
  if (!(r.angular_blur >= 0 && r.angular_blur <= 1)) bad("scan.angular_blur", "= " + num(r.angular_blur) + " must be in [0, 1]");
  if (r.electronic_noise < 0) bad("scan.electronic_noise", "must be >= 0");
  try {
    parse_window(r.filter);  // the one list of filters (synthetic/fbp.cpp)
  } catch (const InputError& e) {
    bad("scan.filter", "= '" + r.filter + "': " + e.what());
  }
  for (size_t i = 0; i < r.poses.size(); ++i) {
    const ScanPose& p = r.poses[i];
    const std::string k = "scan.pose." + std::to_string(i);
    if (p.projections != 0 && std::find(r.projections.begin(), r.projections.end(), p.projections) == r.projections.end())
      bad(k + ".projections", "= " + std::to_string(p.projections) + " names no fast scan (scan.projections; 0 = all)");
    for (size_t j = 0; j < i; ++j)
      if (r.poses[j].projections == p.projections || r.poses[j].projections == 0 || p.projections == 0)
        bad(k + ".projections", "= " + std::to_string(p.projections) + ": scan.pose." + std::to_string(j) +
                                    " already poses these scans (one pose per projection count)");
    if (p.rotation_deg[0] != 0 || p.rotation_deg[1] != 0)
      bad(k + ".rotation_deg", "= [" + num(p.rotation_deg[0]) + ", " + num(p.rotation_deg[1]) + ", " +
                                   num(p.rotation_deg[2]) +
                                   "]: tilts about x and y are not simulated; give [0, 0, angle about z]");
    if (!(std::abs(p.rotation_deg[2]) <= 360)) bad(k + ".rotation_deg", "angle about z must be in [-360, 360]");
    if (!(p.voxel_size_um >= 0)) bad(k + ".voxel_size_um", "= " + num(p.voxel_size_um) + " must be > 0 (or 0 = the phantom's)");
  }
  if (r.output_type != "float32" && r.output_type != "uint16")
    bad("scan.output_type", "= '" + r.output_type + "' must be float32 or uint16");
  if (r.uint16_full_scale_mu < 0)
    bad("scan.uint16_full_scale_mu", "= " + num(r.uint16_full_scale_mu) +
                                         " must be >= 0 (the mu in 1/mm stored as 65535; 0 = 2 x the material mu)");
  // Sizes against the memory budget before anything is allocated (core/memory.hpp; harden stream):
  // the phantom's float volume, labels and scans (12 bytes per voxel, an estimate), and one slice's
  // sinogram and its filtered copy per thread (8 bytes per angle and bin).
  const uint64_t vox = saturating_product({uint64_t(r.dims[0]), uint64_t(r.dims[1]), uint64_t(r.dims[2])});
  check_memory(saturating_product({vox, 12}), "recipe: phantom.dims " + std::to_string(r.dims[0]) + " x " +
                                                  std::to_string(r.dims[1]) + " x " + std::to_string(r.dims[2]));
  const uint64_t bins = r.detector_bins ? uint64_t(r.detector_bins) : uint64_t(std::ceil(diag)) + 2;
  const uint64_t threads = std::max(1u, std::thread::hardware_concurrency());
  for (int n : r.projections)
    check_memory(saturating_product({uint64_t(n), bins, 8, threads}),
                 "recipe: scan.projections = " + std::to_string(n) + " x " + std::to_string(bins) + " detector bins");
  check_memory(saturating_product({uint64_t(r.reference_projections), bins, 8, threads}),
               "recipe: scan.reference_projections = " + std::to_string(r.reference_projections) + " x " +
                   std::to_string(bins) + " detector bins");
  // Diameters are drawn within +-3 spread of the median: a larger minimum could never be drawn.
  for (size_t i = 0; i < r.pores.size(); ++i) {
    const PorePopulation& q = r.pores[i];
    const double largest = q.median_diameter_um * std::exp(3 * q.spread);
    if (!(q.min_diameter_um <= largest))
      bad("pores." + std::to_string(i) + ".min_diameter_um",
          "= " + num(q.min_diameter_um) + " is above the largest diameter drawn (median x exp(3 spread) = " + num(largest) + ")");
  }
}

}  // namespace pb::synth
