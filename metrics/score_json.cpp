// The score record (to_json) and the per-pore CSV of a ScoreResult. Headline metrics are written
// under their block and name in the metric table (metrics/metric_table.hpp), so that the record,
// criteria and compare spell them one way; the other fields are the counts and details behind them.
#include <cmath>
#include <sstream>

#include "core/error.hpp"
#include "core/format.hpp"
#include "metrics/metric_table.hpp"
#include "metrics/score.hpp"

namespace pb {

using ojson = nlohmann::ordered_json;

ojson json_number(double v) { return std::isfinite(v) ? ojson(v) : ojson(); }

namespace {

// block[name] = v for a metric of the table: the key is the table's name, and the block must be the
// table's (a mismatch is a programming error, caught by every scoring test).
void put(ojson& j, const char* block, const char* name, ojson v) {
  const MetricInfo* m = find_metric(name);
  if (!m || std::string(m->block) != block)
    throw std::logic_error(std::string("to_json: '") + name + "' is not a metric of block '" + block + "' in the metric table");
  j[block][m->name] = std::move(v);
}

// block[ci_key] = [lo, hi] for a metric whose interval is in r.ci95.
void put_ci(ojson& j, const ScoreResult& r, const char* name) {
  const MetricInfo* m = find_metric(name);
  const auto it = r.ci95.find(name);
  if (!m || !m->has_ci() || it == r.ci95.end())
    throw std::logic_error(std::string("to_json: no interval for '") + name + "' in the metric table or the result");
  j[m->block][m->ci_key] = {json_number(it->second[0]), json_number(it->second[1])};
}

}  // namespace

nlohmann::ordered_json to_json(const ScoreResult& r) {
  const auto N = [](double v) { return json_number(v); };
  ojson j;
  j["options"] = {{"connectivity", r.options.connectivity},
                  {"match", r.options.match.text()},
                  {"z_begin", r.options.z_begin},
                  {"z_end", r.options.z_begin + r.geometry.dims[2]},
                  {"bootstrap_samples", r.options.bootstrap_samples},
                  {"seed", r.options.seed},
                  {"bins_per_decade", r.options.bins_per_decade},
                  {"max_volume_ratio", r.options.max_volume_ratio}};
  j["dims"] = r.geometry.dims;
  j["spacing_mm"] = r.geometry.spacing_mm;
  j["roi_voxels"] = r.roi_voxels;
  j["roi_volume_mm3"] = N(r.roi_volume_mm3);
  const Overlap& o = r.overlap;
  j["overlap"] = {{"tp", o.tp}, {"fp", o.fp}, {"fn", o.fn}, {"tn", o.tn}};
  put(j, "overlap", "jaccard", N(o.jaccard));
  put(j, "overlap", "dice", N(o.dice));
  put(j, "overlap", "precision", N(o.precision));
  put(j, "overlap", "recall", N(o.recall));
  put(j, "overlap", "volume_similarity", N(o.volume_similarity));
  for (const char* m : {"jaccard", "dice", "precision", "recall"}) put_ci(j, r, m);
  ojson sj = ojson::array();
  for (double v : r.slice_jaccard) sj.push_back(N(v));
  j["slices"] = ojson::object();
  put(j, "slices", "slice_jaccard_mean", N(r.slice_jaccard_mean));
  j["slices"][find_metric("slice_jaccard_mean")->ci_key] = {N(r.slice_jaccard_ci_lo), N(r.slice_jaccard_ci_hi)};
  j["slices"]["defined"] = r.slices_defined;
  j["slices"]["jaccard"] = sj;
  j["porosity"] = {{"porosity_ref_pct", N(r.porosity_ref_pct)}, {"porosity_pred_pct", N(r.porosity_pred_pct)}};
  put(j, "porosity", "porosity_bias_pp", N(r.porosity_bias_pp));
  put(j, "porosity", "porosity_rel_bias", N(r.porosity_rel_bias));
  put_ci(j, r, "porosity_bias_pp");
  j["pores"] = {{"pores_ref", r.pores_ref.size()}, {"pores_pred", r.pores_pred.size()}};
  put(j, "pores", "hits", r.hits);
  put(j, "pores", "misses", r.misses);
  put(j, "pores", "false_calls", r.false_calls);
  put(j, "pores", "false_calls_per_cm3", N(r.false_calls_per_cm3));
  put_ci(j, r, "false_calls_per_cm3");
  put(j, "pores", "false_calls_per_target", N(r.false_calls_per_target));
  j["pores"]["oversized_false_calls"] = r.oversized_false_calls;
  put(j, "pores", "split", r.split);
  put(j, "pores", "merged", r.merged);
  const PodFit& p = r.pod;
  ojson& pj = j["pod"];
  pj["link"] = pod_link_name(p.link);
  pj["n_targets"] = p.n_targets;
  pj["n_hits"] = p.n_hits;
  pj["estimable"] = p.estimable;
  pj["reason"] = p.estimable ? ojson() : ojson(p.reason);
  pj["converged"] = p.converged;
  pj["iterations"] = p.iterations;
  pj["b0"] = N(p.b0);
  pj["b1"] = N(p.b1);
  pj["covariance"] = {{N(p.cov00), N(p.cov01)}, {N(p.cov01), N(p.cov11)}};
  pj["deviance"] = N(p.deviance);
  put(j, "pod", "a50_um", N(p.a50_um));
  put(j, "pod", "a90_um", N(p.a90_um));
  put(j, "pod", "a90_95_um", N(p.a90_95_um));
  // "<=": every target hit, a90_95_um is the bound "at most the smallest target size".
  pj["a90_95_relation"] = p.a90_95_is_bound ? "<=" : std::isfinite(p.a90_95_um) ? "=" : "";
  pj["smallest_target_um"] = N(p.smallest_target_um);
  pj["a90_extrapolated"] = p.a90_extrapolated;
  pj["a90_95_extrapolated"] = p.a90_95_extrapolated;
  if (!p.a90_95_reason.empty()) pj["a90_95_reason"] = p.a90_95_reason;
  pj["a90_95_wald_um"] = N(p.a90_95_wald_um);
  pj["a90_95_wald_note"] = "delta method on ln a90, one-sided 95 %";
  ojson bins = ojson::array();
  for (const auto& b : r.pod_bins)
    bins.push_back({{"lo_um", b.lo_um}, {"hi_um", b.hi_um}, {"n", b.n}, {"hits", b.hits}, {"pod", N(b.pod)},
                    {"ci95", {N(b.ci_lo), N(b.ci_hi)}}});
  pj["bins"] = bins;
  ojson band = ojson::array();
  for (const auto& b : p.band) band.push_back({N(b.size_um), N(b.pod), N(b.lo)});
  pj["band"] = {{"kind", "one-sided 95 % lower likelihood-ratio bound (chi2_1(0.90) = 2.706), its 0.9 crossing = a90/95"},
                {"columns", {"size_um", "pod", "lower"}},
                {"points", band}};
  pj["warnings"] = p.warnings;
  j["sizes"] = {{"edges_um", r.sizes.edges_um},
                {"count_ref", r.sizes.count_ref},
                {"count_pred", r.sizes.count_pred},
                {"count_bias", r.sizes.count_bias}};
  put(j, "sizes", "ks", N(r.sizes.ks));
  put(j, "sizes", "wasserstein1_um", N(r.sizes.wasserstein1_um));
  j["surface"] = ojson::object();
  put(j, "surface", "hd95_mm", N(r.surface.hd95_mm));
  put(j, "surface", "assd_mm", N(r.surface.assd_mm));
  j["surface"]["surface_voxels_ref"] = r.surface.surface_voxels_ref;
  j["surface"]["surface_voxels_pred"] = r.surface.surface_voxels_pred;
  j["warnings"] = r.warnings;
  return j;
}

std::string pores_csv(const ScoreResult& r) {
  std::ostringstream s;
  s << "side,label,voxels,volume_mm3,esd_um,centroid_x_mm,centroid_y_mm,centroid_z_mm,bbox_x0,bbox_y0,bbox_z0,"
       "bbox_x1,bbox_y1,bbox_z1,surface_mm2,sphericity,touches_border,overlap_voxels,partners,best_partner,"
       "best_iou,matched,oversized\n";
  auto num = [&](double v) { s << format_number(v, 10, "NaN"); };
  for (int side = 0; side < 2; ++side)
    for (const auto& p : side == 0 ? r.pores_ref : r.pores_pred) {
      s << (side == 0 ? "ref" : "pred") << ',' << p.label << ',' << p.voxels << ',';
      num(p.volume_mm3), s << ',';
      num(p.esd_um), s << ',';
      for (double c : p.centroid_mm) num(c), s << ',';
      for (int64_t b : p.bbox) s << b << ',';
      num(p.surface_mm2), s << ',';
      num(p.sphericity), s << ',';
      s << int(p.touches_border) << ',' << p.overlap_voxels << ',' << p.partners << ',' << p.best_partner << ',';
      num(p.best_iou), s << ',';
      s << int(p.matched) << ',' << int(p.oversized) << '\n';
    }
  return s.str();
}

}  // namespace pb
