// Paired datasets of a suite: parsing, preflight and preparation (see paired.hpp).
#include "suites/paired.hpp"

#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <set>
#include <sstream>

#include "core/dicom.hpp"
#include "core/error.hpp"
#include "core/histogram.hpp"
#include "core/io.hpp"
#include "core/io_header.hpp"
#include "core/resample.hpp"
#include "core/sha256.hpp"
#include "core/toml_keys.hpp"
#include "methods/pores.hpp"
#include "methods/registry.hpp"
#include "metrics/staple.hpp"
#include "suites/layout.hpp"
#include "suites/pairs.hpp"

namespace fs = std::filesystem;

namespace pb::suite {

namespace {

std::string resolve(const std::string& base_dir, const std::string& p) {
  if (p.empty() || fs::path(p).is_absolute()) return p;
  return (fs::path(base_dir) / p).lexically_normal().string();
}

std::string line_of(const toml::node& n) { return " (line " + std::to_string(n.source().begin.line) + ")"; }

// SHA-256 of a file; a TIFF folder is named as such.
std::string file_sha256(const std::string& path) {
  std::error_code ec;
  return fs::is_directory(path, ec) ? std::string("(a folder of slices: not hashed)") : sha256_file(path);
}

std::string list_text(const std::array<double, 3>& a) {
  std::ostringstream s;
  s.precision(6);
  s << "[" << a[0] << ", " << a[1] << ", " << a[2] << "]";
  return s.str();
}

// A file entry (path or table) at key `key` of t; empty FileSpec when absent.
FileSpec file_at(const toml::table& t, const std::string& key, const std::string& base, const std::string& where,
                 const FailAt& fail, const std::vector<std::string>& extra = {}) {
  const toml::node* n = t.get(key);
  if (!n) return {};
  try {
    FileSpec f = parse_file_entry(*n, base, where + " " + key, false, extra);
    f.where = key + line_of(*n);
    return f;
  } catch (const InputError& e) {
    fail(n->source(), e.what());
    throw;
  }
}

int int_at(const toml::table& t, const std::string& key, const std::string& where, const FailAt& fail, int lo, int hi,
           int def) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  const auto v = n->value_exact<int64_t>();
  if (!v || *v < lo || *v > hi) {
    std::ostringstream s;
    s << where << ": '" << key << "' must be an integer in [" << lo << ", " << hi << "]";
    fail(n->source(), s.str());
  }
  return int(*v);
}

std::string str_at(const toml::table& t, const std::string& key, const std::string& where, const FailAt& fail) {
  const toml::node* n = t.get(key);
  if (!n) return "";
  if (!n->is_string()) fail(n->source(), where + ": '" + key + "' must be a string");
  return std::string(*n->value<std::string_view>());
}

bool is_header_file(const std::string& path) { return has_checked_header(path); }

// The geometry of a file as it will be read: from the checked header when it has one (the data
// size checked too), else by reading it (TIFF, raw: the size and the finite check come with it).
Geometry file_geometry(const FileSpec& f, const std::string& field, bool scan) {
  std::error_code ec;
  if (!fs::exists(f.path, ec)) throw InputError(field + ": file not found: " + f.path);
  if (!fs::is_directory(f.path, ec) && ::access(f.path.c_str(), R_OK) != 0)
    throw InputError(field + ": cannot read " + f.path + ": " + std::strerror(errno));
  const bool dicom = is_dicom(f.path);  // a series folder or file: its headers state the geometry
  if ((is_header_file(f.path) || dicom) && f.read.raw)
    throw InputError(field + ": conflicting geometry: 'raw' given for " + f.path +
                     ", whose header states its geometry; drop 'raw' (raw is for headerless files)");
  auto check_spacing = [&](const std::array<double, 3>& header) {
    if (f.read.spacing_mm)
      for (int i = 0; i < 3; ++i)
        if (std::abs((*f.read.spacing_mm)[size_t(i)] - header[size_t(i)]) > 1e-6 * header[size_t(i)])
          throw InputError(field + ": conflicting geometry: spacing_mm = " + list_text(*f.read.spacing_mm) +
                           " but the header of " + f.path + " says " + list_text(header) +
                           "; drop 'spacing_mm' (or correct the file)");
  };
  if (dicom) {
    ReadOptions ro = f.read;
    ro.spacing_mm.reset();
    try {
      try {
        const Geometry g = read_volume(f.path, ro).geometry();
        check_spacing(g.spacing_mm);
        return g;
      } catch (const DicomGeometryMissing&) {
        if (!f.read.spacing_mm) throw;  // refused naming the file and the tag (core/dicom.hpp)
        return read_volume(f.path, f.read).geometry();  // headers without a voxel size: spacing_mm is the only one
      }
    } catch (const InputError& e) {
      if (std::string(e.what()).rfind(field, 0) == 0) throw;
      throw InputError(field + ": " + e.what());
    }
  }
  if (is_header_file(f.path)) {
    const VolumeHeader h = check_volume_file(f.path);
    check_spacing(h.spacing_mm);
    if (!(scan && h.type == VoxelType::f32)) {  // integer voxels are always finite
      Geometry g;
      g.dims = h.dims;
      g.spacing_mm = h.spacing_mm;
      return g;
    }
  }
  try {
    return read_volume(f.path, f.read).geometry();  // refuses non-finite voxels and short raw files
  } catch (const InputError& e) {
    throw InputError(field + ": " + e.what());
  }
}

// reference_consensus = ["otsu", { name = "sauvola", label = "sauvola-31", params = { window = 31 } }, ...]:
// entries in the form of the suite's [[method]] entries, one parameter set each (no grid), at
// least two, labels unique.
std::vector<RaterSpec> parse_raters(const toml::node& n, const std::string& where, const FailAt& fail) {
  const toml::array* a = n.as_array();
  if (!a || a->size() < 2)
    fail(n.source(), where + ": 'reference_consensus' must be a list of at least two method entries (a method name, or "
                             "{ name = ..., label = ..., params = { ... } }), got " +
                         (a ? std::to_string(a->size()) + " entr" + (a->size() == 1 ? "y" : "ies") : std::string("no list")));
  std::vector<RaterSpec> out;
  std::set<std::string> labels;
  for (size_t i = 0; i < a->size(); ++i) {
    const toml::node& e = *a->get(i);
    const std::string w = where + " reference_consensus[" + std::to_string(i + 1) + "]";
    RaterSpec r;
    if (const auto s = e.value_exact<std::string>()) {
      r.name = *s;
    } else if (const toml::table* et = e.as_table()) {
      if (const auto u = first_unknown_key(*et, {"name", "label", "params"}))
        fail(u->where, w + ": unknown key '" + u->key + "' (name, label, params)" +
                           (u->near.empty() ? "" : " (did you mean '" + u->near + "'?)"));
      r.name = str_at(*et, "name", w, fail);
      if (r.name.empty()) fail(e.source(), w + ": 'name' (the method) is required");
      r.label = str_at(*et, "label", w, fail);
      if (const toml::node* p = et->get("params")) {
        const toml::table* pt = p->as_table();
        if (!pt) fail(p->source(), w + ": 'params' must be a table");
        for (auto&& [k, v] : *pt) {
          const std::string key(k.str());
          std::string text;
          if (auto sv = v.value_exact<std::string>()) text = *sv;
          else if (auto iv = v.value_exact<int64_t>()) text = std::to_string(*iv);
          else if (auto dv = v.value_exact<double>()) {
            std::ostringstream ss;
            ss.precision(12);
            ss << *dv;
            text = ss.str();
          } else if (auto bv = v.value_exact<bool>()) text = *bv ? "true" : "false";
          else
            fail(v.source(), w + ": parameter '" + key + "' must be one string, number or boolean (a rater runs one "
                                 "parameter set, not a grid)");
          r.params.push_back(key + "=" + text);
        }
      }
    } else {
      fail(e.source(), w + ": must be a method name or a table { name, label, params }");
    }
    if (r.label.empty()) r.label = r.name;
    try {
      parse_params(Registry::instance().get(r.name), r.params);
    } catch (const InputError& err) {
      fail(e.source(), w + ": method '" + r.name + "': " + err.what());
    }
    if (!labels.insert(r.label).second)
      fail(e.source(), w + ": rater label '" + r.label + "' is used twice (give each rater a 'label')");
    out.push_back(r);
  }
  return out;
}

// How a reference segmentation is made again on a fast scan's grid from the reference scan
// resampled there linearly ("grey" resampling): a method that reports one threshold is re-applied
// at it (its pre-filters and pore options as they were, the last stage replaced by "manual"); any
// other (local thresholds, region growing, neural) is re-run there with its parameters, sizes in
// voxels as given. A predictions method reads files made elsewhere and cannot be: no info (its
// mask is resampled by nearest neighbour).
struct Reapply {
  const MethodInfo* info = nullptr;
  ParamValues params;
  std::string text;  // what is done, for the record
};
Reapply reapply_for(const MethodInfo& m, const ParamValues& pv, const MethodOutput& out) {
  Reapply r;
  if (m.family == "predictions") return r;
  const auto it = std::find_if(out.chosen.begin(), out.chosen.end(), [](const auto& kv) { return kv.first == "threshold"; });
  if (it == out.chosen.end()) {
    std::string given;
    for (const auto& [k, v] : pv.text()) given += (given.empty() ? "" : ", ") + k + "=" + v;
    r.info = &m;
    r.params = pv;
    r.text = m.name + " re-run there with its parameters (" + (given.empty() ? "defaults" : given) +
             "; sizes in voxels of that grid)";
    return r;
  }
  const size_t plus = m.name.rfind('+');
  const MethodInfo& manual = Registry::instance().get(plus == std::string::npos ? "manual" : m.name.substr(0, plus) + "+manual");
  std::ostringstream t;
  t.precision(17);
  t << it->second;
  std::vector<std::string> kv = {"threshold=" + t.str()};
  for (const auto& spec : manual.params)
    if (spec.name != "threshold" && pv.text().count(spec.name)) kv.push_back(spec.name + "=" + pv.text().at(spec.name));
  r.info = &manual;
  r.params = parse_params(manual, kv);
  r.text = m.name + " re-applied there at threshold " + t.str() + " (chosen on the reference scan)";
  return r;
}

// A STAPLE consensus made again on another grid: each rater's mask there (Reapply), fused by
// STAPLE's E-step with the performance parameters estimated on the reference grid (staple_fuse).
struct ConsensusRule {
  std::vector<Reapply> raters;
  std::vector<double> sensitivity, specificity;
  double prior = 0, threshold = 0.5;
  bool possible() const {
    return !raters.empty() && std::all_of(raters.begin(), raters.end(), [](const Reapply& r) { return r.info; });
  }
};

// The consensus reference: each rater run on the reference scan, combined by STAPLE (Warfield, Zou
// & Wells 2004, IEEE TMI 23(7):903-921) over the whole reference volume, W >= 0.5 the reference
// pores. The record keeps each rater's STAPLE sensitivity and specificity and the iterations.
Mask consensus_reference(const DatasetSpec& d, const VolumeF& ref_scan, const Mask* part, VoxelType type, Json& record,
                         ConsensusRule& rule, const LogFn& log) {
  constexpr double threshold = 0.5;
  std::vector<Mask> masks;
  Json raters = Json::array();
  for (const RaterSpec& r : d.reference_consensus) {
    const MethodInfo& m = Registry::instance().get(r.name);
    const ParamValues pv = parse_params(m, r.params);
    if (log) log("dataset '" + d.name + "': reference rater '" + r.label + "' (" + m.name + ") on " + d.reference_scan);
    MethodOutput out = run_method(m, pv, MethodInput{ref_scan, part, type});
    rule.raters.push_back(reapply_for(m, pv, out));
    Json chosen = Json::object();
    for (const auto& [k, v] : out.chosen) chosen[k] = v;
    std::string given;
    for (const auto& kv : r.params) given += (given.empty() ? "" : ", ") + kv;
    raters.push_back({{"label", r.label}, {"method", m.name}, {"given", given.empty() ? "defaults" : given},
                      {"params", pv.text()}, {"chosen", chosen},
                      {"pore_voxels", count_nonzero(out.pores)}});
    masks.push_back(std::move(out.pores));
  }
  std::vector<const Mask*> in;
  std::vector<std::string> names;
  for (size_t i = 0; i < masks.size(); ++i) in.push_back(&masks[i]), names.push_back("reference_consensus[" + std::to_string(i + 1) + "] (" + d.reference_consensus[i].label + ")");
  StapleResult st = staple(in, names, threshold);
  rule.sensitivity = st.sensitivity, rule.specificity = st.specificity, rule.prior = st.prior, rule.threshold = threshold;
  for (size_t i = 0; i < masks.size(); ++i) {
    raters[i]["sensitivity"] = st.sensitivity[i];
    raters[i]["specificity"] = st.specificity[i];
  }
  std::vector<std::string> warnings;
  if (!st.converged)
    warnings.push_back("STAPLE did not converge in " + std::to_string(st.iterations) +
                       " iterations: the consensus is the last estimate");
  if (log) {
    std::ostringstream s;
    s << "dataset '" << d.name << "': STAPLE consensus of " << masks.size() << " raters: " << st.consensus_voxels
      << " pore voxels after " << st.iterations << " iterations";
    log(s.str());
    for (const auto& w : warnings) log("warning: dataset '" + d.name + "': " + w);
  }
  record = {{"scan", d.reference_scan}, {"sha256", file_sha256(d.reference_scan)},
            {"consensus", {{"method", "STAPLE"},
                           {"source", "Warfield, Zou & Wells (2004) Simultaneous truth and performance level estimation "
                                      "(STAPLE). IEEE Trans. Med. Imaging 23(7):903-921"},
                           {"threshold", threshold}, {"over", "the whole reference volume"},
                           {"prior", st.prior}, {"iterations", st.iterations}, {"converged", st.converged},
                           {"pore_voxels", st.consensus_voxels}, {"raters", raters}, {"warnings", warnings}}},
            {"projections", d.reference_projections}};
  return std::move(st.consensus);
}

}  // namespace

