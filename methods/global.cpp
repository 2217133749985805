// Global histogram thresholds. Each computes one threshold from the grey-value histogram of the
// ROI; air (pores) is below it. Thresholds are reported in grey units at a bin boundary: the
// upper edge of the last bin of the dark class.
//   otsu:   Otsu N. (1979) A threshold selection method from gray-level histograms.
//           IEEE Trans. Syst. Man Cybern. 9(1):62-66. Maximises the between-class variance.
//   manual: a fixed threshold given by the user.
#include <cmath>

#include "methods/threshold.hpp"

namespace pb {

// Index k maximising the between-class variance w0*w1*(m0-m1)^2 of the split {0..k} | {k+1..}.
// Bin centres stand for the grey values, as in scikit-image's threshold_otsu.
int otsu_split(const Histogram& h) {
  const int n = h.bins();
  double total = 0, total_sum = 0;
  for (int i = 0; i < n; ++i) {
    total += double(h.counts[size_t(i)]);
    total_sum += double(h.counts[size_t(i)]) * h.centre(i);
  }
  double w0 = 0, s0 = 0, best = -1;
  int best_k = 0;
  for (int k = 0; k < n - 1; ++k) {
    w0 += double(h.counts[size_t(k)]);
    s0 += double(h.counts[size_t(k)]) * h.centre(k);
    const double w1 = total - w0;
    if (w0 <= 0 || w1 <= 0) continue;
    const double d = s0 / w0 - (total_sum - s0) / w1;
    const double between = w0 * w1 * d * d;
    if (between > best) {
      best = between;
      best_k = k;
    }
  }
  return best_k;
}

namespace {

MethodInfo otsu_info() {
  return histogram_method(
      "otsu", "Otsu's method: the threshold that maximises the between-class variance of the histogram",
      "Otsu N. (1979) A threshold selection method from gray-level histograms. IEEE Trans. Syst. Man Cybern. 9(1):62-66",
      [](const Histogram& h, const ParamValues&) { return ThresholdChoice{h.edge(otsu_split(h) + 1), {}}; });
}

MethodInfo manual_info() {
  MethodInfo m;
  m.name = "manual";
  m.family = "global";
  m.doc = "A fixed threshold in grey units given by the user: air is below it";
  m.citation = "none (user-chosen threshold)";
  m.params = {{"threshold", ParamType::Float, "", -3.4e38, 3.4e38, {}, "grey", "the threshold in grey-value units"}};
  m.run = [](const MethodInput& in, const ParamValues& p) {
    return apply_threshold(in, ThresholdChoice{p.num("threshold"), {}});
  };
  return m;
}

}  // namespace

PB_REGISTER_METHOD(otsu_info());
PB_REGISTER_METHOD(manual_info());

}  // namespace pb
