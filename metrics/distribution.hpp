#pragma once
// Comparing two size samples (equivalent spherical diameters, um): histograms on shared
// log-spaced bins, count bias per bin, the two-sample Kolmogorov-Smirnov distance
// sup |F_pred - F_ref| (Kolmogorov 1933, Smirnov 1948) and the Wasserstein-1 distance
// integral |F_pred - F_ref| dx (Vallender 1974), in um. Undefined (NaN) when a sample is empty.
#include <cstdint>
#include <vector>

#include "metrics/pod.hpp"

namespace pb {

// Edges 10^(k / per_decade) covering [min, max] of the positive values (empty if none).
std::vector<double> log_bin_edges(const std::vector<double>& a, const std::vector<double>& b, int per_decade);

double ks_distance(std::vector<double> a, std::vector<double> b);
double wasserstein1(std::vector<double> a, std::vector<double> b);

struct SizeComparison {
  std::vector<double> edges_um;
  std::vector<int64_t> count_ref, count_pred, count_bias;  // bias = pred - ref
  double ks = kMetricNaN, wasserstein1_um = kMetricNaN;
};
SizeComparison compare_sizes(const std::vector<double>& ref_um, const std::vector<double>& pred_um, int per_decade);

}  // namespace pb