namespace {

// The older form's geometry (spacing_mm, raw) given once for the scan and the reference scan:
// into d.read. Returns the node that gave it (its source for later messages), nullptr if none.
const toml::node* parse_shared_geometry(const toml::table& t, const std::string& base, const std::string& where,
                                        const FailAt& fail, DatasetSpec& d) {
  const toml::node* dsp = t.get("spacing_mm");
  const toml::node* draw = t.get("raw");
  if (!dsp && !draw) return nullptr;
  toml::table g;
  g.insert("path", "dataset-level");
  if (dsp) dsp->is_array() ? g.insert("spacing_mm", *dsp->as_array()) : g.insert("spacing_mm", "not a list");
  if (draw) draw->is_table() ? g.insert("raw", *draw->as_table()) : g.insert("raw", "not a table");
  try {
    d.read = parse_file_entry(g, base, where, false).read;
  } catch (const InputError& e) {
    fail((dsp ? dsp : draw)->source(), e.what());
  }
  return dsp ? dsp : draw;
}

// reference_params: one "key=value" string or a list of them, checked against reference_method.
void parse_reference_params(const toml::table& t, const std::string& where, const FailAt& fail, DatasetSpec& d) {
  if (const toml::node* n = t.get("reference_params")) {
    if (n->is_string()) d.reference_params.push_back(std::string(*n->value<std::string_view>()));
    else if (const toml::array* a = n->as_array()) {
      for (const auto& e : *a) {
        if (!e.is_string()) fail(e.source(), where + ": 'reference_params' entries are strings \"key=value\"");
        d.reference_params.push_back(std::string(*e.value<std::string_view>()));
      }
    } else {
      fail(n->source(), where + ": 'reference_params' must be a list of \"key=value\" strings");
    }
  }
  if (!d.reference_method.empty()) {
    try {
      parse_params(Registry::instance().get(d.reference_method), d.reference_params);
    } catch (const InputError& e) {
      fail(t.get("reference_method")->source(), where + ": reference_method '" + d.reference_method + "': " + e.what());
    }
  }
}

// The reference: a mask, or a scan with the method (or the consensus of raters) that segments it;
// its resampling, label and projections, and the part mask. Returns whether it is a scan.
bool parse_reference(const toml::table& t, const std::string& base, const std::string& where, const FailAt& fail,
                     bool shared_geometry, DatasetSpec& d) {
  const bool has_mask = t.get("reference_mask"), has_scan = t.get("reference_scan");
  if (has_mask == has_scan) fail(t.source(), where + ": give exactly one of 'reference_mask' and 'reference_scan'");
  const std::string rkey = has_scan ? "reference_scan" : "reference_mask";
  d.reference_file = file_at(t, rkey, base, where, fail);
  if (has_scan && shared_geometry) {
    if (t.get(rkey)->is_table())
      fail(t.get(rkey)->source(), where + ": conflicting geometry: 'spacing_mm'/'raw' are given for the dataset and " + rkey +
                                      " is a table; give the geometry in each file entry");
    d.reference_file.read = d.read;
  }
  (has_scan ? d.reference_scan : d.reference_mask) = d.reference_file.path;
  d.reference_method = str_at(t, "reference_method", where, fail);
  if (const toml::node* n = t.get("reference_consensus")) {
    if (!has_scan)
      fail(n->source(), where + ": 'reference_consensus' segments a 'reference_scan'; a reference_mask is used as it is");
    if (t.get("reference_method") || t.get("reference_params"))
      fail(n->source(), where + ": give 'reference_method' (one method) or 'reference_consensus' (a STAPLE consensus of "
                                "several), not both");
    d.reference_consensus = parse_raters(*n, where, fail);
  }
  if (has_scan && d.reference_method.empty() && d.reference_consensus.empty())
    fail(t.source(), where + ": 'reference_scan' needs 'reference_method' (the method that segments it) or "
                             "'reference_consensus' (several methods, combined by STAPLE)");
  if (!has_scan && !d.reference_method.empty())
    fail(t.get("reference_method")->source(), where + ": 'reference_method' is for a 'reference_scan'; a reference_mask is used as it is");
  parse_reference_params(t, where, fail, d);
  if (const toml::node* n = t.get("reference_resample")) {
    d.reference_resample = str_at(t, "reference_resample", where, fail);
    if (d.reference_resample != "grey" && d.reference_resample != "mask")
      fail(n->source(), where + ": reference_resample = '" + d.reference_resample + "' unknown (grey, mask)");
    if (!has_scan && d.reference_resample == "grey")
      fail(n->source(), where + ": reference_resample = 'grey' needs a 'reference_scan' (a reference mask is resampled as a mask)");
  }
  d.reference_label = int_at(t, "reference_label", where, fail, -1, 65535, -1);
  if (d.reference_label >= 0 && !has_mask)
    fail(t.get("reference_label")->source(), where + ": 'reference_label' is for a 'reference_mask'");
  d.reference_projections = int_at(t, "reference_projections", where, fail, 0, 1000000, 0);
  d.part_file = file_at(t, "part_mask", base, where, fail);
  d.part_mask = d.part_file.path;
  return has_scan;
}

// An align value `a` given at `at` (in `w`): a known mode, and none without a reference scan.
void check_align(const std::string& a, const toml::node& at, const std::string& w, bool has_scan, const FailAt& fail) {
  try {
    const AlignMode m = parse_align_mode(a, w);
    if (m != AlignMode::none && !has_scan)
      fail(at.source(), w + ": align = \"" + a + "\" needs a 'reference_scan': a reference mask alone cannot be registered (align = \"none\")");
  } catch (const InputError& e) {
    fail(at.source(), e.what());
  }
}

// A scan entry's i0 (exposure or dose, > 0) and i0_unit (a short unit name, only with i0).
void parse_i0(const toml::table& st, const std::string& w, const FailAt& fail, PairedScanSpec& s) {
  if (const toml::node* n = st.get("i0")) {
    const auto v = n->value<double>();
    if (!v || !(*v > 0) || !std::isfinite(*v)) fail(n->source(), w + ": 'i0' (exposure or dose) must be a positive number");
    s.i0 = *v;
  }
  if (const toml::node* n = st.get("i0_unit")) {
    const std::string u = str_at(st, "i0_unit", w, fail);
    const auto b = u.find_first_not_of(" \t"), e2 = u.find_last_not_of(" \t");
    s.i0_unit = b == std::string::npos ? "" : u.substr(b, e2 - b + 1);
    if (s.i0_unit.empty())
      fail(n->source(), w + ": 'i0_unit' = '" + u + "' is empty: name the unit of 'i0' (e.g. \"mAs\") or leave the key out");
    if (s.i0_unit.size() > 32 || std::any_of(s.i0_unit.begin(), s.i0_unit.end(), [](unsigned char c) { return c < 0x20 || c == 0x7f; }))
      fail(n->source(), w + ": 'i0_unit' = '" + s.i0_unit + "' must be a short unit name (at most 32 characters, no control characters)");
    if (!st.get("i0")) fail(n->source(), w + ": 'i0_unit' = '" + s.i0_unit + "' without 'i0' (the exposure or dose it is the unit of)");
  }
}

// Entry i (0-based) of 'scans', after the entries already in d.scans: its file, projections,
// label (unique in the dataset, a file token), i0 (one unit across the dataset), align or transform.
PairedScanSpec parse_scan_entry(const toml::node& e, size_t i, const std::string& base, const std::string& where,
                                const FailAt& fail, const std::string& align, bool has_scan, const DatasetSpec& d,
                                std::set<std::string>& labels) {
  const std::string w = where + " scans[" + std::to_string(i + 1) + "]";
  PairedScanSpec s;
  try {
    s.file = parse_file_entry(e, base, w, false, {"label", "projections", "i0", "i0_unit", "align", "transform"});
  } catch (const InputError& err) {
    fail(e.source(), err.what());
  }
  s.file.where = w;
  s.align = align;
  if (const toml::table* st = e.as_table()) {
    s.projections = int_at(*st, "projections", w, fail, 0, 1000000, 0);
    s.label = str_at(*st, "label", w, fail);
    parse_i0(*st, w, fail, s);
    if (const toml::node* n = st->get("align")) {
      s.align = str_at(*st, "align", w, fail);
      check_align(s.align, *n, w, has_scan, fail);
    }
    if (const toml::node* n = st->get("transform")) {
      if (st->get("align")) fail(n->source(), w + ": give 'align' or a known 'transform', not both");
      s.transform = resolve(base, str_at(*st, "transform", w, fail));
      s.align = "none";
    }
  }
  if (s.label.empty()) s.label = s.projections > 0 ? "scan-" + std::to_string(s.projections) + "p" : "scan-" + std::to_string(i + 1);
  if (file_token(s.label) != s.label)
    fail(e.source(), w + ": label '" + s.label + "' must be letters, digits, '-', '_' or '.' (it names files)");
  if (!labels.insert(s.label).second)
    fail(e.source(), w + ": label '" + s.label + "' is used twice in the dataset (give each scan a 'label')");
  s.file.where = "scans[" + std::to_string(i + 1) + "] (" + s.label + ", line " + std::to_string(e.source().begin.line) + ")";
  // The dose axis has one unit: every scan that gives 'i0' gives the same 'i0_unit' (or none does).
  if (s.i0 > 0)
    for (const PairedScanSpec& o : d.scans)
      if (o.i0 > 0 && o.i0_unit != s.i0_unit)
        fail(e.source(), w + ": i0_unit = '" + s.i0_unit + "' but " + o.file.where + " has i0_unit = '" + o.i0_unit +
                             "': the scans of a dataset share one unit of 'i0'");
  return s;
}

// The series: one 'scan' (the older form, which may share the dataset-level geometry) or a list
// 'scans' of file entries.
void parse_series(const toml::table& t, const std::string& base, const std::string& where, const FailAt& fail,
                  const toml::node* shared_at, const std::string& align, bool has_scan, DatasetSpec& d) {
  const toml::node* one = t.get("scan");
  const toml::node* many = t.get("scans");
  if (bool(one) == bool(many)) fail(t.source(), where + ": give exactly one of 'scans' (the fast scans, a list) and 'scan'");
  if (one) {
    PairedScanSpec s;
    s.label = "scan";
    s.file = file_at(t, "scan", base, where, fail);
    if (shared_at) {
      if (one->is_table())
        fail(one->source(), where + ": conflicting geometry: 'spacing_mm'/'raw' are given for the dataset and 'scan' is "
                                    "a table; give the geometry in each file entry");
      s.file.read = d.read;
    }
    s.projections = int_at(t, "projections", where, fail, 0, 1000000, 0);
    s.align = align;
    s.file.where = "scan" + line_of(*one);
    d.scan = s.file.path;
    d.projections = s.projections;
    d.scans.push_back(s);
    return;
  }
  if (t.get("projections"))
    fail(t.get("projections")->source(), where + ": 'projections' belongs to each entry of 'scans'");
  if (shared_at)
    fail(shared_at->source(), where + ": dataset-level 'spacing_mm'/'raw' go with 'scan'; with 'scans' give them in each entry");
  const toml::array* a = many->as_array();
  if (!a || a->empty()) fail(many->source(), where + ": 'scans' must be a non-empty list of file entries");
  std::set<std::string> labels;
  for (size_t i = 0; i < a->size(); ++i)
    d.scans.push_back(parse_scan_entry(*a->get(i), i, base, where, fail, align, has_scan, d, labels));
  d.scan = d.scans.front().file.path;
}

}  // namespace

