#pragma once
// Metrics of a pore-probability map (methods that yield one: neural, predictions of kind
// probability) against the reference mask, voxelwise over the ROI voxels of slices [z0, z1) (the
// whole volume without ROI; NaN voxels left out and counted). Voxelwise on the map, before the
// shared pore extraction (methods/pores.hpp), so the curve's Jaccard at the chosen threshold can
// differ from the cell's overlap Jaccard by the open pores that extraction removes.
//  - threshold curve: Jaccard and porosity bias (pp of the ROI voxels) at t = 0.05, 0.10, ..., 0.95,
//    pore = p >= t (float32 comparison, as the methods binarise); the method's chosen threshold kept
//  - average precision: sum over distinct probabilities in descending order of (R_n - R_{n-1}) P_n,
//    exact (every distinct probability visited), as scikit-learn's average_precision_score; bounded
//    memory (probability.cpp: buckets of the float bits, a few passes) instead of a sort of every voxel;
//    Zhu M. (2004) Recall, precision and average precision. Tech. rep. 2004-09, Univ. Waterloo
//  - Brier score: mean (p - y)^2; Brier G.W. (1950) Monthly Weather Review 78:1-3
//  - expected calibration error: sum_b n_b / N |fraction positive_b - mean p_b| over 10 uniform bins
//    on [0, 1] with edges i/10; a probability on an inner edge goes to the lower bin, exactly as
//    sklearn.calibration.calibration_curve(strategy="uniform") bins; Guo C. et al. (2017) On
//    calibration of modern neural networks. ICML, PMLR 70:1321-1330; Naeini M.P. et al. (2015) AAAI
//  - reliability data: per non-empty bin its edges, voxel count, mean p and fraction positive.
#include <cstdint>
#include <vector>

#include "core/json.hpp"
#include "core/volume.hpp"

namespace pb {

struct ReliabilityBin {
  double lo = 0, hi = 0;
  int64_t count = 0;
  double mean_predicted = 0, fraction_positive = 0;
};

struct ProbabilityMetrics {
  int64_t voxels = 0, positives = 0, nonfinite = 0;
  double chosen_threshold = 0.5;
  std::vector<double> thresholds, jaccard_at, porosity_bias_pp_at;  // NaN where undefined
  double average_precision = 0, brier_score = 0, ece = 0;          // NaN where undefined
  int ece_bins = 10;
  std::vector<ReliabilityBin> reliability;  // non-empty bins only
};

// z1 < 0: to the last slice. prob, ref and roi (when given) have the same dims.
ProbabilityMetrics probability_metrics(const VolumeF& prob, const Mask& ref, const Mask* roi, int64_t z0, int64_t z1,
                                       double chosen_threshold, int ece_bins = 10);
// The same on a map held elsewhere: `prob` holds ref's voxel count in porebench's layout.
// ap_memory_bytes bounds the average precision's working memory (more passes when smaller; the
// result does not depend on it).
constexpr size_t kApMemoryBytes = size_t(64) << 20;
ProbabilityMetrics probability_metrics(const float* prob, const Mask& ref, const Mask* roi, int64_t z0, int64_t z1,
                                       double chosen_threshold, int ece_bins = 10, size_t ap_memory_bytes = kApMemoryBytes);

// The "probability" block of a score record (keys in metric_table order first).
nlohmann::ordered_json to_json(const ProbabilityMetrics& m);

}  // namespace pb
