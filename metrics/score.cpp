// Scoring a predicted pore mask against a reference: one labelling of each side, one overlap pass
// (voxel confusion counts, per-slice counts, overlap of every (ref pore, pred pore) pair), one pass
// per side for pore geometry; matching, POD, size distributions and false calls derive from these.
// Pore surface area: Crofton's formula S = 2 E_u[ integral |n.u| dS ] estimated from boundary
// crossings along the 13 lattice directions of the 3x3x3 neighbourhood, each weighted by the solid
// angle of its Voronoi cell on the sphere (Lang, Ohser & Hilfer 2001, J. Microsc. 203:303-313);
// sphericity = pi^(1/3) (6V)^(2/3) / S (Wadell 1935). ESD = (6V/pi)^(1/3). The surface estimate is
// within 1-2 % for digital spheres of radius 4-12 voxels, and about 10 % low for planes normal to an
// axis (tests/test_metrics_score.cpp); a voxel-face count is 50 % high on spheres.
#include "metrics/score.hpp"

#include <omp.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <random>
#include <unordered_map>

#include <boost/math/distributions/chi_squared.hpp>

#include "core/components.hpp"
#include "core/error.hpp"
#include "core/format.hpp"
#include "core/slabs.hpp"

namespace pb {

using ojson = nlohmann::ordered_json;

// ---------------------------------------------------------------------------------------------
std::string MatchRule::text() const {
  if (kind == any) return "any";
  return (kind == coverage ? "coverage:" : "iou:") + format_number(threshold, 6);
}

MatchRule parse_match_rule(const std::string& s, const std::string& what) {
  MatchRule r;
  auto bad = [&] {
    return InputError(what + ": '" + s + "' is not a rule; use coverage:F (0 < F <= 1), iou:F (0 < F <= 1) or any");
  };
  if (s == "any") {
    r.kind = MatchRule::any;
    r.threshold = 0;
    return r;
  }
  const auto colon = s.find(':');
  if (colon == std::string::npos) throw bad();
  const std::string k = s.substr(0, colon), v = s.substr(colon + 1);
  if (k == "coverage")
    r.kind = MatchRule::coverage;
  else if (k == "iou")
    r.kind = MatchRule::iou;
  else
    throw bad();
  try {
    size_t used = 0;
    r.threshold = std::stod(v, &used);
    if (used != v.size()) throw bad();
  } catch (const std::logic_error&) {
    throw bad();
  }
  if (!(r.threshold > 0 && r.threshold <= 1)) throw bad();
  return r;
}

void ScoreOptions::validate() const {
  check_connectivity(connectivity);
  if (z_begin < 0) throw InputError("z range: begin must be >= 0, got " + std::to_string(z_begin));
  if (z_end >= 0 && z_end <= z_begin)
    throw InputError("z range: end " + std::to_string(z_end) + " must be greater than begin " + std::to_string(z_begin));
  if (bootstrap_samples < 0) throw InputError("bootstrap_samples must be >= 0, got " + std::to_string(bootstrap_samples));
  if (!(max_volume_ratio == 0 || (max_volume_ratio >= 1 && max_volume_ratio <= 1e9)))
    throw InputError("max_volume_ratio must be 0 (no cap) or in [1, 1e9], got " + std::to_string(max_volume_ratio));
  if (bins_per_decade < 1 || bins_per_decade > 100)
    throw InputError("bins_per_decade must be in 1..100, got " + std::to_string(bins_per_decade));
}

Overlap overlap_from_counts(int64_t tp, int64_t fp, int64_t fn, int64_t tn) {
  Overlap o;
  o.tp = tp, o.fp = fp, o.fn = fn, o.tn = tn;
  const double TP = double(tp), FP = double(fp), FN = double(fn);
  if (tp + fp + fn > 0) {
    o.jaccard = TP / (TP + FP + FN);
    o.dice = 2 * TP / (2 * TP + FP + FN);
    o.volume_similarity = 1 - std::fabs(FN - FP) / (2 * TP + FP + FN);
  }
  if (tp + fp > 0) o.precision = TP / (TP + FP);
  if (tp + fn > 0) o.recall = TP / (TP + FN);
  return o;
}

std::array<double, 3> bootstrap_mean_ci(const std::vector<double>& v, int samples, uint64_t seed) {
  std::vector<double> d;
  for (double x : v)
    if (std::isfinite(x)) d.push_back(x);
  std::array<double, 3> out{kMetricNaN, kMetricNaN, kMetricNaN};
  if (d.empty()) return out;
  double s = 0;
  for (double x : d) s += x;
  out[0] = s / double(d.size());
  if (d.size() < 2 || samples < 1) return out;
  std::mt19937_64 rng(seed);
  std::uniform_int_distribution<size_t> pick(0, d.size() - 1);
  std::vector<double> means(static_cast<size_t>(samples));
  for (auto& m : means) {
    double t = 0;
    for (size_t k = 0; k < d.size(); ++k) t += d[pick(rng)];
    m = t / double(d.size());
  }
  out[1] = percentile_linear(means, 2.5);
  out[2] = percentile_linear(means, 97.5);
  return out;
}

// ---------------------------------------------------------------------------------------------
namespace {

// The 13 lattice directions (one of each +-d pair) and their Voronoi solid-angle weights for the
// given spacing, computed on a Fibonacci lattice of 40000 points on the sphere.
struct Directions {
  std::array<std::array<int, 3>, 13> d;
  std::array<double, 13> weight, line_area_mm2;  // area per line = voxel volume / |d| (mm)
};

Directions lattice_directions(const std::array<double, 3>& sp) {
  Directions D;
  int k = 0;
  for (int dz = -1; dz <= 1; ++dz)
    for (int dy = -1; dy <= 1; ++dy)
      for (int dx = -1; dx <= 1; ++dx) {
        // one of each pair: the first non-zero component positive
        const int first = dz != 0 ? dz : (dy != 0 ? dy : dx);
        if (first > 0) D.d[size_t(k++)] = {dx, dy, dz};
      }
  std::array<std::array<double, 3>, 13> u;
  for (int i = 0; i < 13; ++i) {
    const double x = D.d[i][0] * sp[0], y = D.d[i][1] * sp[1], z = D.d[i][2] * sp[2];
    const double len = std::sqrt(x * x + y * y + z * z);
    u[i] = {x / len, y / len, z / len};
    D.line_area_mm2[i] = sp[0] * sp[1] * sp[2] / len;
  }
  const int n = 40000;
  std::array<int, 13> cnt{};
  const double golden = M_PI * (3 - std::sqrt(5.0));
  for (int j = 0; j < n; ++j) {
    const double z = 1 - (2 * j + 1.0) / n, r = std::sqrt(1 - z * z), t = golden * j;
    const double x = r * std::cos(t), y = r * std::sin(t);
    int best = 0;
    double bv = -1;
    for (int i = 0; i < 13; ++i) {
      const double c = std::fabs(x * u[i][0] + y * u[i][1] + z * u[i][2]);
      if (c > bv) bv = c, best = i;
    }
    ++cnt[size_t(best)];
  }
  for (int i = 0; i < 13; ++i) D.weight[size_t(i)] = double(cnt[size_t(i)]) / n;
  return D;
}

// Sums of one pore from the runs a thread visits: voxel coordinate sums (centroid), bounding box
// (x0 y0 z0 x1 y1 z1), voxel pairs per direction (see pore_geometry), touches the border.
struct Acc {
  std::array<int64_t, 3> sum{0, 0, 0};
  std::array<int64_t, 6> bbox{INT64_MAX, INT64_MAX, INT64_MAX, -1, -1, -1};
  std::array<int64_t, 13> cross{};
  bool touch = false;
};

// Where the sums of one run go: its pore (and the pore's coordinate sums), or a carried Acc.
struct RunSink {
  std::array<int64_t, 3>* sum;
  std::array<int64_t, 6>* bbox;
  std::array<int64_t, 13>* cross;
  bool* touch;
};

// The forward neighbour rows (dy, dz) of a row and the direction index of each (row, dx + 1); the
// +x direction within the row itself.
struct ForwardRows {
  static constexpr int dy[4] = {-1, 0, 1, 1}, dz[4] = {1, 1, 1, 0};
  int dir[4][3];
  int plus_x = 0;
};

ForwardRows forward_rows(const Directions& D) {
  ForwardRows F;
  for (int k = 0; k < 13; ++k) {
    const auto& d = D.d[size_t(k)];
    for (int n = 0; n < 4; ++n)
      if (d[1] == F.dy[n] && d[2] == F.dz[n]) F.dir[n][d[0] + 1] = k;
    if (d[0] == 1 && d[1] == 0 && d[2] == 0) F.plus_x = k;
  }
  return F;
}

// The runs [cur[n], end[n]) of the four forward neighbour rows of row (y, z); absent rows hold none.
inline void open_forward_rows(const LabelRuns& c, int64_t y, int64_t z, int64_t (&cur)[4], int64_t (&end)[4]) {
  const int64_t ny = c.geometry.dims[1], nz = c.geometry.dims[2];
  for (int n = 0; n < 4; ++n) {
    const int64_t yy = y + ForwardRows::dy[n], zz = z + ForwardRows::dz[n];
    if (yy < 0 || yy >= ny || zz >= nz) {
      cur[n] = end[n] = 0;
    } else {
      cur[n] = c.row_begin[size_t(c.row_of(yy, zz))];
      end[n] = c.row_begin[size_t(c.row_of(yy, zz)) + 1];
    }
  }
}

// Coordinate sums and bounding box of the voxels [a, b) of row (y, z).
inline void add_extent(const RunSink& s, int32_t a, int32_t b, int64_t y, int64_t z) {
  const int64_t len = b - a;
  (*s.sum)[0] += (int64_t(a) + b - 1) * len / 2, (*s.sum)[1] += y * len, (*s.sum)[2] += z * len;
  auto& bb = *s.bbox;
  bb[0] = std::min<int64_t>(bb[0], a), bb[3] = std::max<int64_t>(bb[3], b - 1);
  bb[1] = std::min(bb[1], y), bb[4] = std::max(bb[4], y);
  bb[2] = std::min(bb[2], z), bb[5] = std::max(bb[5], z);
}

// Voxel pairs P_k of the run [a, b) of label l: len - 1 along +x within the run, and per forward
// row the run's voxels whose neighbour lies in a run of the same label (interval overlaps). The
// cursors cur advance along the forward rows as the runs of the row go left to right.
inline void add_pairs(const LabelRuns& c, const ForwardRows& F, int64_t (&cur)[4], const int64_t (&end)[4], int32_t a,
                      int32_t b, uint32_t l, std::array<int64_t, 13>& P) {
  P[size_t(F.plus_x)] += b - a - 1;  // the next run of the row is at least one voxel away
  for (int n = 0; n < 4; ++n) {
    int64_t& j = cur[n];
    while (j < end[n] && c.runs[size_t(j)].x1 <= a - 1) ++j;  // runs before [a-1, b+1)
    for (int64_t k = j; k < end[n] && c.runs[size_t(k)].x0 < b + 1; ++k) {
      if (c.label[size_t(k)] != l) continue;
      const int32_t e0 = c.runs[size_t(k)].x0, e1 = c.runs[size_t(k)].x1;
      for (int dx = -1; dx <= 1; ++dx) {  // voxels x in [a, b) with x + dx in [e0, e1)
        const int64_t o = std::min<int64_t>(b, e1 - dx) - std::max<int64_t>(a, e0 - dx);
        if (o > 0) P[size_t(F.dir[n][dx + 1])] += o;
      }
    }
  }
}

// Whether the voxels [a, b) of row (y, z) have a 6-neighbour outside the volume (edge_row: the row
// lies on a y or z face) or outside the ROI R (x-neighbours: only the run's ends).
inline bool run_touches_outside(const uint8_t* R, const Geometry& g, bool edge_row, int32_t a, int32_t b, int64_t y,
                                int64_t z) {
  const int64_t nx = g.dims[0], ny = g.dims[1];
  if (edge_row || a == 0 || b == nx) return true;
  if (!R) return false;
  const int64_t base = (z * ny + y) * nx;
  if ((a > 0 && !R[base + a - 1]) || (b < nx && !R[base + b])) return true;
  const int64_t offs[4] = {-nx, nx, -nx * ny, nx * ny};
  for (int q = 0; q < 4; ++q)
    for (int64_t x = a; x < b; ++x)
      if (!R[base + offs[q] + x]) return true;
  return false;
}

// One thread's pass over the rows of slices [z0, z1): labels >= own_from add into their Pore (and
// sums), the others into the thread's carried map.
void scan_chunk(const LabelRuns& c, const uint8_t* R, const ForwardRows& F, int64_t z0, int64_t z1, uint32_t own_from,
                Buffer<Pore>& pores, Buffer<std::array<int64_t, 3>>& sums, std::unordered_map<uint32_t, Acc>& carry) {
  const Geometry& g = c.geometry;
  const int64_t ny = g.dims[1], nz = g.dims[2];
  uint32_t carry_label = 0;
  Acc* carry_acc = nullptr;
  for (int64_t z = z0; z < z1; ++z)
    for (int64_t y = 0; y < ny; ++y) {
      const int64_t row = c.row_of(y, z), i0 = c.row_begin[size_t(row)], i1 = c.row_begin[size_t(row) + 1];
      if (i0 == i1) continue;
      int64_t cur[4], end[4];
      open_forward_rows(c, y, z, cur, end);
      const bool edge_row = y == 0 || z == 0 || y + 1 == ny || z + 1 == nz;
      for (int64_t i = i0; i < i1; ++i) {
        const int32_t a = c.runs[size_t(i)].x0, b = c.runs[size_t(i)].x1;
        const uint32_t l = c.label[size_t(i)];
        RunSink s;
        if (l >= own_from) {
          Pore& p = pores[l - 1];
          s = {&sums[l - 1], &p.bbox, &p.crossings, &p.touches_border};
        } else {
          if (l != carry_label) carry_acc = &carry[l], carry_label = l;
          s = {&carry_acc->sum, &carry_acc->bbox, &carry_acc->cross, &carry_acc->touch};
        }
        add_extent(s, a, b, y, z);
        add_pairs(c, F, cur, end, a, b, l, *s.cross);
        if (!*s.touch) *s.touch = run_touches_outside(R, g, edge_row, a, b, y, z);
      }
    }
}

// Labels carried into later chunks: integer sums, mins and maxes, in any order.
void merge_carried(const std::vector<std::unordered_map<uint32_t, Acc>>& carried, Buffer<Pore>& pores,
                   Buffer<std::array<int64_t, 3>>& sums) {
  for (const auto& carry : carried)
    for (const auto& [l, a] : carry) {
      Pore& p = pores[l - 1];
      for (int i = 0; i < 3; ++i) sums[l - 1][size_t(i)] += a.sum[size_t(i)];
      for (int i = 0; i < 3; ++i)
        p.bbox[size_t(i)] = std::min(p.bbox[size_t(i)], a.bbox[size_t(i)]),
        p.bbox[size_t(i) + 3] = std::max(p.bbox[size_t(i) + 3], a.bbox[size_t(i) + 3]);
      for (int k = 0; k < 13; ++k) p.crossings[size_t(k)] += a.cross[size_t(k)];
      p.touches_border = p.touches_border || a.touch;
    }
}

// From the sums to the figures of every pore: size, volume, ESD, centroid, bounding box in input
// slices, crossings (from the pairs P_k), surface and sphericity.
void finish_pores(const LabelRuns& c, const Buffer<std::array<int64_t, 3>>& sums, const Directions& D, int64_t z_offset,
                  Buffer<Pore>& pores) {
  const Geometry& g = c.geometry;
  const auto& sp = g.spacing_mm;
  const double vv = g.voxel_volume_mm3();
  const int64_t np = int64_t(c.count);
#pragma omp parallel for schedule(static)
  for (int64_t k = 0; k < np; ++k) {
    Pore& p = pores[size_t(k)];
    const auto& t = sums[size_t(k)];
    p.label = uint32_t(k + 1);
    p.voxels = c.sizes[size_t(k) + 1];
    p.volume_mm3 = double(p.voxels) * vv;
    p.esd_um = 1000.0 * std::cbrt(6 * p.volume_mm3 / M_PI);
    const double n = double(p.voxels);
    p.centroid_mm = {g.origin_mm[0] + sp[0] * double(t[0]) / n, g.origin_mm[1] + sp[1] * double(t[1]) / n,
                     g.origin_mm[2] + sp[2] * double(t[2]) / n};
    p.bbox[2] += z_offset, p.bbox[5] += z_offset;
    for (auto& x : p.crossings) x = 2 * (p.voxels - x);  // pairs P_k -> crossings
    double s = 0;
    for (int q = 0; q < 13; ++q) s += D.weight[size_t(q)] * double(p.crossings[size_t(q)]) * D.line_area_mm2[size_t(q)];
    p.surface_mm2 = 2 * s;
    p.sphericity = std::cbrt(M_PI) * std::pow(6 * p.volume_mm3, 2.0 / 3.0) / p.surface_mm2;
  }
}

// Geometry of every component from its runs: sums for centroids, bounding boxes, boundary
// crossings along the 13 directions (a voxel and its neighbour along +-d differ in label, or the
// neighbour is outside the volume), and whether a voxel is 6-adjacent to the outside of the ROI
// (R: non-zero = inside, nullptr = no ROI) or of the volume. Crossings along d_k for a pore of N
// voxels are 2 (N - P_k), P_k the voxels v of the pore with v + d_k in the pore too (as many as
// those with v - d_k in it): so only the forward neighbour rows (y-1..y+1, z+1) and (y+1, z) are
// visited, and the run's own row gives len - 1 pairs along +x. P_k counts, per run and forward
// offset, the run's voxels whose neighbour lies in a run of the same label: interval overlaps,
// no voxel visits; the pass sums P_k in Pore::crossings, turned into crossings at the end.
// Memory: one accumulator per pore, not per pore and thread. Thread t takes the slices
// [nz t / T, nz (t + 1) / T) and owns the labels that start there (labels are in raster order of
// first voxels, so these are the labels above every label of the slices before): it adds into
// their Pore directly. Labels that started in an earlier chunk (few: they cross the chunk's first
// slice) go to a small per-thread map, added in afterwards. Every sum is an integer sum, a min or
// a max: the result does not depend on the thread count.
Buffer<Pore> pore_geometry(const LabelRuns& c, const uint8_t* R, const Directions& D, int64_t z_offset) {
  const int64_t nz = c.geometry.dims[2];
  const ForwardRows F = forward_rows(D);
  Buffer<Pore> pores(c.count);
  Buffer<std::array<int64_t, 3>> sums(c.count);
  const int nt = int(std::max<int64_t>(1, std::min<int64_t>(nz, omp_get_max_threads())));
  std::vector<uint32_t> chunk_max(size_t(nt) + 1, 0);
  std::vector<std::unordered_map<uint32_t, Acc>> carried(static_cast<size_t>(nt));
#pragma omp parallel num_threads(nt)
  {
    const int T = omp_get_num_threads(), t = omp_get_thread_num();
    const int64_t z0 = nz * t / T, z1 = nz * (t + 1) / T;
    const int64_t r0 = c.row_begin[size_t(c.row_of(0, z0))], r1 = c.row_begin[size_t(c.row_of(0, z1))];
    uint32_t m = 0;
    for (int64_t i = r0; i < r1; ++i) m = std::max(m, c.label[size_t(i)]);
    chunk_max[size_t(t) + 1] = m;
#pragma omp barrier
    uint32_t own_from = 1;  // labels >= own_from start in this chunk
    for (int k = 0; k <= t; ++k) own_from = std::max(own_from, chunk_max[size_t(k)] + 1);
    for (uint32_t l = own_from; l <= m; ++l) {
      pores[l - 1].bbox = Acc{}.bbox;
      sums[l - 1] = {0, 0, 0};
    }
    scan_chunk(c, R, F, z0, z1, own_from, pores, sums, carried[size_t(t)]);
  }
  merge_carried(carried, pores, sums);
  finish_pores(c, sums, D, z_offset, pores);
  return pores;
}

// A copy of slices [z0, z1) (origin moved accordingly).
Mask crop_z(const Mask& m, int64_t z0, int64_t z1) {
  const Geometry g = slab_geometry(m.geometry(), z0, z1);
  Mask out(g);
  std::copy(m.slice(z0), m.slice(z0) + g.voxels(), out.data());
  return out;
}

// The inputs restricted to the z-range: copies of slices [z0, z1) when a range is asked for,
// otherwise the inputs themselves.
struct ScoredInputs {
  Mask pc, rc, oc;  // crops (empty when the whole volume is scored)
  const Mask* pred = nullptr;
  const Mask* ref = nullptr;
  const Mask* roi = nullptr;
  int64_t z0 = 0;
};

void restrict_z(const Mask& pred_in, const Mask& ref_in, const Mask* roi_in, const ScoreOptions& opt, ScoredInputs& in) {
  check_same_geometry(pred_in.geometry(), "pred", ref_in.geometry(), "ref");
  if (roi_in) check_same_geometry(roi_in->geometry(), "roi", ref_in.geometry(), "ref");
  const int64_t nz_in = ref_in.nz();
  const auto [z0, z1] = scored_slices(nz_in, opt);
  in.z0 = z0;
  in.pred = &pred_in, in.ref = &ref_in, in.roi = roi_in;
  if (z0 == 0 && z1 == nz_in) return;
  in.pc = crop_z(pred_in, z0, z1);
  in.rc = crop_z(ref_in, z0, z1);
  in.pred = &in.pc, in.ref = &in.rc;
  if (roi_in) in.oc = crop_z(*roi_in, z0, z1), in.roi = &in.oc;
}

// The overlap pass: per row, a sweep over the ref and pred runs gives the per-slice tp/fp/fn, the
// ROI voxels per slice and the overlap of every (ref pore, pred pore) pair.
void overlap_pass(const LabelRuns& cp, const LabelRuns& cr, const uint8_t* roi, ScoreResult& r) {
  const Geometry& g = r.geometry;
  const int64_t ny = g.dims[1], nz = g.dims[2], sxy = g.dims[0] * ny;
  r.slice_tp.assign(size_t(nz), 0);
  r.slice_fp.assign(size_t(nz), 0);
  r.slice_fn.assign(size_t(nz), 0);
  std::vector<int64_t> slice_in(size_t(nz), 0);
  const int nt = omp_get_max_threads();
  std::vector<std::unordered_map<uint64_t, int64_t>> pair_maps(static_cast<size_t>(nt));
  const uint8_t* O = roi;
#pragma omp parallel num_threads(nt)
  {
    auto& pm = pair_maps[size_t(omp_get_thread_num())];
    uint64_t last_key = 0;
    int64_t* last = nullptr;
#pragma omp for schedule(static)
    for (int64_t z = 0; z < nz; ++z) {
      int64_t tp = 0, n_ref = 0, n_pred = 0, in = 0;
      for (int64_t y = 0; y < ny; ++y) {
        const int64_t row = cr.row_of(y, z);
        int64_t i = cr.row_begin[size_t(row)], j = cp.row_begin[size_t(row)];
        const int64_t ie = cr.row_begin[size_t(row) + 1], je = cp.row_begin[size_t(row) + 1];
        for (int64_t k = i; k < ie; ++k) n_ref += cr.runs[size_t(k)].x1 - cr.runs[size_t(k)].x0;
        for (int64_t k = j; k < je; ++k) n_pred += cp.runs[size_t(k)].x1 - cp.runs[size_t(k)].x0;
        while (i < ie && j < je) {
          const Run &u = cr.runs[size_t(i)], &v = cp.runs[size_t(j)];
          const int64_t o = std::min(u.x1, v.x1) - std::max(u.x0, v.x0);
          if (o > 0) {
            tp += o;
            const uint64_t key = (uint64_t(cr.label[size_t(i)]) << 32) | cp.label[size_t(j)];
            if (!last || key != last_key) {
              last = &pm[key];
              last_key = key;
            }
            *last += o;
          }
          if (u.x1 <= v.x1) ++i; else ++j;
        }
      }
      if (O) {
        for (int64_t q = z * sxy, e = q + sxy; q < e; ++q) in += O[q] != 0;
      } else {
        in = sxy;
      }
      r.slice_tp[size_t(z)] = tp, r.slice_fp[size_t(z)] = n_pred - tp, r.slice_fn[size_t(z)] = n_ref - tp;
      slice_in[size_t(z)] = in;
    }
  }
  r.slice_roi = slice_in;
  int64_t tp = 0, fp = 0, fn = 0;
  for (int64_t z = 0; z < nz; ++z) {
    tp += r.slice_tp[size_t(z)], fp += r.slice_fp[size_t(z)], fn += r.slice_fn[size_t(z)];
    r.roi_voxels += slice_in[size_t(z)];
  }
  r.roi_volume_mm3 = double(r.roi_voxels) * g.voxel_volume_mm3();
  r.overlap = overlap_from_counts(tp, fp, fn, r.roi_voxels - tp - fp - fn);
  std::map<uint64_t, int64_t> merged_pairs;
  for (auto& pm : pair_maps)
    for (auto& [k, v] : pm) merged_pairs[k] += v;
  for (auto& [k, v] : merged_pairs) r.pairs.push_back({uint32_t(k >> 32), uint32_t(k & 0xffffffffu), v});
}

// Per-slice Jaccard, its mean over defined slices and the bootstrap CI.
void slice_jaccards(const ScoreOptions& opt, ScoreResult& r) {
  const size_t nz = r.slice_tp.size();
  r.slice_jaccard.resize(nz);
  for (size_t z = 0; z < nz; ++z) {
    const int64_t u = r.slice_tp[z] + r.slice_fp[z] + r.slice_fn[z];
    r.slice_jaccard[z] = u > 0 ? double(r.slice_tp[z]) / double(u) : kMetricNaN;
    r.slices_defined += u > 0;
  }
  const auto ci = bootstrap_mean_ci(r.slice_jaccard, opt.bootstrap_samples, opt.seed);
  r.slice_jaccard_mean = ci[0], r.slice_jaccard_ci_lo = ci[1], r.slice_jaccard_ci_hi = ci[2];
}

// Percentile bootstrap over slices (Efron & Tibshirani 1993, ch. 13) of the pooled overlap ratios
// and the porosity bias: each resample draws the slices that hold ROI voxels with replacement and
// pools their counts. Slices are not independent (pores span several), so the interval is
// indicative, like the slice-Jaccard one. Seeded apart from the slice-Jaccard bootstrap.
void pooled_cis(const ScoreOptions& opt, ScoreResult& r) {
  const char* names[5] = {"jaccard", "dice", "precision", "recall", "porosity_bias_pp"};
  for (const char* n : names) r.ci95[n] = {kMetricNaN, kMetricNaN};
  std::vector<size_t> slices;
  for (size_t z = 0; z < r.slice_roi.size(); ++z)
    if (r.slice_roi[z] > 0) slices.push_back(z);
  if (slices.size() < 2 || opt.bootstrap_samples < 1) return;
  std::mt19937_64 rng(opt.seed + 1);
  std::uniform_int_distribution<size_t> pick(0, slices.size() - 1);
  std::vector<std::vector<double>> v(5);
  for (int b = 0; b < opt.bootstrap_samples; ++b) {
    double tp = 0, fp = 0, fn = 0, in = 0;
    for (size_t k = 0; k < slices.size(); ++k) {
      const size_t z = slices[pick(rng)];
      tp += double(r.slice_tp[z]), fp += double(r.slice_fp[z]), fn += double(r.slice_fn[z]), in += double(r.slice_roi[z]);
    }
    if (tp + fp + fn > 0) v[0].push_back(tp / (tp + fp + fn)), v[1].push_back(2 * tp / (2 * tp + fp + fn));
    if (tp + fp > 0) v[2].push_back(tp / (tp + fp));
    if (tp + fn > 0) v[3].push_back(tp / (tp + fn));
    v[4].push_back(100.0 * (fp - fn) / in);
  }
  // A ratio undefined in some resamples gets no interval (its value is not defined everywhere).
  for (int m = 0; m < 5; ++m)
    if (v[size_t(m)].size() == size_t(opt.bootstrap_samples))
      r.ci95[names[m]] = {percentile_linear(v[size_t(m)], 2.5), percentile_linear(v[size_t(m)], 97.5)};
}

// Exact two-sided 95 % Poisson interval of the false-call rate (Garwood 1936, Biometrika 28:437):
// [chi2(0.025; 2k) / 2, chi2(0.975; 2k + 2) / 2] per ROI volume.
void false_call_ci(ScoreResult& r) {
  r.ci95["false_calls_per_cm3"] = {kMetricNaN, kMetricNaN};
  if (!(r.roi_volume_mm3 > 0)) return;
  const double k = double(r.false_calls), cm3 = r.roi_volume_mm3 / 1000.0;
  const double lo = k == 0 ? 0.0 : boost::math::quantile(boost::math::chi_squared(2 * k), 0.025) / 2;
  const double hi = boost::math::quantile(boost::math::chi_squared(2 * k + 2), 0.975) / 2;
  r.ci95["false_calls_per_cm3"] = {lo / cm3, hi / cm3};
}

// Porosities divide by the ROI voxels of the scored slices: the part mask when one is given,
// otherwise every voxel of the scored slices (metrics/README.md, "Porosity").
void porosity(ScoreResult& r) {
  if (r.roi_voxels == 0) return;
  const Overlap& o = r.overlap;
  r.porosity_ref_pct = 100.0 * double(o.tp + o.fn) / double(r.roi_voxels);
  r.porosity_pred_pct = 100.0 * double(o.tp + o.fp) / double(r.roi_voxels);
  r.porosity_bias_pp = r.porosity_pred_pct - r.porosity_ref_pct;
  if (o.tp + o.fn > 0) r.porosity_rel_bias = r.porosity_bias_pp / r.porosity_ref_pct;
}

// Partners and best IoU of every pore from the pair overlaps, the volume-ratio cap, then hits
// under the rule and the counts that derive from them.
void match_pores(const MatchRule& m, double max_ratio, ScoreResult& r) {
  std::vector<int64_t> cover(r.pores_ref.size(), 0), covered(r.pores_pred.size(), 0);
  for (const auto& pr : r.pairs) {
    Pore& a = r.pores_ref[pr.ref - 1];
    Pore& b = r.pores_pred[pr.pred - 1];
    const double iou = double(pr.voxels) / double(a.voxels + b.voxels - pr.voxels);
    a.overlap_voxels += pr.voxels, b.overlap_voxels += pr.voxels;
    ++a.partners, ++b.partners;
    cover[pr.ref - 1] += b.voxels, covered[pr.pred - 1] += a.voxels;
    // Ties in IoU go to the smaller label (pairs are visited in label order).
    if (iou > a.best_iou) a.best_iou = iou, a.best_partner = pr.pred;
    if (iou > b.best_iou) b.best_iou = iou, b.best_partner = pr.ref;
  }
  if (max_ratio > 0) {
    for (size_t k = 0; k < r.pores_ref.size(); ++k)
      r.pores_ref[k].oversized = double(cover[k]) > max_ratio * double(r.pores_ref[k].voxels);
    for (size_t k = 0; k < r.pores_pred.size(); ++k)
      r.pores_pred[k].oversized = covered[k] > 0 && double(r.pores_pred[k].voxels) > max_ratio * double(covered[k]);
  }
  if (m.kind == MatchRule::iou) {
    // One-to-one, greedy by IoU (descending; ties by ref label, then pred label).
    std::vector<std::pair<double, size_t>> order;
    for (size_t k = 0; k < r.pairs.size(); ++k) {
      const auto& pr = r.pairs[k];
      const double iou = double(pr.voxels) / double(r.pores_ref[pr.ref - 1].voxels +
                                                    r.pores_pred[pr.pred - 1].voxels - pr.voxels);
      if (iou >= m.threshold) order.push_back({iou, k});
    }
    std::stable_sort(order.begin(), order.end(), [](auto& x, auto& y) { return x.first > y.first; });
    for (auto& [iou, k] : order) {
      Pore& a = r.pores_ref[r.pairs[k].ref - 1];
      Pore& b = r.pores_pred[r.pairs[k].pred - 1];
      if (a.matched || b.matched || a.oversized || b.oversized) continue;
      a.matched = b.matched = true;
    }
  } else {
    for (auto& a : r.pores_ref)
      a.matched = !a.oversized && (m.kind == MatchRule::any ? a.overlap_voxels > 0
                                                            : double(a.overlap_voxels) >= m.threshold * double(a.voxels));
    for (auto& b : r.pores_pred) b.matched = b.overlap_voxels > 0 && !b.oversized;
  }
  for (const auto& a : r.pores_ref) {
    r.hits += a.matched;
    r.split += a.partners >= 2;
  }
  r.misses = int64_t(r.pores_ref.size()) - r.hits;
  for (const auto& b : r.pores_pred) {
    r.false_calls += b.overlap_voxels == 0 || b.oversized;
    r.oversized_false_calls += b.overlap_voxels > 0 && b.oversized;
    r.merged += b.partners >= 2;
  }
  if (r.roi_volume_mm3 > 0) r.false_calls_per_cm3 = double(r.false_calls) / (r.roi_volume_mm3 / 1000.0);
  if (!r.pores_ref.empty()) r.false_calls_per_target = double(r.false_calls) / double(r.pores_ref.size());
}

// POD from the hits, ESD distributions of both sides, binned POD, surface distances.
void detection_and_sizes(const ScoreOptions& opt, const LabelRuns& cp, const LabelRuns& cr, ScoreResult& r) {
  std::vector<double> esd_ref, esd_pred;
  std::vector<int> hit;
  for (const auto& a : r.pores_ref) esd_ref.push_back(a.esd_um), hit.push_back(a.matched ? 1 : 0);
  for (const auto& b : r.pores_pred) esd_pred.push_back(b.esd_um);
  r.pod = fit_pod(esd_ref, hit, opt.pod_link);
  r.sizes = compare_sizes(esd_ref, esd_pred, opt.bins_per_decade);
  const auto edges = log_bin_edges(esd_ref, {}, opt.bins_per_decade);
  r.pod_bins = binned_pod(esd_ref, hit, edges);
  for (const auto& w : r.pod.warnings) r.warnings.push_back("pod: " + w);
  if (!r.pod.estimable) r.warnings.push_back("pod: not estimable: " + r.pod.reason);
  if (opt.surface_distances) r.surface = surface_distances(cp, cr);
}

}  // namespace

// ---------------------------------------------------------------------------------------------
namespace {

// Everything score() computes once both sides are labelled (runs of the scored slices; z0: the
// first scored slice of the input, for bounding boxes).
ScoreResult score_labelled(const LabelRuns& cp, const LabelRuns& cr, const uint8_t* roi, int64_t z0, const ScoreOptions& opt) {
  ScoreResult r;
  r.options = opt;
  r.geometry = cr.geometry;
  overlap_pass(cp, cr, roi, r);
  porosity(r);
  // The two bootstraps draw from their own seeds and write their own fields: side by side.
#pragma omp parallel sections
  {
#pragma omp section
    slice_jaccards(opt, r);
#pragma omp section
    pooled_cis(opt, r);
  }
  const Directions D = lattice_directions(r.geometry.spacing_mm);
  r.pores_ref = pore_geometry(cr, roi, D, z0);
  r.pores_pred = pore_geometry(cp, roi, D, z0);
  match_pores(opt.match, opt.max_volume_ratio, r);
  false_call_ci(r);
  detection_and_sizes(opt, cp, cr, r);
  if (r.roi_voxels == 0) r.warnings.push_back("the ROI holds no voxels: every metric is undefined");
  return r;
}

}  // namespace

ScoreResult score(const Mask& pred_in, const Mask& ref_in, const Mask* roi_in, const ScoreOptions& opt) {
  opt.validate();
  ScoredInputs in;
  restrict_z(pred_in, ref_in, roi_in, opt, in);
  const LabelRuns cp = label_runs(*in.pred, in.roi, opt.connectivity);
  const LabelRuns cr = label_runs(*in.ref, in.roi, opt.connectivity);
  return score_labelled(cp, cr, in.roi ? in.roi->data() : nullptr, in.z0, opt);
}

ScoreResult score_runs(const LabelRuns& pred, const LabelRuns& ref, int64_t z0, const ScoreOptions& opt, const uint8_t* roi) {
  opt.validate();
  check_same_geometry(pred.geometry, "pred", ref.geometry, "ref");
  return score_labelled(pred, ref, roi, z0, opt);
}

std::array<int64_t, 2> scored_slices(int64_t nz, const ScoreOptions& opt) {
  const int64_t z0 = opt.z_begin, z1 = opt.z_end < 0 ? nz : opt.z_end;
  if (z1 > nz || (nz > 0 && z0 >= nz))
    throw InputError("z range [" + std::to_string(z0) + ", " + std::to_string(z1) + ") is outside the " +
                     std::to_string(nz) + " slices");
  return {z0, z1};
}

}  // namespace pb