void parse_paired_dataset(const toml::table& t, const std::string& base, const std::string& where, const FailAt& fail,
                          DatasetSpec& d) {
  static const std::vector<std::string> keys = {"name", "kind", "scan", "scans", "reference_mask", "reference_label",
                                                "reference_scan", "reference_method", "reference_params", "part_mask",
                                                "projections", "reference_projections", "raw", "spacing_mm", "align",
                                                "reference_consensus", "reference_resample"};
  if (const auto u = first_unknown_key(t, keys))
    fail(u->where, "unknown key '" + u->key + "' in " + where + (u->near.empty() ? "" : " (did you mean '" + u->near + "'?)"));
  d.kind = DatasetSpec::paired;
  const toml::node* shared_at = parse_shared_geometry(t, base, where, fail, d);
  const bool has_scan = parse_reference(t, base, where, fail, shared_at != nullptr, d);
  // align: the dataset's default, each scan may set its own.
  std::string align = has_scan ? "auto" : "none";
  if (t.get("align")) align = str_at(t, "align", where, fail);
  if (const toml::node* n = t.get("align")) check_align(align, *n, where, has_scan, fail);
  parse_series(t, base, where, fail, shared_at, align, has_scan, d);
}

void preflight_paired(const DatasetSpec& d) {
  const std::string rkey = d.reference_scan.empty() ? "reference_mask" : "reference_scan";
  const Geometry rg = file_geometry(d.reference_file, d.reference_file.where, !d.reference_scan.empty());
  if (!d.part_file.path.empty()) {
    const Geometry pg = file_geometry(d.part_file, d.part_file.where, false);
    if (pg.dims != rg.dims)
      throw InputError("part_mask: conflicting geometry: " + d.part_file.path + " has dims " + describe(pg) + " but " + rkey +
                       " " + d.reference_file.path + " has " + describe(rg) + " (the part mask lies on the reference's grid)");
  }
  for (const auto& s : d.scans) {
    file_geometry(s.file, s.file.where, true);
    if (!s.transform.empty()) try {
        read_transform_json(s.transform);
      } catch (const InputError& e) {
        throw InputError(s.file.where + " transform: " + e.what());
      }
  }
}

