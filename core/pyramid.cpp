// REDUCE step of a Gaussian pyramid (Burt & Adelson 1983): binomial [1 4 6 4 1]/16 along x, y, z
// in turn, each pass keeping every second voxel along its axis. See core/pyramid.hpp.
#include "core/pyramid.hpp"

#include <algorithm>

namespace pb {

namespace {

// Filters along the axis with stride `step` (length n) and keeps every second voxel: `lines`
// lines, line k starts at in_base(k) / out_base(k); output stride out_step.
template <class InBase, class OutBase>
void reduce_axis(const float* in, float* out, int64_t n, int64_t step, int64_t out_step, int64_t lines, InBase in_base,
                 OutBase out_base) {
  const int64_t m = (n + 1) / 2;
#pragma omp parallel for schedule(static)
  for (int64_t k = 0; k < lines; ++k) {
    const float* src = in + in_base(k);
    float* dst = out + out_base(k);
    for (int64_t i = 0; i < m; ++i) {
      const int64_t c = 2 * i;
      auto at = [&](int64_t j) { return src[std::clamp<int64_t>(j, 0, n - 1) * step]; };
      dst[i * out_step] = (at(c - 2) + at(c + 2) + 4.0f * (at(c - 1) + at(c + 1)) + 6.0f * at(c)) * (1.0f / 16.0f);
    }
  }
}

}  // namespace

VolumeF reduce2(const VolumeF& in) {
  const Geometry& g = in.geometry();
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2];
  const int64_t mx = (nx + 1) / 2, my = (ny + 1) / 2, mz = (nz + 1) / 2;
  Geometry gx = g, gy = g, go = g;
  gx.dims = {mx, ny, nz};
  gy.dims = {mx, my, nz};
  go.dims = {mx, my, mz};
  for (int d = 0; d < 3; ++d) go.spacing_mm[size_t(d)] = 2.0 * g.spacing_mm[size_t(d)];
  gx.spacing_mm = gy.spacing_mm = go.spacing_mm;
  VolumeF ax(gx, Uninitialized{}), axy(gy, Uninitialized{}), out(go, Uninitialized{});
  // x: a line per (y, z) row.
  reduce_axis(in.data(), ax.data(), nx, 1, 1, ny * nz, [&](int64_t k) { return k * nx; },
              [&](int64_t k) { return k * mx; });
  // y: a line per (x, z) column of the x-reduced volume.
  reduce_axis(ax.data(), axy.data(), ny, mx, mx, mx * nz,
              [&](int64_t k) { return (k / mx) * mx * ny + k % mx; }, [&](int64_t k) { return (k / mx) * mx * my + k % mx; });
  // z: a line per (x, y) of the x- and y-reduced volume.
  reduce_axis(axy.data(), out.data(), nz, mx * my, mx * my, mx * my, [](int64_t k) { return k; },
              [](int64_t k) { return k; });
  return out;
}

}  // namespace pb
