// Scoring by slabs (metrics/score_slabs.hpp): one pass per input for its value counts (how it is read
// as a mask: metrics/mask_input.hpp, the rule read_mask_volume applies), one pass per input for its
// runs, then the score from the runs.
#include "metrics/score_slabs.hpp"

#include <algorithm>

#include "core/components.hpp"
#include "core/error.hpp"

namespace pb {
namespace {

int64_t slabs_of(const Geometry& g, int64_t slab) {
  if (slab > 0) return slab;
  return std::clamp<int64_t>((int64_t(256) << 20) / std::max<int64_t>(1, g.slice_voxels() * 4), 1, std::max<int64_t>(1, g.dims[2]));
}

std::vector<int64_t> value_counts(const SlabFile& f, int64_t slab) {
  const int64_t shift = f.type() == VoxelType::i16 ? 32768 : 0;
  std::vector<int64_t> hist(f.type() == VoxelType::u8 ? 256 : 65536, 0);
  VolumeF v;  // one buffer for every slab
  for (int64_t z = 0; z < f.geometry().dims[2]; z += slab) {
    f.read_float(z, std::min(f.geometry().dims[2], z + slab), v);
    for (int64_t i = 0; i < v.size(); ++i) ++hist[size_t(int64_t(v[i]) + shift)];
  }
  return hist;
}

// The runs of the pores of f in slices [z0, z1) (geometry of those slices), read by `rule`.
LabelRuns runs_of(const SlabFile& f, const IntegerMaskRule& rule, int64_t z0, int64_t z1, int connectivity, int64_t slab) {
  RunCollector c(slab_geometry(f.geometry(), z0, z1));
  VolumeF v;  // buffers reused for every slab
  std::vector<uint8_t> m;
  const float label = float(rule.label);
  const bool nonzero = rule.nonzero;
  for (int64_t z = z0; z < z1; z += slab) {
    f.read_float(z, std::min(z1, z + slab), v);
    m.resize(size_t(v.size()));
    uint8_t* d = m.data();
    const int64_t n = v.size();
#pragma omp parallel for schedule(static)
    for (int64_t i = 0; i < n; ++i) d[i] = nonzero ? v[i] != 0 : v[i] == label;
    c.add(d, v.nz());
  }
  return c.finish(connectivity);
}

}  // namespace

uint64_t score_memory_bytes(const Geometry& g, VoxelType pred, VoxelType ref, bool roi) {
  const uint64_t per = uint64_t(voxel_type_bytes(pred) + voxel_type_bytes(ref)) + 3 + (roi ? 2 : 0);
  return saturating_product({uint64_t(std::max<int64_t>(0, g.voxels())), per});
}

bool plan_score_by_slabs(const std::string& pred, const std::string& ref, const std::string& roi, const ScoreSetup& s,
                         uint64_t limit) {
  (void)s;
  Geometry gp, gr;
  VoxelType tp = VoxelType::u8, tr = VoxelType::u8;
  if (!volume_size_from_header(pred, {}, gp, tp) || !volume_size_from_header(ref, {}, gr, tr)) return false;
  const uint64_t need = score_memory_bytes(gr, tp, tr, !roi.empty());
  if (need <= limit) return false;
  std::string why;
  if (!roi.empty()) why = "an ROI (--roi) is not read by slabs";
  else if (tp == VoxelType::f32) why = "--pred " + pred + " is a float probability map, whose metrics need every probability";
  else if (tr == VoxelType::f32) why = "--ref " + ref + " holds float voxels; a reference read by slabs is an integer mask";
  else if (const std::string w = slab_read_refusal(pred, {}); !w.empty()) why = "--pred " + pred + ": " + w;
  else if (const std::string w2 = slab_read_refusal(ref, {}); !w2.empty()) why = "--ref " + ref + ": " + w2;
  if (!why.empty())
    throw InputError("--pred " + pred + " (" + size_text(gp, tp) + ") and --ref " + ref + " (" + size_text(gr, tr) +
                     ") need about " + bytes_text(need) + " to score in memory, above --memory-limit " + bytes_text(limit) +
                     ", and cannot be scored by slabs: " + why);
  return true;
}

ScoreRecord score_record_by_slabs(const ScoreSetup& s, const SlabFile& pred, const SlabFile& ref, bool with_json,
                                  int64_t slab_slices) {
  check_same_geometry(pred.geometry(), pred.path(), ref.geometry(), ref.path());
  if (pred.type() == VoxelType::f32 || ref.type() == VoxelType::f32)
    throw InputError("score by slabs: " + (pred.type() == VoxelType::f32 ? pred.path() : ref.path()) +
                     " holds float voxels; masks read by slabs are integer volumes (probability maps are scored in memory)");
  const ScoreOptions& o = s.options;
  const auto [z0, z1] = scored_slices(ref.geometry().dims[2], o);
  const int64_t slab = slabs_of(ref.geometry(), slab_slices);
  const IntegerMaskRule pr = integer_mask_rule(pred.type(), value_counts(pred, slab), s.pred, pred.path(), s.pred_option, "--pred-threshold");
  const IntegerMaskRule rr = integer_mask_rule(ref.type(), value_counts(ref, slab), s.ref, ref.path(), s.ref_option,
                                               "the reference threshold (fixed at 0.5)");
  ScoreRecord rec;
  rec.pred_how = pr.how;
  rec.ref_how = rr.how;
  {
    const LabelRuns cp = runs_of(pred, pr, z0, z1, o.connectivity, slab);
    const LabelRuns cr = runs_of(ref, rr, z0, z1, o.connectivity, slab);
    rec.result = score_runs(cp, cr, z0, o);
  }
  if (!with_json) return rec;
  auto input = [](const SlabFile& f) { return nlohmann::ordered_json{{"path", f.path()}, {"sha256_voxels", f.sha256()}}; };
  fill_score_json(rec, input(pred), input(ref), nlohmann::ordered_json());
  return rec;
}

}  // namespace pb
