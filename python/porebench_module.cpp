// The Python module `porebench` (pybind11): score, segment and synth on NumPy arrays, with the
// records of the command line. One translation unit over libporebench (python/CMakeLists.txt);
// it knows nothing of the command line: the records come from the library (metrics/score_record,
// methods/segment_record), so porebench.score returns what `porebench score --json` writes.
// Arrays are indexed [z, y, x] (3-D) or [y, x] (one slice), the .npy and scikit-image convention.
// An input array that is C-contiguous, in native byte order and of a porebench voxel type (uint8,
// bool as uint8, uint16, int16, float32) is read in place; any other layout or byte order is copied
// once (numpy.ascontiguousarray / astype), and float64 is converted to float32 once, refused when
// not finite where the command line refuses it. Output arrays own porebench's buffers (no copy).
// An InputError (what the command line reports with exit 2) raises ValueError with its message.
#include <pybind11/numpy.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>

#include <cmath>
#include <limits>
#include <memory>
#include <optional>
#include <string>
#include <type_traits>
#include <vector>

#include "core/byteorder.hpp"
#include "core/error.hpp"
#include "core/io.hpp"
#include "core/names.hpp"
#include "core/npy.hpp"
#include "core/sha256.hpp"
#include "core/volume.hpp"
#include "core/volume_view.hpp"
#include "methods/pores.hpp"
#include "methods/registry.hpp"
#include "methods/segment_record.hpp"
#include "metrics/score_record.hpp"
#include "synthetic/synth.hpp"

namespace py = pybind11;
using namespace pb;

