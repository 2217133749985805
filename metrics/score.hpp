#pragma once
// Scoring a predicted pore mask against a reference inside a region of interest: voxel overlap
// (Jaccard 1901, Dice 1945, volume similarity after Taha & Hanbury 2015, BMC Med. Imaging 15:29),
// porosity bias, 3D pores (connected components, default 26-connectivity) with size, centroid,
// surface and sphericity (Wadell 1935), pore matching, probability of detection (metrics/pod.hpp),
// ESD distributions (metrics/distribution.hpp) and surface distances (metrics/surface.hpp).
// One pass builds the matching; every figure derives from it. Definitions and the empty cases
// (empty ref / empty pred / both) are written down in metrics/README.md.
#include <array>
#include <cstdint>
#include <map>
#include <string>
#include <vector>

#include "core/json.hpp"
#include "core/volume.hpp"
#include "metrics/distribution.hpp"
#include "metrics/pod.hpp"
#include "metrics/surface.hpp"

namespace pb {

struct MatchRule {
  enum Kind { coverage, any, iou } kind = coverage;
  double threshold = 0.5;  // coverage fraction or IoU; unused for `any`
  std::string text() const;  // "coverage:0.5", "any", "iou:0.5"
};
// InputError naming `what` (the option or key, e.g. "--match"), the value and the valid forms.
MatchRule parse_match_rule(const std::string& s, const std::string& what = "--match");

struct ScoreOptions {
  int connectivity = 26;
  MatchRule match;
  int64_t z_begin = 0, z_end = -1;  // score slices [z_begin, z_end) only; -1 = to the last slice
  int bootstrap_samples = 2000;     // per-slice Jaccard CI
  uint64_t seed = 20261201;         // bootstrap seed
  PodLink pod_link = PodLink::logit;
  int bins_per_decade = 10;         // ESD histograms and binned POD (log-spaced, in um)
  bool surface_distances = true;
  // Robust hit rule: a ref pore is a hit only when the pred pores covering it hold at most this many
  // times its voxels, and a pred pore larger than this many times the ref pores it overlaps is a
  // false call (noise merged into one component cannot buy hits). 0 = no cap. Our default, no source.
  double max_volume_ratio = 10;
  void validate() const;            // InputError naming the field and value
};

struct Overlap {
  int64_t tp = 0, fp = 0, fn = 0, tn = 0;
  double jaccard = kMetricNaN, dice = kMetricNaN, precision = kMetricNaN, recall = kMetricNaN,
         volume_similarity = kMetricNaN;
};
Overlap overlap_from_counts(int64_t tp, int64_t fp, int64_t fn, int64_t tn);

struct Pore {
  uint32_t label = 0;
  int64_t voxels = 0;
  double volume_mm3 = 0, esd_um = 0;
  std::array<double, 3> centroid_mm{0, 0, 0};
  std::array<int64_t, 6> bbox{0, 0, 0, 0, 0, 0};  // x0 y0 z0 x1 y1 z1, inclusive, voxel indices of the input
  double surface_mm2 = 0, sphericity = 0;
  // Boundary crossings behind the surface estimate: for each of the 13 lattice directions d (one
  // of each +-pair, the first non-zero of (dz, dy, dx) positive, in raster order of (dz, dy, dx)),
  // the voxels whose neighbour at +d or -d has another label or lies outside the volume.
  std::array<int64_t, 13> crossings{};
  bool touches_border = false;  // a voxel 6-adjacent to the outside of the ROI, z-range or volume
  // Matching against the other side.
  int64_t overlap_voxels = 0;  // own voxels covered by pores of the other side
  int partners = 0;            // pores of the other side that overlap this one
  uint32_t best_partner = 0;   // label of the partner with the largest IoU (0 = none)
  double best_iou = 0;
  bool matched = false;        // ref: hit under the rule; pred: matched (iou) or overlaps a ref pore
  // ref: the pred pores covering it hold > max_volume_ratio times its voxels (never a hit);
  // pred: > max_volume_ratio times the voxels of the ref pores it overlaps (a false call).
  bool oversized = false;
};

struct PairOverlap {
  uint32_t ref, pred;
  int64_t voxels;
};

struct ScoreResult {
  ScoreOptions options;
  Geometry geometry;     // of the scored sub-volume (z-range applied)
  int64_t roi_voxels = 0;
  double roi_volume_mm3 = 0;
  Overlap overlap;
  // Per slice z (input index z_begin + k): tp, fp, fn and Jaccard (NaN where tp + fp + fn = 0).
  std::vector<int64_t> slice_tp, slice_fp, slice_fn, slice_roi;
  std::vector<double> slice_jaccard;
  double slice_jaccard_mean = kMetricNaN, slice_jaccard_ci_lo = kMetricNaN, slice_jaccard_ci_hi = kMetricNaN;
  int64_t slices_defined = 0;
  double porosity_ref_pct = kMetricNaN, porosity_pred_pct = kMetricNaN, porosity_bias_pp = kMetricNaN,
         porosity_rel_bias = kMetricNaN;
  // Index k = label k + 1. A noisy prediction has 10^5-10^6 pores: the project's buffer (large ones
  // on huge pages, core/volume.hpp), like the voxel buffers.
  Buffer<Pore> pores_ref, pores_pred;
  std::vector<PairOverlap> pairs;           // sorted by (ref, pred)
  int64_t hits = 0, misses = 0, false_calls = 0, split = 0, merged = 0;
  int64_t oversized_false_calls = 0;  // of false_calls: pred pores overlapping ref pores but oversized
  double false_calls_per_cm3 = kMetricNaN, false_calls_per_target = kMetricNaN;
  // 95 % intervals [lo, hi] by metric name (the table's ci_key is "<name>_ci95"): jaccard, dice,
  // precision, recall, porosity_bias_pp from a percentile bootstrap over slices of the pooled
  // counts; false_calls_per_cm3 from the exact Poisson interval (Garwood 1936). NaN when undefined.
  std::map<std::string, std::array<double, 2>> ci95;
  PodFit pod;
  std::vector<PodBin> pod_bins;
  SizeComparison sizes;
  SurfaceDistances surface;
  std::vector<std::string> warnings;
};

// Masks: non-zero = pore. roi: non-zero = inside (nullptr = whole volume). Geometries must match
// (InputError otherwise).
ScoreResult score(const Mask& pred, const Mask& ref, const Mask* roi, const ScoreOptions& opt = {});

// The same score from both sides labelled (label_runs with opt.connectivity, inside the ROI when
// one is given) over the scored slices, z0 being the first of them in the input (bounding boxes are
// in input slice indices): for masks read by slabs (metrics/score_slabs.hpp) or converted slab by
// slab (metrics/score_record.hpp). roi: the part mask's voxels of the scored slices (non-zero =
// inside), nullptr = none. opt.z_begin/z_end are not applied here.
struct LabelRuns;
ScoreResult score_runs(const LabelRuns& pred, const LabelRuns& ref, int64_t z0, const ScoreOptions& opt,
                       const uint8_t* roi = nullptr);
// The scored slices [z0, z1) of a volume of nz slices under opt's z range; InputError when outside.
std::array<int64_t, 2> scored_slices(int64_t nz, const ScoreOptions& opt);

// Mean of the defined values and its percentile bootstrap 95 % CI (Efron & Tibshirani 1993, ch. 13).
// NaN entries are skipped; all NaN when fewer than 2 values are defined.
std::array<double, 3> bootstrap_mean_ci(const std::vector<double>& v, int samples, uint64_t seed);

// Result record (without the context block) and one tidy CSV row per pore (both sides).
nlohmann::ordered_json to_json(const ScoreResult& r);
std::string pores_csv(const ScoreResult& r);

// JSON number, or null for NaN/Inf.
nlohmann::ordered_json json_number(double v);

}  // namespace pb
