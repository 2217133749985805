// Surface distances (hd95, assd) between two segmentations by exact nearest-neighbour search of
// surface voxels (found from the runs, 64 voxels a word): first the 3x3x3 neighbourhood, else a
// uniform grid of 8^3-voxel cells searched in rings (the far points of a cell together) until no
// unsearched cell can hold a closer point. Definitions: see surface.hpp
// (Nikolov et al. 2021 for the max of directed 95th percentiles; Heimann et al. 2009 for assd).
#include "metrics/surface.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstring>

#include <immintrin.h>

#include <omp.h>

#include "core/components.hpp"
#include "core/cpu.hpp"

namespace pb {
namespace {

constexpr int kCell = 8;  // Surface::at unpacks offsets of 3 bits per axis

using Point = std::array<int32_t, 3>;

// A volume of bits, one row of ceil(nx / 64) words per (y, z): bit x of row r (bits past nx zero).
// Made uninitialised: surface_bits writes every row.
struct RowBits {
  int64_t nx = 0, ny = 0, nz = 0, nw = 0;
  Buffer<uint64_t> w;
  explicit RowBits(const std::array<int64_t, 3>& d)
      : nx(d[0]), ny(d[1]), nz(d[2]), nw((d[0] + 63) / 64), w(size_t(nw * ny * nz)) {}
  const uint64_t* row(int64_t y, int64_t z) const { return w.data() + (z * ny + y) * nw; }
  uint64_t* row(int64_t y, int64_t z) { return w.data() + (z * ny + y) * nw; }
  // Bits x0-1 .. x0+8 of row (y, z) as bits 0..9, x0 a multiple of 8 (zero outside the volume and
  // past nx): for x = x0 + i, i in 0..7, bits x-1, x, x+1 are window10(x0, y, z) >> i & 7.
  unsigned window10(int64_t x0, int64_t y, int64_t z) const {
    if (y < 0 || z < 0 || y >= ny || z >= nz) return 0;
    const uint64_t* r = row(y, z);
    if (x0 == 0) return unsigned(r[0] << 1) & 0x3ffu;
    const int64_t b = x0 - 1, k = b >> 6, s = b & 63;
    uint64_t v = r[k] >> s;
    if (s > 54 && k + 1 < nw) v |= r[k + 1] << (64 - s);
    return unsigned(v) & 0x3ffu;
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
        if (!any) {
          std::fill(S.row(y, z), S.row(y, z) + nw, 0);
          continue;
        }
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
  // Visits the voxel rows of cell row (cy, cz) in raster order and in each the cells from left to
  // right, giving f(cx, v, oy, oz) for each cell with points there: v = the cell's eight voxels of
  // the row (bit i: x % 8 = i; byte j of row word k is cell 8 k + j, kCell = 8), oy, oz = y % 8,
  // z % 8. So the points come in the grid's order (within a cell: raster order).
  static_assert(kCell == 8, "a byte of a row word is one cell's voxels of that row");
  auto each_cell_row = [&](int64_t cy, int64_t cz, auto&& f) {
    for (int64_t z = cz * kCell; z < std::min(bits.nz, (cz + 1) * kCell); ++z)
      for (int64_t y = cy * kCell; y < std::min(bits.ny, (cy + 1) * kCell); ++y) {
        const uint64_t* r = bits.row(y, z);
        const unsigned oy = unsigned(y % kCell), oz = unsigned(z % kCell);
        for (int64_t k = 0; k < bits.nw; ++k)
          for (uint64_t w = r[k]; w;) {
            const int j = __builtin_ctzll(w) >> 3;
            w &= ~(uint64_t(0xff) << (8 * j));
            f(k * 8 + j, unsigned(r[k] >> (8 * j)) & 0xffu, oy, oz);
          }
      }
  };
  // Points per byte of a row from a table: the build is portable x86-64 (no -mpopcnt), where
  // __builtin_popcount is a call into libgcc for every byte.
  static constexpr std::array<uint8_t, 256> ones = [] {
    std::array<uint8_t, 256> t{};
    for (int v = 1; v < 256; ++v) t[size_t(v)] = uint8_t(t[size_t(v >> 1)] + (v & 1));
    return t;
  }();
  // Counts per cell (into begin[c + 1]), then offsets, then the points.
#pragma omp parallel for schedule(static)
  for (int64_t row = 0; row < nrows; ++row) {
    const int64_t cy = row % n[1], cz = row / n[1];
    int64_t* cnt = begin.data() + cell(0, cy, cz) + 1;
    std::fill(cnt, cnt + n[0], 0);
    std::array<uint8_t, 6>* bx = box.data() + cell(0, cy, cz);
    std::fill(bx, bx + n[0], std::array<uint8_t, 6>{kCell, kCell, kCell, 0, 0, 0});
    each_cell_row(cy, cz, [&](int64_t cx, unsigned v, unsigned oy, unsigned oz) {
      cnt[cx] += ones[v];
      auto& b = bx[cx];
      const uint8_t x0 = uint8_t(__builtin_ctz(v)), x1 = uint8_t(31 - __builtin_clz(v));
      b[0] = std::min(b[0], x0), b[3] = std::max(b[3], x1);
      b[1] = std::min(b[1], uint8_t(oy)), b[4] = std::max(b[4], uint8_t(oy));
      b[2] = std::min(b[2], uint8_t(oz)), b[5] = std::max(b[5], uint8_t(oz));
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
      each_cell_row(cy, cz, [&](int64_t cx, unsigned v, unsigned oy, unsigned oz) {
        int64_t& at = cur[size_t(cx)];
        const unsigned yz = kCell * oy + kCell * kCell * oz;
        for (; v; v &= v - 1) off[size_t(at++)] = uint16_t(unsigned(__builtin_ctz(v)) + yz);
      });
    }
  }
}

// The least of `best` and the squared distances from a query point to m points of a cell (offsets
// o, cell corner minus query point r): e = ex ex + ey ey + ez ez with ex = (r_x + o_x) sp_x, each
// product and sum rounded on its own (no fused multiply-add: surface.cpp is built with
// -ffp-contract=off), so both versions give the same bits as a point-to-point distance elsewhere.
double cell_min(const uint16_t* o, int64_t m, const int32_t r[3], const double* sp, double best) {
  for (int64_t j = 0; j < m; ++j) {
    const double ex = double(r[0] + (o[j] & 7)) * sp[0], ey = double(r[1] + (o[j] >> 3 & 7)) * sp[1],
                 ez = double(r[2] + (o[j] >> 6)) * sp[2];
    const double e = ex * ex + ey * ey + ez * ez;
    best = e < best ? e : best;
  }
  return best;
}

__attribute__((target("avx2"))) double cell_min_avx2(const uint16_t* o, int64_t m, const int32_t r[3],
                                                     const double* sp, double best) {
  const __m128i seven = _mm_set1_epi32(7), rx = _mm_set1_epi32(r[0]), ry = _mm_set1_epi32(r[1]), rz = _mm_set1_epi32(r[2]);
  const __m256d sx = _mm256_set1_pd(sp[0]), sy = _mm256_set1_pd(sp[1]), sz = _mm256_set1_pd(sp[2]);
  __m256d b = _mm256_set1_pd(best);
  int64_t j = 0;
  for (; j + 4 <= m; j += 4) {
    __m128i w;
    std::memcpy(&w, o + j, 8);
    w = _mm_cvtepu16_epi32(w);
    const __m256d ex = _mm256_mul_pd(_mm256_cvtepi32_pd(_mm_add_epi32(rx, _mm_and_si128(w, seven))), sx);
    const __m256d ey = _mm256_mul_pd(_mm256_cvtepi32_pd(_mm_add_epi32(ry, _mm_and_si128(_mm_srli_epi32(w, 3), seven))), sy);
    const __m256d ez = _mm256_mul_pd(_mm256_cvtepi32_pd(_mm_add_epi32(rz, _mm_srli_epi32(w, 6))), sz);
    const __m256d e = _mm256_add_pd(_mm256_add_pd(_mm256_mul_pd(ex, ex), _mm256_mul_pd(ey, ey)), _mm256_mul_pd(ez, ez));
    b = _mm256_min_pd(e, b);  // e < b ? e : b, lane by lane
  }
  alignas(32) double lanes[4];
  _mm256_store_pd(lanes, b);
  for (const double v : lanes) best = v < best ? v : best;
  return cell_min(o + j, m - j, r, sp, best);
}

// Exact nearest target surface voxel for every query point, in two steps. First the 3x3x3
// neighbourhood of each point: exact when something there is within 2 x the smallest spacing
// (anything outside it is farther). The points left ("far" points: isolated noise, or surfaces
// apart) are searched together, a query cell at a time, so that one walk over rings of target
// cells serves them all: each occupied target cell is scanned (AVX2 when the CPU has it) for the
// points its box of points may be closer to, and a point leaves the walk when no unsearched cell
// can hold a closer target. On a ring, a row of cells (cy, cz) is either a whole run of cells (the
// ring's faces, tested a word of occupancy bits at a time) or its two end cells. Every bound is
// formed from whole-voxel gaps in the same arithmetic (and order of additions) as a point-to-point
// distance, so rounding (monotone) never lets a bound exceed a distance it stands for; the minimum,
// and so the result, does not depend on the order cells are visited in.
// Query points: the surface points of `from`, in its order (cell by cell); d[k] for point k (d
// holds at least from.points() values).
void distances(const Surface& from, const Surface& G, const std::array<double, 3>& sp, double* d) {
  const bool avx2 = simd_level() >= Simd::avx2;
  const RowBits& bits = G.bits;
  const double min_sp = std::min({sp[0], sp[1], sp[2]});
  // Squared distance of whole-voxel gaps (a point pair's distance when the gaps are its offsets).
  auto dist2 = [&](int64_t gx, int64_t gy, int64_t gz) {
    const double ex = double(gx) * sp[0], ey = double(gy) * sp[1], ez = double(gz) * sp[2];
    return ex * ex + ey * ey + ez * ez;
  };
  // The 26 neighbour offsets, bit (dz + 1) 9 + (dy + 1) 3 + dx + 1 of the 3x3x3 look, by squared
  // length (ties in any order: only the length is used).
  std::array<std::pair<double, int>, 26> near;
  for (int o = 0, k = 0; o < 27; ++o)
    if (o != 13) near[size_t(k++)] = {dist2(o % 3 - 1, o / 3 % 3 - 1, o / 9 - 1), o};
  std::sort(near.begin(), near.end());
  // Smallest gap between voxel ranges [a0, a1] and [b0, b1] along one axis.
  auto gap_min = [](int64_t a0, int64_t a1, int64_t b0, int64_t b1) -> int64_t {
    return b0 > a1 ? b0 - a1 : (a0 > b1 ? a0 - b1 : 0);
  };
  // The 3x3x3 look by lengths: the offsets of each squared length (a mask of look bits; the
  // centre, length 0, first), ascending, with the root and whether it is exact (nothing outside
  // the look can be closer: within 2 x the smallest spacing). The nearest target in the look is
  // the first class with a bit set (the same length as the first set offset in `near`).
  struct LookClass {
    uint32_t mask;
    double len2, len;
    bool exact;
  };
  std::vector<LookClass> classes{{uint32_t(1) << 13, 0.0, 0.0, true}};
  for (const auto& [len2, o] : near) {
    if (classes.back().len2 != len2)
      classes.push_back({0, len2, std::sqrt(len2), len2 <= 4 * min_sp * min_sp});
    classes.back().mask |= uint32_t(1) << o;
  }
  const int64_t rmax = std::max({G.n[0], G.n[1], G.n[2]});
  struct Far {
    Point p;
    double best;  // squared distance to the nearest target found so far
    int64_t k;    // index of the query point
  };
  // The far points of query cell c (box [lo, hi]) searched together: rings of target cells around
  // the cell; an occupied cell is scanned for each point its box of points may be closer to; a point
  // is finished when no unsearched cell can hold a closer target. hint: any target point (a first
  // bound for every point; updated to a target near the last improvement).
  auto search_far = [&](const int64_t c[3], const int64_t lo[3], const int64_t hi[3], std::vector<Far>& fp,
                        Point& hint, bool& have_hint) {
    size_t active = fp.size();  // fp[0, active): points still searching
    if (have_hint)
      for (Far& f : fp) f.best = std::min(f.best, dist2(hint[0] - f.p[0], hint[1] - f.p[1], hint[2] - f.p[2]));
    auto worst = [&] {
      double w = 0;
      for (size_t i = 0; i < active; ++i) w = std::max(w, fp[i].best);
      return w;
    };
    double bound = worst();  // no active point is helped by a cell at least this far from the box
    auto visit = [&](int64_t x, int64_t y, int64_t z) {
      const int64_t cell = G.cell(x, y, z);
      const auto& b = G.box[size_t(cell)];
      const int64_t at[3] = {x * kCell, y * kCell, z * kCell};
      const uint16_t* o = G.off.data() + G.begin[size_t(cell)];
      const int64_t m = G.begin[size_t(cell) + 1] - G.begin[size_t(cell)];
      for (size_t i = 0; i < active; ++i) {
        Far& f = fp[i];
        int64_t g[3];
        for (int a = 0; a < 3; ++a) g[a] = gap_min(f.p[size_t(a)], f.p[size_t(a)], at[a] + b[size_t(a)], at[a] + b[size_t(a) + 3]);
        if (dist2(g[0], g[1], g[2]) >= f.best) continue;  // the cell's points' box is no closer
        const int32_t r[3] = {int32_t(at[0] - f.p[0]), int32_t(at[1] - f.p[1]), int32_t(at[2] - f.p[2])};
        const double e = avx2 ? cell_min_avx2(o, m, r, sp.data(), f.best) : cell_min(o, m, r, sp.data(), f.best);
        if (e < f.best) f.best = e, hint = Surface::at(x, y, z, o[0]), have_hint = true;
      }
    };
    for (int64_t r = 0; r <= rmax && active > 0; ++r) {
      const int64_t x0 = std::max<int64_t>(0, c[0] - r), x1 = std::min<int64_t>(G.n[0] - 1, c[0] + r);
      for (int64_t dz = -r; dz <= r; ++dz) {
        const int64_t z = c[2] + dz;
        if (z < 0 || z >= G.n[2]) continue;
        const int64_t gz = gap_min(lo[2], hi[2], z * kCell, z * kCell + kCell - 1);
        if (dist2(0, 0, gz) >= bound) continue;  // the whole slice of cells is no closer
        for (int64_t dy = -r; dy <= r; ++dy) {
          const int64_t y = c[1] + dy;
          if (y < 0 || y >= G.n[1]) continue;
          if (dist2(0, gap_min(lo[1], hi[1], y * kCell, y * kCell + kCell - 1), gz) >= bound) continue;  // the row
          const uint64_t* o = G.occ_row(y, z);
          auto occupied = [&](int64_t x) { return (o[x >> 6] >> (x & 63)) & 1; };
          if (std::abs(dz) < r && std::abs(dy) < r) {  // inside the ring's faces: the two end cells
            if (c[0] - r >= 0 && occupied(c[0] - r)) visit(c[0] - r, y, z);
            if (c[0] + r < G.n[0] && occupied(c[0] + r)) visit(c[0] + r, y, z);
            continue;
          }
          for (int64_t w = x0 >> 6; w <= x1 >> 6; ++w) {  // cells x0..x1 of the row
            uint64_t m = o[w];
            if (w == x0 >> 6) m &= ~uint64_t(0) << (x0 & 63);
            if (w == x1 >> 6 && (x1 & 63) != 63) m &= (uint64_t(1) << ((x1 & 63) + 1)) - 1;
            for (; m; m &= m - 1) visit(w * 64 + __builtin_ctzll(m), y, z);
          }
        }
      }
      // A point is finished when every unsearched voxel, beyond one face of the searched block of
      // cells (faces on the volume's border hide nothing), is no closer than its best.
      for (size_t i = 0; i < active;) {
        const Far& f = fp[i];
        double reach2 = INFINITY;
        for (int a = 0; a < 3; ++a) {
          int64_t g[3] = {0, 0, 0};
          if (c[a] - r > 0) {
            g[a] = f.p[size_t(a)] - ((c[a] - r) * kCell - 1);
            reach2 = std::min(reach2, dist2(g[0], g[1], g[2]));
          }
          if (c[a] + r + 1 < G.n[a]) {
            g[a] = (c[a] + r + 1) * kCell - f.p[size_t(a)];
            reach2 = std::min(reach2, dist2(g[0], g[1], g[2]));
          }
        }
        if (f.best <= reach2)
          std::swap(fp[i], fp[--active]);  // finished: out of the active front
        else
          ++i;
      }
      bound = worst();
    }
  };
  const int64_t ncells = from.n[0] * from.n[1] * from.n[2];
#pragma omp parallel
  {
    std::vector<Far> far;
    Point hint{0, 0, 0};  // a target point near the last query's nearest (a valid bound anywhere)
    bool have_hint = false;
#pragma omp for schedule(dynamic, 64)
    for (int64_t cell = 0; cell < ncells; ++cell) {
      const int64_t c[3] = {cell % from.n[0], cell / from.n[0] % from.n[1], cell / (from.n[0] * from.n[1])};
      far.clear();
      int64_t lo[3] = {INT64_MAX, INT64_MAX, INT64_MAX}, hi[3] = {INT64_MIN, INT64_MIN, INT64_MIN};
      // The look of a point from the ten-bit windows of the nine target rows around its row
      // (taken once for the points of a row of the cell: offsets o with the same o >> 3).
      unsigned win[9];
      int win_row = -1;
      for (int64_t k = from.begin[size_t(cell)]; k < from.begin[size_t(cell) + 1]; ++k) {
        const uint16_t o = from.off[size_t(k)];
        if (int(o >> 3) != win_row) {
          win_row = int(o >> 3);
          const int64_t y = c[1] * kCell + (o >> 3 & 7), z = c[2] * kCell + (o >> 6);
          for (int r = 0; r < 9; ++r) win[r] = bits.window10(c[0] * kCell, y + r % 3 - 1, z + r / 3 - 1);
        }
        const unsigned xo = o & 7u;
        uint32_t look = 0;
        for (int r = 0; r < 9; ++r) look |= (win[r] >> xo & 7u) << (3 * r);  // bit (dz + 1) 9 + (dy + 1) 3 + dx + 1
        const LookClass* hit = nullptr;
        for (const LookClass& lc : classes)
          if (look & lc.mask) {
            hit = &lc;
            break;
          }
        if (hit && hit->exact) {
          d[size_t(k)] = hit->len;
          continue;
        }
        const Point p = Surface::at(c[0], c[1], c[2], o);
        far.push_back({p, hit ? hit->len2 : INFINITY, k});
        for (int i = 0; i < 3; ++i) lo[i] = std::min<int64_t>(lo[i], p[size_t(i)]), hi[i] = std::max<int64_t>(hi[i], p[size_t(i)]);
      }
      if (far.empty()) continue;
      search_far(c, lo, hi, far, hint, have_hint);
      for (const Far& f : far) d[size_t(f.k)] = std::sqrt(f.best);
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
