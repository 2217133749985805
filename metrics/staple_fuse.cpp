// STAPLE's E-step with fixed performance parameters (see metrics/staple.hpp).
#include <algorithm>
#include <cmath>
#include <stdexcept>

#include "metrics/staple.hpp"

namespace pb {

Mask staple_fuse(const std::vector<const Mask*>& masks, const std::vector<double>& sensitivity,
                 const std::vector<double>& specificity, double prior, double threshold) {
  const size_t n = masks.size();
  if (n == 0 || sensitivity.size() != n || specificity.size() != n)
    throw std::logic_error("staple_fuse: one sensitivity and one specificity per mask");
  const Geometry& g = masks[0]->geometry();
  for (const Mask* m : masks)
    if (m->geometry().dims != g.dims) throw std::logic_error("staple_fuse: masks of one grid");
  auto clamp = [](double x) { return std::min(1 - 1e-12, std::max(1e-12, x)); };
  // log(a / b) as a sum over raters: a rater that says pore adds log(p / (1 - q)), one that says
  // background adds log((1 - p) / q); W >= t  <=>  log(g a / ((1 - g) b)) >= log(t / (1 - t)).
  std::vector<double> yes(n), no(n);
  for (size_t j = 0; j < n; ++j) {
    const double p = clamp(sensitivity[j]), q = clamp(specificity[j]);
    yes[j] = std::log(p) - std::log(1 - q);
    no[j] = std::log(1 - p) - std::log(q);
  }
  const double gp = clamp(prior);
  const double base = std::log(gp) - std::log(1 - gp), cut = std::log(threshold) - std::log(1 - threshold);
  Mask out(g, Uninitialized{});
  const int64_t voxels = g.voxels();
#pragma omp parallel for schedule(static)
  for (int64_t i = 0; i < voxels; ++i) {
    double s = base;
    for (size_t j = 0; j < n; ++j) s += (*masks[j])[i] ? yes[j] : no[j];
    out[i] = s >= cut ? 1 : 0;
  }
  return out;
}

}  // namespace pb
