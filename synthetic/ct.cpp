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

Sinogram project_image(const float* img, int nx, int ny, double s, const ParallelGeometry& g, bool parallel) {
  Sinogram out(g);
  const double tau = g.bin_mm;
#pragma omp parallel for schedule(static) if (parallel)
  for (int i = 0; i < g.angles; ++i) {
    const double th = g.angle_rad(i), ct = std::cos(th), st = std::sin(th);
    float* row = out.row(i);
    const bool along_y = std::abs(ct) >= std::abs(st);  // rays closer to the y axis: step over rows
    // Ray k meets line j (a row, or a column) at pixel coordinate f = f0 + k * df - j * dj.
    const double c = along_y ? ct : st, o = along_y ? st : ct;
    const int n_lines = along_y ? ny : nx, n_along = along_y ? nx : ny;
    const double centre_lines = (n_lines - 1) / 2.0, centre_along = (n_along - 1) / 2.0;
    const float w = float(s / std::abs(c));
    const double df = tau / (c * s), f0 = g.bin_t_mm(0) / (c * s) + centre_along;
    for (int j = 0; j < n_lines; ++j) {
      const double shift = (j - centre_lines) * o / c;  // y_j sin / (cos s), in pixels
      const float* line_ptr = img;
      const ptrdiff_t stride = along_y ? 1 : nx;
      line_ptr += along_y ? ptrdiff_t(j) * nx : j;
      // Valid k: 0 <= f < n_along - 1, f = f0 - shift + k df.
      const double a = f0 - shift;
      double k_lo = (0 - a) / df, k_hi = (n_along - 1 - a) / df;
      if (k_lo > k_hi) std::swap(k_lo, k_hi);
      const int k0 = std::max(0, int(std::ceil(k_lo - 1))), k1 = std::min(g.bins - 1, int(std::floor(k_hi + 1)));
      for (int k = k0; k <= k1; ++k) {
        const double f = a + k * df;
        const int ip = int(std::floor(f));
        const float fr = float(f - ip);
        const float v0 = (ip >= 0 && ip < n_along) ? line_ptr[ip * stride] : 0.f;
        const float v1 = (ip + 1 >= 0 && ip + 1 < n_along) ? line_ptr[(ip + 1) * stride] : 0.f;
        row[k] += w * (v0 + fr * (v1 - v0));
      }
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
inline void bp_row(const float* __restrict q, const float* __restrict dq, float u0, float du, int nx,
                   float* __restrict out) {
  for (int i = 0; i < nx; ++i) {
    const float u = u0 + float(i) * du;
    const int k = int(u);
    const float w = u - float(k);
    out[i] += q[k] + w * dq[k];
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
#pragma omp parallel for schedule(static) if (parallel)
  for (int j = 0; j < ny; ++j) {
    std::vector<float> acc(size_t(nx), 0.f);
    for (int i = 0; i < na; ++i) {
      const float u0 = float(-cx * cu[size_t(i)] + (j - cy) * su[size_t(i)] + cb);
      bp_row(f.row(i), dq.data() + size_t(i) * size_t(nb), u0, cu[size_t(i)], nx, acc.data());
    }
    float* o = out + size_t(j) * size_t(nx);
    for (int x = 0; x < nx; ++x) o[x] += scale * acc[size_t(x)];
  }
}

std::vector<float> Fbp::reconstruct(Sinogram sino, int nx, int ny, double s, bool parallel) {
  filter(sino);
  std::vector<float> img(size_t(nx) * size_t(ny), 0.f);
  backproject(sino, nx, ny, s, img.data(), parallel);
  return img;
}

}  // namespace pb::synth
