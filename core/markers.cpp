// Marker detection (threshold, components, sphere fits) and matching by distance pattern.
#include "core/markers.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

#include "core/error.hpp"

namespace pb {

namespace {
constexpr double kPi = 3.14159265358979323846;

// Automatic marker threshold: half-way between the 99th percentile (the part and the air, since
// markers are a small fraction of the volume) and the brightest voxel. Common practice, no source.
double auto_threshold(const VolumeF& v) {
  const int64_t n = v.size();
  const int64_t step = std::max<int64_t>(1, n / 2000000);
  std::vector<float> s;
  s.reserve(size_t(n / step + 1));
  float hi = -std::numeric_limits<float>::infinity();
  for (int64_t i = 0; i < n; ++i) {
    const float x = v[i];
    if (std::isnan(x)) continue;
    hi = std::max(hi, x);
    if (i % step == 0) s.push_back(x);
  }
  if (s.empty()) return std::numeric_limits<double>::infinity();
  auto k = s.begin() + std::ptrdiff_t(double(s.size() - 1) * 0.99);
  std::nth_element(s.begin(), k, s.end());
  return *k + 0.5 * (double(hi) - *k);
}
}  // namespace

SphereFit fit_sphere(const std::vector<Eigen::Vector3d>& pts) {
  if (pts.size() < 4) throw InputError("sphere fit: needs 4 points, got " + std::to_string(pts.size()));
  Eigen::Vector3d mean = Eigen::Vector3d::Zero();
  for (const auto& p : pts) mean += p;
  mean /= double(pts.size());
  // Algebraic fit: |q|^2 = 2 c.q + k with q = p - mean, k = r^2 - |c|^2 (linear least squares).
  Eigen::MatrixXd A(Eigen::Index(pts.size()), 4);
  Eigen::VectorXd b(Eigen::Index(pts.size()));
  for (size_t i = 0; i < pts.size(); ++i) {
    const Eigen::Vector3d q = pts[i] - mean;
    A.row(Eigen::Index(i)) << 2 * q.x(), 2 * q.y(), 2 * q.z(), 1.0;
    b(Eigen::Index(i)) = q.squaredNorm();
  }
  const Eigen::Vector4d x = A.colPivHouseholderQr().solve(b);
  Eigen::Vector3d c = x.head<3>();
  double r = std::sqrt(std::max(0.0, x(3) + c.squaredNorm()));
  // Gauss-Newton on the geometric residuals |q - c| - r.
  for (int it = 0; it < 20; ++it) {
    Eigen::MatrixXd J(Eigen::Index(pts.size()), 4);
    Eigen::VectorXd res(Eigen::Index(pts.size()));
    for (size_t i = 0; i < pts.size(); ++i) {
      const Eigen::Vector3d d = pts[i] - mean - c;
      const double len = std::max(d.norm(), 1e-300);
      J.row(Eigen::Index(i)) << -d.x() / len, -d.y() / len, -d.z() / len, -1.0;
      res(Eigen::Index(i)) = len - r;
    }
    const Eigen::Vector4d delta = J.colPivHouseholderQr().solve(-res);
    c += delta.head<3>();
    r += delta(3);
    if (delta.norm() < 1e-12 * std::max(1.0, r)) break;
  }
  SphereFit f;
  f.centre = c + mean;
  f.radius = r;
  double ss = 0;
  for (const auto& p : pts) ss += std::pow((p - f.centre).norm() - r, 2);
  f.rms = std::sqrt(ss / double(pts.size()));
  return f;
}

std::vector<Marker> find_markers(const VolumeF& v, const MarkerOptions& opt, double* threshold_used) {
  const Geometry& g = v.geometry();
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2];
  const double vmin = std::min({g.spacing_mm[0], g.spacing_mm[1], g.spacing_mm[2]});
  const double extent = std::min({nx * g.spacing_mm[0], ny * g.spacing_mm[1], nz * g.spacing_mm[2]});
  const double rmin = opt.min_radius_mm > 0 ? opt.min_radius_mm : 1.5 * vmin;
  const double rmax = opt.max_radius_mm > 0 ? opt.max_radius_mm : 0.25 * extent;
  const double thr = opt.auto_threshold ? auto_threshold(v) : opt.threshold;
  if (threshold_used) *threshold_used = thr;
  std::vector<Marker> out;
  if (!std::isfinite(thr) || v.empty()) return out;

