#pragma once
// The record of `porebench score --json`, shared by the command line (apps/cmd_score.cpp) and the
// Python module (python/porebench_module.cpp: porebench.score returns it as a dict): the scoring
// arguments as the command line spells them, checked with its messages; the inputs read as masks
// (metrics/mask_input.hpp) in place; the score; the probability-map metrics of a float prediction;
// the JSON (run context, inputs with their voxel hashes and how they were read, then to_json of the
// score, then the "probability" block).
#include <cstdint>
#include <functional>
#include <optional>
#include <string>

#include "core/json.hpp"
#include "core/volume.hpp"
#include "core/volume_view.hpp"
#include "metrics/mask_input.hpp"
#include "metrics/probability.hpp"
#include "metrics/score.hpp"

namespace pb {

// `porebench score`'s options, as text where the command line takes text.
struct ScoreArgs {
  std::string match = "coverage:0.5", pod_link = "logit", z_range;  // z_range "Z0:Z1" or ""
  std::string pore_label, ref_label, pred_label;                     // "", "N" or "nonzero"
  double pred_threshold = 0.5;
  bool pred_threshold_given = false;
  double max_volume_ratio = ScoreOptions{}.max_volume_ratio;
  int connectivity = 26, bootstrap = 2000;
  uint64_t seed = ScoreOptions{}.seed;
  bool no_surface = false;
};

struct ScoreSetup {
  ScoreOptions options;
  MaskSpec pred, ref;
  std::string pred_option, ref_option;  // "--pred-label"/"--ref-label", or "--pore-label"
};

// Checks every argument before any input is read; InputError with the command line's messages.
ScoreSetup score_setup(const ScoreArgs& a);

struct ScoreInput {
  VolumeView volume;
  std::string name;             // in messages: the file, or what stands for it
  nlohmann::ordered_json path;  // the record's inputs.<role>.path: the file, or null
  // Called once score_record has read (and hashed) pred or ref and no longer needs its voxels, so
  // that the owner can free them before the scoring proper (the command line does); may be empty.
  std::function<void()> release;
};

struct ScoreRecord {
  ScoreResult result;
  std::optional<ProbabilityMetrics> probability;  // a float prediction read as a probability map
  std::string pred_how, ref_how;                   // how each was read (metrics/mask_input.hpp)
  nlohmann::ordered_json json;                     // empty unless asked for
};

// Checks the geometries (InputError naming both inputs), reads pred and ref as masks and roi as a
// part mask (nullptr: the whole volume), scores; with_json also hashes the inputs and renders.
// Integer pred and ref are labelled a few slices at a time from the inputs (no mask copies; a uint8
// roi is read in place) and released after; a float volume is read as a whole mask.
ScoreRecord score_record(const ScoreSetup& s, const ScoreInput& pred, const ScoreInput& ref, const ScoreInput* roi,
                         bool with_json);

// rec.json from rec and the inputs' {"path", "sha256_voxels"} objects (roi: null when none).
void fill_score_json(ScoreRecord& rec, nlohmann::ordered_json pred, nlohmann::ordered_json ref, nlohmann::ordered_json roi);

// Inputs read from files: a .npy (no voxel size stored) takes the spacing and origin of an input
// that has them (the reference first, then the prediction, then the ROI); when every input is .npy,
// 1 mm stays and a warning says so. `say` gets one line per adoption or warning. roi may be empty.
void adopt_npy_geometry(AnyVolume& pv, const std::string& pred, AnyVolume& rv, const std::string& ref, AnyVolume& ov,
                        const std::string& roi, const std::function<void(const std::string&)>& say);

}  // namespace pb