void describe_paired(const DatasetSpec& d, Dataset& p) {
  p.ref_mask_path = p.data_dir + "/reference-pores.mha";  // on the reference's grid
  p.part_mask_path = d.part_mask;
  for (const auto& s : d.scans) {
    Variant v;
    v.scan = s.label;
    v.path = s.file.path;
    v.read = s.file.read;
    v.projections = s.projections;
    v.i0 = s.i0;
    v.reference_projections = d.reference_projections;
    v.ref_mask_path = p.data_dir + "/reference-pores-" + file_token(s.label) + ".mha";
    v.part_mask_path = d.part_mask.empty() ? "" : p.data_dir + "/part-mask-" + file_token(s.label) + ".mha";
    p.variants.push_back(v);
  }
}

namespace {

// A paired dataset's reference on its own grid, and what it takes to make it again elsewhere.
struct PairedReference {
  Mask part, pores;
  VolumeF scan;  // the grey reference scan (empty for a reference mask)
  VoxelType type = VoxelType::u8;
  Json record;
  Reapply reapply;     // the reference method made again on a fast grid (grey resampling)
  ConsensusRule rule;  // or the consensus: its raters and STAPLE's fitted rule
};

// The reference, once: a mask as it is, or the high-quality scan segmented by the named method (or
// by the consensus of raters); the part mask beside it.
PairedReference make_reference(const DatasetSpec& d, const LogFn& log) {
  PairedReference r;
  AnyVolume ref_any = read_volume(d.reference_file.path, d.reference_file.read);
  if (!d.part_file.path.empty()) {
    const AnyVolume pm = read_volume(d.part_file.path, d.part_file.read);
    check_same_geometry(ref_any.geometry(), d.reference_file.path, pm.geometry(), d.part_file.path);
    r.part = pm.to_mask();
  }
  if (!d.reference_mask.empty()) {
    r.pores = d.reference_label >= 0 ? ref_any.to_mask(d.reference_label) : ref_any.to_mask();
    r.record = {{"mask", d.reference_mask}, {"label", d.reference_label}, {"sha256", file_sha256(d.reference_mask)},
                {"grid", describe(ref_any.geometry())}};
  } else if (!d.reference_consensus.empty()) {
    r.scan = ref_any.to_float();
    r.pores = consensus_reference(d, r.scan, r.part.empty() ? nullptr : &r.part, ref_any.type(), r.record, r.rule, log);
    r.record["grid"] = describe(ref_any.geometry());
  } else {
    const MethodInfo& m = Registry::instance().get(d.reference_method);
    const ParamValues pv = parse_params(m, d.reference_params);
    r.scan = ref_any.to_float();
    if (log) log("dataset '" + d.name + "': segmenting the reference scan " + d.reference_scan + " once (" + m.name + ")");
    const MethodOutput out = run_method(m, pv, MethodInput{r.scan, r.part.empty() ? nullptr : &r.part, ref_any.type()});
    r.pores = out.pores;
    Json chosen = Json::object();
    for (const auto& [k, v] : out.chosen) chosen[k] = v;
    r.reapply = reapply_for(m, pv, out);
    r.record = {{"scan", d.reference_scan}, {"sha256", file_sha256(d.reference_scan)}, {"method", m.name},
                {"params", pv.text()}, {"chosen", chosen}, {"projections", d.reference_projections},
                {"grid", describe(ref_any.geometry())}};
  }
  r.type = ref_any.type();
  return r;
}

// What a fast scan on another grid or pose gets: the grey reference resampled and segmented there
// as on the reference grid, or (reference_resample = "mask", a reference mask, a predictions
// method) the reference pores by nearest neighbour. Sets the record's "resample"; returns whether
// grey, with `grey_text` saying how the pores are made from the resampled grey scan.
bool resample_rule(const DatasetSpec& d, PairedReference& r, std::string& grey_text) {
  const bool grey = d.reference_resample == "grey" && (r.reapply.info || r.rule.possible());
  std::string how;  // how the pores are made on a fast grid from the resampled grey scan
  if (grey && r.reapply.info) {
    how = r.reapply.text;
  } else if (grey) {
    how = "each rater made again there (";
    for (size_t i = 0; i < r.rule.raters.size(); ++i) how += (i ? "; " : "") + r.rule.raters[i].text;
    how += "), fused by STAPLE's rule (W >= 0.5) with the sensitivities, specificities and prior estimated on the "
           "reference grid";
  }
  grey_text = "grey resampled (linear), " + how;
  if (grey)
    r.record["resample"] = "grey: the reference scan resampled linearly onto each fast scan's grid where it differs, " + how;
  else if (d.reference_resample == "grey")
    r.record["resample"] = std::string("mask: nearest neighbour (the reference method reads files made elsewhere: it "
                                       "cannot be made again on a resampled scan)");
  else
    r.record["resample"] = "mask: nearest neighbour (reference_resample = \"mask\")";
  return grey;
}

// The reference pores made again from the grey reference resampled onto `in`'s grid: the
// reference method, or each rater fused by STAPLE's rule.
Mask reference_pores_again(const PairedReference& r, const MethodInput& in) {
  if (r.reapply.info) return run_method(*r.reapply.info, r.reapply.params, in).pores;
  std::vector<Mask> masks;
  std::vector<const Mask*> ptrs;
  for (const Reapply& x : r.rule.raters) masks.push_back(run_method(*x.info, x.params, in).pores);
  for (const Mask& m : masks) ptrs.push_back(&m);
  return staple_fuse(ptrs, r.rule.sensitivity, r.rule.specificity, r.rule.prior, r.rule.threshold);
}

// What prepare_variant shares across the fast scans of one dataset.
struct VariantContext {
  const DatasetSpec& d;
  const PairedReference& ref;
  bool grey;
  const std::string& grey_text;
  const Calibration& c;
  const fs::path& dir;
  const std::string& token;
  const LogFn& log;
};

// One fast scan: the reference brought onto its grid (files, split, montage slices) and its record;
// a registration that fails (does not converge, too few markers) fails this scan's cells with the
// reason, the other scans go on. The first scan that aligns gives the dataset its split.
Json prepare_variant(Dataset& p, Variant& v, const PairedScanSpec& s, const VariantContext& x, bool& first) {
  const DatasetSpec& d = x.d;
  const PairedReference& r = x.ref;
  const AnyVolume fa = read_volume(v.path, v.read);
  const VolumeF fast = fa.to_float();
  const Geometry& fg = fast.geometry();
  const AlignMode mode = parse_align_mode(s.align, s.file.where);
  Json rec = {{"scan", v.scan}, {"path", v.path}, {"sha256", file_sha256(v.path)}, {"grid", describe(fg)},
              {"projections", v.projections}, {"i0", v.i0}, {"i0_unit", s.i0_unit}, {"reference", false},
              {"reference_projections", v.reference_projections}, {"reference_i0", v.reference_i0}};
  const std::string png = "data/" + x.token + "/montage-" + file_token(v.scan) + ".png";
  const std::string ref_png = "data/" + x.token + "/montage-reference-" + file_token(v.scan) + ".png";
  const Stats st = compute_stats(fast);
  try {
    AlignedReference a =
        s.transform.empty() ? align_reference(mode, fast, v.path, r.scan.empty() ? nullptr : &r.scan,
                                              d.reference_file.path, r.pores)
                            : apply_known_transform(fast, r.pores, read_transform_json(s.transform), s.transform);
    const bool moved = !(same_grid(r.pores.geometry(), fg) && mode == AlignMode::none && s.transform.empty());
    Mask part_here;
    if (!r.part.empty()) {
      part_here = moved ? resample_nearest(r.part, fg, a.T) : r.part;
      write_volume(part_here, v.part_mask_path, {true});
    }
    if (moved && x.grey) {  // grey resampling: thin voids survive a sub-voxel re-mount
      const VolumeF grey_here = resample_linear(r.scan, fg, a.T);
      a.pores = reference_pores_again(r, MethodInput{grey_here, part_here.empty() ? nullptr : &part_here, r.type});
      if (!a.record.contains("resampled") || !a.record["resampled"].is_object())
        a.record["resampled"] = {{"grid", "the fast scan's"}};
      a.record["resampled"]["mask"] = x.grey_text;
    }
    write_volume(a.pores, v.ref_mask_path, {true});
    v.split = split_slices(p.name + "' scan '" + v.scan, r.part.empty() ? nullptr : &part_here, a.pores, x.c);
    rec["alignment"] = a.record;
    rec["warnings"] = a.warnings;
    for (const auto& w : a.warnings)
      if (x.log) x.log("warning: dataset '" + d.name + "', scan '" + v.scan + "': " + w);
    rec["slices"] = {{"calibration", {v.split.cal_begin, v.split.cal_end}}, {"gap", x.c.gap_slices},
                     {"test", {v.split.test_begin, v.split.test_end}}, {"montage_z", v.split.montage_z}};
    write_mask_png(a.pores, v.split.montage_z, (x.dir / ref_png).string());
    if (first) {  // the dataset's split and montage slice, as for synthetic data: the first scan's
      p.cal_begin = v.split.cal_begin, p.cal_end = v.split.cal_end, p.test_begin = v.split.test_begin;
      p.test_end = v.split.test_end, p.montage_z = v.split.montage_z;
      p.record["slices"] = rec["slices"];
      p.record["montage_reference_png"] = ref_png;
      first = false;
    }
  } catch (const InputError& e) {
    v.error = std::string("registration failed (align = \"") + align_mode_name(mode) + "\"): " + e.what();
    v.split.montage_z = fg.dims[2] / 2;
    rec["alignment"] = {{"align", align_mode_name(mode)}, {"error", v.error}};
    rec["error"] = v.error;
    if (x.log) x.log("error: dataset '" + d.name + "', scan '" + v.scan + "': " + v.error);
    write_mask_png(Mask(fg), v.split.montage_z, (x.dir / ref_png).string());
  }
  write_slice_png(fast, v.split.montage_z, st.min, st.max, (x.dir / png).string());
  rec["montage_png"] = png;
  rec["montage_reference_png"] = ref_png;
  return rec;
}

}  // namespace

