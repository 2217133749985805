// Exact parallel-beam projections of 2D ellipses, the Shepp-Logan phantom and an area-mean
// rasteriser: the analytic cases of the CT tests and benchmarks. Sources: Kak & Slaney (1988)
// Principles of Computerized Tomographic Imaging, ch. 3 (ellipse projections, table 3.1); Shepp &
// Logan (1974) IEEE TNS 21:21. Conventions: ct_geometry.hpp.
#include "synthetic/ct_phantoms.hpp"

#include <cmath>

namespace pb::synth {

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

}  // namespace pb::synth
