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
#include <iomanip>
#include <map>
#include <random>
#include <sstream>
#include <unordered_map>

#include "core/error.hpp"
#include "core/components.hpp"

namespace pb {

using ojson = nlohmann::ordered_json;

// ---------------------------------------------------------------------------------------------
std::string MatchRule::text() const {
  std::ostringstream s;
  if (kind == any) return "any";
  s << (kind == coverage ? "coverage:" : "iou:") << threshold;
  return s.str();
}

MatchRule parse_match_rule(const std::string& s) {
  MatchRule r;
  auto bad = [&] {
    return InputError("--match: '" + s + "' is not a rule; use coverage:F (0 < F <= 1), iou:F (0 < F <= 1) or any");
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

struct Acc {
  int64_t sx = 0, sy = 0, sz = 0;
  int32_t lo[3] = {INT32_MAX, INT32_MAX, INT32_MAX}, hi[3] = {-1, -1, -1};
  int64_t cross[13] = {};
  bool touch = false;
};

// Geometry of every component from its runs: sums for centroids, bounding boxes, boundary
// crossings along the 13 directions (a voxel and its neighbour along +-d differ in label, or the
// neighbour is outside the volume), and whether a voxel is 6-adjacent to the outside of the ROI
// or of the volume. Crossings count, per run and neighbour offset, the run's voxels whose
// neighbour lies in a run of the same label: interval overlaps, no voxel visits.
std::vector<Pore> pore_geometry(const LabelRuns& c, const Mask* roi, const Directions& D, int64_t z_offset) {
  const Geometry& g = c.geometry;
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2];
  const uint8_t* R = roi ? roi->data() : nullptr;
  // Direction index of each of the 26 offsets (dx, dy, dz) in 0..2 each (+1 shifted).
  std::array<int, 27> dir_of{};
  for (int k = 0; k < 13; ++k) {
    const auto& d = D.d[size_t(k)];
    dir_of[size_t((d[2] + 1) * 9 + (d[1] + 1) * 3 + d[0] + 1)] = k;
    dir_of[size_t((1 - d[2]) * 9 + (1 - d[1]) * 3 + 1 - d[0])] = k;
  }
  const int nt = omp_get_max_threads();
  std::vector<std::vector<Acc>> acc(static_cast<size_t>(nt));
#pragma omp parallel num_threads(nt)
  {
    auto& A = acc[size_t(omp_get_thread_num())];
    A.assign(size_t(c.count) + 1, Acc{});
#pragma omp for schedule(static)
    for (int64_t z = 0; z < nz; ++z)
      for (int64_t y = 0; y < ny; ++y) {
        const int64_t row = c.row_of(y, z), i0 = c.row_begin[size_t(row)], i1 = c.row_begin[size_t(row) + 1];
        if (i0 == i1) continue;
        // The nine neighbour rows (dy, dz) with a cursor each; absent rows hold no runs.
        int64_t cur[9], end[9];
        for (int dz = -1; dz <= 1; ++dz)
          for (int dy = -1; dy <= 1; ++dy) {
            const int n = (dz + 1) * 3 + dy + 1;
            const int64_t yy = y + dy, zz = z + dz;
            if (yy < 0 || zz < 0 || yy >= ny || zz >= nz) {
              cur[n] = end[n] = 0;
            } else {
              cur[n] = c.row_begin[size_t(c.row_of(yy, zz))];
              end[n] = c.row_begin[size_t(c.row_of(yy, zz)) + 1];
            }
          }
        const bool edge_row = y == 0 || z == 0 || y + 1 == ny || z + 1 == nz;
        for (int64_t i = i0; i < i1; ++i) {
          const int32_t a = c.runs[size_t(i)].x0, b = c.runs[size_t(i)].x1;
          const uint32_t l = c.label[size_t(i)];
          const int64_t len = b - a;
          Acc& t = A[l];
          t.sx += (int64_t(a) + b - 1) * len / 2, t.sy += y * len, t.sz += z * len;
          t.lo[0] = std::min(t.lo[0], a), t.hi[0] = std::max(t.hi[0], b - 1);
          t.lo[1] = std::min(t.lo[1], int32_t(y)), t.hi[1] = std::max(t.hi[1], int32_t(y));
          t.lo[2] = std::min(t.lo[2], int32_t(z)), t.hi[2] = std::max(t.hi[2], int32_t(z));
          int64_t same[27] = {};
          for (int n = 0; n < 9; ++n) {
            int64_t& j = cur[n];
            while (j < end[n] && c.runs[size_t(j)].x1 <= a - 1) ++j;  // runs before [a-1, b+1)
            for (int64_t k = j; k < end[n] && c.runs[size_t(k)].x0 < b + 1; ++k) {
              if (c.label[size_t(k)] != l) continue;
              const int32_t e0 = c.runs[size_t(k)].x0, e1 = c.runs[size_t(k)].x1;
              for (int dx = -1; dx <= 1; ++dx) {  // voxels x in [a, b) with x + dx in [e0, e1)
                const int64_t o = std::min<int64_t>(b, e1 - dx) - std::max<int64_t>(a, e0 - dx);
                if (o > 0) same[n * 3 + dx + 1] += o;
              }
            }
          }
          for (int o = 0; o < 27; ++o)
            if (o != 13) t.cross[dir_of[size_t(o)]] += len - same[o];
          if (edge_row || a == 0 || b == nx) t.touch = true;
          if (R && !t.touch) {  // a 6-neighbour outside the ROI (x-neighbours: only the ends)
            const int64_t base = (z * ny + y) * nx;
            if ((a > 0 && !R[base + a - 1]) || (b < nx && !R[base + b])) t.touch = true;
            const int64_t offs[4] = {-nx, nx, -nx * ny, nx * ny};
            for (int q = 0; q < 4 && !t.touch; ++q)
              for (int64_t x = a; x < b; ++x)
                if (!R[base + offs[q] + x]) {
                  t.touch = true;
                  break;
                }
          }
        }
      }
  }
  std::vector<Pore> pores(c.count);
  const auto& sp = g.spacing_mm;
  const double vv = g.voxel_volume_mm3();
  for (uint32_t l = 1; l <= c.count; ++l) {
    Acc t;
    for (auto& A : acc) {
      const Acc& a = A[l];
      t.sx += a.sx, t.sy += a.sy, t.sz += a.sz;
      for (int i = 0; i < 3; ++i) t.lo[i] = std::min(t.lo[i], a.lo[i]), t.hi[i] = std::max(t.hi[i], a.hi[i]);
      for (int k = 0; k < 13; ++k) t.cross[k] += a.cross[k];
      t.touch = t.touch || a.touch;
    }
    Pore& p = pores[l - 1];
    p.label = l;
    p.voxels = c.sizes[l];
    p.volume_mm3 = double(p.voxels) * vv;
    p.esd_um = 1000.0 * std::cbrt(6 * p.volume_mm3 / M_PI);
    const double n = double(p.voxels);
    p.centroid_mm = {g.origin_mm[0] + sp[0] * double(t.sx) / n, g.origin_mm[1] + sp[1] * double(t.sy) / n,
                     g.origin_mm[2] + sp[2] * double(t.sz) / n};
    p.bbox = {t.lo[0], t.lo[1], t.lo[2] + z_offset, t.hi[0], t.hi[1], t.hi[2] + z_offset};
    double s = 0;
    for (int k = 0; k < 13; ++k) s += D.weight[size_t(k)] * double(t.cross[k]) * D.line_area_mm2[size_t(k)];
    for (int k = 0; k < 13; ++k) p.crossings[size_t(k)] = t.cross[k];
    p.surface_mm2 = 2 * s;
    p.sphericity = std::cbrt(M_PI) * std::pow(6 * p.volume_mm3, 2.0 / 3.0) / p.surface_mm2;
    p.touches_border = t.touch;
  }
  return pores;
}

// A copy of slices [z0, z1) (origin moved accordingly).
Mask crop_z(const Mask& m, int64_t z0, int64_t z1) {
  Geometry g = m.geometry();
  g.dims[2] = z1 - z0;
  g.origin_mm[2] += double(z0) * g.spacing_mm[2];
  Mask out(g);
  std::copy(m.slice(z0), m.slice(z0) + g.voxels(), out.data());
  return out;
}

}  // namespace

// ---------------------------------------------------------------------------------------------
ScoreResult score(const Mask& pred_in, const Mask& ref_in, const Mask* roi_in, const ScoreOptions& opt) {
  opt.validate();
  check_same_geometry(pred_in.geometry(), "pred", ref_in.geometry(), "ref");
  if (roi_in) check_same_geometry(roi_in->geometry(), "roi", ref_in.geometry(), "ref");
  const int64_t nz_in = ref_in.nz();
  const int64_t z0 = opt.z_begin, z1 = opt.z_end < 0 ? nz_in : opt.z_end;
  if (z1 > nz_in || (nz_in > 0 && z0 >= nz_in))
    throw InputError("z range [" + std::to_string(z0) + ", " + std::to_string(z1) + ") is outside the " +
                     std::to_string(nz_in) + " slices");
  // Crop only when a z-range is asked for; otherwise work on the inputs in place.
  Mask pc, rc, oc;
  const bool crop = z0 != 0 || z1 != nz_in;
  if (crop) {
    pc = crop_z(pred_in, z0, z1);
    rc = crop_z(ref_in, z0, z1);
    if (roi_in) oc = crop_z(*roi_in, z0, z1);
  }
  const Mask& pred = crop ? pc : pred_in;
  const Mask& ref = crop ? rc : ref_in;
  const Mask* roi = roi_in ? (crop ? &oc : roi_in) : nullptr;

  ScoreResult r;
  r.options = opt;
  r.geometry = ref.geometry();
  const Geometry& g = r.geometry;
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2], sxy = nx * ny;

