// Joseph's projector (Joseph 1982, IEEE TMI 1:192) of a pixel image: every ray steps over the
// image rows (or columns, whichever it crosses more steeply) and interpolates linearly along each.
// The line kernels are in projector_kernels.cpp. Conventions: ct_geometry.hpp.
#include "synthetic/projector.hpp"

#include <algorithm>
#include <cmath>
#include <vector>

#include "core/cpu.hpp"
#include "synthetic/projector_kernels.hpp"

namespace pb::synth {

Sinogram project_image(const float* img, int nx, int ny, double s, const ParallelGeometry& g, bool parallel,
                       bool simd) {
  Sinogram out(g);
  const double tau = g.bin_mm;
  using namespace kernels;
  simd = kJosephAvx512Built && simd && simd_level() == Simd::avx512;
  constexpr int slack = kJosephSlack;
  // Zero-padded copies of the rows and of the columns, so that every line is contiguous (with
  // slack at both ends of the buffers for the SIMD windows), and their differences.
  const int px = nx + 2, py = ny + 2;
  std::vector<float> rows(size_t(px) * size_t(ny) + 2 * slack, 0.f), cols(size_t(py) * size_t(nx) + 2 * slack, 0.f);
  for (int j = 0; j < ny; ++j)
    for (int i = 0; i < nx; ++i) {
      const float v = img[size_t(j) * size_t(nx) + size_t(i)];
      rows[slack + size_t(j) * size_t(px) + size_t(i + 1)] = v;
      cols[slack + size_t(i) * size_t(py) + size_t(j + 1)] = v;
    }
  std::vector<float> drows, dcols;
  if (simd) {
    drows.assign(rows.size(), 0.f);
    dcols.assign(cols.size(), 0.f);
    for (size_t i = 0; i + 1 < rows.size(); ++i) drows[i] = rows[i + 1] - rows[i];
    for (size_t i = 0; i + 1 < cols.size(); ++i) dcols[i] = cols[i + 1] - cols[i];
  }
#pragma omp parallel for schedule(static) if (parallel)
  for (int i = 0; i < g.angles; ++i) {
    const double th = g.angle_rad(i), ct = std::cos(th), st = std::sin(th);
    float* row = out.row(i);
    const bool along_y = std::abs(ct) >= std::abs(st);  // rays closer to the y axis: step over rows
    // Ray k meets line j (a row, or a column) at pixel coordinate f = f0 - shift_j + k df.
    const double c = along_y ? ct : st, o = along_y ? st : ct;
    const int n_lines = along_y ? ny : nx, n_along = along_y ? nx : ny;
    const float* lines = (along_y ? rows.data() : cols.data()) + slack;
    const float* dlines = simd ? (along_y ? drows.data() : dcols.data()) + slack : nullptr;
    const size_t pitch = size_t(n_along + 2);
    const double centre_lines = (n_lines - 1) / 2.0, centre_along = (n_along - 1) / 2.0;
    const float w = float(s / std::abs(c));
    const double df = tau / (c * s), f0 = g.bin_t_mm(0) / (c * s) + centre_along;
    const bool windows = simd && std::abs(df) <= kJosephMaxDf;
    for (int j = 0; j < n_lines; ++j) {
      const double a = f0 - (j - centre_lines) * o / c;
      // Valid k: -1 < f < n_along, i.e. the padded index stays inside the line.
      double k_lo = (-1 - a) / df, k_hi = (n_along - a) / df;
      if (k_lo > k_hi) std::swap(k_lo, k_hi);
      int k0 = std::max(0, int(std::floor(k_lo)) + 1), k1 = std::min(g.bins - 1, int(std::ceil(k_hi)) - 1);
      // Guard the ends against rounding: the float position must stay in (-1, n_along).
      auto inside = [&](int k) {
        const float f = float(a) + float(k) * float(df);
        return f > -1.0f && f < float(n_along) - 1e-3f;
      };
      while (k0 <= k1 && !inside(k0)) ++k0;
      while (k1 >= k0 && !inside(k1)) --k1;
      if (k0 > k1) continue;
      if (windows) {
        joseph_line_avx512(lines + size_t(j) * pitch, dlines + size_t(j) * pitch, a, df, k0, k1, w, row);
        continue;
      }
      joseph_line(lines + size_t(j) * pitch, float(a), float(df), k0, k1, w, row);
    }
  }
  return out;
}

}  // namespace pb::synth
