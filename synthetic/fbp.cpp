// Filtered back-projection: the windowed ramp filter through FFTW and the back-projection driver
// (generic path; the SIMD tiles are in bp_kernels.cpp). Sources: Kak & Slaney (1988) Principles of
// Computerized Tomographic Imaging, ch. 3 (eq. 3.61 spatial-domain ramp, eq. 3.60 sum pi/N), window
// definitions as in Kak & Slaney / scikit-image iradon. Conventions: ct_geometry.hpp.
#include "synthetic/fbp.hpp"

#include <fftw3.h>

#include <algorithm>
#include <cmath>
#include <memory>
#include <mutex>

#include "core/cpu.hpp"
#include "core/error.hpp"
#include "synthetic/bp_kernels.hpp"

namespace pb::synth {

namespace {
std::mutex& fftw_planner_mutex() {  // FFTW's planner is not thread-safe; execution is.
  static std::mutex m;
  return m;
}
}  // namespace

RampWindow parse_window(const std::string& n) {
  if (n == "ram-lak" || n == "ramp") return RampWindow::RamLak;
  if (n == "shepp-logan") return RampWindow::SheppLogan;
  if (n == "cosine") return RampWindow::Cosine;
  if (n == "hamming") return RampWindow::Hamming;
  if (n == "hann") return RampWindow::Hann;
  throw InputError("filter '" + n + "' is not known; filters: ram-lak, shepp-logan, cosine, hamming, hann");
}

Fbp::Fbp(const ParallelGeometry& g, RampWindow w) : g_(g) {
  if (g.angles < 1 || g.bins < 2) throw InputError("FBP needs >= 1 angle and >= 2 detector bins");
  pad_ = 64;
  while (pad_ < 2 * g.bins) pad_ *= 2;  // zero padding to >= 2 x bins: no circular wrap-around
  const int nf = pad_ / 2 + 1;
  std::lock_guard<std::mutex> lock(fftw_planner_mutex());
  buf_ = static_cast<float*>(fftwf_malloc(sizeof(float) * size_t(pad_) + sizeof(fftwf_complex) * size_t(nf)));
  auto* spec = reinterpret_cast<fftwf_complex*>(buf_ + pad_);
  fwd_ = fftwf_plan_dft_r2c_1d(pad_, buf_, spec, FFTW_ESTIMATE);
  inv_ = fftwf_plan_dft_c2r_1d(pad_, spec, buf_, FFTW_ESTIMATE);
  // Spatial-domain ramp (Kak & Slaney eq. 3.61, tau = 1 bin): h(0) = 1/4, h(odd n) = -1/(n pi)^2.
  // Built in space and transformed, so the DC term is right (no zero-frequency bias).
  std::vector<double> h(size_t(pad_), 0.0);
  h[0] = 0.25;
  for (int n = 1; n < pad_ / 2; n += 2) h[size_t(n)] = h[size_t(pad_ - n)] = -1.0 / (M_PI * M_PI * n * n);
  response_.assign(size_t(nf), 0.f);
  for (int j = 0; j < nf; ++j) {
    double re = 0;  // H is real (h is even)
    for (int n = 0; n < pad_; ++n) re += h[size_t(n)] * std::cos(2 * M_PI * double(j) * n / pad_);
    const double f = double(j) / pad_;  // cycles per bin, 0..0.5
    double win = 1;
    switch (w) {
      case RampWindow::RamLak: break;
      case RampWindow::SheppLogan: win = j == 0 ? 1.0 : std::sin(M_PI * f) / (M_PI * f); break;
      case RampWindow::Cosine: win = std::cos(M_PI * f); break;
      case RampWindow::Hamming: win = 0.54 + 0.46 * std::cos(2 * M_PI * f); break;
      case RampWindow::Hann: win = 0.5 + 0.5 * std::cos(2 * M_PI * f); break;
    }
    // 1/tau turns the per-bin ramp into 1/mm; 1/pad undoes FFTW's unnormalised inverse.
    response_[size_t(j)] = float(re * win / (g.bin_mm * pad_));
  }
}

Fbp::~Fbp() {
  std::lock_guard<std::mutex> lock(fftw_planner_mutex());
  if (fwd_) fftwf_destroy_plan(static_cast<fftwf_plan>(fwd_));
  if (inv_) fftwf_destroy_plan(static_cast<fftwf_plan>(inv_));
  if (buf_) fftwf_free(buf_);
}

void Fbp::filter_row(const float* in, float* out, float* work) const {
  auto* spec = reinterpret_cast<fftwf_complex*>(work + pad_);
  std::copy(in, in + g_.bins, work);
  std::fill(work + g_.bins, work + pad_, 0.f);
  fftwf_execute_dft_r2c(static_cast<fftwf_plan>(fwd_), work, spec);
  for (int j = 0; j < pad_ / 2 + 1; ++j) {
    spec[j][0] *= response_[size_t(j)];
    spec[j][1] *= response_[size_t(j)];
  }
  fftwf_execute_dft_c2r(static_cast<fftwf_plan>(inv_), spec, work);
  std::copy(work, work + g_.bins, out);
}

void Fbp::filter(Sinogram& sino) {
  if (sino.geo.bins != g_.bins || sino.geo.angles != g_.angles) throw InputError("FBP: sinogram geometry differs from the filter's");
  for (int i = 0; i < g_.angles; ++i) filter_row(sino.row(i), sino.row(i), buf_);
}

bool bp_kernel_supported(BpKernel k) {
  switch (k) {
    case BpKernel::Auto:
    case BpKernel::Generic: return true;
    case BpKernel::Avx2: return simd_level() != Simd::generic;
    case BpKernel::Avx512: return simd_level() == Simd::avx512;
  }
  return false;
}

BpKernel best_bp_kernel() {
  switch (simd_level()) {
    case Simd::avx512: return BpKernel::Avx512;
    case Simd::avx2: return BpKernel::Avx2;
    default: return BpKernel::Generic;
  }
}

const char* bp_kernel_name(BpKernel k) {
  switch (k) {
    case BpKernel::Auto: return "auto";
    case BpKernel::Generic: return "generic";
    case BpKernel::Avx2: return "avx2";
    case BpKernel::Avx512: return "avx512";
  }
  return "?";
}

void Fbp::backproject(const Sinogram& f, int nx, int ny, double s, float* out, bool parallel, BpKernel kernel) const {
  back_project(f, false, nx, ny, s, out, parallel, kernel);
}

void Fbp::back_project(const Sinogram& f, bool filter_rows, int nx, int ny, double s, float* out, bool parallel,
                       BpKernel kernel) const {
  const BpKernel kern = checked_kernel(f, nx, ny, s, kernel);
  const Steps st = steps(nx, ny, s);
  if (bp::kSimdBuilt && kern != BpKernel::Generic)
    back_project_simd(f, filter_rows, st, nx, ny, out, parallel, kern == BpKernel::Avx512);
  else
    back_project_generic(f, filter_rows, st, nx, ny, out, parallel);
}

BpKernel Fbp::checked_kernel(const Sinogram& f, int nx, int ny, double s, BpKernel kernel) const {
  const int nb = g_.bins, na = g_.angles;
  if (f.geo.bins != nb || f.geo.angles != na) throw InputError("FBP: sinogram geometry differs from the filter's");
  const double diag_bins = std::sqrt(double(nx) * nx + double(ny) * ny) * s / g_.bin_mm;
  if (nb < diag_bins + 1)
    throw InputError("FBP: detector of " + std::to_string(nb) + " bins is narrower than the slice diagonal (" +
                     std::to_string(diag_bins) + " bins)");
  const BpKernel kern = kernel == BpKernel::Auto ? best_bp_kernel() : kernel;
  if (!bp_kernel_supported(kern))
    throw InputError(std::string("FBP: back-projection kernel '") + bp_kernel_name(kern) + "' is not supported by this CPU");
  return kern;
}

Fbp::Steps Fbp::steps(int nx, int ny, double s) const {
  const int nb = g_.bins, na = g_.angles;
  const double cx = (nx - 1) / 2.0, cy = (ny - 1) / 2.0, cb = (nb - 1) / 2.0;
  Steps st;
  st.du.resize(size_t(na));
  st.su.resize(size_t(na));
  st.u00.resize(size_t(na));
  for (int a = 0; a < na; ++a) {
    st.du[size_t(a)] = std::cos(g_.angle_rad(a)) * s / g_.bin_mm;
    st.su[size_t(a)] = std::sin(g_.angle_rad(a)) * s / g_.bin_mm;
    st.u00[size_t(a)] = -cx * st.du[size_t(a)] - cy * st.su[size_t(a)] + cb;  // u of pixel (0, 0)
  }
  return st;
}

void Fbp::back_project_generic(const Sinogram& f, bool filter_rows, const Steps& st, int nx, int ny, float* out,
                               bool parallel) const {
  const int na = g_.angles;
  const float scale = float(M_PI / na);  // Kak & Slaney eq. 3.60: f = pi/N sum_i Q_i (180 and 360 arcs)
  Sinogram filtered(filter_rows ? g_ : ParallelGeometry{});
  if (filter_rows) {  // only reconstruct() (non-const) gets here: buf_ is the object's own buffer
    std::copy(f.data.begin(), f.data.end(), filtered.data.begin());
    for (int a = 0; a < na; ++a) filter_row(filtered.row(a), filtered.row(a), buf_);
  }
  const Sinogram& src = filter_rows ? filtered : f;
  // One row at a time, angles in order; u in double, so this is also the reference of the SIMD
  // kernels. The detector covers the diagonal: 0 <= u < bins - 1 for every pixel.
#pragma omp parallel for schedule(static) if (parallel)
  for (int j = 0; j < ny; ++j) {
    std::vector<float> acc(size_t(nx), 0.f);
    for (int a = 0; a < na; ++a) {
      const float* q = src.row(a);
      const double u0 = st.u00[size_t(a)] + j * st.su[size_t(a)], d = st.du[size_t(a)];
      for (int i = 0; i < nx; ++i) {
        const double u = u0 + i * d;
        const int k = int(u);
        const float w = float(u - k);
        acc[size_t(i)] += q[k] + w * (q[k + 1] - q[k]);
      }
    }
    float* o = out + size_t(j) * size_t(nx);
    for (int i = 0; i < nx; ++i) o[i] += scale * acc[size_t(i)];
  }
}

void Fbp::back_project_simd(const Sinogram& f, bool filter_rows, const Steps& st, int nx, int ny, float* out,
                            bool parallel, bool avx512) const {
  using namespace bp;
  const int nb = g_.bins, na = g_.angles;
  const float scale = float(M_PI / na);  // Kak & Slaney eq. 3.60
  const int lanes = avx512 ? 16 : 8, R = avx512 ? kRows512 : kRows256;
  BpPlan p;
  p.allocate(na, nb);
  p.u00.resize(size_t(na));
  p.du = st.du;
  p.su = st.su;
  p.du_f.resize(size_t(na));
  for (int a = 0; a < na; ++a) {
    p.u00[size_t(a)] = st.u00[size_t(a)] + kFront;
    p.du_f[size_t(a)] = float(st.du[size_t(a)]);
  }
  // Row groups of R rows (the last one may be shorter), split evenly over the threads.
  const int stride = round_up(nx, lanes), n_groups = (ny + R - 1) / R;
  // One parallel region: (filter and) pad the rows, then the row groups.
#pragma omp parallel if (parallel)
  {
    const size_t work_bytes = sizeof(float) * size_t(pad_) + sizeof(fftwf_complex) * size_t(pad_ / 2 + 1);
    std::unique_ptr<float, void (*)(void*)> work(
        filter_rows ? static_cast<float*>(fftwf_malloc(work_bytes)) : nullptr, fftwf_free);
#pragma omp for schedule(static)
    for (int a = 0; a < na; ++a) {
      float* row = p.q(a);  // zeros, q, zeros, then the same for dq
      float* q = row + kFront;
      float* dq = q + p.L;
      std::fill(row, q, 0.f);
      if (filter_rows)
        filter_row(f.row(a), q, work.get());
      else
        std::copy(f.row(a), f.row(a) + nb, q);
      std::fill(q + nb, dq, 0.f);
      for (int k = 0; k + 1 < nb; ++k) dq[k] = q[k + 1] - q[k];
      std::fill(dq + nb - 1, row + 2 * size_t(p.L), 0.f);
    }
#pragma omp for schedule(static)
    for (int grp = 0; grp < n_groups; ++grp) {
      const int j0 = grp * R, rows = std::min(R, ny - j0);
      const TileFn tile = avx512 ? tile_avx512(rows) : tile_avx2(rows);
      std::vector<float> acc(size_t(rows) * size_t(stride), 0.f);
      for (int a0 = 0; a0 < na; a0 += kAngleChunk)
        for (int i0 = 0; i0 < nx; i0 += lanes) tile(p, j0, i0, a0, std::min(na, a0 + kAngleChunk), acc.data() + i0, stride);
      for (int r = 0; r < rows; ++r) {
        float* o = out + size_t(j0 + r) * size_t(nx);
        const float* src = acc.data() + size_t(r) * size_t(stride);
        for (int i = 0; i < nx; ++i) o[i] += scale * src[i];
      }
    }
  }
}

std::vector<float> Fbp::reconstruct(const Sinogram& sino, int nx, int ny, double s, bool parallel) {
  std::vector<float> img(size_t(nx) * size_t(ny), 0.f);
  back_project(sino, true, nx, ny, s, img.data(), parallel, BpKernel::Auto);
  return img;
}

}  // namespace pb::synth
