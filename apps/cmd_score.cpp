// porebench score --pred MASK --ref MASK: scores a predicted pore mask against a reference inside
// an optional part mask (ROI). Prints a summary; --json writes the full record (opening with the
// run context and the input hashes), --csv one tidy row per pore. Definitions: metrics/README.md.
#include <cmath>
#include <iostream>
#include <memory>
#include <optional>

#include "apps/cli.hpp"
#include "core/error.hpp"
#include "core/format.hpp"
#include "metrics/score_record.hpp"
#include "metrics/score_slabs.hpp"

namespace pb::cli {
namespace {

std::string fmt(double v) { return format_number(v, 6, "undefined"); }

struct Args : ScoreArgs {
  std::string pred, ref, roi, json, csv, memory_limit;
  int64_t slab_slices = 0;
};

// The options of `score`; returns --pred-threshold's option (whether it was given).
CLI::Option* add_score_options(CLI::App& app, Args& a) {
  app.add_option("--pred", a.pred, "predicted pore mask: 0/1 mask, label volume (--pred-label) or float probability map (--pred-threshold)")->required();
  app.add_option("--ref", a.ref, "reference pore mask (0/1 mask, label volume with --ref-label, or synth's 0/1/2 truth labels: pores = 2)")->required();
  app.add_option("--roi", a.roi, "part mask: everything is computed inside it (default: whole volume)");
  app.add_option("--match", a.match, "pore matching rule: coverage:F, any or iou:F")->capture_default_str();
  app.add_option("--max-volume-ratio", a.max_volume_ratio,
                 "hit rule: a pore is missed when the predicted pores covering it hold more than R times its voxels (0: no cap)")
      ->capture_default_str();
  app.add_option("--connectivity", a.connectivity, "pore connectivity: 6, 18 or 26")->capture_default_str();
  app.add_option("--ref-label", a.ref_label, "the reference is a label volume: pores are voxels equal to N ('nonzero': every non-zero voxel)");
  app.add_option("--pred-label", a.pred_label, "the prediction is a label volume: pores are voxels equal to N ('nonzero': every non-zero voxel)");
  app.add_option("--pore-label", a.pore_label, "both masks are label volumes with pores = N (sets --ref-label and --pred-label)");
  auto* thr = app.add_option("--pred-threshold", a.pred_threshold,
                             "float prediction (probability map in [0, 1]): pore = value >= T (default 0.5, common practice)");
  app.add_option("--z-range", a.z_range, "score slices Z0:Z1 only (Z1 exclusive)");
  app.add_option("--pod-link", a.pod_link, "POD link function: logit or probit")->capture_default_str();
  app.add_option("--bootstrap", a.bootstrap, "bootstrap samples for the per-slice Jaccard CI")->capture_default_str();
  app.add_option("--seed", a.seed, "bootstrap seed")->capture_default_str();
  app.add_flag("--no-surface", a.no_surface, "skip the surface distances (hd95, assd)");
  app.add_option("--json", a.json, "write the full result record as JSON");
  app.add_option("--csv", a.csv, "write one row per pore (ref and pred) as CSV");
  app.add_option("--memory-limit", a.memory_limit,
                 "memory for the inputs (bytes, or e.g. 12G): above it the masks are read and scored by slabs, or "
                 "refused when they cannot be (default: half the machine's memory)");
  app.add_option("--slab-slices", a.slab_slices, "slices per slab when scoring by slabs (default: about 256 MiB of voxels)")
      ->check(CLI::Range(int64_t(1), int64_t(1) << 40));
  return thr;
}

// The record: scored by slabs above the memory limit, else from the volumes read whole.
ScoreRecord score_files(const Args& a, const ScoreSetup& setup) {
  const uint64_t limit = a.memory_limit.empty() ? default_memory_limit() : parse_memory_limit(a.memory_limit, "--memory-limit");
  if (plan_score_by_slabs(a.pred, a.ref, a.roi, setup, limit)) {
    log("porebench: --pred " + a.pred + " and --ref " + a.ref + " scored by slabs (above --memory-limit)");
    return score_record_by_slabs(setup, SlabFile(a.pred, {}), SlabFile(a.ref, {}), !a.json.empty(), a.slab_slices);
  }
  AnyVolume pv = read_volume(a.pred), rv = read_volume(a.ref);
  AnyVolume ov;
  if (!a.roi.empty()) ov = read_volume(a.roi);
  adopt_npy_geometry(pv, a.pred, rv, a.ref, ov, a.roi, [](const std::string& m) { log(m); });
  const ScoreInput roi_in{view_of(ov), a.roi, a.roi, {}};
  // pred and ref are freed as soon as their pores are labelled (peak memory: issue 16).
  return score_record(setup, {view_of(pv), a.pred, a.pred, [&pv] { pv = AnyVolume(); }},
                      {view_of(rv), a.ref, a.ref, [&rv] { rv = AnyVolume(); }}, a.roi.empty() ? nullptr : &roi_in,
                      !a.json.empty());
}

// Both outputs are rendered before either is written.
void write_outputs(const Args& a, const ScoreRecord& rec) {
  std::string json_text, csv_text;
  if (!a.json.empty()) json_text = rec.json.dump(2) + "\n";
  if (!a.csv.empty()) csv_text = pores_csv(rec.result);
  if (!json_text.empty()) write_text_atomic(a.json, json_text);
  if (!csv_text.empty()) write_text_atomic(a.csv, csv_text);
}

// The summary on standard output.
void print_summary(const ScoreRecord& rec, const ScoreOptions& o) {
  const ScoreResult& r = rec.result;
  const std::optional<ProbabilityMetrics>& pm = rec.probability;
  const Overlap& v = r.overlap;
  std::cout << "overlap: jaccard " << fmt(v.jaccard) << "  dice " << fmt(v.dice) << "  precision "
            << fmt(v.precision) << "  recall " << fmt(v.recall) << "  (tp " << v.tp << ", fp " << v.fp << ", fn "
            << v.fn << ")\n"
            << "porosity: ref " << fmt(r.porosity_ref_pct) << " %  pred " << fmt(r.porosity_pred_pct)
            << " %  bias " << fmt(r.porosity_bias_pp) << " pp\n"
            << "pores: ref " << r.pores_ref.size() << "  pred " << r.pores_pred.size() << "  hits " << r.hits
            << "  misses " << r.misses << "  false calls " << r.false_calls << " (" << fmt(r.false_calls_per_cm3)
            << " per cm3, " << fmt(r.false_calls_per_target) << " per target)  split " << r.split << "  merged " << r.merged << "  [" << o.match.text() << "]\n";
  if (r.pod.a90_95_is_bound)
    std::cout << "pod (" << r.pod.n_targets << " targets, every one hit): a90/95 <= " << fmt(r.pod.a90_95_um)
              << " um (bound: the smallest target size; no data below it)\n";
  else if (r.pod.estimable)
    std::cout << "pod (" << pod_link_name(r.pod.link) << ", " << r.pod.n_targets << " targets): a50 "
              << fmt(r.pod.a50_um) << " um  a90 " << fmt(r.pod.a90_um) << " um" << (r.pod.a90_extrapolated ? " (extrapolated)" : "")
              << "  a90/95 " << fmt(r.pod.a90_95_um) << " um (profile likelihood)"
              << (r.pod.a90_95_extrapolated ? " (extrapolated below the smallest target)" : "") << "\n";
  else
    std::cout << "pod: not estimable: " << r.pod.reason << '\n';
  std::cout << "sizes: ks " << fmt(r.sizes.ks) << "  wasserstein1 " << fmt(r.sizes.wasserstein1_um) << " um\n";
  if (o.surface_distances)
    std::cout << "surface: hd95 " << fmt(r.surface.hd95_mm) << " mm  assd " << fmt(r.surface.assd_mm) << " mm\n";
  if (pm)
    std::cout << "probability map: average precision " << fmt(pm->average_precision) << "  Brier " << fmt(pm->brier_score)
              << "  ECE " << fmt(pm->ece) << " (" << pm->ece_bins << " uniform bins)\n";
}

Action setup_score(CLI::App& app) {
  app.description("score a predicted pore mask against a reference mask");
  auto a = std::make_shared<Args>();
  CLI::Option* thr = add_score_options(app, *a);
  return [a, thr] {
    a->pred_threshold_given = thr->count() > 0;
    const ScoreSetup setup = score_setup(*a);
    if (!a->json.empty()) check_writable(a->json);
    if (!a->csv.empty()) check_writable(a->csv);
    const ScoreRecord rec = score_files(*a, setup);
    log("porebench: --pred " + a->pred + ": " + rec.pred_how);
    log("porebench: --ref " + a->ref + ": " + rec.ref_how);
    for (const auto& w : rec.result.warnings) log("porebench: warning: " + w);
    write_outputs(*a, rec);
    print_summary(rec, setup.options);
    if (!a->json.empty() || !a->csv.empty())
      std::cout << "wrote" << (a->json.empty() ? "" : " " + a->json) << (a->csv.empty() ? "" : " " + a->csv) << '\n';
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("score", 50, setup_score);

}  // namespace pb::cli
