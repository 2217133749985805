// 3D connected-component labelling, run-based two-scan with union-find (He, Chao & Suzuki 2008,
// IEEE TIP 17(5):749-756, extended to 3D). Scan 1 finds the foreground runs along x of every row
// and unites each run with the overlapping runs of the already scanned neighbour rows; scan 2
// writes the labels. Connectivity picks the neighbour rows and whether diagonal x-steps count:
//
//   row offsets (dy, dz)   6-conn      18-conn     26-conn     x-extension e: run [a,b) meets
//   ( -1,  0)              e = 0       e = 1       e = 1       runs overlapping [a-e, b+e)
//   (  0, -1)              e = 0       e = 1       e = 1
//   ( -1, -1), (+1, -1)    --          e = 0       e = 1
//
// Union-find links the larger root to the smaller, so a component's root is its first run in
// raster order, and labels come out in raster order of first voxels. Slabs of z are united in
// parallel, their boundaries afterwards in order: the partition (and so the labels) is unique.
#include "metrics/ccl.hpp"

#include <omp.h>

#include <algorithm>
#include <cstring>
#include <memory>
#include <string>

#include "core/error.hpp"

namespace pb {
namespace {

struct Run {
  int32_t x0, x1;  // [x0, x1)
};

inline uint32_t find_root(uint32_t* p, uint32_t i) {
  while (p[i] != i) {  // path halving
    p[i] = p[p[i]];
    i = p[i];
  }
  return i;
}

// A neighbour row: runs [n0, n1), x-extension e, and a cursor that only moves forward.
struct NbrRow {
  int64_t j, n1;
  int e;
};

// Unites runs [c0, c1) of the current row with the overlapping runs of up to four neighbour rows.
// The current run's root is kept while it meets several runs (they are often already united).
inline void merge_runs(const Run* runs, uint32_t* p, int64_t c0, int64_t c1, NbrRow* nb, int nnb) {
  for (int64_t i = c0; i < c1; ++i) {
    uint32_t ri = uint32_t(i);  // a run is its own root until first united
    for (int r = 0; r < nnb; ++r) {
      NbrRow& n = nb[r];
      const int32_t a = runs[i].x0 - n.e, b = runs[i].x1 + n.e;
      while (n.j < n.n1 && runs[n.j].x1 <= a) ++n.j;
      for (int64_t k = n.j; k < n.n1 && runs[k].x0 < b; ++k) {
        if (p[k] == ri) continue;  // quick path: already united with this root
        const uint32_t rk = find_root(p, uint32_t(k));
        if (rk == ri) continue;
        ri = find_root(p, ri);  // ri may have been linked below by another neighbour row
        if (rk < ri) {
          p[ri] = rk;
          ri = rk;
        } else if (ri < rk) {
          p[rk] = ri;
        }
      }
    }
  }
}

inline int64_t count_runs(const uint8_t* a, int64_t nx) {
  int64_t c = a[0] != 0;
  for (int64_t x = 1; x < nx; ++x) c += (a[x] != 0) & (a[x - 1] == 0);
  return c;
}

inline int64_t count_runs_roi(const uint8_t* a, const uint8_t* r, int64_t nx) {
  int64_t c = (a[0] != 0) & (r[0] != 0);
  for (int64_t x = 1; x < nx; ++x) c += ((a[x] != 0) & (r[x] != 0)) & ((a[x - 1] == 0) | (r[x - 1] == 0));
  return c;
}

// Runs of a sparse row, skipping background eight voxels at a time.
inline void fill_runs(const uint8_t* a, int32_t nx, Run* out) {
  int32_t x = 0;
  while (x < nx) {
    while (x + 8 <= nx) {
      uint64_t w;
      std::memcpy(&w, a + x, 8);
      if (w != 0) break;
      x += 8;
    }
    while (x < nx && a[x] == 0) ++x;
    if (x >= nx) break;
    const int32_t s = x;
    while (x < nx && a[x] != 0) ++x;
    *out++ = Run{s, x};
  }
}

// Branch-free run extraction (random masks defeat branch prediction): every x writes a candidate
// start and end, and the counters advance only at transitions. `tmp` holds nx + 1 runs.
template <bool kRoi>
inline int64_t fill_runs_impl(const uint8_t* a, const uint8_t* r, int32_t nx, Run* tmp, Run* out) {
  int64_t ns = 0, ne = 0;
  int prev = 0;
  for (int32_t x = 0; x < nx; ++x) {
    const int cur = kRoi ? ((a[x] != 0) & (r[x] != 0)) : (a[x] != 0);
    tmp[ns].x0 = x;
    ns += cur & (prev ^ 1);
    tmp[ne].x1 = x;
    ne += (cur ^ 1) & prev;
    prev = cur;
  }
  if (prev) tmp[ne++].x1 = nx;
  std::memcpy(out, tmp, size_t(ns) * sizeof(Run));
  return ns;
}

}  // namespace

void check_connectivity(int connectivity, const char* field) {
  if (connectivity != 6 && connectivity != 18 && connectivity != 26)
    throw InputError(std::string(field) + " must be 6, 18 or 26, got " + std::to_string(connectivity));
}

Components label_components(const Mask& m, int connectivity) { return label_components(m, nullptr, connectivity); }

Components label_components(const Mask& m, const Mask* roi, int connectivity) {
  check_connectivity(connectivity);
  const Geometry& g = m.geometry();
  if (roi && !roi->geometry().same_dims(g))
    throw InputError("label_components: ROI dims differ from the mask dims (" + describe(roi->geometry()) + " vs " +
                     describe(g) + ")");
  const uint8_t* rmask = roi ? roi->data() : nullptr;
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2];
  if (nx > INT32_MAX - 2) throw InputError("label_components: dims along x " + std::to_string(nx) + " too large");
  Components c;
  c.labels = Image<uint32_t>(g, Uninitialized{});  // every voxel is written in scan 2, in parallel
  c.sizes.assign(1, 0);
  if (m.size() == 0) return c;
  const int64_t nrows = ny * nz;
  const uint8_t* mask = m.data();

