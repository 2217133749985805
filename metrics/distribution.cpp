// Size-sample comparison: shared log-spaced histograms, two-sample Kolmogorov-Smirnov distance
// (Kolmogorov 1933; Smirnov 1948) and Wasserstein-1 distance (Vallender 1974) between empirical
// distribution functions. Both walk the merged sorted samples once.
#include "metrics/distribution.hpp"

#include <algorithm>
#include <cmath>

namespace pb {

std::vector<double> log_bin_edges(const std::vector<double>& a, const std::vector<double>& b, int per_decade) {
  double lo = INFINITY, hi = -INFINITY;
  for (const auto* v : {&a, &b})
    for (double x : *v)
      if (x > 0 && std::isfinite(x)) {
        lo = std::min(lo, x);
        hi = std::max(hi, x);
      }
  std::vector<double> e;
  if (!(lo <= hi)) return e;
  const int k0 = int(std::floor(std::log10(lo) * per_decade + 1e-9));
  int k1 = int(std::ceil(std::log10(hi) * per_decade - 1e-9));
  if (k1 <= k0) k1 = k0 + 1;
  for (int k = k0; k <= k1; ++k) e.push_back(std::pow(10.0, double(k) / per_decade));
  return e;
}

namespace {
std::vector<int64_t> histogram(const std::vector<double>& v, const std::vector<double>& e) {
  std::vector<int64_t> c(e.size() > 1 ? e.size() - 1 : 0, 0);
  if (c.empty()) return c;
  for (double x : v) {
    auto it = std::upper_bound(e.begin(), e.end(), x);
    int64_t k = int64_t(it - e.begin()) - 1;
    if (k == int64_t(c.size()) && x <= e.back() * (1 + 1e-12)) k = int64_t(c.size()) - 1;  // top edge inclusive
    if (k >= 0 && k < int64_t(c.size())) ++c[size_t(k)];
  }
  return c;
}

// Calls f(x_next - x, Fa, Fb) for every gap between consecutive distinct merged values, and
// g(Fa, Fb) at every distinct value (after it).
template <class Gap>
void walk_ecdf(std::vector<double>& a, std::vector<double>& b, Gap&& gap) {
  std::sort(a.begin(), a.end());
  std::sort(b.begin(), b.end());
  const double na = double(a.size()), nb = double(b.size());
  size_t i = 0, j = 0;
  while (i < a.size() || j < b.size()) {
    const double x = std::min(i < a.size() ? a[i] : INFINITY, j < b.size() ? b[j] : INFINITY);
    while (i < a.size() && a[i] == x) ++i;
    while (j < b.size() && b[j] == x) ++j;
    const double next = std::min(i < a.size() ? a[i] : INFINITY, j < b.size() ? b[j] : INFINITY);
    gap(std::isfinite(next) ? next - x : 0.0, double(i) / na, double(j) / nb);
  }
}
}  // namespace

double ks_distance(std::vector<double> a, std::vector<double> b) {
  if (a.empty() || b.empty()) return kMetricNaN;
  double d = 0;
  walk_ecdf(a, b, [&](double, double fa, double fb) { d = std::max(d, std::fabs(fa - fb)); });
  return d;
}

double wasserstein1(std::vector<double> a, std::vector<double> b) {
  if (a.empty() || b.empty()) return kMetricNaN;
  double w = 0;
  walk_ecdf(a, b, [&](double dx, double fa, double fb) { w += dx * std::fabs(fa - fb); });
  return w;
}

SizeComparison compare_sizes(const std::vector<double>& ref_um, const std::vector<double>& pred_um, int per_decade) {
  SizeComparison s;
  s.edges_um = log_bin_edges(ref_um, pred_um, per_decade);
  s.count_ref = histogram(ref_um, s.edges_um);
  s.count_pred = histogram(pred_um, s.edges_um);
  s.count_bias.resize(s.count_ref.size());
  for (size_t k = 0; k < s.count_ref.size(); ++k) s.count_bias[k] = s.count_pred[k] - s.count_ref[k];
  s.ks = ks_distance(ref_um, pred_um);
  s.wasserstein1_um = wasserstein1(ref_um, pred_um);
  return s;
}

}  // namespace pb
