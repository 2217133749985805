// Per-file geometry and reference alignment for paired suites (see pairs.hpp).
#include "suites/pairs.hpp"

#include <algorithm>
#include <filesystem>
#include <sstream>

#include "core/resample.hpp"
#include "suites/layout.hpp"

namespace pb::suite {

namespace fs = std::filesystem;

namespace {
std::string at(const toml::node& n) {
  std::ostringstream s;
  s << " (line " << n.source().begin.line << ")";
  return s.str();
}

std::string resolve(const std::string& base, const std::string& p) {
  if (p.empty() || fs::path(p).is_absolute()) return p;
  return (fs::path(base) / p).string();
}

std::array<double, 3> spacing3(const toml::node& n, const std::string& where) {
  const toml::array* a = n.as_array();
  std::array<double, 3> s{};
  if (!a || a->size() != 3) throw InputError(where + ": 'spacing_mm' must be a list of 3 numbers" + at(n));
  for (size_t i = 0; i < 3; ++i) {
    const auto v = a->get(i)->value<double>();
    if (!v || !(*v > 0) || !std::isfinite(*v))
      throw InputError(where + ": 'spacing_mm' values must be positive mm" + at(n));
    s[i] = *v;
  }
  return s;
}
}  // namespace

FileEntry parse_file_entry(const toml::node& n, const std::string& base_dir, const std::string& where,
                           bool check_exists, const std::vector<std::string>& extra_keys) {
  FileEntry e;
  if (const auto s = n.value<std::string>()) {
    e.path = resolve(base_dir, *s);
  } else if (const toml::table* t = n.as_table()) {
    for (const auto& [k, v] : *t) {
      const std::string key(k.str());
      if (key != "path" && key != "spacing_mm" && key != "raw" &&
          std::find(extra_keys.begin(), extra_keys.end(), key) == extra_keys.end()) {
        std::string known = "path, spacing_mm, raw";
        for (const auto& x : extra_keys) known += ", " + x;
        throw InputError(where + ": unknown key '" + key + "' (" + known + ")" + at(v));
      }
    }
    const toml::node* p = t->get("path");
    if (!p || !p->is_string()) throw InputError(where + ": 'path' (a string) is required" + at(n));
    e.path = resolve(base_dir, *p->value<std::string>());
    if (const toml::node* s = t->get("spacing_mm")) e.read.spacing_mm = spacing3(*s, where);
    if (const toml::node* r = t->get("raw")) {
      const toml::table* rt = r->as_table();
      if (!rt) throw InputError(where + ": 'raw' must be a table" + at(*r));
      for (const auto& [k, v] : *rt) {
        const std::string key(k.str());
        if (key != "dims" && key != "type" && key != "endian" && key != "header_bytes")
          throw InputError(where + " raw: unknown key '" + key + "' (dims, type, endian, header_bytes)" + at(v));
      }
      RawSpec spec;
      const toml::array* dims = rt->get("dims") ? rt->get("dims")->as_array() : nullptr;
      if (!dims || dims->size() != 3) throw InputError(where + " raw: 'dims' must be a list of 3 integers" + at(*r));
      for (size_t i = 0; i < 3; ++i) {
        const auto d = dims->get(i)->value<int64_t>();
        if (!d || *d <= 0) throw InputError(where + " raw: 'dims' must be positive integers" + at(*r));
        spec.dims[i] = *d;
      }
      const toml::node* ty = rt->get("type");
      if (!ty || !ty->is_string()) throw InputError(where + " raw: 'type' (uint8, uint16, int16, float32) is required" + at(*r));
      spec.type = parse_voxel_type(*ty->value<std::string>());
      const std::string endian = rt->get("endian") ? rt->get("endian")->value<std::string>().value_or("?") : "little";
      if (endian != "little" && endian != "big")
        throw InputError(where + " raw: 'endian' must be little or big, got '" + endian + "'" + at(*r));
      spec.big_endian = endian == "big";
      if (const toml::node* h = rt->get("header_bytes")) {
        const auto hb = h->value<int64_t>();
        if (!hb || *hb < 0) throw InputError(where + " raw: 'header_bytes' must be a non-negative integer" + at(*h));
        spec.header_bytes = uint64_t(*hb);
      }
      if (!e.read.spacing_mm) throw InputError(where + ": raw file " + e.path + " needs 'spacing_mm'" + at(*r));
      spec.spacing_mm = *e.read.spacing_mm;
      e.read.raw = spec;
    }
  } else {
    throw InputError(where + ": must be a path or a table { path = ..., spacing_mm = [...], raw = {...} }" + at(n));
  }
  if (!e.read.spacing_mm && spacing_unknown(e.path))
    throw InputError(where + ": " + e.path + " stores no reliable voxel size (TIFF, raw or .npy); give 'spacing_mm'" + at(n));
  if (check_exists && !fs::exists(e.path)) throw InputError(where + ": file not found: " + e.path + at(n));
  return e;
}

AlignMode parse_align_mode(const std::string& s, const std::string& where) {
  if (s == "none") return AlignMode::none;
  if (s == "auto") return AlignMode::auto_select;
  if (s == "markers") return AlignMode::markers;
  if (s == "intensity") return AlignMode::intensity;
  throw InputError(where + ": align = '" + s + "' unknown (auto, markers, intensity, none)");
}

const char* align_mode_name(AlignMode m) {
  switch (m) {
    case AlignMode::none: return "none";
    case AlignMode::auto_select: return "auto";
    case AlignMode::markers: return "markers";
    case AlignMode::intensity: return "intensity";
  }
  return "?";
}

SimilarityTransform read_transform_json(const std::string& path) {
  const nlohmann::ordered_json j = read_json_file(path);
  const nlohmann::ordered_json* t = &j;
  if (j.contains("registration") && j["registration"].is_object() && j["registration"].contains("transform"))
    t = &j["registration"]["transform"];
  else if (j.contains("transform"))
    t = &j["transform"];
  SimilarityTransform T;
  try {
    const auto& R = t->at("rotation");
    const auto& tr = t->at("translation_mm");
    if (!R.is_array() || R.size() != 3 || !tr.is_array() || tr.size() != 3) throw std::runtime_error("shape");
    for (int r = 0; r < 3; ++r) {
      if (!R[size_t(r)].is_array() || R[size_t(r)].size() != 3) throw std::runtime_error("shape");
      for (int k = 0; k < 3; ++k) T.R(r, k) = R[size_t(r)][size_t(k)].get<double>();
      T.t[r] = tr[size_t(r)].get<double>();
    }
    T.scale = t->value("scale", 1.0);
  } catch (const std::exception&) {
    throw InputError("transform " + path + ": needs 'rotation' (3 x 3 numbers) and 'translation_mm' (3 numbers), "
                     "at the top, in 'transform' or in 'registration.transform' (the T.json of porebench align)");
  }
  const double det = T.R.determinant();
  if (!(std::abs(det - 1) < 1e-3) || !((T.R * T.R.transpose() - Eigen::Matrix3d::Identity()).norm() < 1e-3) ||
      !(T.scale > 0) || !T.t.allFinite())
    throw InputError("transform " + path + ": 'rotation' is not a proper rotation (det " + std::to_string(det) +
                     ") or 'scale' is not positive");
  return T;
}

AlignedReference apply_known_transform(const VolumeF& fast, const Mask& ref_pores, const SimilarityTransform& T,
                                       const std::string& source) {
  AlignedReference out;
  out.T = T;
  out.record["align"] = "given";
  out.record["resampled"] = {{"from", describe(ref_pores.geometry())}, {"onto", describe(fast.geometry())},
                             {"grid", "the fast scan's"}, {"mask", "nearest neighbour"}, {"grey", "linear"}};
  out.record["registration"] = {{"method", "given"}, {"source", source}, {"dof", T.scale == 1.0 ? "rigid" : "similarity"},
                                {"converged", true}, {"transform", to_json(T)}, {"markers", {{"rms_mm", nullptr}}}};
  out.record["shift_check"] = nullptr;
  out.pores = resample_nearest(ref_pores, fast.geometry(), T);
  return out;
}

AlignedReference align_reference(AlignMode mode, const VolumeF& fast, const std::string& fast_name,
                                 const VolumeF* ref_scan, const std::string& ref_name, const Mask& ref_pores,
                                 const RegistrationOptions& base) {
  if (ref_scan) check_same_geometry(ref_scan->geometry(), ref_name, ref_pores.geometry(), ref_name + " (pores)");
  AlignedReference out;
  auto& rec = out.record;
  rec["align"] = align_mode_name(mode);
  const Geometry& fg = fast.geometry();
  const bool same = same_grid(ref_pores.geometry(), fg);
  rec["resampled"] = same ? nlohmann::ordered_json() : nlohmann::ordered_json{
      {"from", describe(ref_pores.geometry())}, {"onto", describe(fg)}, {"grid", "the fast scan's"},
      {"mask", "nearest neighbour"}, {"grey", "linear"}};
  if (mode == AlignMode::none) {
    rec["registration"] = nullptr;
    const SimilarityTransform identity;
    out.pores = same ? ref_pores : resample_nearest(ref_pores, fg, identity);
    if (!ref_scan) {
      rec["shift_check"] = nullptr;
      out.warnings.push_back("align = \"none\" with a reference mask only: the misalignment alarm needs a reference scan");
      return out;
    }
    const VolumeF on_fast = same ? VolumeF() : resample_linear(*ref_scan, fg, identity);
    const ShiftEstimate e = estimate_shift(fast, same ? *ref_scan : on_fast);
    rec["shift_check"] = {{"method", "phase correlation"},
                          {"shift_voxel", {e.shift_vox.x(), e.shift_vox.y(), e.shift_vox.z()}},
                          {"magnitude_voxel", e.magnitude_vox},
                          {"peak", e.peak},
                          {"downsample", e.downsample}};
    if (e.magnitude_vox > 0.5) {
      std::ostringstream s;
      s.precision(3);
      s << ref_name << " is shifted " << e.magnitude_vox << " voxels against " << fast_name
        << " (above 0.5 voxel): set align = \"auto\" for this scan";
      out.warnings.push_back(s.str());
    }
    return out;
  }
  if (!ref_scan)
    throw InputError("align = \"" + std::string(align_mode_name(mode)) + "\" for " + fast_name +
                     " needs a reference scan (reference_scan): a mask alone cannot be registered");
  RegistrationOptions o = base;
  o.method = mode == AlignMode::markers ? RegMethod::markers
             : mode == AlignMode::intensity ? RegMethod::intensity
                                            : RegMethod::auto_select;
  const RegistrationResult r = register_volumes(*ref_scan, fast, o);
  rec["registration"] = to_json(r);
  if (!r.converged) {
    std::ostringstream s;
    s << "registration of " << ref_name << " onto " << fast_name << " (" << r.method << ", " << r.dof
      << ") did not converge after " << r.iterations << " iterations: " << r.stop_reason
      << "; not scored (try align = \"markers\" or another dof)";
    throw RegistrationFailed(s.str());
  }
  for (const auto& w : r.warnings) out.warnings.push_back(fast_name + ": " + w);
  rec["shift_check"] = nullptr;
  out.T = r.T;
  out.pores = resample_nearest(ref_pores, fg, r.T);
  return out;
}

}  // namespace pb::suite
