// porebench score --pred MASK --ref MASK: scores a predicted pore mask against a reference inside
// an optional part mask (ROI). Prints a summary; --json writes the full record (opening with the
// run context and the input hashes), --csv one tidy row per pore. Definitions: metrics/README.md.
#include <cmath>
#include <iostream>
#include <memory>
#include <optional>
#include <type_traits>
#include <sstream>
#include <nlohmann/json.hpp>

#include "apps/cli.hpp"
#include "core/context.hpp"
#include "core/error.hpp"
#include "core/npy.hpp"
#include "core/sha256.hpp"
#include "metrics/mask_input.hpp"
#include "metrics/probability.hpp"
#include "metrics/score.hpp"

namespace pb::cli {
namespace {

std::string fmt(double v) {
  if (!std::isfinite(v)) return "undefined";
  std::ostringstream s;
  s << v;
  return s.str();
}

// A .npy stores no voxel size or origin: it takes those of an input that has them (the
// reference first, then the prediction); when every input is .npy, 1 mm is said aloud.
void adopt_npy_geometry(AnyVolume& pv, const std::string& pred, AnyVolume& rv, const std::string& ref,
                        AnyVolume& ov, const std::string& roi) {
  const std::string* from_name = !is_npy_path(ref) ? &ref : !is_npy_path(pred) ? &pred : nullptr;
  if (!from_name) {
    if (!roi.empty() && !is_npy_path(roi)) from_name = &roi;
    else {
      log("porebench: warning: every input is .npy (no voxel size stored): spacing 1 mm assumed, so sizes in um "
          "and counts per cm3 are in voxel units");
      return;
    }
  }
  const Geometry g = from_name == &ref ? rv.geometry() : from_name == &pred ? pv.geometry() : ov.geometry();
  auto take = [&](AnyVolume& v, const std::string& name) {
    if (!name.empty() && is_npy_path(name) && adopt_geometry(v, g))
      log("porebench: " + name + " stores no voxel size: spacing and origin of " + *from_name + " taken");
  };
  take(pv, pred);
  take(rv, ref);
  take(ov, roi);
}

Action setup_score(CLI::App& app) {
  app.description("score a predicted pore mask against a reference mask");
  struct Args {
    std::string pred, ref, roi, json, csv, match = "coverage:0.5", link = "logit", z_range;
    std::string pore_label, ref_label, pred_label;
    double pred_threshold = 0.5, max_volume_ratio = ScoreOptions{}.max_volume_ratio;
    int connectivity = 26, bootstrap = 2000;
    uint64_t seed = ScoreOptions{}.seed;
    bool no_surface = false;
  };
  auto a = std::make_shared<Args>();
  app.add_option("--pred", a->pred, "predicted pore mask: 0/1 mask, label volume (--pred-label) or float probability map (--pred-threshold)")->required();
  app.add_option("--ref", a->ref, "reference pore mask (0/1 mask, label volume with --ref-label, or synth's 0/1/2 truth labels: pores = 2)")->required();
  app.add_option("--roi", a->roi, "part mask: everything is computed inside it (default: whole volume)");
  app.add_option("--match", a->match, "pore matching rule: coverage:F, any or iou:F")->capture_default_str();
  app.add_option("--max-volume-ratio", a->max_volume_ratio,
                 "hit rule: a pore is missed when the predicted pores covering it hold more than R times its voxels (0: no cap)")
      ->capture_default_str();
  app.add_option("--connectivity", a->connectivity, "pore connectivity: 6, 18 or 26")->capture_default_str();
  app.add_option("--ref-label", a->ref_label, "the reference is a label volume: pores are voxels equal to N ('nonzero': every non-zero voxel)");
  app.add_option("--pred-label", a->pred_label, "the prediction is a label volume: pores are voxels equal to N ('nonzero': every non-zero voxel)");
  app.add_option("--pore-label", a->pore_label, "both masks are label volumes with pores = N (sets --ref-label and --pred-label)");
  auto* thr = app.add_option("--pred-threshold", a->pred_threshold,
                             "float prediction (probability map in [0, 1]): pore = value >= T (default 0.5, common practice)");
  app.add_option("--z-range", a->z_range, "score slices Z0:Z1 only (Z1 exclusive)");
  app.add_option("--pod-link", a->link, "POD link function: logit or probit")->capture_default_str();
  app.add_option("--bootstrap", a->bootstrap, "bootstrap samples for the per-slice Jaccard CI")->capture_default_str();
  app.add_option("--seed", a->seed, "bootstrap seed")->capture_default_str();
  app.add_flag("--no-surface", a->no_surface, "skip the surface distances (hd95, assd)");
  app.add_option("--json", a->json, "write the full result record as JSON");
  app.add_option("--csv", a->csv, "write one row per pore (ref and pred) as CSV");
  return [a, thr] {
    ScoreOptions o;
    o.match = parse_match_rule(a->match);
    o.connectivity = a->connectivity;
    o.max_volume_ratio = a->max_volume_ratio;
    o.pod_link = parse_pod_link(a->link);
    o.bootstrap_samples = a->bootstrap;
    o.seed = a->seed;
    o.surface_distances = !a->no_surface;
    if (!a->z_range.empty()) {
      const auto c = a->z_range.find(':');
      try {
        if (c == std::string::npos) throw std::invalid_argument("no colon");
        size_t u0 = 0, u1 = 0;
        o.z_begin = std::stoll(a->z_range.substr(0, c), &u0);
        o.z_end = std::stoll(a->z_range.substr(c + 1), &u1);
        if (u0 != c || u1 != a->z_range.size() - c - 1) throw std::invalid_argument("trailing");
      } catch (const std::logic_error&) {
        throw InputError("--z-range: '" + a->z_range + "' is not Z0:Z1 (two slice indices, Z1 exclusive)");
      }
    }
    o.validate();
    if (!a->pore_label.empty() && (!a->ref_label.empty() || !a->pred_label.empty()))
      throw InputError("--pore-label sets both --ref-label and --pred-label: give either it or them");
    MaskSpec ref_spec = parse_mask_label(a->pore_label.empty() ? a->ref_label : a->pore_label,
                                         a->pore_label.empty() ? "--ref-label" : "--pore-label");
    MaskSpec pred_spec = parse_mask_label(a->pore_label.empty() ? a->pred_label : a->pore_label,
                                          a->pore_label.empty() ? "--pred-label" : "--pore-label");
    pred_spec.threshold = a->pred_threshold;
    pred_spec.threshold_given = thr->count() > 0;
    if (!a->json.empty()) check_writable(a->json);
    if (!a->csv.empty()) check_writable(a->csv);

    AnyVolume pv = read_volume(a->pred), rv = read_volume(a->ref);
    AnyVolume ov;
    if (!a->roi.empty()) ov = read_volume(a->roi);
    adopt_npy_geometry(pv, a->pred, rv, a->ref, ov, a->roi);
    check_same_geometry(pv.geometry(), a->pred, rv.geometry(), a->ref);
    if (!a->roi.empty()) check_same_geometry(ov.geometry(), a->roi, rv.geometry(), a->ref);
    const std::string ref_opt = a->pore_label.empty() ? "--ref-label" : "--pore-label";
    const std::string pred_opt = a->pore_label.empty() ? "--pred-label" : "--pore-label";
    const MaskReading pred_read = read_mask_volume(pv, pred_spec, a->pred, pred_opt, "--pred-threshold");
    const MaskReading ref_read = read_mask_volume(rv, ref_spec, a->ref, ref_opt, "the reference threshold (fixed at 0.5)");
    log("porebench: --pred " + a->pred + ": " + pred_read.how);
    log("porebench: --ref " + a->ref + ": " + ref_read.how);
    const Mask& pred = pred_read.mask;
    const Mask& ref = ref_read.mask;
    Mask roi;
    if (!a->roi.empty()) roi = ov.to_mask();
    const ScoreResult r = score(pred, ref, a->roi.empty() ? nullptr : &roi, o);
    // A probability map also gets the probability-map metrics (metrics/probability.hpp).
    std::optional<ProbabilityMetrics> pm;
    if (pv.type() == VoxelType::f32 && pred_spec.kind == MaskSpec::automatic)
      pv.visit([&](const auto& img) {
        if constexpr (std::is_same_v<std::decay_t<decltype(img)>, VolumeF>)
          pm = probability_metrics(img, ref, a->roi.empty() ? nullptr : &roi, o.z_begin, o.z_end, pred_spec.threshold);
      });
    for (const auto& w : r.warnings) log("porebench: warning: " + w);

    // Both outputs are rendered before either is written.
    std::string json_text, csv_text;
    if (!a->json.empty()) {
      nlohmann::ordered_json j;
      j["context"] = run_context();
      j["command"] = "score";
      auto input = [](const std::string& path, const AnyVolume& v) {
        return nlohmann::ordered_json{{"path", path}, {"sha256_voxels", sha256_hex(v.raw(), v.bytes())}};
      };
      j["inputs"] = {{"pred", input(a->pred, pv)}, {"ref", input(a->ref, rv)}};
      j["inputs"]["roi"] = a->roi.empty() ? nlohmann::ordered_json() : input(a->roi, ov);
      j["inputs"]["pred"]["read_as"] = pred_read.how;
      j["inputs"]["ref"]["read_as"] = ref_read.how;
      const nlohmann::ordered_json body = to_json(r);
      for (auto it = body.begin(); it != body.end(); ++it) j[it.key()] = *it;
      if (pm) j["probability"] = to_json(*pm);
      json_text = j.dump(2) + "\n";
    }
    if (!a->csv.empty()) csv_text = pores_csv(r);
    if (!json_text.empty()) write_text_atomic(a->json, json_text);
    if (!csv_text.empty()) write_text_atomic(a->csv, csv_text);

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
    if (!a->json.empty() || !a->csv.empty())
      std::cout << "wrote" << (a->json.empty() ? "" : " " + a->json) << (a->csv.empty() ? "" : " " + a->csv) << '\n';
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("score", 50, setup_score);

}  // namespace pb::cli
