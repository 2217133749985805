// The record of `porebench score --json` (metrics/score_record.hpp).
#include "metrics/score_record.hpp"

#include <algorithm>
#include <stdexcept>
#include <type_traits>

#include "core/components.hpp"
#include "core/context.hpp"
#include "core/error.hpp"
#include "core/npy.hpp"
#include "core/sha256.hpp"
#include "core/slabs.hpp"
#include "metrics/pod.hpp"

namespace pb {

ScoreSetup score_setup(const ScoreArgs& a) {
  ScoreSetup s;
  ScoreOptions& o = s.options;
  o.match = parse_match_rule(a.match);
  o.connectivity = a.connectivity;
  o.max_volume_ratio = a.max_volume_ratio;
  o.pod_link = parse_pod_link(a.pod_link);
  o.bootstrap_samples = a.bootstrap;
  o.seed = a.seed;
  o.surface_distances = !a.no_surface;
  if (!a.z_range.empty()) {
    const auto c = a.z_range.find(':');
    try {
      if (c == std::string::npos) throw std::invalid_argument("no colon");
      size_t u0 = 0, u1 = 0;
      o.z_begin = std::stoll(a.z_range.substr(0, c), &u0);
      o.z_end = std::stoll(a.z_range.substr(c + 1), &u1);
      if (u0 != c || u1 != a.z_range.size() - c - 1) throw std::invalid_argument("trailing");
    } catch (const std::logic_error&) {
      throw InputError("--z-range: '" + a.z_range + "' is not Z0:Z1 (two slice indices, Z1 exclusive)");
    }
  }
  o.validate();
  if (!a.pore_label.empty() && (!a.ref_label.empty() || !a.pred_label.empty()))
    throw InputError("--pore-label sets both --ref-label and --pred-label: give either it or them");
  s.ref_option = a.pore_label.empty() ? "--ref-label" : "--pore-label";
  s.pred_option = a.pore_label.empty() ? "--pred-label" : "--pore-label";
  s.ref = parse_mask_label(a.pore_label.empty() ? a.ref_label : a.pore_label, s.ref_option);
  s.pred = parse_mask_label(a.pore_label.empty() ? a.pred_label : a.pore_label, s.pred_option);
  s.pred.threshold = a.pred_threshold;
  s.pred.threshold_given = a.pred_threshold_given;
  return s;
}

namespace {

// Pores of an integer volume under `rule` (and inside roi, the part mask's voxels of the scored
// slices, when given) over slices [z0, z1), labelled as label_runs labels the whole mask: converted
// and collected a few slices at a time (core/components.hpp RunCollector), so that no whole-volume
// mask is made.
LabelRuns runs_by_rule(const VolumeView& v, const IntegerMaskRule& rule, const uint8_t* roi, int64_t z0, int64_t z1,
                       int connectivity) {
  const Geometry g = slab_geometry(v.geometry, z0, z1);
  RunCollector c(g);
  const int64_t sxy = g.slice_voxels();
  // Slabs of up to 64 slices and 4 MiB.
  const int64_t slab = std::clamp<int64_t>(std::min<int64_t>(64, (int64_t(4) << 20) / std::max<int64_t>(1, sxy)), 1,
                                           std::max<int64_t>(1, z1 - z0));
  std::vector<uint8_t> m(size_t(std::min(slab, z1 - z0) * sxy));
  for (int64_t z = z0; z < z1; z += slab) {
    const int64_t k = std::min(z1, z + slab) - z;
#pragma omp parallel for schedule(static)
    for (int64_t j = 0; j < k; ++j)
      apply_mask_rule(v, rule, (z + j) * sxy, sxy, roi ? roi + (z - z0 + j) * sxy : nullptr, m.data() + j * sxy);
    c.add(m.data(), k);
  }
  return c.finish(connectivity);
}

}  // namespace

ScoreRecord score_record(const ScoreSetup& s, const ScoreInput& pred, const ScoreInput& ref, const ScoreInput* roi,
                         bool with_json) {
  check_same_geometry(pred.volume.geometry, pred.name, ref.volume.geometry, ref.name);
  if (roi) check_same_geometry(roi->volume.geometry, roi->name, ref.volume.geometry, ref.name);
  auto input = [](const ScoreInput& in) {
    return nlohmann::ordered_json{{"path", in.path}, {"sha256_voxels", sha256_hex(in.volume.data, in.volume.bytes())}};
  };
  ScoreRecord rec;
  if (pred.volume.type != VoxelType::f32 && ref.volume.type != VoxelType::f32) {
    // Integer masks: labelled slab by slab from the inputs as they are (no mask copies); each input
    // is hashed, then released (ScoreInput::release) once its runs are made.
    const IntegerMaskRule pr = integer_mask_rule(pred.volume, s.pred, pred.name, s.pred_option, "--pred-threshold");
    const IntegerMaskRule rr =
        integer_mask_rule(ref.volume, s.ref, ref.name, s.ref_option, "the reference threshold (fixed at 0.5)");
    rec.pred_how = pr.how;
    rec.ref_how = rr.how;
    s.options.validate();
    const auto slices = scored_slices(ref.volume.geometry.dims[2], s.options);
    const int64_t z0 = slices[0], z1 = slices[1];  // plain names: lambdas below capture them (C++17)
    Mask roi_mask;  // a part mask stored wider than uint8, as 0/1
    const uint8_t* R = nullptr;
    if (roi && roi->volume.type == VoxelType::u8) R = static_cast<const uint8_t*>(roi->volume.data);
    else if (roi) roi_mask = to_mask(roi->volume), R = roi_mask.data();
    const uint8_t* R0 = R ? R + z0 * ref.volume.geometry.slice_voxels() : nullptr;
    nlohmann::ordered_json jp, jr;
    auto runs = [&](const ScoreInput& in, const IntegerMaskRule& rule, nlohmann::ordered_json& j) {
      LabelRuns c = runs_by_rule(in.volume, rule, R0, z0, z1, s.options.connectivity);
      if (with_json) j = input(in);
      if (in.release) in.release();
      return c;
    };
    {
      const LabelRuns cp = runs(pred, pr, jp);
      const LabelRuns cr = runs(ref, rr, jr);
      rec.result = score_runs(cp, cr, z0, s.options, R0);
    }
    if (!with_json) return rec;
    fill_score_json(rec, std::move(jp), std::move(jr), roi ? input(*roi) : nlohmann::ordered_json());
    return rec;
  }
  const MaskReading pred_read = read_mask_volume(pred.volume, s.pred, pred.name, s.pred_option, "--pred-threshold");
  const MaskReading ref_read =
      read_mask_volume(ref.volume, s.ref, ref.name, s.ref_option, "the reference threshold (fixed at 0.5)");
  Mask roi_mask;
  if (roi) roi_mask = to_mask(roi->volume);
  rec.pred_how = pred_read.how;
  rec.ref_how = ref_read.how;
  rec.result = score(pred_read.mask, ref_read.mask, roi ? &roi_mask : nullptr, s.options);
  // A probability map also gets the probability-map metrics (metrics/probability.hpp).
  if (pred.volume.type == VoxelType::f32 && s.pred.kind == MaskSpec::automatic)
    rec.probability = probability_metrics(static_cast<const float*>(pred.volume.data), ref_read.mask,
                                          roi ? &roi_mask : nullptr, s.options.z_begin, s.options.z_end, s.pred.threshold);
  if (!with_json) return rec;
  fill_score_json(rec, input(pred), input(ref), roi ? input(*roi) : nlohmann::ordered_json());
  return rec;
}

void fill_score_json(ScoreRecord& rec, nlohmann::ordered_json pred, nlohmann::ordered_json ref, nlohmann::ordered_json roi) {
  nlohmann::ordered_json& j = rec.json;
  j["context"] = run_context();
  j["command"] = "score";
  j["inputs"] = {{"pred", std::move(pred)}, {"ref", std::move(ref)}};
  j["inputs"]["roi"] = std::move(roi);
  j["inputs"]["pred"]["read_as"] = rec.pred_how;
  j["inputs"]["ref"]["read_as"] = rec.ref_how;
  const nlohmann::ordered_json body = to_json(rec.result);
  for (auto it = body.begin(); it != body.end(); ++it) j[it.key()] = *it;
  if (rec.probability) j["probability"] = to_json(*rec.probability);
}

void adopt_npy_geometry(AnyVolume& pv, const std::string& pred, AnyVolume& rv, const std::string& ref, AnyVolume& ov,
                        const std::string& roi, const std::function<void(const std::string&)>& say) {
  const std::string* from_name = !is_npy_path(ref) ? &ref : !is_npy_path(pred) ? &pred : nullptr;
  if (!from_name) {
    if (!roi.empty() && !is_npy_path(roi)) from_name = &roi;
    else {
      say("porebench: warning: every input is .npy (no voxel size stored): spacing 1 mm assumed, so sizes in um "
          "and counts per cm3 are in voxel units");
      return;
    }
  }
  const Geometry g = from_name == &ref ? rv.geometry() : from_name == &pred ? pv.geometry() : ov.geometry();
  auto take = [&](AnyVolume& v, const std::string& name) {
    if (!name.empty() && is_npy_path(name) && adopt_geometry(v, g))
      say("porebench: " + name + " stores no voxel size: spacing and origin of " + *from_name + " taken");
  };
  take(pv, pred);
  take(rv, ref);
  take(ov, roi);
}

}  // namespace pb