  // Scan 1a: runs per row, then their offsets.
  std::vector<int64_t> row_begin(size_t(nrows) + 1, 0);
#pragma omp parallel for schedule(static)
  for (int64_t r = 0; r < nrows; ++r)
    row_begin[size_t(r) + 1] = rmask ? count_runs_roi(mask + r * nx, rmask + r * nx, nx) : count_runs(mask + r * nx, nx);
  for (int64_t r = 0; r < nrows; ++r) row_begin[size_t(r) + 1] += row_begin[size_t(r)];
  const int64_t nruns = row_begin[size_t(nrows)];
  if (nruns >= int64_t(UINT32_MAX))
    throw InputError("label_components: " + std::to_string(nruns) + " runs exceed the 32-bit label range");
  // Uninitialised (every element is written below, in parallel, so pages are first touched by
  // the threads that use them): zero-filling 12 bytes per run first would cost a serial pass.
  const std::unique_ptr<Run[]> runs(new Run[size_t(nruns)]);
  const std::unique_ptr<uint32_t[]> parent(new uint32_t[size_t(nruns)]);
#pragma omp parallel
  {
    std::vector<Run> tmp(static_cast<size_t>(nx) + 1);
#pragma omp for schedule(static)
    for (int64_t r = 0; r < nrows; ++r) {
      const int64_t b = row_begin[size_t(r)], e = row_begin[size_t(r) + 1];
      if (b == e) continue;
      Run* out = runs.get() + b;
      if (rmask)
        fill_runs_impl<true>(mask + r * nx, rmask + r * nx, int32_t(nx), tmp.data(), out);
      else if (e - b <= 2)  // sparse rows: skip background a word at a time
        fill_runs(mask + r * nx, int32_t(nx), out);
      else
        fill_runs_impl<false>(mask + r * nx, nullptr, int32_t(nx), tmp.data(), out);
      for (int64_t i = b; i < e; ++i) parent[size_t(i)] = uint32_t(i);
    }
  }

