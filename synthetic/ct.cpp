// Parallel-beam projection and filtered back-projection of one slice. Sources: Kak & Slaney (1988)
// Principles of Computerized Tomographic Imaging, ch. 3 (ellipse projections, eq. 3.61 spatial-domain
// ramp, FBP sum pi/N), Joseph (1982) IEEE TMI 1:192 (image projector), window definitions as in
// Kak & Slaney / scikit-image iradon. Conventions: see ct.hpp (theta from +x, t = x cos + y sin,
// centre of rotation at the slice centre, x fastest).
#include "synthetic/ct.hpp"

#include <fftw3.h>

#include <algorithm>
#include <cmath>
#include <memory>
#include <mutex>

#include "core/cpu.hpp"
#include "core/error.hpp"
#include "core/memory.hpp"

#if defined(__x86_64__) && defined(__GNUC__)
// GCC 12 warns about the _mm512_undefined_* values inside its own intrinsic headers (a false positive).
#pragma GCC diagnostic push
#pragma GCC diagnostic ignored "-Wmaybe-uninitialized"
#include <immintrin.h>
#pragma GCC diagnostic pop
#endif

// Hot loops get an AVX2 clone picked at run time (the binary stays portable x86-64).
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__)
#define PB_SIMD_CLONES __attribute__((target_clones("avx2", "default")))
#else
#define PB_SIMD_CLONES
#endif

