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
  // States in m: 0 solid, 1 air not (yet) reached from outside, 2 air reached from outside.
  const int64_t nx = m.nx(), ny = m.ny(), nz = m.nz(), sxy = nx * ny;
  uint8_t* a = m.data();
  const uint8_t* r = roi ? roi->data() : nullptr;
  std::vector<int64_t> stack;
  auto seed = [&](int64_t i) {
    if (a[i] == 1) {
      a[i] = 2;
      stack.push_back(i);
    }
  };
  if (r) {
    // Outside the ROI every voxel counts as open air through which the outside reaches in.
    for (int64_t i = 0; i < m.size(); ++i)
      if (!r[i]) a[i] = 3;
  }
  for (int64_t z = 0; z < nz; ++z)
    for (int64_t y = 0; y < ny; ++y)
      for (int64_t x = 0; x < nx; ++x) {
        const bool border = x == 0 || y == 0 || z == 0 || x == nx - 1 || y == ny - 1 || z == nz - 1;
        const int64_t i = (z * ny + y) * nx + x;
        if (border) seed(i);
        if (a[i] == 3) {  // an outside voxel: its air neighbours are reached
          if (x > 0) seed(i - 1);
          if (x < nx - 1) seed(i + 1);
          if (y > 0) seed(i - nx);
          if (y < ny - 1) seed(i + nx);
          if (z > 0) seed(i - sxy);
          if (z < nz - 1) seed(i + sxy);
        }
      }
  while (!stack.empty()) {
    const int64_t i = stack.back();
    stack.pop_back();
    const int64_t x = i % nx, y = (i / nx) % ny, z = i / sxy;
    if (x > 0) seed(i - 1);
    if (x < nx - 1) seed(i + 1);
    if (y > 0) seed(i - nx);
    if (y < ny - 1) seed(i + nx);
    if (z > 0) seed(i - sxy);
    if (z < nz - 1) seed(i + sxy);
  }
  const int64_t n = m.size();
  int64_t part = 0;
#pragma omp parallel for schedule(static) reduction(+ : part)
  for (int64_t i = 0; i < n; ++i) {
    part += a[i] < 2;
    a[i] = a[i] == 1;
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