namespace {

int64_t g_input_copies = 0;  // inputs copied or converted since import (porebench._input_copies)

// A Python warning (UserWarning); a filter that turns warnings into errors raises here.
void py_warn(const std::string& text) {
  if (PyErr_WarnEx(PyExc_UserWarning, ("porebench: " + text).c_str(), 1) < 0) throw py::error_already_set();
}

py::object to_python(const nlohmann::ordered_json& j) {
  return py::module_::import("json").attr("loads")(j.dump());
}

// An input: a NumPy array viewed (or its one copy), or a volume read from a file (a str path).
struct Input {
  py::array array;  // keeps the viewed buffer alive
  AnyVolume file;   // when read from a file
  VolumeView view;
  std::string name;             // in messages
  nlohmann::ordered_json path;  // the file, or null
  bool from_file = false, has_geometry = false;
};

std::array<double, 3> triple(const py::handle& v, const std::string& what) {
  if (py::isinstance<py::float_>(v) || py::isinstance<py::int_>(v)) {
    const double s = v.cast<double>();
    return {s, s, s};
  }
  const auto t = v.cast<std::vector<double>>();
  if (t.size() != 3) throw InputError(what + ": give one number or three (x, y, z), got " + std::to_string(t.size()));
  return {t[0], t[1], t[2]};
}

// A float64 array (NumPy's default dtype): converted to float32 once, as an f8 .npy file is read
// (core/npy.hpp: a finite value beyond float32's range refused, rounding told as a warning).
py::array float64_to_float32(const py::array& a, const std::string& name) {
  ++g_input_copies;
  const py::array_t<double, py::array::c_style | py::array::forcecast> src(a);
  py::array_t<float> out(std::vector<py::ssize_t>(src.shape(), src.shape() + src.ndim()));
  const Float64Narrowing r = narrow_float64(src.data(), int64_t(src.size()), out.mutable_data(), name);
  const std::string note = r.note(name + " (float64, converted to float32)");
  if (!note.empty()) py_warn(note);
  return std::move(out);
}

Input input(const py::handle& obj, const std::string& role, const ReadOptions& ro = {}) {
  Input in;
  if (py::isinstance<py::str>(obj) || py::hasattr(obj, "__fspath__")) {
    const std::string path = py::str(py::module_::import("os").attr("fspath")(obj));
    in.file = read_volume(path, ro);
    in.view = view_of(in.file);
    in.name = path;
    in.path = path;
    in.from_file = true;
    in.has_geometry = !is_npy_path(path);
    return in;
  }
  in.name = role + " (array)";
  if (!py::isinstance<py::array>(obj)) ++g_input_copies;  // a list or the like becomes an array
  py::array a = py::array::ensure(obj);
  if (!a) throw InputError(role + ": not an array or a file path");
  if (a.ndim() != 2 && a.ndim() != 3)
    throw InputError(role + ": an array indexed [z, y, x] (3-D) or [y, x] (2-D) is expected, got " +
                     std::to_string(a.ndim()) + " axes");
  const py::dtype dt = a.dtype();
  const char kind = dt.kind();
  const size_t size = size_t(dt.itemsize());
  const std::string order = dt.attr("byteorder").cast<std::string>();
  const bool native = order != (host_is_little_endian() ? ">" : "<");
  VoxelType type;
  if ((kind == 'b' || kind == 'u') && size == 1) type = VoxelType::u8;
  else if (kind == 'u' && size == 2) type = VoxelType::u16;
  else if (kind == 'i' && size == 2) type = VoxelType::i16;
  else if (kind == 'f' && size == 4) type = VoxelType::f32;
  else if (kind == 'f' && size == 8) {
    a = float64_to_float32(a, in.name);
    type = VoxelType::f32;
  } else {
    throw InputError(role + ": dtype " + dt.attr("name").cast<std::string>() +
                     " is not a porebench voxel type (uint8, bool, uint16, int16, float32, or float64 converted to "
                     "float32); convert it, e.g. .astype(numpy.uint16) for labels");
  }
  if (!native || !(a.flags() & py::array::c_style)) {
    ++g_input_copies;
    a = py::array(py::module_::import("numpy").attr("ascontiguousarray")(
        a, a.dtype().attr("newbyteorder")("=")));
  }
  in.array = a;
  Geometry g;
  const int64_t nz = a.ndim() == 3 ? a.shape(0) : 1, ny = a.shape(a.ndim() - 2), nx = a.shape(a.ndim() - 1);
  g.dims = {nx, ny, nz};
  if (nx < 1 || ny < 1 || nz < 1) throw InputError(role + ": the array is empty (shape with a 0)");
  in.view = VolumeView{a.data(), type, g};
  return in;
}

// Arrays take spacing_mm/origin_mm when given, else the geometry of an input read from a file with
// one (the reference first, as the command line's .npy inputs do), else 1 mm with a warning.
void set_geometry(std::vector<Input*> ins, const py::object& spacing, const py::object& origin,
                  std::vector<std::string>& notes) {
  std::optional<Geometry> from;
  for (Input* in : ins)
    if (in && in->has_geometry && !from) from = in->view.geometry;
  const bool all_arrays_or_npy = !from;
  for (Input* in : ins) {
    if (!in || in->has_geometry) continue;
    Geometry& g = in->view.geometry;
    if (!spacing.is_none()) g.spacing_mm = triple(spacing, "spacing_mm");
    else if (from && from->dims == g.dims) g.spacing_mm = from->spacing_mm;
    if (!origin.is_none()) g.origin_mm = triple(origin, "origin_mm");
    else if (from && from->dims == g.dims) g.origin_mm = from->origin_mm;
    for (int i = 0; i < 3; ++i)
      if (!(g.spacing_mm[i] > 0))
        throw InputError("spacing_mm must be positive, got " + std::to_string(g.spacing_mm[i]) + " along " + "xyz"[i]);
  }
  if (all_arrays_or_npy && spacing.is_none())
    notes.push_back("no input stores a voxel size and spacing_mm is not given: spacing 1 mm assumed, so sizes in um "
                    "and counts per cm3 are in voxel units");
}

void warn(const std::vector<std::string>& notes) {
  for (const auto& n : notes) py_warn(n);
}

// A porebench image handed to NumPy without a copy: the array owns it through a capsule.
template <class T>
py::array to_numpy(Image<T>&& img, bool two_d) {
  auto* held = new Image<T>(std::move(img));
  py::capsule owner(held, [](void* p) { delete static_cast<Image<T>*>(p); });
  const auto& g = held->geometry();
  std::vector<py::ssize_t> shape, strides;
  if (!two_d) shape.push_back(g.dims[2]), strides.push_back(py::ssize_t(sizeof(T)) * g.dims[0] * g.dims[1]);
  shape.push_back(g.dims[1]), strides.push_back(py::ssize_t(sizeof(T)) * g.dims[0]);
  shape.push_back(g.dims[0]), strides.push_back(py::ssize_t(sizeof(T)));
  return py::array_t<T>(shape, strides, held->data(), owner);
}

py::array to_numpy(AnyVolume&& v, bool two_d) {
  py::array out;
  v.visit([&](auto& img) { out = to_numpy(std::move(img), two_d); });
  return out;
}

std::string text_of(const py::handle& v) {
  if (py::isinstance<py::bool_>(v)) return v.cast<bool>() ? "true" : "false";
  if (py::isinstance<py::list>(v) || py::isinstance<py::tuple>(v)) {
    std::string s = "[";
    for (const auto& x : v) s += (s.size() > 1 ? "," : "") + text_of(x);
    return s + "]";
  }
  return py::str(v);
}

// --- score ----------------------------------------------------------------------------------------
const std::vector<std::string> kScoreKeys = {"match", "max_volume_ratio", "connectivity", "ref_label", "pred_label",
                                             "pore_label", "pred_threshold", "z_range", "pod_link", "bootstrap",
                                             "seed", "surface"};

ScoreArgs score_args(const py::kwargs& kw) {
  ScoreArgs a;
  for (const auto& [k, v] : kw) {
    const std::string key = py::str(k);
    if (key == "match") a.match = py::str(v);
    else if (key == "max_volume_ratio") a.max_volume_ratio = v.cast<double>();
    else if (key == "connectivity") a.connectivity = v.cast<int>();
    else if (key == "ref_label") a.ref_label = text_of(v);
    else if (key == "pred_label") a.pred_label = text_of(v);
    else if (key == "pore_label") a.pore_label = text_of(v);
    else if (key == "pred_threshold") a.pred_threshold = v.cast<double>(), a.pred_threshold_given = true;
    else if (key == "z_range") {
      if (py::isinstance<py::str>(v)) a.z_range = py::str(v);
      else {
        const auto z = v.cast<std::vector<int64_t>>();
        if (z.size() != 2) throw InputError("z_range: give (z0, z1) or 'Z0:Z1'");
        a.z_range = std::to_string(z[0]) + ":" + std::to_string(z[1]);
      }
    } else if (key == "pod_link") a.pod_link = py::str(v);
    else if (key == "bootstrap") a.bootstrap = v.cast<int>();
    else if (key == "seed") a.seed = v.cast<uint64_t>();
    else if (key == "surface") a.no_surface = !v.cast<bool>();
    else {
      const std::string near = closest_name(key, kScoreKeys);
      throw InputError("score: unknown scoring option '" + key + "'" + (near.empty() ? "" : " (did you mean " + near + "?)"));
    }
  }
  return a;
}

py::dict py_score(const py::handle& pred, const py::handle& ref, const py::handle& roi, const py::object& spacing,
                  const py::object& origin, const py::kwargs& kw) {
  const ScoreSetup setup = score_setup(score_args(kw));  // every argument checked before any input is read
  Input p = input(pred, "pred"), r = input(ref, "ref");
  std::optional<Input> o;
  if (!roi.is_none()) o = input(roi, "roi");
  std::vector<std::string> notes;
  set_geometry({&r, &p, o ? &*o : nullptr}, spacing, origin, notes);
  const ScoreInput roi_in = o ? ScoreInput{o->view, o->name, o->path, {}} : ScoreInput{};
  ScoreRecord rec;
  {
    py::gil_scoped_release free;
    rec = score_record(setup, {p.view, p.name, p.path, {}}, {r.view, r.name, r.path, {}}, o ? &roi_in : nullptr, true);
  }
  for (const auto& w : rec.result.warnings) notes.push_back("warning: " + w);
  warn(notes);
  return to_python(rec.json);
}

// --- segment --------------------------------------------------------------------------------------
py::tuple py_segment(const py::handle& volume, const std::string& method, const py::handle& roi, const py::object& spacing,
                     const py::object& origin, bool allow_nonfinite, const py::kwargs& kw) {
  const MethodInfo& m = Registry::instance().get(method);
  std::vector<std::string> sets;
  for (const auto& [k, v] : kw) sets.push_back(std::string(py::str(k)) + "=" + text_of(v));
  const ParamValues params = parse_params(m, sets);
  ReadOptions ro;
  ro.allow_nonfinite = allow_nonfinite;
  Input in = input(volume, "volume", ro);
  std::optional<Input> o;
  if (!roi.is_none()) o = input(roi, "roi");
  std::vector<std::string> notes;
  set_geometry({&in, o ? &*o : nullptr}, spacing, origin, notes);
  Mask roi_mask;
  if (o) {
    roi_mask = to_mask(o->view);
    if (count_nonzero(roi_mask) == 0)
      throw InputError("ROI " + o->name + " is empty: it has no non-zero voxel, so no voxel would be classified");
    check_same_geometry(in.view.geometry, in.name, roi_mask.geometry(), o->name);
  }
  MethodOutput out;
  nlohmann::ordered_json record;
  VolumeF vol;
  {
    py::gil_scoped_release free;
    const std::string sha = sha256_hex(in.view.data, in.view.bytes());
    vol = to_float(in.view);  // methods take float32 (one copy, as the command line makes)
    if (!in.from_file) {
      AnyVolume checked(std::move(vol));  // non-finite voxels as read_volume treats them
      const NonFinite nf = count_nonfinite(checked);
      if (nf.total() > 0 && !allow_nonfinite)
        throw InputError("input " + in.name + " has " + nf.text() + " of " + std::to_string(in.view.geometry.voxels()) +
                         "; pass allow_nonfinite=True to accept them (they are then treated as NaN: never air, left "
                         "out of histograms and statistics)");
      checked.visit([&](auto& img) {
        if constexpr (std::is_same_v<std::decay_t<decltype(img)>, VolumeF>) vol = std::move(img);
      });
      if (nf.total() > 0)
        for (int64_t i = 0; i < vol.size(); ++i)
          if (std::isinf(vol[i])) vol[i] = std::numeric_limits<float>::quiet_NaN();
    }
    out = run_method(m, params, MethodInput{vol, o ? &roi_mask : nullptr, in.view.type});
    SegmentRecordInputs io{in.path, sha, std::nullopt, nullptr};
    if (o) io.roi = o->path;
    record = segment_record(m, params, out, vol.size(), io);
  }
  for (const auto& w : out.warnings) notes.push_back("warning: " + w);
  warn(notes);
  const bool two_d = !in.from_file && in.array.ndim() == 2;
  py::dict info = to_python(record);
  if (!out.probability.empty()) info["probability_map"] = to_numpy(std::move(out.probability), two_d);
  return py::make_tuple(to_numpy(std::move(out.pores), two_d), info);
}

// --- synth ----------------------------------------------------------------------------------------
py::dict py_synth(const std::string& what, const py::kwargs& kw) {
  std::vector<std::string> names = synth::preset_names();
  const bool is_preset = std::find(names.begin(), names.end(), what) != names.end();
  synth::Recipe r = is_preset ? synth::preset(what) : lower_extension(what) == ".toml" ? synth::load_recipe(what)
                                                                                        : synth::preset(what);
  std::vector<std::string> sets;
  for (const auto& [k, v] : kw) {
    std::string key = py::str(k);
    for (size_t i; (i = key.find("__")) != std::string::npos;) key.replace(i, 2, ".");
    sets.push_back(key + "=" + text_of(v));
  }
  r = synth::apply_overrides(r, sets);
  py::dict out;
  synth::SynthResult s;
  std::vector<std::pair<std::string, AnyVolume>> scans;
  {
    py::gil_scoped_release free;
    s = synth::synthesize(r);
    const bool dose_series = r.i0.size() > 1;
    for (auto& sc : s.scans) {
      std::string name = sc.spec.file_name(dose_series);
      if (name.size() > 4 && name.compare(name.size() - 4, 4, ".mha") == 0) name.resize(name.size() - 4);
      scans.emplace_back(name, synth::stored_scan(sc.mu, r));
      sc.mu = VolumeF();
    }
  }
  const Geometry g = s.truth.labels.geometry();
  out["recipe"] = synth::to_toml(s.recipe);
  out["spacing_mm"] = py::make_tuple(g.spacing_mm[0], g.spacing_mm[1], g.spacing_mm[2]);
  out["origin_mm"] = py::make_tuple(g.origin_mm[0], g.origin_mm[1], g.origin_mm[2]);
  out["analytic_porosity_pct"] = s.phantom.porosity_pct();
  out["pores_csv"] = synth::pores_csv(s.phantom);
  out["truth_labels"] = to_numpy(std::move(s.truth.labels), false);
  out["part_mask"] = to_numpy(std::move(s.truth.part), false);
  py::dict sd;
  for (auto& [name, v] : scans) sd[py::str(name)] = to_numpy(std::move(v), false);
  out["scans"] = sd;
  return out;
}

}  // namespace