  const LabelRuns cp = label_runs(pred, roi, opt.connectivity);
  const LabelRuns cr = label_runs(ref, roi, opt.connectivity);

  // --- the overlap pass: per row, a sweep over the ref and pred runs ------------------------
  r.slice_tp.assign(size_t(nz), 0);
  r.slice_fp.assign(size_t(nz), 0);
  r.slice_fn.assign(size_t(nz), 0);
  std::vector<int64_t> slice_in(size_t(nz), 0);
  const int nt = omp_get_max_threads();
  std::vector<std::unordered_map<uint64_t, int64_t>> pair_maps(static_cast<size_t>(nt));
  const uint8_t* O = roi ? roi->data() : nullptr;
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
  int64_t tp = 0, fp = 0, fn = 0;
  for (int64_t z = 0; z < nz; ++z) {
    tp += r.slice_tp[size_t(z)], fp += r.slice_fp[size_t(z)], fn += r.slice_fn[size_t(z)];
    r.roi_voxels += slice_in[size_t(z)];
  }
  r.roi_volume_mm3 = double(r.roi_voxels) * g.voxel_volume_mm3();
  r.overlap = overlap_from_counts(tp, fp, fn, r.roi_voxels - tp - fp - fn);
  {
    std::map<uint64_t, int64_t> merged_pairs;
    for (auto& pm : pair_maps)
      for (auto& [k, v] : pm) merged_pairs[k] += v;
    for (auto& [k, v] : merged_pairs) r.pairs.push_back({uint32_t(k >> 32), uint32_t(k & 0xffffffffu), v});
  }