namespace pb::synth {

namespace {
std::mutex& fftw_planner_mutex() {  // FFTW's planner is not thread-safe; execution is.
  static std::mutex m;
  return m;
}
}  // namespace

int detector_bins_for(int64_t nx, int64_t ny, double pixel_mm, double bin_mm) {
  const double diag = std::sqrt(double(nx * nx + ny * ny)) * pixel_mm / bin_mm;
  int n = int(std::ceil(diag)) + 2;
  if ((n - nx) % 2 != 0) ++n;
  return n;
}

bool ellipse_interval(const Ellipse2D& e, double theta, double t, double& s0, double& s1) {
  const double ct = std::cos(theta), st = std::sin(theta), cp = std::cos(e.phi_rad), sp = std::sin(e.phi_rad);
  const double px = t * ct - e.cx, py = t * st - e.cy;  // ray origin relative to the centre
  const double u0 = (px * cp + py * sp) / e.a, v0 = (-px * sp + py * cp) / e.b;
  const double ud = (-st * cp + ct * sp) / e.a, vd = (st * sp + ct * cp) / e.b;
  const double A = ud * ud + vd * vd, B = u0 * ud + v0 * vd, C = u0 * u0 + v0 * v0 - 1;
  const double disc = B * B - A * C;
  if (disc <= 0) return false;
  const double r = std::sqrt(disc);
  s0 = (-B - r) / A;
  s1 = (-B + r) / A;
  return true;
}

double ellipse_chord(const Ellipse2D& e, double theta, double t) {
  double s0, s1;
  return ellipse_interval(e, theta, t, s0, s1) ? s1 - s0 : 0.0;
}

Sinogram project_ellipses(const std::vector<Ellipse2D>& el, const ParallelGeometry& g) {
  Sinogram s(g);
#pragma omp parallel for schedule(static)
  for (int i = 0; i < g.angles; ++i) {
    const double th = g.angle_rad(i);
    float* row = s.row(i);
    for (int k = 0; k < g.bins; ++k) {
      double p = 0;
      for (const auto& e : el) p += e.value * ellipse_chord(e, th, g.bin_t_mm(k));
      row[k] = float(p);
    }
  }
  return s;
}

std::vector<Ellipse2D> shepp_logan(double R, bool modified) {
  // {cx, cy, a, b, phi_deg, density}, unit head; Kak & Slaney table 3.1 rewritten with semi-axis a
  // along x before rotation (values from memory of the published table).
  struct Row {
    double cx, cy, a, b, phi, v, vmod;
  };
  static const Row rows[] = {
      {0, 0, 0.69, 0.92, 0, 2.0, 1.0},           {0, -0.0184, 0.6624, 0.874, 0, -0.98, -0.8},
      {0.22, 0, 0.11, 0.31, -18, -0.02, -0.2},    {-0.22, 0, 0.16, 0.41, 18, -0.02, -0.2},
      {0, 0.35, 0.21, 0.25, 0, 0.01, 0.1},        {0, 0.1, 0.046, 0.046, 0, 0.01, 0.1},
      {0, -0.1, 0.046, 0.046, 0, 0.01, 0.1},      {-0.08, -0.605, 0.046, 0.023, 0, 0.01, 0.1},
      {0, -0.605, 0.023, 0.023, 0, 0.01, 0.1},    {0.06, -0.605, 0.023, 0.046, 0, 0.01, 0.1}};
  std::vector<Ellipse2D> out;
  for (const Row& r : rows) out.push_back({r.cx * R, r.cy * R, r.a * R, r.b * R, r.phi * M_PI / 180, modified ? r.vmod : r.v});
  return out;
}

std::vector<float> rasterize_ellipses(const std::vector<Ellipse2D>& el, int nx, int ny, double s, int m) {
  std::vector<float> img(size_t(nx) * size_t(ny), 0.f);
#pragma omp parallel for schedule(static)
  for (int j = 0; j < ny; ++j)
    for (int i = 0; i < nx; ++i) {
      double acc = 0;
      for (int b = 0; b < m; ++b)
        for (int a = 0; a < m; ++a) {
          const double x = (i - (nx - 1) / 2.0 + (a + 0.5) / m - 0.5) * s, y = (j - (ny - 1) / 2.0 + (b + 0.5) / m - 0.5) * s;
          for (const auto& e : el) {
            const double dx = x - e.cx, dy = y - e.cy, c = std::cos(e.phi_rad), sn = std::sin(e.phi_rad);
            const double u = (dx * c + dy * sn) / e.a, v = (-dx * sn + dy * c) / e.b;
            if (u * u + v * v <= 1) acc += e.value;
          }
        }
      img[size_t(j) * size_t(nx) + size_t(i)] = float(acc / (m * m));
    }
  return img;
}

namespace {

// One line of Joseph's projector: row[k] += w * L(f0 + k df) for k in [k0, k1], L a line of the
// image padded with one zero each side (index = f + 1), linear interpolation.
PB_SIMD_CLONES
void joseph_line(const float* __restrict line, float f0, float df, int k0, int k1, float w, float* __restrict row) {
  for (int k = k0; k <= k1; ++k) {
    const float f = f0 + float(k) * df + 1.0f;
    const int ip = int(f);
    const float fr = f - float(ip);
    row[k] += w * (line[ip] + fr * (line[ip + 1] - line[ip]));
  }
}

#if defined(__x86_64__) && defined(__GNUC__)
constexpr double kJosephMaxDf = 1.9;  // 15 x 1.9 + 3 < 32: the 16 bins of a register read one window
constexpr int kJosephSlack = 64;      // floats before and after the padded lines (window reads)

// The same without gathers (AVX-512): 16 bins at a time read a window of 32 floats of the line and
// of its differences dline[i] = line[i+1] - line[i], picked by two-source permutes (as the
// back-projection kernels do). |df| <= kJosephMaxDf.
__attribute__((target("avx512f,avx512bw,avx512vl,avx512dq"))) void joseph_line_avx512(
    const float* line, const float* dline, double f0, double df, int k0, int k1, float w, float* row) {
  const __m512 lane = _mm512_setr_ps(0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15);
  const __m512 dfv = _mm512_set1_ps(float(df)), wv = _mm512_set1_ps(w);
  const double lo = std::min(0.0, 15 * df);
  for (int kb = k0; kb <= k1; kb += 16) {
    const __mmask16 m = __mmask16((1u << std::min(16, k1 - kb + 1)) - 1);
    const double fk = f0 + kb * df + 1.0;
    const int kmin = int(std::floor(fk + lo)) - 1;
    const __m512 t = _mm512_fmadd_ps(lane, dfv, _mm512_set1_ps(float(fk - kmin)));
    const __m512i idx = _mm512_cvttps_epi32(t);
    const __m512 fr = _mm512_sub_ps(t, _mm512_cvtepi32_ps(idx));
    const __m512 lv = _mm512_permutex2var_ps(_mm512_loadu_ps(line + kmin), idx, _mm512_loadu_ps(line + kmin + 16));
    const __m512 dv = _mm512_permutex2var_ps(_mm512_loadu_ps(dline + kmin), idx, _mm512_loadu_ps(dline + kmin + 16));
    const __m512 r = _mm512_fmadd_ps(wv, _mm512_fmadd_ps(fr, dv, lv), _mm512_maskz_loadu_ps(m, row + kb));
    _mm512_mask_storeu_ps(row + kb, m, r);
  }
}
#endif

}  // namespace

Sinogram project_image(const float* img, int nx, int ny, double s, const ParallelGeometry& g, bool parallel,
                       bool simd) {
  Sinogram out(g);
  const double tau = g.bin_mm;
#if defined(__x86_64__) && defined(__GNUC__)
  simd = simd && simd_level() == Simd::avx512;
  constexpr int slack = kJosephSlack;
#else
  simd = false;
  constexpr int slack = 0;
#endif
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
    [[maybe_unused]] const float* dlines = simd ? (along_y ? drows.data() : dcols.data()) + slack : nullptr;
    const size_t pitch = size_t(n_along + 2);
    const double centre_lines = (n_lines - 1) / 2.0, centre_along = (n_along - 1) / 2.0;
    const float w = float(s / std::abs(c));
    const double df = tau / (c * s), f0 = g.bin_t_mm(0) / (c * s) + centre_along;
#if defined(__x86_64__) && defined(__GNUC__)
    const bool windows = simd && std::abs(df) <= kJosephMaxDf;
#endif
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
#if defined(__x86_64__) && defined(__GNUC__)
      if (windows) {
        joseph_line_avx512(lines + size_t(j) * pitch, dlines + size_t(j) * pitch, a, df, k0, k1, w, row);
        continue;
      }
#endif
      joseph_line(lines + size_t(j) * pitch, float(a), float(df), k0, k1, w, row);
    }
  }
  return out;
}

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