void prepare_paired(Dataset& p, const Calibration& c, const std::string& out_dir, const LogFn& log) {
  const DatasetSpec& d = *p.spec;
  fs::create_directories(p.data_dir);
  const fs::path dir(out_dir);
  const std::string token = file_token(p.name);
  PairedReference ref = make_reference(d, log);
  write_volume(ref.pores, p.ref_mask_path, {true});
  std::string grey_text;
  const bool grey = resample_rule(d, ref, grey_text);
  // Each fast scan: the reference brought onto its grid, its own split and montage slice.
  const VariantContext x{d, ref, grey, grey_text, c, dir, token, log};
  Json variants = Json::array();
  bool first = true;
  for (auto& v : p.variants) variants.push_back(prepare_variant(p, v, d.scans[size_t(&v - p.variants.data())], x, first));
  std::string i0_unit;  // one per dataset (parse_paired_dataset): the series axis unit
  for (const auto& s : d.scans) if (!s.i0_unit.empty()) i0_unit = s.i0_unit;
  Json rec = {{"name", d.name}, {"kind", "paired"}, {"i0_unit", i0_unit}, {"reference", ref.record}, {"part_mask", d.part_mask},
              {"scan", d.scan}, {"scan_sha256", file_sha256(d.scan)}, {"grid", "each scan's own (the reference resampled onto it)"}};
  for (auto it = p.record.begin(); it != p.record.end(); ++it) rec[it.key()] = it.value();
  if (!rec.contains("slices")) {  // every registration failed
    rec["slices"] = {{"calibration", {0, 0}}, {"gap", c.gap_slices}, {"test", {0, 0}}, {"montage_z", p.variants.front().split.montage_z}};
    rec["montage_reference_png"] = variants.front()["montage_reference_png"];
  }
  rec["variants"] = variants;
  p.record = rec;
  p.prepared = true;
}

}  // namespace pb::suite