  // --- per-slice Jaccard --------------------------------------------------------------------
  r.slice_jaccard.resize(size_t(nz));
  for (int64_t z = 0; z < nz; ++z) {
    const int64_t u = r.slice_tp[size_t(z)] + r.slice_fp[size_t(z)] + r.slice_fn[size_t(z)];
    r.slice_jaccard[size_t(z)] = u > 0 ? double(r.slice_tp[size_t(z)]) / double(u) : kMetricNaN;
    r.slices_defined += u > 0;
  }
  const auto ci = bootstrap_mean_ci(r.slice_jaccard, opt.bootstrap_samples, opt.seed);
  r.slice_jaccard_mean = ci[0], r.slice_jaccard_ci_lo = ci[1], r.slice_jaccard_ci_hi = ci[2];

  // --- porosity -----------------------------------------------------------------------------
  if (r.roi_voxels > 0) {
    r.porosity_ref_pct = 100.0 * double(tp + fn) / double(r.roi_voxels);
    r.porosity_pred_pct = 100.0 * double(tp + fp) / double(r.roi_voxels);
    r.porosity_bias_pp = r.porosity_pred_pct - r.porosity_ref_pct;
    if (tp + fn > 0) r.porosity_rel_bias = r.porosity_bias_pp / r.porosity_ref_pct;
  }