namespace {

// ---- Back-projection kernels -----------------------------------------------------------------
// Pixel (i, j) of an angle reads the filtered projection at u = u00 + i du + j su (in bins), with
// linear interpolation q[k] + w dq[k], k = floor(u), w = u - k, dq[k] = q[k+1] - q[k]. Every pixel
// sums its angles in order 0..N-1, whatever the kernel's tiling and the thread count.
//
// SIMD kernels (AVX-512: 16 pixels, AVX2: 8 pixels of one image row per register; a tile is R
// rows, its accumulators stay in registers over a chunk of angles) avoid gathers: the bins a tile
// needs for one angle span 1 + (lanes-1)|du| + (R-1)|su| bins, which for pixels no coarser than
// bins fit in a window of 2 x lanes floats starting at kmin = floor(min u) - 1. The window is loaded
// once per angle and tile (two registers of q, two of dq) and every row picks its values with a
// two-source permute. Steeper angles take one window per row (|du| <= kMaxDu), then gathers.

constexpr double kMaxDu = 1.8;   // 15 x 1.8 + 3 < 32 (AVX-512) and 7 x 1.8 + 3 < 16 (AVX2)
constexpr int kFront = 32;       // zero bins before each padded row: tail lanes may reach u ~ -27
// Rows per tile; with |du|, |su| <= 1 one window serves the tile at every angle.
constexpr int kRows512 = 16;  // 16 accumulators; 15 |du| + 15 |su| + 3 <= 24.3 < 32 bins
constexpr int kRows256 = 8;   // 8 accumulators; 7 |du| + 7 |su| + 3 <= 12.9 < 16 bins
constexpr int kAngleChunk = 64;  // angles per pass over a row group (their rows stay in L2)

// q and dq of every angle in zero-padded rows of length L (q at 0, dq at L), with per-angle
// coordinates in padded bins.
struct BpPlan {
  int L = 0;
  float* rows = nullptr;  // angles x 2L, from allocate_buffer, every float written by its angle's thread
  size_t bytes = 0;
  BpPlan() = default;
  BpPlan(const BpPlan&) = delete;
  BpPlan& operator=(const BpPlan&) = delete;
  ~BpPlan() { if (rows) free_buffer(rows, bytes); }
  std::vector<double> u00, du, su;  // u of pixel (0, 0) in padded bins; steps per pixel and row
  std::vector<float> du_f;
  const float* q(int a) const { return rows + size_t(a) * 2 * size_t(L); }
};

int round_up(int n, int m) { return (n + m - 1) / m * m; }

#if defined(__x86_64__) && defined(__GNUC__)
#define PB_BP_X86 1

// Broadcasts of per-row values stored by a tile: from memory they take a load port, where the
// compiler's own choice (a shuffle and a register broadcast of the value it still holds) takes
// two ALU slots.
__attribute__((target("avx512f"))) inline __m512 bcast16(const float& x) {
  __m512 v;
  __asm__("vbroadcastss %1, %0" : "=v"(v) : "m"(x));
  return v;
}
__attribute__((target("avx2"))) inline __m256 bcast8(const float& x) {
  __m256 v;
  __asm__("vbroadcastss %1, %0" : "=x"(v) : "m"(x));
  return v;
}

// R rows x 16 pixels from (i0, j0), angles [a0, a1), adding into acc (row stride `stride`).
template <int R>
__attribute__((target("avx512f,avx512bw,avx512vl,avx512dq"))) void bp_tile_avx512(
    const BpPlan& p, int j0, int i0, int a0, int a1, float* acc, int stride) {
  static_assert(R >= 1 && R <= 16, "rows per tile");
  __m512 s[R];
#pragma GCC unroll 16
  for (int r = 0; r < R; ++r) s[r] = _mm512_loadu_ps(acc + size_t(r) * size_t(stride));
  const __m512 lane = _mm512_setr_ps(0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15);
  const __m512d rows = _mm512_setr_pd(0, 1, 2, 3, 4, 5, 6, 7), eight = _mm512_set1_pd(8);
  const __m512i last = _mm512_set1_epi32(p.L - 2);
  alignas(32) float base[16];
  alignas(32) int kmin[16];
  for (int a = a0; a < a1; ++a) {
    const float* q = p.q(a);
    const float* dq = q + p.L;
    const double du = p.du[size_t(a)], su = p.su[size_t(a)], v = p.u00[size_t(a)] + i0 * du + j0 * su;
    const __m512 duv = _mm512_set1_ps(p.du_f[size_t(a)]);
    // u of each row's lane 0, rows 0-7 and 8-15
    const __m512d ur = _mm512_fmadd_pd(rows, _mm512_set1_pd(su), _mm512_set1_pd(v));
    const __m512d ur8 = _mm512_fmadd_pd(_mm512_add_pd(rows, eight), _mm512_set1_pd(su), _mm512_set1_pd(v));
    const double lo_du = std::min(0.0, 15 * du);
    if (15 * std::abs(du) + (R - 1) * std::abs(su) <= 28) {  // one window for the tile
      const int k0 = int(v + lo_du + (R - 1) * std::min(0.0, su)) - 1;
      _mm256_store_ps(base, _mm512_cvtpd_ps(_mm512_sub_pd(ur, _mm512_set1_pd(k0))));
      if (R > 8) _mm256_store_ps(base + 8, _mm512_cvtpd_ps(_mm512_sub_pd(ur8, _mm512_set1_pd(k0))));
      const __m512 q0 = _mm512_loadu_ps(q + k0), q1 = _mm512_loadu_ps(q + k0 + 16);
      const __m512 d0 = _mm512_loadu_ps(dq + k0), d1 = _mm512_loadu_ps(dq + k0 + 16);
#pragma GCC unroll 16
      for (int r = 0; r < R; ++r) {
        const __m512 t = _mm512_fmadd_ps(lane, duv, bcast16(base[r]));
        const __m512i idx = _mm512_cvttps_epi32(t);
        const __m512 w = _mm512_sub_ps(t, _mm512_cvtepi32_ps(idx));
        s[r] = _mm512_add_ps(s[r], _mm512_fmadd_ps(w, _mm512_permutex2var_ps(d0, idx, d1),
                                                   _mm512_permutex2var_ps(q0, idx, q1)));
      }
    } else if (std::abs(du) <= kMaxDu) {  // one window per row
      const __m256i km = _mm256_sub_epi32(_mm512_cvttpd_epi32(_mm512_add_pd(ur, _mm512_set1_pd(lo_du))),
                                          _mm256_set1_epi32(1));
      _mm256_store_si256(reinterpret_cast<__m256i*>(kmin), km);
      _mm256_store_ps(base, _mm512_cvtpd_ps(_mm512_sub_pd(ur, _mm512_cvtepi32_pd(km))));
      if (R > 8) {
        const __m256i km8 = _mm256_sub_epi32(_mm512_cvttpd_epi32(_mm512_add_pd(ur8, _mm512_set1_pd(lo_du))),
                                             _mm256_set1_epi32(1));
        _mm256_store_si256(reinterpret_cast<__m256i*>(kmin + 8), km8);
        _mm256_store_ps(base + 8, _mm512_cvtpd_ps(_mm512_sub_pd(ur8, _mm512_cvtepi32_pd(km8))));
      }
#pragma GCC unroll 16
      for (int r = 0; r < R; ++r) {
        const int k = kmin[r];
        const __m512 t = _mm512_fmadd_ps(lane, duv, bcast16(base[r]));
        const __m512i idx = _mm512_cvttps_epi32(t);
        const __m512 w = _mm512_sub_ps(t, _mm512_cvtepi32_ps(idx));
        const __m512 qv = _mm512_permutex2var_ps(_mm512_loadu_ps(q + k), idx, _mm512_loadu_ps(q + k + 16));
        const __m512 dv = _mm512_permutex2var_ps(_mm512_loadu_ps(dq + k), idx, _mm512_loadu_ps(dq + k + 16));
        s[r] = _mm512_add_ps(s[r], _mm512_fmadd_ps(w, dv, qv));
      }
    } else {  // gathers
      _mm256_store_ps(base, _mm512_cvtpd_ps(ur));
      if (R > 8) _mm256_store_ps(base + 8, _mm512_cvtpd_ps(ur8));
#pragma GCC unroll 16
      for (int r = 0; r < R; ++r) {
        const __m512 t = _mm512_fmadd_ps(lane, duv, bcast16(base[r]));
        // Tail lanes past the row end may leave the detector: clamp them (their sums are dropped).
        const __m512i idx = _mm512_min_epi32(_mm512_max_epi32(_mm512_cvttps_epi32(t), _mm512_setzero_si512()), last);
        const __m512 w = _mm512_sub_ps(t, _mm512_cvtepi32_ps(idx));
        const __m512 qv = _mm512_i32gather_ps(idx, q, 4), dv = _mm512_i32gather_ps(idx, dq, 4);
        s[r] = _mm512_add_ps(s[r], _mm512_fmadd_ps(w, dv, qv));
      }
    }
  }
#pragma GCC unroll 16
  for (int r = 0; r < R; ++r) _mm512_storeu_ps(acc + size_t(r) * size_t(stride), s[r]);
}

// The AVX2 twin: 8 pixels, window of 16 bins, two one-source permutes and a blend per table.
__attribute__((target("avx2,fma"))) inline __m256 pick16(__m256 lo, __m256 hi, __m256i idx, __m256 upper) {
  return _mm256_blendv_ps(_mm256_permutevar8x32_ps(lo, idx), _mm256_permutevar8x32_ps(hi, idx), upper);
}

template <int R>
__attribute__((target("avx2,fma"))) void bp_tile_avx2(const BpPlan& p, int j0, int i0, int a0, int a1, float* acc,
                                                      int stride) {
  static_assert(R >= 1 && R <= 8, "rows per tile");
  __m256 s[R];
#pragma GCC unroll 8
  for (int r = 0; r < R; ++r) s[r] = _mm256_loadu_ps(acc + size_t(r) * size_t(stride));
  const __m256 lane = _mm256_setr_ps(0, 1, 2, 3, 4, 5, 6, 7);
  const __m256d rows = _mm256_setr_pd(0, 1, 2, 3), four = _mm256_set1_pd(4);
  const __m256i last = _mm256_set1_epi32(p.L - 2);
  alignas(32) float base[8];
  alignas(32) int kmin[8];
  for (int a = a0; a < a1; ++a) {
    const float* q = p.q(a);
    const float* dq = q + p.L;
    const double du = p.du[size_t(a)], su = p.su[size_t(a)], v = p.u00[size_t(a)] + i0 * du + j0 * su;
    const __m256 duv = _mm256_set1_ps(p.du_f[size_t(a)]);
    const __m256d ur = _mm256_fmadd_pd(rows, _mm256_set1_pd(su), _mm256_set1_pd(v));  // rows 0-3, 4-7
    const __m256d ur4 = _mm256_fmadd_pd(_mm256_add_pd(rows, four), _mm256_set1_pd(su), _mm256_set1_pd(v));
    const double lo_du = std::min(0.0, 7 * du);
    if (7 * std::abs(du) + (R - 1) * std::abs(su) <= 12) {  // one window for the tile
      const int k0 = int(v + lo_du + (R - 1) * std::min(0.0, su)) - 1;
      _mm_store_ps(base, _mm256_cvtpd_ps(_mm256_sub_pd(ur, _mm256_set1_pd(k0))));
      if (R > 4) _mm_store_ps(base + 4, _mm256_cvtpd_ps(_mm256_sub_pd(ur4, _mm256_set1_pd(k0))));
      const __m256 q0 = _mm256_loadu_ps(q + k0), q1 = _mm256_loadu_ps(q + k0 + 8);
      const __m256 d0 = _mm256_loadu_ps(dq + k0), d1 = _mm256_loadu_ps(dq + k0 + 8);
#pragma GCC unroll 8
      for (int r = 0; r < R; ++r) {
        const __m256 t = _mm256_fmadd_ps(lane, duv, bcast8(base[r]));
        const __m256i idx = _mm256_cvttps_epi32(t);
        const __m256 w = _mm256_sub_ps(t, _mm256_cvtepi32_ps(idx));
        const __m256 upper = _mm256_castsi256_ps(_mm256_slli_epi32(idx, 28));  // sign bit = (idx & 8)
        s[r] = _mm256_add_ps(s[r], _mm256_fmadd_ps(w, pick16(d0, d1, idx, upper), pick16(q0, q1, idx, upper)));
      }
    } else if (std::abs(du) <= kMaxDu) {  // one window per row
      _mm_store_si128(reinterpret_cast<__m128i*>(kmin),
                      _mm_sub_epi32(_mm256_cvttpd_epi32(_mm256_add_pd(ur, _mm256_set1_pd(lo_du))), _mm_set1_epi32(1)));
      _mm_store_si128(reinterpret_cast<__m128i*>(kmin + 4),
                      _mm_sub_epi32(_mm256_cvttpd_epi32(_mm256_add_pd(ur4, _mm256_set1_pd(lo_du))), _mm_set1_epi32(1)));
#pragma GCC unroll 8
      for (int r = 0; r < R; ++r) {
        const int k = kmin[r];
        base[r] = float((r < 4 ? ur[r] : ur4[r - 4]) - k);
        const __m256 t = _mm256_fmadd_ps(lane, duv, _mm256_set1_ps(base[r]));
        const __m256i idx = _mm256_cvttps_epi32(t);
        const __m256 w = _mm256_sub_ps(t, _mm256_cvtepi32_ps(idx));
        const __m256 upper = _mm256_castsi256_ps(_mm256_slli_epi32(idx, 28));
        const __m256 qv = pick16(_mm256_loadu_ps(q + k), _mm256_loadu_ps(q + k + 8), idx, upper);
        const __m256 dv = pick16(_mm256_loadu_ps(dq + k), _mm256_loadu_ps(dq + k + 8), idx, upper);
        s[r] = _mm256_add_ps(s[r], _mm256_fmadd_ps(w, dv, qv));
      }
    } else {  // gathers
      _mm_store_ps(base, _mm256_cvtpd_ps(ur));
      _mm_store_ps(base + 4, _mm256_cvtpd_ps(ur4));
#pragma GCC unroll 8
      for (int r = 0; r < R; ++r) {
        const __m256 t = _mm256_fmadd_ps(lane, duv, bcast8(base[r]));
        const __m256i idx = _mm256_min_epi32(_mm256_max_epi32(_mm256_cvttps_epi32(t), _mm256_setzero_si256()), last);
        const __m256 w = _mm256_sub_ps(t, _mm256_cvtepi32_ps(idx));
        const __m256 qv = _mm256_i32gather_ps(q, idx, 4), dv = _mm256_i32gather_ps(dq, idx, 4);
        s[r] = _mm256_add_ps(s[r], _mm256_fmadd_ps(w, dv, qv));
      }
    }
  }
#pragma GCC unroll 8
  for (int r = 0; r < R; ++r) _mm256_storeu_ps(acc + size_t(r) * size_t(stride), s[r]);
}

using TileFn = void (*)(const BpPlan&, int, int, int, int, float*, int);
#endif

}  // namespace

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
  const int nb = g_.bins, na = g_.angles;
  if (f.geo.bins != nb || f.geo.angles != na) throw InputError("FBP: sinogram geometry differs from the filter's");
  const double diag_bins = std::sqrt(double(nx) * nx + double(ny) * ny) * s / g_.bin_mm;
  if (nb < diag_bins + 1)
    throw InputError("FBP: detector of " + std::to_string(nb) + " bins is narrower than the slice diagonal (" +
                     std::to_string(diag_bins) + " bins)");
  const BpKernel kern = kernel == BpKernel::Auto ? best_bp_kernel() : kernel;
  if (!bp_kernel_supported(kern))
    throw InputError(std::string("FBP: back-projection kernel '") + bp_kernel_name(kern) + "' is not supported by this CPU");
  const double cx = (nx - 1) / 2.0, cy = (ny - 1) / 2.0, cb = (nb - 1) / 2.0;
  const float scale = float(M_PI / na);  // Kak & Slaney eq. 3.60: f = pi/N sum_i Q_i (180 and 360 arcs)
  std::vector<double> du(static_cast<size_t>(na)), su(static_cast<size_t>(na)), u00(static_cast<size_t>(na));
  for (int a = 0; a < na; ++a) {
    du[size_t(a)] = std::cos(g_.angle_rad(a)) * s / g_.bin_mm;
    su[size_t(a)] = std::sin(g_.angle_rad(a)) * s / g_.bin_mm;
    u00[size_t(a)] = -cx * du[size_t(a)] - cy * su[size_t(a)] + cb;  // u of pixel (0, 0)
  }