PYBIND11_MODULE(porebench, mod) {
  mod.doc() =
      "porebench: CT pore-segmentation trials (score, segment, synth) on NumPy arrays.\n\n"
      "Arrays are indexed [z, y, x] (or [y, x], one slice). A C-contiguous array in native byte order of\n"
      "dtype uint8, bool, uint16, int16 or float32 is read in place (no copy); another layout or byte\n"
      "order is copied once, float64 is converted to float32 once. A str or os.PathLike argument is\n"
      "read as a file, as the command line reads it. Bad input raises ValueError with the command\n"
      "line's message. The tool supports, and does not replace, qualification to the applicable\n"
      "standards and local codes and the judgement of qualified personnel.";
  set_read_note([](const std::string& m) { py_warn("note: " + m); });
  py::register_exception_translator([](std::exception_ptr p) {
    try {
      if (p) std::rethrow_exception(p);
    } catch (const InputError& e) {
      PyErr_SetString(PyExc_ValueError, e.what());
    }
  });
  mod.def("score", &py_score, py::arg("pred"), py::arg("ref"), py::arg("roi") = py::none(),
          py::arg("spacing_mm") = py::none(), py::arg("origin_mm") = py::none(),
          "score(pred, ref, roi=None, spacing_mm=None, origin_mm=None, **scoring) -> dict\n\n"
          "The record `porebench score --json` writes, as a dict (json.loads of the same text). pred:\n"
          "0/1 mask, label volume (pred_label) or float probability map (pred_threshold; then the\n"
          "'probability' block too); ref: mask, label volume (ref_label) or synth's 0/1/2 truth labels;\n"
          "roi: part mask. Each an array or a file path. spacing_mm: one number or (x, y, z) in mm for\n"
          "the arrays (else a file input's, else 1 mm with a warning); origin_mm likewise. scoring: the\n"
          "command line's options with underscores: match='coverage:0.5', max_volume_ratio=10,\n"
          "connectivity=26, ref_label/pred_label/pore_label=N or 'nonzero', pred_threshold=0.5,\n"
          "z_range=(z0, z1) or 'Z0:Z1', pod_link='logit', bootstrap=2000, seed, surface=True.\n"
          "inputs.<role>.path is the file, or None for an array. Arrays of the supported dtypes in C\n"
          "order are read in place; others are copied once (see the module doc).");
  mod.def("segment", &py_segment, py::arg("volume"), py::arg("method"), py::arg("roi") = py::none(),
          py::arg("spacing_mm") = py::none(), py::arg("origin_mm") = py::none(), py::arg("allow_nonfinite") = false,
          "segment(volume, method, roi=None, spacing_mm=None, origin_mm=None, allow_nonfinite=False, **params)\n"
          "    -> (mask, record)\n\n"
          "One method on one grey volume, as `porebench segment METHOD INPUT --set key=value`: mask is a\n"
          "uint8 array (1 = pore) shaped as the input; record is `segment --json`'s record as a dict\n"
          "(method, params, chosen, runtime_s, counts, porosity_pct, warnings, input; output None) and,\n"
          "when the method makes one, record['probability_map'] (float32 array). params: the method's\n"
          "parameters (porebench methods), e.g. window=25; a dotted name through a dict:\n"
          "**{'median.radius': 1}. The volume is read in place and converted to float32 once (methods\n"
          "take float32; the command line converts too). Output arrays own their buffers (no copy).");
  mod.def("synth", &py_synth, py::arg("preset_or_recipe"),
          "synth(preset_or_recipe, **overrides) -> dict\n\n"
          "The volumes `porebench synth` writes, in memory: truth_labels (uint8, 0 background, 1 material,\n"
          "2 closed pore), part_mask (uint8), scans {'reference-scan': ..., 'scan-200p': ...} as stored\n"
          "(float32 mu in 1/mm, or uint16 per the recipe), spacing_mm and origin_mm (x, y, z), recipe (TOML\n"
          "text), pores_csv, analytic_porosity_pct. preset_or_recipe: a built-in preset name or a recipe\n"
          ".toml path. overrides: recipe keys, e.g. seed=3, scan__projections=[400, 100] ('__' for '.')\n"
          "or **{'scan.i0': 1e4}.");
  mod.def("_input_copies", [] { return g_input_copies; },
          "Inputs copied or converted since import (0 while every array is read in place).");
  mod.attr("presets") = synth::preset_names();
}
