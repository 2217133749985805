// Surface distances (hd95, assd) between two segmentations by exact nearest-neighbour search of
// surface voxels on a uniform grid of 4^3-voxel cells, searched in rings of increasing Chebyshev
// cell distance until no unsearched cell can hold a closer point. Definitions: see surface.hpp
// (Nikolov et al. 2021 for the max of directed 95th percentiles; Heimann et al. 2009 for assd).
#include "metrics/surface.hpp"

#include <algorithm>
#include <array>
#include <cmath>

namespace pb {
namespace {

constexpr int kCell = 4;

std::vector<std::array<int32_t, 3>> surface_points(const Image<uint32_t>& l) {
  const int64_t nx = l.nx(), ny = l.ny(), nz = l.nz();
  std::vector<std::array<int32_t, 3>> pts;
  auto fg = [&](int64_t x, int64_t y, int64_t z) {
    return x >= 0 && y >= 0 && z >= 0 && x < nx && y < ny && z < nz && l(x, y, z) != 0;
  };
  for (int64_t z = 0; z < nz; ++z)
    for (int64_t y = 0; y < ny; ++y) {
      const uint32_t* row = l.data() + (z * ny + y) * nx;
      for (int64_t x = 0; x < nx; ++x) {
        if (!row[x]) continue;
        if (!fg(x - 1, y, z) || !fg(x + 1, y, z) || !fg(x, y - 1, z) || !fg(x, y + 1, z) || !fg(x, y, z - 1) ||
            !fg(x, y, z + 1))
          pts.push_back({int32_t(x), int32_t(y), int32_t(z)});
      }
    }
  return pts;
}

struct Grid {
  std::array<int64_t, 3> n{0, 0, 0};
  std::vector<int64_t> begin;
  std::vector<std::array<int32_t, 3>> pts;
  int64_t cell(int64_t cx, int64_t cy, int64_t cz) const { return (cz * n[1] + cy) * n[0] + cx; }
};

Grid make_grid(const std::vector<std::array<int32_t, 3>>& pts, const Geometry& g) {
  Grid G;
  for (int i = 0; i < 3; ++i) G.n[i] = (g.dims[i] + kCell - 1) / kCell;
  G.begin.assign(size_t(G.n[0] * G.n[1] * G.n[2]) + 1, 0);
  auto cid = [&](const std::array<int32_t, 3>& p) { return G.cell(p[0] / kCell, p[1] / kCell, p[2] / kCell); };
  for (auto& p : pts) ++G.begin[size_t(cid(p)) + 1];
  for (size_t c = 1; c < G.begin.size(); ++c) G.begin[c] += G.begin[c - 1];
  G.pts.resize(pts.size());
  std::vector<int64_t> pos(G.begin.begin(), G.begin.end() - 1);
  for (auto& p : pts) G.pts[size_t(pos[size_t(cid(p))]++)] = p;
  return G;
}

std::vector<double> distances(const std::vector<std::array<int32_t, 3>>& from, const Grid& G,
                              const std::array<double, 3>& sp) {
  std::vector<double> d(from.size(), kMetricNaN);
  if (G.pts.empty()) return d;
  const double min_sp = std::min({sp[0], sp[1], sp[2]});
  const int64_t rmax = std::max({G.n[0], G.n[1], G.n[2]});
  const int64_t nq = int64_t(from.size());
#pragma omp parallel for schedule(static)
  for (int64_t q = 0; q < nq; ++q) {
    const auto& p = from[size_t(q)];
    const int64_t cx = p[0] / kCell, cy = p[1] / kCell, cz = p[2] / kCell;
    double best = INFINITY;
    for (int64_t r = 0; r <= rmax; ++r) {
      for (int64_t dz = -r; dz <= r; ++dz) {
        const int64_t z = cz + dz;
        if (z < 0 || z >= G.n[2]) continue;
        for (int64_t dy = -r; dy <= r; ++dy) {
          const int64_t y = cy + dy;
          if (y < 0 || y >= G.n[1]) continue;
          const bool inner = std::abs(dz) < r && std::abs(dy) < r;
          for (int64_t dx = -r; dx <= r; dx += (inner ? 2 * r : 1)) {
            const int64_t x = cx + dx;
            if (x >= 0 && x < G.n[0]) {
              const int64_t c = G.cell(x, y, z);
              for (int64_t k = G.begin[size_t(c)]; k < G.begin[size_t(c) + 1]; ++k) {
                const auto& t = G.pts[size_t(k)];
                const double ex = (t[0] - p[0]) * sp[0], ey = (t[1] - p[1]) * sp[1], ez = (t[2] - p[2]) * sp[2];
                best = std::min(best, ex * ex + ey * ey + ez * ez);
              }
            }
            if (r == 0) break;
          }
        }
      }
      const double reach = double(r) * kCell * min_sp;  // any unsearched point is at least this far
      if (best <= reach * reach) break;
    }
    d[size_t(q)] = std::sqrt(best);
  }
  return d;
}

}  // namespace

double percentile_linear(std::vector<double> v, double q_pct) {
  if (v.empty()) return kMetricNaN;
  std::sort(v.begin(), v.end());
  const double pos = q_pct / 100.0 * double(v.size() - 1);
  const size_t lo = size_t(std::floor(pos));
  const size_t hi = std::min(lo + 1, v.size() - 1);
  return v[lo] + (pos - double(lo)) * (v[hi] - v[lo]);
}

std::vector<double> directed_surface_distances(const Image<uint32_t>& from, const Image<uint32_t>& to) {
  return distances(surface_points(from), make_grid(surface_points(to), to.geometry()), from.geometry().spacing_mm);
}

SurfaceDistances surface_distances(const Image<uint32_t>& pred, const Image<uint32_t>& ref) {
  SurfaceDistances s;
  const auto sp_pred = surface_points(pred), sp_ref = surface_points(ref);
  s.surface_voxels_pred = int64_t(sp_pred.size());
  s.surface_voxels_ref = int64_t(sp_ref.size());
  if (sp_pred.empty() || sp_ref.empty()) return s;
  const auto& spacing = pred.geometry().spacing_mm;
  const auto d_pr = distances(sp_pred, make_grid(sp_ref, ref.geometry()), spacing);
  const auto d_rp = distances(sp_ref, make_grid(sp_pred, pred.geometry()), spacing);
  double sum = 0;
  for (double v : d_pr) sum += v;
  for (double v : d_rp) sum += v;
  s.assd_mm = sum / double(d_pr.size() + d_rp.size());
  s.hd95_mm = std::max(percentile_linear(d_pr, 95), percentile_linear(d_rp, 95));
  return s;
}

}  // namespace pb