#ifdef PB_BP_X86
  const bool simd = kern != BpKernel::Generic;
#else
  const bool simd = false;
#endif
  if (!simd) {
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
        const double u0 = u00[size_t(a)] + j * su[size_t(a)], d = du[size_t(a)];
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
    return;
  }
#ifdef PB_BP_X86
  const bool avx512 = kern == BpKernel::Avx512;
  const int lanes = avx512 ? 16 : 8, R = avx512 ? kRows512 : kRows256;
  BpPlan p;
  // Tail lanes reach (lanes - 1) kMaxDu bins past either end of the detector, and a window reads
  // 2 x lanes floats from kmin.
  p.L = round_up(kFront + nb + 2 * 16 + 32, 16);
  p.bytes = sizeof(float) * size_t(na) * 2 * size_t(p.L);
  p.rows = static_cast<float*>(allocate_buffer(p.bytes));
  p.u00.resize(size_t(na));
  p.du = du;
  p.su = su;
  p.du_f.resize(size_t(na));
  for (int a = 0; a < na; ++a) {
    p.u00[size_t(a)] = u00[size_t(a)] + kFront;
    p.du_f[size_t(a)] = float(du[size_t(a)]);
  }
  // Row groups of R rows (the last one may be shorter), split evenly over the threads.
  static const TileFn tiles512[16] = {&bp_tile_avx512<1>,  &bp_tile_avx512<2>,  &bp_tile_avx512<3>,  &bp_tile_avx512<4>,
                                      &bp_tile_avx512<5>,  &bp_tile_avx512<6>,  &bp_tile_avx512<7>,  &bp_tile_avx512<8>,
                                      &bp_tile_avx512<9>,  &bp_tile_avx512<10>, &bp_tile_avx512<11>, &bp_tile_avx512<12>,
                                      &bp_tile_avx512<13>, &bp_tile_avx512<14>, &bp_tile_avx512<15>, &bp_tile_avx512<16>};
  static const TileFn tiles256[8] = {&bp_tile_avx2<1>, &bp_tile_avx2<2>, &bp_tile_avx2<3>, &bp_tile_avx2<4>,
                                     &bp_tile_avx2<5>, &bp_tile_avx2<6>, &bp_tile_avx2<7>, &bp_tile_avx2<8>};
  const int stride = round_up(nx, lanes), n_groups = (ny + R - 1) / R;
  // One parallel region: (filter and) pad the rows, then the row groups.
#pragma omp parallel if (parallel)
  {
    const size_t work_bytes = sizeof(float) * size_t(pad_) + sizeof(fftwf_complex) * size_t(pad_ / 2 + 1);
    std::unique_ptr<float, void (*)(void*)> work(
        filter_rows ? static_cast<float*>(fftwf_malloc(work_bytes)) : nullptr, fftwf_free);
#pragma omp for schedule(static)
    for (int a = 0; a < na; ++a) {
      float* row = p.rows + size_t(a) * 2 * size_t(p.L);  // zeros, q, zeros, then the same for dq
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
      const TileFn tile = avx512 ? tiles512[rows - 1] : tiles256[rows - 1];
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
#endif
}

std::vector<float> Fbp::reconstruct(const Sinogram& sino, int nx, int ny, double s, bool parallel) {
  std::vector<float> img(size_t(nx) * size_t(ny), 0.f);
  back_project(sino, true, nx, ny, s, img.data(), parallel, BpKernel::Auto);
  return img;
}

}  // namespace pb::synth
