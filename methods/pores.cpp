#include "methods/pores.hpp"

#include <vector>

#include "metrics/ccl.hpp"

namespace pb {

Mask air_below(const VolumeF& v, double threshold, const Mask* roi) {
  Mask air(v.geometry());
  const float t = float(threshold);
  const float* d = v.data();
  uint8_t* a = air.data();
  const uint8_t* r = roi ? roi->data() : nullptr;
  const int64_t n = v.size();
  // Note: in float, v < t with t rounded to float; NaN compares false, so NaN is never air.
#pragma omp parallel for schedule(static)
  for (int64_t i = 0; i < n; ++i) a[i] = (d[i] < t) && (!r || r[i]);
  return air;
}

int64_t air_to_pores(Mask& m, const Mask* roi) {
  // Label air and the outside of the ROI together (6-connected, with our run-based CCL); a
  // component that reaches the volume border or holds an outside voxel is background. The same
  // as a flood fill from the outside through air, but parallel and cache-friendly.
  const int64_t nx = m.nx(), ny = m.ny(), nz = m.nz(), n = m.size();
  uint8_t* a = m.data();
  const uint8_t* r = roi ? roi->data() : nullptr;
  Mask open(m.geometry());
  uint8_t* o = open.data();
#pragma omp parallel for schedule(static)
  for (int64_t i = 0; i < n; ++i) o[i] = a[i] || (r && !r[i]);
  const Components c = label_components(open, 6);
  std::vector<uint8_t> outside(size_t(c.count) + 1, 0);
  const uint32_t* l = c.labels.data();
  auto mark = [&](int64_t i) { outside[l[i]] = 1; };
  for (int64_t z = 0; z < nz; ++z)
    for (int64_t y = 0; y < ny; ++y) {
      const int64_t row = (z * ny + y) * nx;
      if (z == 0 || z == nz - 1 || y == 0 || y == ny - 1) {
        for (int64_t x = 0; x < nx; ++x) mark(row + x);
      } else {
        mark(row);
        mark(row + nx - 1);
      }
    }
  if (r)
    for (int64_t i = 0; i < n; ++i)
      if (!r[i]) mark(i);
  outside[0] = 0;  // label 0 is solid
  int64_t part = 0;
#pragma omp parallel for schedule(static) reduction(+ : part)
  for (int64_t i = 0; i < n; ++i) {
    const bool bg = outside[l[i]] != 0;
    part += !bg && (!r || r[i]);
    a[i] = a[i] && !bg;
  }
  return part;
}

int64_t count_nonzero(const Mask& m) {
  int64_t c = 0;
  const uint8_t* a = m.data();
  const int64_t n = m.size();
#pragma omp parallel for reduction(+ : c) schedule(static)
  for (int64_t i = 0; i < n; ++i) c += a[i] != 0;
  return c;
}

}  // namespace pb

namespace pb {

int64_t remove_small_pores(Mask& pores, int64_t min_voxels) {
  const Components c = label_components(pores, 26);
  std::vector<uint8_t> keep(size_t(c.count) + 1, 0);
  int64_t removed = 0;
  for (uint32_t k = 1; k <= c.count; ++k) {
    keep[k] = c.sizes[k] >= min_voxels;
    removed += !keep[k];
  }
  const uint32_t* l = c.labels.data();
  uint8_t* a = pores.data();
  const int64_t n = pores.size();
#pragma omp parallel for schedule(static)
  for (int64_t i = 0; i < n; ++i) a[i] = keep[l[i]];
  return removed;
}

}  // namespace pb
