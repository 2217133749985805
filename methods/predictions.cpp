// The predictions family: segmentations made elsewhere (a model run in Python, another program),
// read from a file per scan so that they are scored and ranked beside every other method. Kinds:
// a binary mask (non-zero = pore), a label volume (pore_label), or a pore-probability map in
// [0, 1] binarised at pore_threshold (0.5: common practice, no source). The prediction is then
// handled as every method's pore call: inside the ROI only, and pore voxels connected to the volume
// border or to the outside of the ROI are background (methods/pores.hpp). No published method:
// this reads results. The file must have the scan's geometry (a .npy, which stores none, takes
// the scan's). Runtime: a sidecar JSON beside the file (FILE.json or STEM.json, {"runtime_s": S})
// gives the time it took where it was made; without one the runtime is not measured (NaN).
// The method knows nothing of suites: the suite runner fills the {dataset} and {scan} of a path
// template (suites/predictions.hpp) before the method sees `file`.
#include "methods/predictions.hpp"

#include <cmath>
#include <filesystem>

#include "core/error.hpp"
#include "core/format.hpp"
#include "core/io.hpp"
#include "core/json.hpp"
#include "core/npy.hpp"
#include "core/text_file.hpp"
#include "methods/pores.hpp"
#include "methods/registry.hpp"

namespace fs = std::filesystem;

