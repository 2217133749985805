#include "core/histogram.hpp"

#include <omp.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <stdexcept>

namespace pb {

uint64_t Histogram::total() const {
  uint64_t t = 0;
  for (auto c : counts) t += c;
  return t;
}

int Histogram::bin_of(double v) const {
  const double f = (v - lo) / (hi - lo) * double(counts.size());
  if (!(f > 0)) return 0;                                         // below lo, -inf, NaN
  if (!(f < double(counts.size()))) return int(counts.size()) - 1;  // at or above hi, +inf
  return int(f);
}

Stats compute_stats(const float* d, int64_t n, const uint8_t* mask) {
  const int nt = omp_get_max_threads();
  std::vector<double> mins(nt, std::numeric_limits<double>::infinity()), maxs(nt, -std::numeric_limits<double>::infinity());
  std::vector<double> sums(nt, 0.0);
  std::vector<int64_t> counts(nt, 0), nans(nt, 0);
#pragma omp parallel num_threads(nt)
  {
    const int t = omp_get_thread_num();
    float lo = std::numeric_limits<float>::infinity(), hi = -lo;
    double sum = 0;
    int64_t c = 0, nn = 0;
#pragma omp for schedule(static)
    for (int64_t i = 0; i < n; ++i) {
      if (mask && !mask[i]) continue;
      const float v = d[i];
      if (!std::isfinite(v)) {  // NaN and +-inf: counted apart, never in min, max or mean
        nn += std::isnan(v);
        continue;
      }
      lo = std::min(lo, v);
      hi = std::max(hi, v);
      sum += v;
      ++c;
    }
    mins[t] = lo;
    maxs[t] = hi;
    sums[t] = sum;
    counts[t] = c;
    nans[t] = nn;
  }
  Stats s;
  double sum = 0, lo = std::numeric_limits<double>::infinity(), hi = -lo;
  for (int t = 0; t < nt; ++t) {
    lo = std::min(lo, mins[t]);
    hi = std::max(hi, maxs[t]);
    sum += sums[t];
    s.count += counts[t];
    s.nan_count += nans[t];
  }
  if (s.count > 0) {
    s.min = lo;
    s.max = hi;
    s.mean = sum / double(s.count);
  }
  return s;
}

Histogram compute_histogram(const float* d, int64_t n, double lo, double hi, int bins, const uint8_t* mask) {
  if (!std::isfinite(lo) || !std::isfinite(hi) || bins < 1)
    throw std::invalid_argument("compute_histogram: the range must be finite and bins >= 1");
  Histogram h;
  h.lo = lo;
  h.hi = hi > lo ? hi : lo + 1.0;  // a constant volume still gets a valid bin width
  h.counts.assign(size_t(bins), 0);
  const int nt = omp_get_max_threads();
  std::vector<std::vector<uint64_t>> local(size_t(nt), std::vector<uint64_t>(size_t(bins), 0));
  const float flo = float(h.lo);
  const float scale = float(double(bins) / (h.hi - h.lo));
  const int last = bins - 1;
#pragma omp parallel num_threads(nt)
  {
    uint64_t* c = local[size_t(omp_get_thread_num())].data();
#pragma omp for schedule(static)
    for (int64_t i = 0; i < n; ++i) {
      if (mask && !mask[i]) continue;
      const float v = d[i];
      if (std::isnan(v)) continue;
      float f = (v - flo) * scale;  // +-inf stay +-inf (scale is finite and > 0)
      f = f > 0.0f ? f : 0.0f;       // below lo and -inf: the first bin
      f = f < float(last) ? f : float(last);  // above hi and +inf: the last bin
      ++c[int(f)];
    }
  }
  for (const auto& l : local)
    for (int b = 0; b < bins; ++b) h.counts[size_t(b)] += l[size_t(b)];
  return h;
}

double histogram_quantile(const Histogram& h, double fraction) {
  const double target = fraction * double(h.total());
  double acc = 0;
  for (int b = 0; b < h.bins(); ++b) {
    const double c = double(h.counts[size_t(b)]);
    if (acc + c >= target && c > 0) return h.edge(b) + h.width() * (target - acc) / c;
    acc += c;
  }
  return h.hi;
}

}  // namespace pb