  // --- pores and matching -------------------------------------------------------------------
  const Directions D = lattice_directions(g.spacing_mm);
  r.pores_ref = pore_geometry(cr, roi, D, z0);
  r.pores_pred = pore_geometry(cp, roi, D, z0);
  for (const auto& pr : r.pairs) {
    Pore& a = r.pores_ref[pr.ref - 1];
    Pore& b = r.pores_pred[pr.pred - 1];
    const double iou = double(pr.voxels) / double(a.voxels + b.voxels - pr.voxels);
    a.overlap_voxels += pr.voxels, b.overlap_voxels += pr.voxels;
    ++a.partners, ++b.partners;
    // Ties in IoU go to the smaller label (pairs are visited in label order).
    if (iou > a.best_iou) a.best_iou = iou, a.best_partner = pr.pred;
    if (iou > b.best_iou) b.best_iou = iou, b.best_partner = pr.ref;
  }
  const MatchRule& m = opt.match;
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
      if (a.matched || b.matched) continue;
      a.matched = b.matched = true;
    }
  } else {
    for (auto& a : r.pores_ref)
      a.matched = m.kind == MatchRule::any ? a.overlap_voxels > 0
                                           : double(a.overlap_voxels) >= m.threshold * double(a.voxels);
    for (auto& b : r.pores_pred) b.matched = b.overlap_voxels > 0;
  }
  for (const auto& a : r.pores_ref) {
    r.hits += a.matched;
    r.split += a.partners >= 2;
  }
  r.misses = int64_t(r.pores_ref.size()) - r.hits;
  for (const auto& b : r.pores_pred) {
    r.false_calls += b.overlap_voxels == 0;
    r.merged += b.partners >= 2;
  }
  if (r.roi_volume_mm3 > 0) r.false_calls_per_cm3 = double(r.false_calls) / (r.roi_volume_mm3 / 1000.0);

  // --- POD, size distributions, surface distances -------------------------------------------
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
  if (r.roi_voxels == 0) r.warnings.push_back("the ROI holds no voxels: every metric is undefined");
  return r;
}

// ---------------------------------------------------------------------------------------------
ojson json_number(double v) { return std::isfinite(v) ? ojson(v) : ojson(); }

