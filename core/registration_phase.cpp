// Residual shift by phase correlation (Kuglin & Hines 1975) of block-averaged copies, with FFTW:
// the normalised cross-power spectrum of two volumes that differ by a translation is a pure phase
// ramp whose inverse transform peaks at the shift. Mean removed and a Hann window applied before
// the transform (against the edge of the field of view, common practice, no source); sub-voxel
// peak by a parabola through the peak and its two neighbours along each axis.
#include <fftw3.h>

#include <algorithm>
#include <cmath>
#include <complex>
#include <mutex>
#include <vector>

#include "core/error.hpp"
#include "core/registration.hpp"

namespace pb {

namespace {

std::mutex& plan_mutex() {  // FFTW planning is not thread-safe
  static std::mutex m;
  return m;
}

struct FftwFree {
  void operator()(void* p) const { fftwf_free(p); }
};

std::vector<float> block_mean(const VolumeF& v, int f, const std::array<int64_t, 3>& n) {
  std::vector<float> out(size_t(n[0] * n[1] * n[2]), 0.0f);
  const double w = 1.0 / double(f * f * f);
  for (int64_t z = 0; z < n[2]; ++z)
    for (int64_t y = 0; y < n[1]; ++y)
      for (int64_t x = 0; x < n[0]; ++x) {
        double s = 0;
        for (int dz = 0; dz < f; ++dz)
          for (int dy = 0; dy < f; ++dy) {
            const float* row = v.data() + v.index(x * f, y * f + dy, z * f + dz);
            for (int dx = 0; dx < f; ++dx) s += std::isnan(row[dx]) ? 0.0 : double(row[dx]);
          }
        out[size_t((z * n[1] + y) * n[0] + x)] = float(s * w);
      }
  return out;
}

void demean_window(std::vector<float>& a, const std::array<int64_t, 3>& n) {
  double mean = 0;
  for (float x : a) mean += x;
  mean /= double(a.size());
  std::array<std::vector<double>, 3> h;
  for (int k = 0; k < 3; ++k) {
    h[size_t(k)].resize(size_t(n[size_t(k)]));
    for (int64_t i = 0; i < n[size_t(k)]; ++i)
      h[size_t(k)][size_t(i)] = n[size_t(k)] > 1 ? 0.5 - 0.5 * std::cos(2 * M_PI * (double(i) + 0.5) / double(n[size_t(k)])) : 1.0;
  }
  for (int64_t z = 0; z < n[2]; ++z)
    for (int64_t y = 0; y < n[1]; ++y)
      for (int64_t x = 0; x < n[0]; ++x) {
        float& v = a[size_t((z * n[1] + y) * n[0] + x)];
        v = float((v - mean) * h[0][size_t(x)] * h[1][size_t(y)] * h[2][size_t(z)]);
      }
}

}  // namespace

ShiftEstimate estimate_shift(const VolumeF& a, const VolumeF& b, int64_t max_dim) {
  const Geometry& g = a.geometry();
  if (!g.same_dims(b.geometry()))
    throw InputError("shift estimate: the volumes differ in dims (" + describe(g) + " vs " + describe(b.geometry()) +
                     "); resample onto one grid first");
  const int64_t big = std::max({g.dims[0], g.dims[1], g.dims[2]});
  const int f = int(std::max<int64_t>(1, (big + max_dim - 1) / std::max<int64_t>(1, max_dim)));
  const std::array<int64_t, 3> n{g.dims[0] / f, g.dims[1] / f, g.dims[2] / f};
  if (n[0] < 4 || n[1] < 4 || n[2] < 4)
    throw InputError("shift estimate: volume too small (" + describe(g) + "), needs 4 voxels per axis after " +
                     std::to_string(f) + "x downsampling");
  std::vector<float> da = block_mean(a, f, n), db = block_mean(b, f, n);
  demean_window(da, n);
  demean_window(db, n);
  const int64_t nreal = n[0] * n[1] * n[2];
  const int64_t nc = n[2] * n[1] * (n[0] / 2 + 1);
  std::unique_ptr<float, FftwFree> r(static_cast<float*>(fftwf_malloc(sizeof(float) * size_t(nreal))));
  std::unique_ptr<fftwf_complex, FftwFree> fa(static_cast<fftwf_complex*>(fftwf_malloc(sizeof(fftwf_complex) * size_t(nc))));
  std::unique_ptr<fftwf_complex, FftwFree> fb(static_cast<fftwf_complex*>(fftwf_malloc(sizeof(fftwf_complex) * size_t(nc))));
  if (!r || !fa || !fb) throw std::bad_alloc();
  fftwf_plan fwd, inv;
  {
    std::lock_guard<std::mutex> lock(plan_mutex());
    fwd = fftwf_plan_dft_r2c_3d(int(n[2]), int(n[1]), int(n[0]), r.get(), fa.get(), FFTW_ESTIMATE);
    inv = fftwf_plan_dft_c2r_3d(int(n[2]), int(n[1]), int(n[0]), fa.get(), r.get(), FFTW_ESTIMATE);
  }
  std::copy(da.begin(), da.end(), r.get());
  fftwf_execute_dft_r2c(fwd, r.get(), fa.get());
  std::copy(db.begin(), db.end(), r.get());
  fftwf_execute_dft_r2c(fwd, r.get(), fb.get());
  // Cross power of b against a, normalised to unit magnitude: its inverse peaks at b's offset.
  for (int64_t i = 0; i < nc; ++i) {
    const std::complex<float> A(fa.get()[i][0], fa.get()[i][1]), B(fb.get()[i][0], fb.get()[i][1]);
    std::complex<float> c = B * std::conj(A);
    const float m = std::abs(c);
    c = m > 1e-20f ? c / m : std::complex<float>(0, 0);
    fa.get()[i][0] = c.real();
    fa.get()[i][1] = c.imag();
  }
  fftwf_execute_dft_c2r(inv, fa.get(), r.get());
  {
    std::lock_guard<std::mutex> lock(plan_mutex());
    fftwf_destroy_plan(fwd);
    fftwf_destroy_plan(inv);
  }
  const float* c = r.get();
  int64_t best = 0;
  for (int64_t i = 1; i < nreal; ++i)
    if (c[i] > c[best]) best = i;
  const int64_t p[3] = {best % n[0], (best / n[0]) % n[1], best / (n[0] * n[1])};
  ShiftEstimate e;
  e.downsample = f;
  e.peak = double(c[best]) / double(nreal);
  for (int k = 0; k < 3; ++k) {
    auto at = [&](int64_t d) {
      int64_t q[3] = {p[0], p[1], p[2]};
      q[k] = (q[k] + d + n[size_t(k)]) % n[size_t(k)];
      return double(c[(q[2] * n[1] + q[1]) * n[0] + q[0]]);
    };
    const double ym = at(-1), y0 = at(0), yp = at(1);
    const double den = ym - 2 * y0 + yp;
    const double sub = std::abs(den) > 1e-30 ? std::clamp(0.5 * (ym - yp) / den, -0.5, 0.5) : 0.0;
    double pos = double(p[k]) + sub;
    if (pos > double(n[size_t(k)]) / 2) pos -= double(n[size_t(k)]);
    e.shift_vox[k] = pos * f;
  }
  e.magnitude_vox = e.shift_vox.norm();
  return e;
}

}  // namespace pb
