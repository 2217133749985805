// Probability-map metrics (see probability.hpp).
#include "metrics/probability.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <vector>
#include <string>

#include "core/error.hpp"

namespace pb {

namespace {

double ratio(double a, double b) { return b > 0 ? a / b : NAN; }

nlohmann::ordered_json number_or_null(double v) { return std::isfinite(v) ? nlohmann::ordered_json(v) : nlohmann::ordered_json(); }

}  // namespace

namespace {

// Average precision without sorting every voxel. A probability p in [0, 1] is identified by its
// float32 bits v < 2^30 (monotone in p for p >= 0); v >> 15 is its bucket (at most 32513), v & 0x7fff
// its place in the bucket. Pass 0 (in probability_metrics) counts voxels per bucket. The buckets are
// then taken from the highest down in groups that fit `memory_bytes`: a bucket of many voxels is
// counted in a dense array of its 32768 places (tp and fp per place, 512 KiB), a bucket of few has
// its voxels' keys (v << 1 | y) collected and sorted; one more pass over the voxels fills a group.
// The distinct probabilities are visited in descending order with the same sums as a full sort, so
// the result is the same to the last bit; memory is at most about memory_bytes instead of 4 bytes
// per ROI voxel.
constexpr int kLowBits = 15;
constexpr uint32_t kPlaces = 1u << kLowBits;
constexpr size_t kBuckets = (0x3F800000u >> kLowBits) + 1;

struct ApInput {
  const float* prob;
  const Mask& ref;
  const Mask* roi;
  int64_t z0, z1;
};

// Calls f(bits, y) for every ROI voxel of slices [z0, z1) with a probability in [0, 1]; counts the
// others (NaN, outside [0, 1]) into *skipped when given.
template <class F>
void for_each_voxel(const ApInput& in, F&& f, int64_t* skipped = nullptr) {
  const int64_t sv = in.ref.geometry().slice_voxels();
  for (int64_t z = in.z0; z < in.z1; ++z) {
    const float* p = in.prob + z * sv;
    const uint8_t* r = in.ref.slice(z);
    const uint8_t* o = in.roi ? in.roi->slice(z) : nullptr;
    for (int64_t i = 0; i < sv; ++i) {
      if (o && !o[i]) continue;
      const float v = p[i] + 0.0f;  // -0 -> +0
      if (!(v >= 0.f && v <= 1.f)) {
        if (skipped) ++*skipped;
        continue;
      }
      uint32_t bits;
      std::memcpy(&bits, &v, 4);
      f(bits, r[i] != 0);
    }
  }
}

double average_precision(const ApInput& in, const std::vector<int64_t>& bucket_n, double positives, size_t memory_bytes) {
  constexpr size_t dense_bytes = size_t(kPlaces) * 2 * sizeof(uint64_t);
  double ap = 0, tp = 0, fp = 0, tp_prev = 0;
  auto visit = [&](double dtp, double dfp) {  // one distinct probability, from the highest down
    tp += dtp;
    fp += dfp;
    ap += (tp - tp_prev) * (tp / (tp + fp));  // divided by the positives once, at the end
    tp_prev = tp;
  };
  std::vector<int32_t> dense_slot(kBuckets, -1);
  std::vector<uint32_t> keys;
  std::vector<uint64_t> dense;
  size_t hi = kBuckets;  // buckets [lo, hi) form the group
  while (hi > 0) {
    // the group: buckets downwards from hi - 1 while they fit (one bucket at least)
    size_t lo = hi, bytes = 0, n_keys = 0, n_dense = 0;
    while (lo > 0) {
      const size_t n = size_t(bucket_n[lo - 1]);
      const size_t cost = std::min(n * sizeof(uint32_t), dense_bytes);
      if (n > 0 && bytes > 0 && bytes + cost > memory_bytes) break;
      bytes += cost;
      --lo;
      if (n * sizeof(uint32_t) > dense_bytes) dense_slot[lo] = int32_t(n_dense++);
      else n_keys += n;
    }
    if (bytes == 0) break;  // only empty buckets left
    keys.clear();
    keys.reserve(n_keys);
    dense.assign(n_dense * kPlaces * 2, 0);
    for_each_voxel(in, [&](uint32_t bits, bool y) {
      const size_t b = bits >> kLowBits;
      if (b < lo || b >= hi) return;
      if (dense_slot[b] >= 0) ++dense[(size_t(dense_slot[b]) * kPlaces + (bits & (kPlaces - 1))) * 2 + y];
      else keys.push_back(bits << 1 | uint32_t(y));
    });
    std::sort(keys.begin(), keys.end());
    size_t j = keys.size();
    for (size_t b = hi; b-- > lo;) {
      if (dense_slot[b] >= 0) {
        const uint64_t* d = dense.data() + size_t(dense_slot[b]) * kPlaces * 2;
        for (size_t k = kPlaces; k-- > 0;)
          if (d[2 * k] | d[2 * k + 1]) visit(double(d[2 * k + 1]), double(d[2 * k]));
        continue;
      }
      while (j > 0 && (keys[j - 1] >> 1 >> kLowBits) == b) {
        const uint32_t value = keys[j - 1] >> 1;
        double dtp = 0, dfp = 0;
        while (j > 0 && (keys[j - 1] >> 1) == value) {
          (keys[j - 1] & 1u ? dtp : dfp) += 1;
          --j;
        }
        visit(dtp, dfp);
      }
    }
    hi = lo;
  }
  return ap / positives;
}

}  // namespace

ProbabilityMetrics probability_metrics(const VolumeF& prob, const Mask& ref, const Mask* roi, int64_t z0, int64_t z1,
                                       double chosen_threshold, int ece_bins) {
  if (!prob.geometry().same_dims(ref.geometry()))
    throw InputError("probability metrics: the probability map and the reference differ in dims (" +
                     describe(prob.geometry()) + " vs " + describe(ref.geometry()) + ")");
  return probability_metrics(prob.data(), ref, roi, z0, z1, chosen_threshold, ece_bins);
}

ProbabilityMetrics probability_metrics(const float* prob, const Mask& ref, const Mask* roi, int64_t z0, int64_t z1,
                                       double chosen_threshold, int ece_bins, size_t ap_memory_bytes) {
  if (roi && !roi->geometry().same_dims(ref.geometry()))
    throw InputError("probability metrics: the ROI and the reference differ in dims (" + describe(roi->geometry()) +
                     " vs " + describe(ref.geometry()) + ")");
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

  std::vector<int64_t> bucket_n(kBuckets, 0);  // voxels per bucket of the average precision
  std::vector<int64_t> tp_at(nt, 0), fp_at(nt, 0);
  std::vector<int64_t> bin_n(size_t(ece_bins), 0), bin_pos(size_t(ece_bins), 0);
  std::vector<double> bin_sum(size_t(ece_bins), 0);
  long double brier = 0;
  const ApInput in{prob, ref, roi, z0, z1};
  for_each_voxel(in, [&](uint32_t bits, bool y) {
    float v;
    std::memcpy(&v, &bits, 4);
    ++m.voxels;
    m.positives += y;
    ++bucket_n[bits >> kLowBits];
    const double d = double(v) - (y ? 1.0 : 0.0);
    brier += d * d;
    // thresholds: every t <= v counts v as pore
    for (size_t k = 0; k < nt && v >= tf[k]; ++k) (y ? tp_at[k] : fp_at[k])++;
    const size_t b = size_t(std::lower_bound(edges.begin() + 1, edges.end() - 1, double(v)) - (edges.begin() + 1));
    ++bin_n[b];
    bin_pos[b] += y;
    bin_sum[b] += double(v);
  }, &m.nonfinite);
  const double n = double(m.voxels), pos = double(m.positives);
  for (size_t k = 0; k < nt; ++k) {
    const double tp = double(tp_at[k]), fp = double(fp_at[k]), fn = pos - tp;
    m.jaccard_at.push_back(ratio(tp, tp + fp + fn));
    m.porosity_bias_pp_at.push_back(m.voxels > 0 ? 100.0 * (tp + fp - pos) / n : NAN);
  }
  m.brier_score = m.voxels > 0 ? double(brier / (long double)(n)) : NAN;
  m.average_precision = m.positives == 0 ? NAN : average_precision(in, bucket_n, pos, ap_memory_bytes);
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
