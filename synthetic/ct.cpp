// Parallel-beam projection and filtered back-projection of one slice. Sources: Kak & Slaney (1988)
// Principles of Computerized Tomographic Imaging, ch. 3 (ellipse projections, eq. 3.61 spatial-domain
// ramp, FBP sum pi/N), Joseph (1982) IEEE TMI 1:192 (image projector), window definitions as in
// Kak & Slaney / scikit-image iradon. Conventions: see ct.hpp (theta from +x, t = x cos + y sin,
// centre of rotation at the slice centre, x fastest).
#include "synthetic/ct.hpp"

#include <fftw3.h>

#include <algorithm>
#include <cmath>
#include <mutex>

#include "core/error.hpp"

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

}  // namespace

Sinogram project_image(const float* img, int nx, int ny, double s, const ParallelGeometry& g, bool parallel) {
  Sinogram out(g);
  const double tau = g.bin_mm;
  // Zero-padded copies of the rows and of the columns, so that every line is contiguous.
  const int px = nx + 2, py = ny + 2;
  std::vector<float> rows(size_t(px) * size_t(ny), 0.f), cols(size_t(py) * size_t(nx), 0.f);
  for (int j = 0; j < ny; ++j)
    for (int i = 0; i < nx; ++i) {
      const float v = img[size_t(j) * size_t(nx) + size_t(i)];
      rows[size_t(j) * size_t(px) + size_t(i + 1)] = v;
      cols[size_t(i) * size_t(py) + size_t(j + 1)] = v;
    }
#pragma omp parallel for schedule(static) if (parallel)
  for (int i = 0; i < g.angles; ++i) {
    const double th = g.angle_rad(i), ct = std::cos(th), st = std::sin(th);
    float* row = out.row(i);
    const bool along_y = std::abs(ct) >= std::abs(st);  // rays closer to the y axis: step over rows
    // Ray k meets line j (a row, or a column) at pixel coordinate f = f0 - shift_j + k df.
    const double c = along_y ? ct : st, o = along_y ? st : ct;
    const int n_lines = along_y ? ny : nx, n_along = along_y ? nx : ny;
    const float* lines = along_y ? rows.data() : cols.data();
    const size_t pitch = size_t(n_along + 2);
    const double centre_lines = (n_lines - 1) / 2.0, centre_along = (n_along - 1) / 2.0;
    const float w = float(s / std::abs(c));
    const double df = tau / (c * s), f0 = g.bin_t_mm(0) / (c * s) + centre_along;
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
      if (k0 <= k1) joseph_line(lines + size_t(j) * pitch, float(a), float(df), k0, k1, w, row);
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

void Fbp::filter(Sinogram& sino) {
  if (sino.geo.bins != g_.bins || sino.geo.angles != g_.angles) throw InputError("FBP: sinogram geometry differs from the filter's");
  const int nf = pad_ / 2 + 1;
  auto* spec = reinterpret_cast<fftwf_complex*>(buf_ + pad_);
  for (int i = 0; i < g_.angles; ++i) {
    float* row = sino.row(i);
    std::copy(row, row + g_.bins, buf_);
    std::fill(buf_ + g_.bins, buf_ + pad_, 0.f);
    fftwf_execute(static_cast<fftwf_plan>(fwd_));
    for (int j = 0; j < nf; ++j) {
      spec[j][0] *= response_[size_t(j)];
      spec[j][1] *= response_[size_t(j)];
    }
    fftwf_execute(static_cast<fftwf_plan>(inv_));
    std::copy(buf_, buf_ + g_.bins, row);
  }
}

namespace {

// One row of back-projection for one angle: out[i] += q(u0 + i du), linear interpolation. The
// detector covers the slice diagonal, so 0 <= u < bins - 1 for every pixel.
PB_SIMD_CLONES
void bp_row(const float* __restrict q, const float* __restrict dq, float u0, float du, int nx,
            float* __restrict out) {
  for (int i = 0; i < nx; ++i) {
    const float u = u0 + float(i) * du;
    const int k = int(u);
    const float w = u - float(k);
    out[i] += q[k] + w * dq[k];
  }
}

// Four angles at once (fewer passes over the accumulators); same per-pixel order of summation as
// four calls of bp_row: ((((acc + a0) + a1) + a2) + a3).
PB_SIMD_CLONES
void bp_row4(const float* const* __restrict q, const float* const* __restrict dq, const float* u0, const float* du,
             int nx, float* __restrict out) {
  const float *q0 = q[0], *q1 = q[1], *q2 = q[2], *q3 = q[3];
  const float *d0 = dq[0], *d1 = dq[1], *d2 = dq[2], *d3 = dq[3];
  for (int i = 0; i < nx; ++i) {
    const float fi = float(i);
    const float ua = u0[0] + fi * du[0], ub = u0[1] + fi * du[1], uc = u0[2] + fi * du[2], ud = u0[3] + fi * du[3];
    const int ka = int(ua), kb = int(ub), kc = int(uc), kd = int(ud);
    float acc = out[i];
    acc += q0[ka] + (ua - float(ka)) * d0[ka];
    acc += q1[kb] + (ub - float(kb)) * d1[kb];
    acc += q2[kc] + (uc - float(kc)) * d2[kc];
    acc += q3[kd] + (ud - float(kd)) * d3[kd];
    out[i] = acc;
  }
}

}  // namespace

void Fbp::backproject(const Sinogram& f, int nx, int ny, double s, float* out, bool parallel) const {
  const int nb = g_.bins, na = g_.angles;
  if (f.geo.bins != nb || f.geo.angles != na) throw InputError("FBP: sinogram geometry differs from the filter's");
  const double diag_bins = std::sqrt(double(nx) * nx + double(ny) * ny) * s / g_.bin_mm;
  if (nb < diag_bins + 1)
    throw InputError("FBP: detector of " + std::to_string(nb) + " bins is narrower than the slice diagonal (" +
                     std::to_string(diag_bins) + " bins)");
  // q and its forward differences, so the inner loop makes two loads per update.
  std::vector<float> dq(size_t(na) * size_t(nb));
  for (int i = 0; i < na; ++i) {
    const float* q = f.row(i);
    float* d = dq.data() + size_t(i) * size_t(nb);
    for (int k = 0; k + 1 < nb; ++k) d[k] = q[k + 1] - q[k];
    d[nb - 1] = 0;
  }
  std::vector<float> cu(static_cast<size_t>(na)), su(static_cast<size_t>(na));
  for (int i = 0; i < na; ++i) {
    cu[size_t(i)] = float(std::cos(g_.angle_rad(i)) * s / g_.bin_mm);
    su[size_t(i)] = float(std::sin(g_.angle_rad(i)) * s / g_.bin_mm);
  }
  const double cx = (nx - 1) / 2.0, cy = (ny - 1) / 2.0, cb = (nb - 1) / 2.0;
  const float scale = float(M_PI / na);  // Kak & Slaney eq. 3.60: f = pi/N sum_i Q_i (180 and 360 arcs)
  // Blocks of rows, angles outside, rows inside: a block's accumulators stay in L1/L2 while each
  // filtered projection is read once per block. Every pixel sums its angles in order, whatever
  // the thread count.
  constexpr int kBlock = 16;
  const int n_blocks = (ny + kBlock - 1) / kBlock;
#pragma omp parallel for schedule(static) if (parallel)
  for (int b = 0; b < n_blocks; ++b) {
    const int j0 = b * kBlock, j1 = std::min(ny, j0 + kBlock);
    std::vector<float> acc(size_t(kBlock) * size_t(nx), 0.f);
    int i = 0;
    for (; i + 4 <= na; i += 4) {
      const float* qs[4] = {f.row(i), f.row(i + 1), f.row(i + 2), f.row(i + 3)};
      const float* ds[4];
      float dus[4], u0s[4];
      for (int a = 0; a < 4; ++a) {
        ds[a] = dq.data() + size_t(i + a) * size_t(nb);
        dus[a] = cu[size_t(i + a)];
      }
      for (int j = j0; j < j1; ++j) {
        for (int a = 0; a < 4; ++a) u0s[a] = float(-cx * cu[size_t(i + a)] + (j - cy) * su[size_t(i + a)] + cb);
        bp_row4(qs, ds, u0s, dus, nx, acc.data() + size_t(j - j0) * size_t(nx));
      }
    }
    for (; i < na; ++i) {
      const float* q = f.row(i);
      const float* d = dq.data() + size_t(i) * size_t(nb);
      for (int j = j0; j < j1; ++j) {
        const float u0 = float(-cx * cu[size_t(i)] + (j - cy) * su[size_t(i)] + cb);
        bp_row(q, d, u0, cu[size_t(i)], nx, acc.data() + size_t(j - j0) * size_t(nx));
      }
    }
    for (int j = j0; j < j1; ++j) {
      float* o = out + size_t(j) * size_t(nx);
      const float* a = acc.data() + size_t(j - j0) * size_t(nx);
      for (int x = 0; x < nx; ++x) o[x] += scale * a[x];
    }
  }
}

std::vector<float> Fbp::reconstruct(Sinogram sino, int nx, int ny, double s, bool parallel) {
  filter(sino);
  std::vector<float> img(size_t(nx) * size_t(ny), 0.f);
  backproject(sino, nx, ny, s, img.data(), parallel);
  return img;
}

}  // namespace pb::synth