  const Run* R = runs.get();
  uint32_t* P = parent.get();
  const int e_face = connectivity == 6 ? 0 : 1;   // (-1,0) and (0,-1) rows
  const int e_diag = connectivity == 26 ? 1 : 0;  // (-1,-1) and (+1,-1) rows, 18 and 26 only
  auto rb = [&](int64_t y, int64_t z) { return row_begin[size_t(z * ny + y)]; };
  auto re = [&](int64_t y, int64_t z) { return row_begin[size_t(z * ny + y) + 1]; };
  // Unites row (y, z) with its neighbour rows; prev_slice = false skips the z-1 rows,
  // same_slice = false the (y-1, z) row.
  auto unite_row = [&](int64_t y, int64_t z, bool same_slice, bool prev_slice) {
    const int64_t c0 = rb(y, z), c1 = re(y, z);
    if (c0 == c1) return;
    NbrRow nb[4];
    int n = 0;
    auto add = [&](int64_t yy, int64_t zz, int e) {
      if (rb(yy, zz) < re(yy, zz)) nb[n++] = NbrRow{rb(yy, zz), re(yy, zz), e};
    };
    if (prev_slice && z > 0) {
      if (connectivity != 6 && y > 0) add(y - 1, z - 1, e_diag);
      add(y, z - 1, e_face);
      if (connectivity != 6 && y + 1 < ny) add(y + 1, z - 1, e_diag);
    }
    if (same_slice && y > 0) add(y - 1, z, e_face);
    merge_runs(R, P, c0, c1, nb, n);
  };

  // Scan 1b: unite within z-slabs in parallel (a slab touches only its own runs), then the slab
  // boundaries in order.
  const int64_t nslabs = std::max<int64_t>(1, std::min<int64_t>(nz, omp_get_max_threads()));
  std::vector<int64_t> slab_z(size_t(nslabs) + 1);
  for (int64_t s = 0; s <= nslabs; ++s) slab_z[size_t(s)] = nz * s / nslabs;
#pragma omp parallel for schedule(static, 1)
  for (int64_t s = 0; s < nslabs; ++s)
    for (int64_t z = slab_z[size_t(s)]; z < slab_z[size_t(s) + 1]; ++z)
      for (int64_t y = 0; y < ny; ++y) unite_row(y, z, true, z > slab_z[size_t(s)]);
  for (int64_t s = 1; s < nslabs; ++s)
    for (int64_t y = 0; y < ny; ++y) unite_row(y, slab_z[size_t(s)], false, true);

  // Flatten: roots are first runs, so one forward pass turns parents into labels 1..count.
  uint32_t count = 0;
  for (int64_t i = 0; i < nruns; ++i) P[i] = (P[i] == uint32_t(i)) ? ++count : P[P[i]];
  c.count = count;
  c.sizes.assign(size_t(count) + 1, 0);
  for (int64_t i = 0; i < nruns; ++i) c.sizes[P[i]] += R[i].x1 - R[i].x0;

  // Scan 2: write labels, background included (the label volume was left uninitialised).
  uint32_t* L = c.labels.data();
#pragma omp parallel for schedule(static)
  for (int64_t r = 0; r < nrows; ++r) {
    uint32_t* row = L + r * nx;
    int64_t x = 0;
    for (int64_t i = row_begin[size_t(r)]; i < row_begin[size_t(r) + 1]; ++i) {
      std::fill(row + x, row + R[i].x0, 0u);
      std::fill(row + R[i].x0, row + R[i].x1, P[i]);
      x = R[i].x1;
    }
    std::fill(row + x, row + nx, 0u);
  }
  return c;
}

std::vector<int64_t> component_sizes(const Components& c) { return c.sizes; }

}  // namespace pb