  // Bright voxels, labelled by a breadth-first walk (26-connected). Above the 99th percentile by
  // construction, so the walk touches a small part of the volume.
  Mask bright(g, Zeroed{});
  std::vector<int64_t> seeds;
  for (int64_t i = 0; i < v.size(); ++i)
    if (v[i] >= thr) {
      bright[i] = 1;
      seeds.push_back(i);
    }
  const double voxvol = g.voxel_volume_mm3();
  const double max_voxels = 4.0 * 4.0 / 3.0 * kPi * rmax * rmax * rmax / voxvol;
  std::vector<int64_t> comp, queue;
  std::vector<Eigen::Vector3d> surface;
  const int64_t d6[6][3] = {{-1, 0, 0}, {1, 0, 0}, {0, -1, 0}, {0, 1, 0}, {0, 0, -1}, {0, 0, 1}};
  auto pos = [&](int64_t x, int64_t y, int64_t z) {
    return Eigen::Vector3d(g.origin_mm[0] + x * g.spacing_mm[0], g.origin_mm[1] + y * g.spacing_mm[1],
                           g.origin_mm[2] + z * g.spacing_mm[2]);
  };
  for (int64_t seed : seeds) {
    if (bright[seed] != 1) continue;
    comp.clear();
    queue.assign(1, seed);
    bright[seed] = 2;
    bool touches_border = false;
    while (!queue.empty()) {
      const int64_t i = queue.back();
      queue.pop_back();
      comp.push_back(i);
      const int64_t x = i % nx, y = (i / nx) % ny, z = i / (nx * ny);
      if (x == 0 || y == 0 || z == 0 || x == nx - 1 || y == ny - 1 || z == nz - 1) touches_border = true;
      for (int64_t dz = -1; dz <= 1; ++dz)
        for (int64_t dy = -1; dy <= 1; ++dy)
          for (int64_t dx = -1; dx <= 1; ++dx) {
            const int64_t X = x + dx, Y = y + dy, Z = z + dz;
            if (X < 0 || Y < 0 || Z < 0 || X >= nx || Y >= ny || Z >= nz) continue;
            const int64_t j = v.index(X, Y, Z);
            if (bright[j] == 1) {
              bright[j] = 2;
              queue.push_back(j);
            }
          }
    }
    const double n = double(comp.size());
    if (touches_border || n > max_voxels || n * voxvol < 0.5 * 4.0 / 3.0 * kPi * rmin * rmin * rmin) continue;
    // Sub-voxel surface points: the threshold crossing between a bright voxel and each dark
    // face neighbour, by linear interpolation along the grid line.
    surface.clear();
    for (int64_t i : comp) {
      const int64_t x = i % nx, y = (i / nx) % ny, z = i / (nx * ny);
      const double a = v[i];
      for (const auto& d : d6) {
        const int64_t X = x + d[0], Y = y + d[1], Z = z + d[2];
        const int64_t j = v.index(X, Y, Z);  // inside: the component does not touch the border
        if (bright[j] != 0) continue;
        const double b = v[j];
        const double f = (a - thr) / std::max(a - b, 1e-30);
        Eigen::Vector3d p = pos(x, y, z);
        for (int k = 0; k < 3; ++k) p[k] += f * double(d[k]) * g.spacing_mm[size_t(k)];
        surface.push_back(p);
      }
    }
    if (surface.size() < 12) continue;
    const SphereFit s = fit_sphere(surface);
    const double vol_ratio = n * voxvol / (4.0 / 3.0 * kPi * s.radius * s.radius * s.radius);
    if (s.radius < rmin || s.radius > rmax || s.rms > 0.15 * s.radius + 0.5 * vmin || vol_ratio < 0.5 ||
        vol_ratio > 2.0)
      continue;
    out.push_back({s.centre, s.radius, int64_t(n), s.rms});
  }
  std::stable_sort(out.begin(), out.end(), [](const Marker& a, const Marker& b) { return a.voxels > b.voxels; });
  if (int(out.size()) > opt.max_markers) out.resize(size_t(std::max(0, opt.max_markers)));
  return out;
}