nlohmann::ordered_json to_json(const ScoreResult& r) {
  const auto N = [](double v) { return json_number(v); };
  ojson j;
  j["options"] = {{"connectivity", r.options.connectivity},
                  {"match", r.options.match.text()},
                  {"z_begin", r.options.z_begin},
                  {"z_end", r.options.z_begin + r.geometry.dims[2]},
                  {"bootstrap_samples", r.options.bootstrap_samples},
                  {"seed", r.options.seed},
                  {"bins_per_decade", r.options.bins_per_decade}};
  j["dims"] = r.geometry.dims;
  j["spacing_mm"] = r.geometry.spacing_mm;
  j["roi_voxels"] = r.roi_voxels;
  j["roi_volume_mm3"] = N(r.roi_volume_mm3);
  const Overlap& o = r.overlap;
  j["overlap"] = {{"tp", o.tp},           {"fp", o.fp},
                  {"fn", o.fn},           {"tn", o.tn},
                  {"jaccard", N(o.jaccard)}, {"dice", N(o.dice)},
                  {"precision", N(o.precision)}, {"recall", N(o.recall)},
                  {"volume_similarity", N(o.volume_similarity)}};
  ojson sj = ojson::array();
  for (double v : r.slice_jaccard) sj.push_back(N(v));
  j["slices"] = {{"jaccard_mean", N(r.slice_jaccard_mean)},
                 {"jaccard_ci95", {N(r.slice_jaccard_ci_lo), N(r.slice_jaccard_ci_hi)}},
                 {"defined", r.slices_defined},
                 {"jaccard", sj}};
  j["porosity"] = {{"porosity_ref_pct", N(r.porosity_ref_pct)},
                   {"porosity_pred_pct", N(r.porosity_pred_pct)},
                   {"porosity_bias_pp", N(r.porosity_bias_pp)},
                   {"porosity_rel_bias", N(r.porosity_rel_bias)}};
  j["pores"] = {{"pores_ref", r.pores_ref.size()}, {"pores_pred", r.pores_pred.size()},
                {"hits", r.hits},                 {"misses", r.misses},
                {"false_calls", r.false_calls},   {"false_calls_per_cm3", N(r.false_calls_per_cm3)},
                {"split", r.split},               {"merged", r.merged}};
  const PodFit& p = r.pod;
  ojson pj;
  pj["link"] = pod_link_name(p.link);
  pj["n_targets"] = p.n_targets;
  pj["n_hits"] = p.n_hits;
  pj["estimable"] = p.estimable;
  pj["reason"] = p.estimable ? ojson() : ojson(p.reason);
  pj["converged"] = p.converged;
  pj["iterations"] = p.iterations;
  pj["b0"] = N(p.b0);
  pj["b1"] = N(p.b1);
  pj["covariance"] = {{N(p.cov00), N(p.cov01)}, {N(p.cov01), N(p.cov11)}};
  pj["deviance"] = N(p.deviance);
  pj["a50_um"] = N(p.a50_um);
  pj["a90_um"] = N(p.a90_um);
  pj["a90_95_um"] = N(p.a90_95_um);
  if (!p.a90_95_reason.empty()) pj["a90_95_reason"] = p.a90_95_reason;
  pj["a90_95_wald_um"] = N(p.a90_95_wald_um);
  pj["a90_95_wald_note"] = "delta method on ln a90, one-sided 95 %";
  ojson bins = ojson::array();
  for (const auto& b : r.pod_bins)
    bins.push_back({{"lo_um", b.lo_um}, {"hi_um", b.hi_um}, {"n", b.n}, {"hits", b.hits}, {"pod", N(b.pod)},
                    {"ci95", {N(b.ci_lo), N(b.ci_hi)}}});
  pj["bins"] = bins;
  pj["warnings"] = p.warnings;
  j["pod"] = pj;
  j["sizes"] = {{"edges_um", r.sizes.edges_um},     {"count_ref", r.sizes.count_ref},
                {"count_pred", r.sizes.count_pred}, {"count_bias", r.sizes.count_bias},
                {"ks", N(r.sizes.ks)},              {"wasserstein1_um", N(r.sizes.wasserstein1_um)}};
  j["surface"] = {{"hd95_mm", N(r.surface.hd95_mm)},
                  {"assd_mm", N(r.surface.assd_mm)},
                  {"surface_voxels_ref", r.surface.surface_voxels_ref},
                  {"surface_voxels_pred", r.surface.surface_voxels_pred}};
  j["warnings"] = r.warnings;
  return j;
}

std::string pores_csv(const ScoreResult& r) {
  std::ostringstream s;
  s << std::setprecision(10);
  s << "side,label,voxels,volume_mm3,esd_um,centroid_x_mm,centroid_y_mm,centroid_z_mm,bbox_x0,bbox_y0,bbox_z0,"
       "bbox_x1,bbox_y1,bbox_z1,surface_mm2,sphericity,touches_border,overlap_voxels,partners,best_partner,"
       "best_iou,matched\n";
  auto num = [&](double v) {
    if (std::isfinite(v))
      s << v;
    else
      s << "NaN";
  };
  for (int side = 0; side < 2; ++side)
    for (const auto& p : side == 0 ? r.pores_ref : r.pores_pred) {
      s << (side == 0 ? "ref" : "pred") << ',' << p.label << ',' << p.voxels << ',';
      num(p.volume_mm3), s << ',';
      num(p.esd_um), s << ',';
      for (double c : p.centroid_mm) num(c), s << ',';
      for (int64_t b : p.bbox) s << b << ',';
      num(p.surface_mm2), s << ',';
      num(p.sphericity), s << ',';
      s << int(p.touches_border) << ',' << p.overlap_voxels << ',' << p.partners << ',' << p.best_partner << ',';
      num(p.best_iou), s << ',';
      s << int(p.matched) << '\n';
    }
  return s.str();
}

}  // namespace pb
