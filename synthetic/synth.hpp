#pragma once
// One phantom, its exact truth and several simulated scans of it: the in-process API (for suite
// runners) and the output contract of `porebench synth` (a folder with truth-labels.mha,
// part-mask.mha, reference-scan.mha, scan-<N>p.mha per projection count, pores.csv, recipe.toml and
// manifest.json with the SHA-256 of every file). Bit-identical for any thread count.
#include <functional>
#include <string>
#include <vector>

#include "core/json.hpp"
#include "synthetic/phantom.hpp"
#include "synthetic/recipe.hpp"
#include "synthetic/scan.hpp"

namespace pb::synth {

struct ScanResult {
  ScanSpec spec;
  VolumeF mu;  // 1/mm, float32
};

struct SynthResult {
  Recipe recipe;
  Phantom phantom;
  Truth truth;
  std::vector<ScanResult> scans;  // scans[0] is the reference scan, then scan_list order
};

// Everything in memory. `progress` (optional) is told about each step.
SynthResult synthesize(const Recipe& r, const std::function<void(const std::string&)>& progress = {});

// Scan volume as written: float32 mu (1/mm), or uint16 value = round(mu x 65535 / full_scale)
// clipped to [0, 65535] (0 -> 0, full_scale -> 65535; back: mu = value x full_scale / 65535, to
// half a step). The manifest records full_scale per scan as uint16_full_scale_mu_per_mm.
AnyVolume stored_scan(const VolumeF& mu, const Recipe& r);
double uint16_full_scale(const Recipe& r);

struct WriteSynthOptions {
  bool compress = false;
  std::function<void(const std::string&)> progress;
};

// Streams the output contract into `dir` (created if missing): truth first, then one projection
// count at a time, so that at most the scans of one projection count are held. Returns the manifest.
nlohmann::ordered_json write_synth(const Recipe& r, const std::string& dir, const WriteSynthOptions& opt = {});

}  // namespace pb::synth