namespace {
struct Candidate {
  std::vector<std::pair<int, int>> pairs;
  PointFit fit;
};

// Pairs each fixed marker with the nearest moving one under T, within tol, one to one.
std::vector<std::pair<int, int>> inliers(const SimilarityTransform& T, const std::vector<Eigen::Vector3d>& F,
                                         const std::vector<Eigen::Vector3d>& M, double tol) {
  std::vector<std::pair<int, int>> p;
  std::vector<char> used(M.size(), 0);
  for (size_t i = 0; i < F.size(); ++i) {
    const Eigen::Vector3d q = T.apply(F[i]);
    int best = -1;
    double bd = tol;
    for (size_t j = 0; j < M.size(); ++j) {
      const double d = (q - M[j]).norm();
      if (!used[j] && d <= bd) {
        bd = d;
        best = int(j);
      }
    }
    if (best >= 0) {
      used[size_t(best)] = 1;
      p.emplace_back(int(i), best);
    }
  }
  return p;
}

PointFit fit_pairs(const std::vector<std::pair<int, int>>& p, const std::vector<Eigen::Vector3d>& F,
                   const std::vector<Eigen::Vector3d>& M, bool with_scale) {
  std::vector<Eigen::Vector3d> a, b;
  for (const auto& [i, j] : p) {
    a.push_back(F[size_t(i)]);
    b.push_back(M[size_t(j)]);
  }
  return absolute_orientation(a, b, with_scale);
}
}  // namespace

MarkerMatch match_markers(const std::vector<Marker>& fixed, const std::vector<Marker>& moving, bool with_scale,
                          double tol_mm, double max_scale_change) {
  MarkerMatch out;
  std::vector<Eigen::Vector3d> F, M;
  for (const auto& m : fixed) F.push_back(m.centre_mm);
  for (const auto& m : moving) M.push_back(m.centre_mm);
  const int nf = int(F.size()), nm = int(M.size());
  if (nf < 3 || nm < 3) return out;
  auto dist = [](const std::vector<Eigen::Vector3d>& P, int a, int b) { return (P[size_t(a)] - P[size_t(b)]).norm(); };
  const double dtol = 2 * tol_mm;
  std::vector<Candidate> cands;
  size_t best = 0;
  auto better = [](const Candidate& a, const Candidate& b) {
    return a.pairs.size() != b.pairs.size() ? a.pairs.size() > b.pairs.size() : a.fit.rms_mm < b.fit.rms_mm;
  };
  for (int i = 0; i < nf; ++i)
    for (int j = i + 1; j < nf; ++j)
      for (int k = j + 1; k < nf; ++k) {
        const double fij = dist(F, i, j), fik = dist(F, i, k), fjk = dist(F, j, k);
        // Skip thin triangles: their rotation is poorly determined.
        const double area = 0.5 * (F[size_t(j)] - F[size_t(i)]).cross(F[size_t(k)] - F[size_t(i)]).norm();
        if (area < 0.5 * dtol * std::max({fij, fik, fjk})) continue;
        for (int a = 0; a < nm; ++a)
          for (int b = 0; b < nm; ++b) {
            if (b == a) continue;
            const double mab = dist(M, a, b);
            const double s = with_scale ? mab / fij : 1.0;
            if (std::abs(s - 1) > max_scale_change || std::abs(mab - s * fij) > dtol) continue;
            for (int c = 0; c < nm; ++c) {
              if (c == a || c == b) continue;
              if (std::abs(dist(M, a, c) - s * fik) > dtol || std::abs(dist(M, b, c) - s * fjk) > dtol) continue;
              Candidate cd;
              const std::vector<std::pair<int, int>> tri{{i, a}, {j, b}, {k, c}};
              PointFit f0 = fit_pairs(tri, F, M, with_scale);
              cd.pairs = inliers(f0.T, F, M, tol_mm);
              if (cd.pairs.size() < 3) continue;
              cd.fit = fit_pairs(cd.pairs, F, M, with_scale);
              cd.pairs = inliers(cd.fit.T, F, M, tol_mm);
              if (cd.pairs.size() < 3) continue;
              cd.fit = fit_pairs(cd.pairs, F, M, with_scale);
              cands.push_back(std::move(cd));
              if (cands.size() == 1 || better(cands.back(), cands[best])) best = cands.size() - 1;
            }
          }
      }
  if (cands.empty()) return out;
  const Candidate& b = cands[best];
  out.pairs = b.pairs;
  out.fit = b.fit;
  for (const auto& c : cands)
    if (c.pairs.size() == b.pairs.size() && rotation_difference_deg(c.fit.T.R, b.fit.T.R) > 2.0 &&
        c.fit.rms_mm <= 2 * b.fit.rms_mm + 0.25 * tol_mm)
      out.ambiguous = true;
  return out;
}

}  // namespace pb