namespace pb {

PredictionKind parse_prediction_kind(const std::string& s) {
  if (s == "auto") return PredictionKind::automatic;
  if (s == "mask") return PredictionKind::mask;
  if (s == "label") return PredictionKind::label;
  if (s == "probability") return PredictionKind::probability;
  throw InputError("predictions: kind '" + s + "' is not one of auto, mask, label, probability");
}

PredictionKind resolve_kind(PredictionKind k, VoxelType t) {
  if (k != PredictionKind::automatic) return k;
  return t == VoxelType::f32 ? PredictionKind::probability : PredictionKind::mask;
}

void check_prediction_values(const AnyVolume& v, PredictionKind kind, int64_t pore_label, const std::string& path) {
  kind = resolve_kind(kind, v.type());
  if (kind == PredictionKind::probability) {
    if (v.type() != VoxelType::f32)
      throw InputError("prediction " + path + ": kind probability needs float32 voxels in [0, 1], the file holds " +
                       voxel_type_name(v.type()));
    const float* d = static_cast<const float*>(v.raw());
    const int64_t n = v.geometry().voxels();
    int64_t bad = 0, first = -1;
    for (int64_t i = 0; i < n; ++i)
      if (!(d[i] >= 0.f && d[i] <= 1.f)) {
        if (first < 0) first = i;
        ++bad;
      }
    if (bad > 0)
      throw InputError("prediction " + path + ": probability map holds " + std::to_string(bad) +
                       " voxels outside [0, 1] (first: voxel " + std::to_string(first) + " = " + format_number(d[first], 6, nullptr) +
                       "); a probability map is in [0, 1] (a logit or a grey scan is not)");
  } else if (kind == PredictionKind::label) {
    bool any = false;
    v.visit([&](const auto& img) {
      using T = typename std::decay_t<decltype(img)>::value_type;
      const T* d = img.data();
      for (int64_t i = 0; i < img.size() && !any; ++i) any = double(d[i]) == double(pore_label);
    });
    if (!any)
      throw InputError("prediction " + path + ": kind label: no voxel equals pore_label = " + std::to_string(pore_label));
  }
}

double read_runtime_sidecar(const std::string& path, bool* found) {
  const fs::path p(path);
  std::string stem = p.filename().string();
  const std::string ext = lower_extension(path);
  stem = stem.substr(0, stem.size() - ext.size());
  const fs::path candidates[] = {fs::path(path + ".json"), p.parent_path() / (stem + ".json")};
  if (found) *found = false;
  for (const auto& c : candidates) {
    std::error_code ec;
    if (c == p || !fs::is_regular_file(c, ec)) continue;
    const std::string text = read_text_file(c.string(), "prediction sidecar");
    nlohmann::json j;
    try {
      j = nlohmann::json::parse(text);
    } catch (const std::exception& e) {
      throw InputError("prediction sidecar " + c.string() + " is not valid JSON: " + e.what());
    }
    if (!j.is_object() || !j.contains("runtime_s")) continue;  // a sidecar of something else
    const auto& r = j["runtime_s"];
    if (!r.is_number() || !(r.get<double>() >= 0) || !std::isfinite(r.get<double>()))
      throw InputError("prediction sidecar " + c.string() + ": field 'runtime_s' = " + r.dump() +
                       " must be a non-negative number of seconds");
    if (found) *found = true;
    return r.get<double>();
  }
  return NAN;
}

AnyVolume read_prediction(const std::string& path, const Geometry& scan, const std::string& scan_name) {
  AnyVolume v = read_volume(path);
  if (is_npy_path(path)) adopt_geometry(v, scan);
  check_same_geometry(v.geometry(), "prediction " + path, scan, scan_name);
  return v;
}

namespace {

MethodOutput run_predictions(const MethodInput& in, const ParamValues& p) {
  const std::string& path = p.choice("file");
  if (path.find('{') != std::string::npos)
    throw InputError("predictions: file = '" + path + "' still holds a placeholder ({dataset}, {scan}): " +
                     "the suite runner fills them; segment needs a file name");
  const AnyVolume v = read_prediction(path, in.volume.geometry(), "the scan");
  const PredictionKind kind = resolve_kind(parse_prediction_kind(p.choice("kind")), v.type());
  const int64_t label = p.integer("pore_label");
  check_prediction_values(v, kind, label, path);
  MethodOutput out;
  out.pores = Mask(in.volume.geometry(), Zeroed{});
  uint8_t* mk = out.pores.data();
  const uint8_t* roi = in.roi ? in.roi->data() : nullptr;
  const int64_t n = out.pores.size();
  if (kind == PredictionKind::probability) {
    out.probability = VolumeF(in.volume.geometry(), Uninitialized{});
    const float* d = static_cast<const float*>(v.raw());
    std::copy(d, d + n, out.probability.data());
    const float t = float(p.num("pore_threshold"));
#pragma omp parallel for schedule(static)
    for (int64_t i = 0; i < n; ++i) mk[i] = d[i] >= t && (!roi || roi[i]);
    out.chosen.push_back({"pore_threshold", p.num("pore_threshold")});
  } else {
    v.visit([&](const auto& img) {
      using T = typename std::decay_t<decltype(img)>::value_type;
      const T* d = img.data();
      if (kind == PredictionKind::label) {
        const double want = double(label);
#pragma omp parallel for schedule(static)
        for (int64_t i = 0; i < n; ++i) mk[i] = double(d[i]) == want && (!roi || roi[i]);
      } else {
#pragma omp parallel for schedule(static)
        for (int64_t i = 0; i < n; ++i) mk[i] = d[i] != T(0) && (!roi || roi[i]);
      }
    });
    if (kind == PredictionKind::label) out.chosen.push_back({"pore_label", double(label)});
  }
  out.part_voxels = air_to_pores(out.pores, in.roi);
  bool found = false;
  out.external_runtime_s = read_runtime_sidecar(path, &found);
  if (!found) out.warnings.push_back("prediction " + path + ": no runtime sidecar (" + path + ".json with runtime_s): runtime not measured");
  return out;
}

MethodInfo predictions_info() {
  MethodInfo m;
  m.name = "predictions";
  m.family = "predictions";
  m.doc = "segmentations made elsewhere, read from a file per scan (mask, label volume or probability map); "
          "in a suite, file is a template with {dataset} and {scan}";
  m.citation = "none: reads results made elsewhere";
  m.params = {
      {"file", ParamType::Text, "", 0, 0, {}, "path",
       "the prediction volume (any format read_volume reads; .npy takes the scan's spacing); in a suite a template "
       "with {dataset} and {scan}, relative to the suite file"},
      {"kind", ParamType::Enum, "auto", 0, 0, {"auto", "mask", "label", "probability"}, "",
       "mask: non-zero = pore; label: voxel = pore_label; probability: float in [0, 1], pore >= pore_threshold; "
       "auto: float32 = probability, integer = mask"},
      {"pore_label", ParamType::Int, "1", -32768, 65535, {}, "label", "kind label: the label of pore voxels"},
      {"pore_threshold", ParamType::Float, "0.5", 0, 1, {}, "probability",
       "kind probability: pore = probability >= this (0.5: common practice, no source)"}};
  m.run = run_predictions;
  return m;
}

}  // namespace

PB_REGISTER_METHOD(predictions_info());

}  // namespace pb
