// Probability-map metrics (see probability.hpp).
#include "metrics/probability.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <string>

#include "core/error.hpp"

namespace pb {

namespace {

double ratio(double a, double b) { return b > 0 ? a / b : NAN; }

nlohmann::ordered_json number_or_null(double v) { return std::isfinite(v) ? nlohmann::ordered_json(v) : nlohmann::ordered_json(); }

}  // namespace

ProbabilityMetrics probability_metrics(const VolumeF& prob, const Mask& ref, const Mask* roi, int64_t z0, int64_t z1,
                                       double chosen_threshold, int ece_bins) {
  if (!prob.geometry().same_dims(ref.geometry()) || (roi && !roi->geometry().same_dims(ref.geometry())))
    throw InputError("probability metrics: the probability map, reference and ROI differ in dims (" +
                     describe(prob.geometry()) + " vs " + describe(ref.geometry()) + ")");
  if (ece_bins < 1) throw InputError("probability metrics: ece_bins must be >= 1");
  const int64_t nz = ref.nz();
  if (z1 < 0 || z1 > nz) z1 = nz;
  z0 = std::max<int64_t>(0, z0);
  ProbabilityMetrics m;
  m.chosen_threshold = chosen_threshold;
  m.ece_bins = ece_bins;
  for (int k = 1; k <= 19; ++k) m.thresholds.push_back(0.05 * k);
  const size_t nt = m.thresholds.size();
  std::vector<float> tf(nt);
  for (size_t k = 0; k < nt; ++k) tf[k] = float(m.thresholds[k]);
  // calibration_curve's bins: edges = linspace(0, 1, n + 1) = i * (1 / n); bin = #inner edges < p
  std::vector<double> edges(size_t(ece_bins) + 1);
  for (int i = 0; i <= ece_bins; ++i) edges[size_t(i)] = double(i) * (1.0 / double(ece_bins));
  edges.back() = 1.0;

  // keys: the probability's bits (monotone for p >= 0) shifted left, the reference bit below
  std::vector<uint32_t> keys;
  std::vector<int64_t> tp_at(nt, 0), fp_at(nt, 0);
  std::vector<int64_t> bin_n(size_t(ece_bins), 0), bin_pos(size_t(ece_bins), 0);
  std::vector<double> bin_sum(size_t(ece_bins), 0);
  long double brier = 0;
  const int64_t sv = ref.geometry().slice_voxels();
  for (int64_t z = z0; z < z1; ++z) {
    const float* p = prob.slice(z);
    const uint8_t* r = ref.slice(z);
    const uint8_t* o = roi ? roi->slice(z) : nullptr;
    for (int64_t i = 0; i < sv; ++i) {
      if (o && !o[i]) continue;
      const float v = p[i] + 0.0f;  // -0 -> +0
      if (!(v >= 0.f && v <= 1.f)) {
        ++m.nonfinite;
        continue;
      }
      const bool y = r[i] != 0;
      ++m.voxels;
      m.positives += y;
      uint32_t bits;
      std::memcpy(&bits, &v, 4);
      keys.push_back(bits << 1 | uint32_t(y));
      const double d = double(v) - (y ? 1.0 : 0.0);
      brier += d * d;
      // thresholds: every t <= v counts v as pore
      for (size_t k = 0; k < nt && v >= tf[k]; ++k) (y ? tp_at[k] : fp_at[k])++;
      const size_t b = size_t(std::lower_bound(edges.begin() + 1, edges.end() - 1, double(v)) - (edges.begin() + 1));
      ++bin_n[b];
      bin_pos[b] += y;
      bin_sum[b] += double(v);
    }
  }
  const double n = double(m.voxels), pos = double(m.positives);
  for (size_t k = 0; k < nt; ++k) {
    const double tp = double(tp_at[k]), fp = double(fp_at[k]), fn = pos - tp;
    m.jaccard_at.push_back(ratio(tp, tp + fp + fn));
    m.porosity_bias_pp_at.push_back(m.voxels > 0 ? 100.0 * (tp + fp - pos) / n : NAN);
  }
  m.brier_score = m.voxels > 0 ? double(brier / (long double)(n)) : NAN;
  // average precision: distinct probabilities from the highest down
  std::sort(keys.begin(), keys.end());
  if (m.positives == 0) {
    m.average_precision = NAN;
  } else {
    double ap = 0, tp = 0, fp = 0, tp_prev = 0;
    for (size_t j = keys.size(); j > 0;) {
      const uint32_t value = keys[j - 1] >> 1;
      while (j > 0 && (keys[j - 1] >> 1) == value) {
        (keys[j - 1] & 1u ? tp : fp) += 1;
        --j;
      }
      ap += (tp - tp_prev) * (tp / (tp + fp));  // divided by the positives once, at the end
      tp_prev = tp;
    }
    m.average_precision = ap / pos;
  }
  double ece = 0;
  for (int b = 0; b < ece_bins; ++b) {
    if (bin_n[size_t(b)] == 0) continue;
    ReliabilityBin rb;
    rb.lo = edges[size_t(b)], rb.hi = edges[size_t(b) + 1];
    rb.count = bin_n[size_t(b)];
    rb.mean_predicted = bin_sum[size_t(b)] / double(rb.count);
    rb.fraction_positive = double(bin_pos[size_t(b)]) / double(rb.count);
    ece += double(rb.count) / n * std::abs(rb.fraction_positive - rb.mean_predicted);
    m.reliability.push_back(rb);
  }
  m.ece = m.voxels > 0 ? ece : NAN;
  return m;
}

nlohmann::ordered_json to_json(const ProbabilityMetrics& m) {
  nlohmann::ordered_json j;
  j["average_precision"] = number_or_null(m.average_precision);
  j["brier_score"] = number_or_null(m.brier_score);
  j["ece"] = number_or_null(m.ece);
  j["ece_binning"] = std::to_string(m.ece_bins) + " uniform bins on [0, 1], edges i/" + std::to_string(m.ece_bins) +
                     ", a probability on an inner edge in the lower bin (as sklearn.calibration.calibration_curve)";
  j["voxels"] = m.voxels;
  j["positives"] = m.positives;
  j["nonfinite_left_out"] = m.nonfinite;
  j["chosen_threshold"] = m.chosen_threshold;
  auto arr = [](const std::vector<double>& v) {
    nlohmann::ordered_json a = nlohmann::ordered_json::array();
    for (double x : v) a.push_back(number_or_null(x));
    return a;
  };
  j["thresholds"] = arr(m.thresholds);
  j["jaccard_at"] = arr(m.jaccard_at);
  j["porosity_bias_pp_at"] = arr(m.porosity_bias_pp_at);
  nlohmann::ordered_json rel = nlohmann::ordered_json::array();
  for (const auto& b : m.reliability)
    rel.push_back({{"lo", b.lo}, {"hi", b.hi}, {"count", b.count}, {"mean_predicted", b.mean_predicted},
                   {"fraction_positive", b.fraction_positive}});
  j["reliability"] = rel;
  return j;
}

}  // namespace pb
