// Surface distances (hd95, assd) between two segmentations by exact nearest-neighbour search of
// surface voxels (found from the runs, 64 voxels a word): first the 3x3x3 neighbourhood, else a
// uniform grid of 8^3-voxel cells searched in rings until no unsearched cell can hold a closer
// point. Definitions: see surface.hpp
// (Nikolov et al. 2021 for the max of directed 95th percentiles; Heimann et al. 2009 for assd).
#include "metrics/surface.hpp"

#include <algorithm>
#include <array>
#include <cmath>

#include <omp.h>

#include "core/components.hpp"

namespace pb {
namespace {

constexpr int kCell = 8;  // Surface::at unpacks offsets of 3 bits per axis

using Point = std::array<int32_t, 3>;

// A volume of bits, one row of ceil(nx / 64) words per (y, z): bit x of row r.
struct RowBits {
  int64_t nx = 0, ny = 0, nz = 0, nw = 0;
  Buffer<uint64_t> w;
  explicit RowBits(const std::array<int64_t, 3>& d)
      : nx(d[0]), ny(d[1]), nz(d[2]), nw((d[0] + 63) / 64), w(zeroed_buffer<uint64_t>(size_t(nw * ny * nz))) {}
  const uint64_t* row(int64_t y, int64_t z) const { return w.data() + (z * ny + y) * nw; }
  uint64_t* row(int64_t y, int64_t z) { return w.data() + (z * ny + y) * nw; }
  // Bits x-1, x, x+1 of row (y, z) as bits 0..2 (zero outside the volume; bits past nx are zero).
  unsigned three(int64_t x, int64_t y, int64_t z) const {
    if (y < 0 || z < 0 || y >= ny || z >= nz) return 0;
    const uint64_t* r = row(y, z);
    if (x == 0) return unsigned(r[0] << 1) & 7u;
    const int64_t b = x - 1, k = b >> 6, s = b & 63;
    uint64_t v = r[k] >> s;
    if (s > 61 && k + 1 < nw) v |= r[k + 1] << (64 - s);
    return unsigned(v) & 7u;
  }
};

// Surface voxels: foreground with a background (or outside) 6-neighbour, 64 voxels at a time. The
// foreground of each thread's slices (and one more on either side) is drawn from the runs into a
// ring of three slices of bits, so no foreground volume is made.
RowBits surface_bits(const LabelRuns& L) {
  RowBits S(L.geometry.dims);
  const int64_t nw = S.nw, ny = S.ny, nz = S.nz, plane = ny * nw;
  const uint64_t last_mask = S.nx % 64 ? (uint64_t(1) << (S.nx % 64)) - 1 : ~uint64_t(0);
#pragma omp parallel
  {
    const int T = omp_get_num_threads(), t = omp_get_thread_num();
    const int64_t z0 = nz * t / T, z1 = nz * (t + 1) / T;
    std::vector<uint64_t> ring(size_t(3 * plane));
    auto slice = [&](int64_t z) { return ring.data() + (z + 3) % 3 * plane; };  // z >= -1
    auto draw = [&](int64_t z) {  // foreground bits of slice z (zero outside the volume)
      uint64_t* P = slice(z);
      std::fill(P, P + plane, 0);
      if (z < 0 || z >= nz) return;
      for (int64_t y = 0; y < ny; ++y) {
        uint64_t* w = P + y * nw;
        const int64_t r = L.row_of(y, z);
        for (int64_t i = L.row_begin[size_t(r)]; i < L.row_begin[size_t(r) + 1]; ++i) {
          const int64_t x0 = L.runs[size_t(i)].x0, x1 = L.runs[size_t(i)].x1;  // bits [x0, x1)
          for (int64_t k = x0 >> 6; k <= (x1 - 1) >> 6; ++k) {
            const int64_t lo = std::max<int64_t>(x0, k * 64) - k * 64, hi = std::min<int64_t>(x1, k * 64 + 64) - k * 64;
            w[k] |= (hi == 64 ? ~uint64_t(0) : (uint64_t(1) << hi) - 1) & ~((uint64_t(1) << lo) - 1);
          }
        }
      }
    };
    if (z0 < z1) draw(z0 - 1), draw(z0);
    for (int64_t z = z0; z < z1; ++z) {
      draw(z + 1);
      const uint64_t *below = slice(z - 1), *here = slice(z), *above = slice(z + 1);
      for (int64_t y = 0; y < ny; ++y) {
        const uint64_t* c = here + y * nw;
        bool any = false;
        for (int64_t k = 0; k < nw && !any; ++k) any = c[k] != 0;
        if (!any) continue;
        const uint64_t* nb[4] = {y > 0 ? c - nw : nullptr, y + 1 < ny ? c + nw : nullptr, below + y * nw, above + y * nw};
        uint64_t* out = S.row(y, z);
        for (int64_t k = 0; k < nw; ++k) {
          const uint64_t left = (c[k] << 1) | (k > 0 ? c[k - 1] >> 63 : 0);  // bit x: voxel x - 1
          uint64_t right = (c[k] >> 1) | (k + 1 < nw ? c[k + 1] << 63 : 0);  // bit x: voxel x + 1
          if (k + 1 == nw) right &= last_mask >> 1;                           // past the row: outside
          uint64_t inner = left & right;
          for (const uint64_t* n : nb) inner &= n ? n[k] : 0;
          out[k] = c[k] & ~inner;
        }
      }
    }
  }
  return S;
}

// Surface voxels of a labelled mask (only foreground vs background matters) as bits, and as points
// grouped by cells of kCell^3 voxels (a uniform grid): the cells in raster order of (cx, cy, cz),
// within a cell the points in raster order, each stored as its offset in the cell (x + 8 y + 64 z,
// two bytes a point). The grid is built from the bits directly (a count pass
// and a fill pass per row of cells), and an occupancy bit per cell, one row of words per (cy, cz),
// lets the ring search skip empty cells a word at a time.
struct Surface {
  RowBits bits;
  std::array<int64_t, 3> n{0, 0, 0};  // cells along x, y, z
  int64_t ow = 0;                      // occupancy words per row of cells
  Buffer<int64_t> begin;               // points of cell c: [begin[c], begin[c + 1])
  Buffer<uint16_t> off;                // the points: offsets in their cells
  Buffer<uint64_t> occ;                // bit cx of word row (cy, cz): cell holds points
  // Of an occupied cell: the bounding box of its points, offsets in the cell (x0 y0 z0 x1 y1 z1).
  Buffer<std::array<uint8_t, 6>> box;
  int64_t cell(int64_t cx, int64_t cy, int64_t cz) const { return (cz * n[1] + cy) * n[0] + cx; }
  int64_t points() const { return begin[size_t(n[0] * n[1] * n[2])]; }
  static Point at(int64_t cx, int64_t cy, int64_t cz, uint16_t o) {
    return {int32_t(cx * kCell + (o & 7)), int32_t(cy * kCell + (o >> 3 & 7)), int32_t(cz * kCell + (o >> 6))};
  }
  const uint64_t* occ_row(int64_t cy, int64_t cz) const { return occ.data() + (cz * n[1] + cy) * ow; }
  explicit Surface(const LabelRuns& L);
};

Surface::Surface(const LabelRuns& L) : bits(surface_bits(L)) {
  for (int i = 0; i < 3; ++i) n[size_t(i)] = (L.geometry.dims[size_t(i)] + kCell - 1) / kCell;
  ow = (n[0] + 63) / 64;
  const int64_t ncells = n[0] * n[1] * n[2], nrows = n[1] * n[2];
  begin.resize(size_t(ncells) + 1);
  occ = zeroed_buffer<uint64_t>(size_t(ow * nrows));
  box.resize(size_t(ncells));
  begin[0] = 0;
  // Visits the voxel rows of cell row (cy, cz) in raster order, giving f(x, y, z) for each set bit.
  auto each_point = [&](int64_t cy, int64_t cz, auto&& f) {
    for (int64_t z = cz * kCell; z < std::min(bits.nz, (cz + 1) * kCell); ++z)
      for (int64_t y = cy * kCell; y < std::min(bits.ny, (cy + 1) * kCell); ++y) {
        const uint64_t* r = bits.row(y, z);
        for (int64_t k = 0; k < bits.nw; ++k)
          for (uint64_t m = r[k]; m; m &= m - 1) f(k * 64 + __builtin_ctzll(m), y, z);
      }
  };
  // Counts per cell (into begin[c + 1]), then offsets, then the points.
#pragma omp parallel for schedule(static)
  for (int64_t row = 0; row < nrows; ++row) {
    const int64_t cy = row % n[1], cz = row / n[1];
    int64_t* cnt = begin.data() + cell(0, cy, cz) + 1;
    std::fill(cnt, cnt + n[0], 0);
    std::array<uint8_t, 6>* bx = box.data() + cell(0, cy, cz);
    std::fill(bx, bx + n[0], std::array<uint8_t, 6>{kCell, kCell, kCell, 0, 0, 0});
    each_point(cy, cz, [&](int64_t x, int64_t y, int64_t z) {
      ++cnt[x / kCell];
      auto& b = bx[x / kCell];
      const uint8_t o[3] = {uint8_t(x % kCell), uint8_t(y % kCell), uint8_t(z % kCell)};
      for (int i = 0; i < 3; ++i) b[size_t(i)] = std::min(b[size_t(i)], o[i]), b[size_t(i) + 3] = std::max(b[size_t(i) + 3], o[i]);
    });
    uint64_t* o = occ.data() + row * ow;
    for (int64_t cx = 0; cx < n[0]; ++cx)
      if (cnt[cx]) o[cx >> 6] |= uint64_t(1) << (cx & 63);
  }
  for (int64_t c = 0; c < ncells; ++c) begin[size_t(c) + 1] += begin[size_t(c)];
  off.resize(size_t(begin[size_t(ncells)]));
#pragma omp parallel
  {
    std::vector<int64_t> cur(static_cast<size_t>(n[0]));
#pragma omp for schedule(static)
    for (int64_t row = 0; row < nrows; ++row) {
      const int64_t cy = row % n[1], cz = row / n[1];
      std::copy(begin.data() + cell(0, cy, cz), begin.data() + cell(0, cy, cz) + n[0], cur.begin());
      each_point(cy, cz, [&](int64_t x, int64_t y, int64_t z) {
        off[size_t(cur[size_t(x / kCell)]++)] = uint16_t(x % kCell + kCell * (y % kCell) + kCell * kCell * (z % kCell));
      });
    }
  }
}

// Exact nearest target surface voxel for every query point: first the 3x3x3 neighbourhood (exact
// when something there is within 2 x the smallest spacing: anything outside it is farther), else
// rings of grid cells until no unsearched cell can hold a closer point. On a ring, a row of cells
// (cy, cz) is either a whole run of cells (the ring's faces, tested a word of occupancy bits at a
// time) or its two end cells. The minimum does not depend on the order cells are visited in.
// Query points: the surface points of `from`, in its order (cell by cell); d[k] for point k (d
// holds at least from.points() values).
void distances(const Surface& from, const Surface& G, const std::array<double, 3>& sp, double* d) {
  const RowBits& bits = G.bits;
  const double min_sp = std::min({sp[0], sp[1], sp[2]});
  // The 26 neighbour offsets, bit (dz + 1) 9 + (dy + 1) 3 + dx + 1 of the 3x3x3 look, by squared
  // length (ties in any order: only the length is used).
  std::array<std::pair<double, int>, 26> near;
  for (int o = 0, k = 0; o < 27; ++o)
    if (o != 13) {
      const double ex = (o % 3 - 1) * sp[0], ey = (o / 3 % 3 - 1) * sp[1], ez = (o / 9 - 1) * sp[2];
      near[size_t(k++)] = {ex * ex + ey * ey + ez * ez, o};
    }
  std::sort(near.begin(), near.end());
  const int64_t rmax = std::max({G.n[0], G.n[1], G.n[2]});
  // hint: a target point (the previous query's nearest, close by: queries go cell by cell); its
  // distance starts the search as a bound, so cells no closer are skipped from the first ring on.
  // Any target point is a valid bound: the minimum, and so the result, does not depend on it.
  auto nearest = [&](const Point& p, Point& hint, bool& have_hint) -> double {
    double best = INFINITY;
    if (bits.three(p[0], p[1], p[2]) & 2) {
      hint = p, have_hint = true;
      return 0;
    }
    uint32_t look = 0;
    for (int dz = -1; dz <= 1; ++dz)
      for (int dy = -1; dy <= 1; ++dy) look |= uint32_t(bits.three(p[0], p[1] + dy, p[2] + dz)) << ((dz + 1) * 9 + (dy + 1) * 3);
    for (const auto& [len2, o] : near)
      if (look >> o & 1) {
        best = len2;
        hint = {p[0] + o % 3 - 1, p[1] + o / 3 % 3 - 1, p[2] + o / 9 - 1}, have_hint = true;
        break;
      }
    if (best <= 4 * min_sp * min_sp) return std::sqrt(best);
    if (have_hint) {
      const double ex = (hint[0] - p[0]) * sp[0], ey = (hint[1] - p[1]) * sp[1], ez = (hint[2] - p[2]) * sp[2];
      best = std::min(best, ex * ex + ey * ey + ez * ez);
    }
    const int64_t c[3] = {p[0] / kCell, p[1] / kCell, p[2] / kCell};
    // A cell none of whose points can be closer than the best so far is skipped: the per-axis gaps
    // to the box of its points give, in the same arithmetic (and order of additions) as a point's
    // distance, a bound no point beats (rounding is monotone). Whole slices and rows of cells
    // likewise, by their z and (y, z) gaps alone.
    auto gap_to = [](int64_t lo, int64_t hi, int32_t v) -> int64_t { return v < lo ? lo - v : (v > hi ? v - hi : 0); };
    auto gap = [&](int64_t cell_index, int32_t v) { return gap_to(cell_index * kCell, cell_index * kCell + kCell - 1, v); };
    auto scan_cell = [&](int64_t x, int64_t y, int64_t z) {
      const int64_t cell = G.cell(x, y, z);
      const auto& b = G.box[size_t(cell)];
      const int64_t at[3] = {x * kCell, y * kCell, z * kCell};
      double g[3];
      for (int i = 0; i < 3; ++i) g[i] = double(gap_to(at[i] + b[size_t(i)], at[i] + b[size_t(i) + 3], p[i])) * sp[size_t(i)];
      if (g[0] * g[0] + g[1] * g[1] + g[2] * g[2] >= best) return;  // the points' box is no closer
      for (int64_t k = G.begin[size_t(cell)]; k < G.begin[size_t(cell) + 1]; ++k) {
        const Point t = Surface::at(x, y, z, G.off[size_t(k)]);
        const double ex = (t[0] - p[0]) * sp[0], ey = (t[1] - p[1]) * sp[1], ez = (t[2] - p[2]) * sp[2];
        const double e = ex * ex + ey * ey + ez * ez;
        if (e < best) best = e, hint = t, have_hint = true;
      }
    };
    for (int64_t r = 0; r <= rmax; ++r) {
      const int64_t x0 = std::max<int64_t>(0, c[0] - r), x1 = std::min<int64_t>(G.n[0] - 1, c[0] + r);
      for (int64_t dz = -r; dz <= r; ++dz) {
        const int64_t z = c[2] + dz;
        if (z < 0 || z >= G.n[2]) continue;
        const double gz = double(gap(z, p[2])) * sp[2];
        if (gz * gz >= best) continue;  // the whole slice of cells is no closer
        for (int64_t dy = -r; dy <= r; ++dy) {
          const int64_t y = c[1] + dy;
          if (y < 0 || y >= G.n[1]) continue;
          const double gy = double(gap(y, p[1])) * sp[1];
          if (gy * gy + gz * gz >= best) continue;  // the whole row of cells is no closer
          const uint64_t* o = G.occ_row(y, z);
          auto occupied = [&](int64_t x) { return (o[x >> 6] >> (x & 63)) & 1; };
          if (std::abs(dz) < r && std::abs(dy) < r) {  // inside the ring's faces: the two end cells
            if (c[0] - r >= 0 && occupied(c[0] - r)) scan_cell(c[0] - r, y, z);
            if (c[0] + r < G.n[0] && occupied(c[0] + r)) scan_cell(c[0] + r, y, z);
            continue;
          }
          for (int64_t w = x0 >> 6; w <= x1 >> 6; ++w) {  // cells x0..x1 of the row
            uint64_t m = o[w];
            if (w == x0 >> 6) m &= ~uint64_t(0) << (x0 & 63);
            if (w == x1 >> 6 && (x1 & 63) != 63) m &= (uint64_t(1) << ((x1 & 63) + 1)) - 1;
            for (; m; m &= m - 1) scan_cell(w * 64 + __builtin_ctzll(m), y, z);
          }
        }
      }
      // Any unsearched voxel lies beyond one face of the searched block of cells (faces on the
      // volume's border hide nothing).
      double reach = INFINITY;
      for (int i = 0; i < 3; ++i) {
        if (c[i] - r > 0) reach = std::min(reach, double(p[i] - ((c[i] - r) * kCell - 1)) * sp[i]);
        if (c[i] + r + 1 < G.n[i]) reach = std::min(reach, double((c[i] + r + 1) * kCell - p[i]) * sp[i]);
      }
      if (best <= reach * reach) break;
    }
    return std::sqrt(best);
  };
  const int64_t ncells = from.n[0] * from.n[1] * from.n[2];
#pragma omp parallel
  {
    Point hint{0, 0, 0};
    bool have_hint = false;
#pragma omp for schedule(dynamic, 64)
    for (int64_t cell = 0; cell < ncells; ++cell) {
      const int64_t cx = cell % from.n[0], cy = cell / from.n[0] % from.n[1], cz = cell / (from.n[0] * from.n[1]);
      for (int64_t k = from.begin[size_t(cell)]; k < from.begin[size_t(cell) + 1]; ++k)
        d[size_t(k)] = nearest(Surface::at(cx, cy, cz, from.off[size_t(k)]), hint, have_hint);
    }
  }
}

}  // namespace

namespace {

// percentile_linear on [b, e), reordering it.
double percentile_in_place(double* b, double* e, double q_pct) {
  if (b == e) return kMetricNaN;
  const size_t n = size_t(e - b);
  const double pos = q_pct / 100.0 * double(n - 1);
  const size_t lo = size_t(std::floor(pos));
  // Order statistics lo and lo + 1 by selection (linear time) instead of a full sort.
  std::nth_element(b, b + lo, e);
  const double v_lo = b[lo];
  const double v_hi = lo + 1 < n ? *std::min_element(b + lo + 1, e) : v_lo;
  return v_lo + (pos - double(lo)) * (v_hi - v_lo);
}

}  // namespace

double percentile_linear(std::vector<double> v, double q_pct) {
  return percentile_in_place(v.data(), v.data() + v.size(), q_pct);
}

SurfaceDistances surface_distances(const LabelRuns& pred, const LabelRuns& ref) {
  SurfaceDistances s;
  const Surface sp(pred), sr(ref);
  s.surface_voxels_pred = sp.points();
  s.surface_voxels_ref = sr.points();
  if (sp.points() == 0 || sr.points() == 0) return s;
  const auto& spacing = pred.geometry.spacing_mm;
  // One buffer for both directions (fresh memory is slow to come by): pred -> ref, its sum and
  // 95th percentile, then ref -> pred.
  const int64_t n_pr = sp.points(), n_rp = sr.points();
  Buffer<double> d(size_t(std::max(n_pr, n_rp)));
  double sum = 0;
  distances(sp, sr, spacing, d.data());
  for (int64_t k = 0; k < n_pr; ++k) sum += d[size_t(k)];
  const double p_pr = percentile_in_place(d.data(), d.data() + n_pr, 95);
  distances(sr, sp, spacing, d.data());
  for (int64_t k = 0; k < n_rp; ++k) sum += d[size_t(k)];
  const double p_rp = percentile_in_place(d.data(), d.data() + n_rp, 95);
  s.assd_mm = sum / double(n_pr + n_rp);
  s.hd95_mm = std::max(p_pr, p_rp);
  return s;
}

}  // namespace pb
