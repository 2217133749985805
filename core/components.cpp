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
#include "core/components.hpp"

#include <omp.h>

#include <algorithm>
#include <cstring>
#include <stdexcept>
#include <string>

#include "core/cpu.hpp"
#include "core/error.hpp"

namespace pb {
namespace {

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

// Run extraction kernels, compiled twice: for AVX2 and for any x86-64 / other CPU.
#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#define PB_CCL_HAVE_AVX2_CLONE 1
#include <immintrin.h>
namespace avx2 {
#define PB_CCL_RUNS_AVX2 1
#define PB_CCL_TARGET __attribute__((target("avx2")))
#include "core/components_runs.inc"
#undef PB_CCL_TARGET
#undef PB_CCL_RUNS_AVX2
}  // namespace avx2
#endif
namespace generic {
#define PB_CCL_TARGET
#include "core/components_runs.inc"
#undef PB_CCL_TARGET
}  // namespace generic

#ifdef PB_CCL_HAVE_AVX2_CLONE
template <bool kAvx2>
inline int64_t fill_runs(const uint8_t* a, const uint8_t* r, int32_t nx, Run* out) {
  return kAvx2 ? avx2::fill_runs(a, r, nx, out) : generic::fill_runs(a, r, nx, out);
}
#else
template <bool kAvx2>
inline int64_t fill_runs(const uint8_t* a, const uint8_t* r, int32_t nx, Run* out) {
  return generic::fill_runs(a, r, nx, out);
}
#endif

}  // namespace

void check_connectivity(int connectivity, const char* field) {
  if (connectivity != 6 && connectivity != 18 && connectivity != 26)
    throw InputError(std::string(field) + " must be 6, 18 or 26, got " + std::to_string(connectivity));
}

Components label_components(const Mask& m, int connectivity) { return label_components(m, nullptr, connectivity); }

namespace {

// The z slabs, one per thread, in which runs are united in parallel (their faces afterwards, in
// order): slab_z[s] .. slab_z[s + 1].
std::vector<int64_t> thread_slabs(int64_t nz) {
  const int64_t nslabs = std::max<int64_t>(1, std::min<int64_t>(nz, omp_get_max_threads()));
  std::vector<int64_t> slab_z(size_t(nslabs) + 1);
  for (int64_t s = 0; s <= nslabs; ++s) slab_z[size_t(s)] = nz * s / nslabs;
  return slab_z;
}

// Scan 1b and the flattening: unites the runs of c (row_begin and runs filled, label sized) within
// each slab of slab_z in parallel, then across the slab faces in order, and turns the union-find
// parents into labels 1..count in raster order of first voxels, with sizes.
void link_and_label(LabelRuns& c, int connectivity, const std::vector<int64_t>& slab_z) {
  const int64_t ny = c.geometry.dims[1];
  const int64_t nslabs = int64_t(slab_z.size()) - 1;
  const Buffer<int64_t>& row_begin = c.row_begin;
  const int64_t nruns = int64_t(c.runs.size());
  auto slab_base = [&](int64_t s) { return row_begin[size_t(slab_z[size_t(s)] * ny)]; };  // first run of slab s
  const Run* R = c.runs.data();
  uint32_t* P = c.label.data();  // parents during union-find, labels after the flattening
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
#pragma omp parallel for schedule(static, 1)
  for (int64_t s = 0; s < nslabs; ++s) {
    for (int64_t i = slab_base(s); i < slab_base(s + 1); ++i) P[i] = uint32_t(i);
    for (int64_t z = slab_z[size_t(s)]; z < slab_z[size_t(s) + 1]; ++z)
      for (int64_t y = 0; y < ny; ++y) unite_row(y, z, true, z > slab_z[size_t(s)]);
  }
  for (int64_t s = 1; s < nslabs; ++s)
    for (int64_t y = 0; y < ny; ++y) unite_row(y, slab_z[size_t(s)], false, true);

  // Flatten: roots are first runs, so one forward pass turns parents into labels 1..count.
  uint32_t count = 0;
  for (int64_t i = 0; i < nruns; ++i) P[i] = (P[i] == uint32_t(i)) ? ++count : P[P[i]];
  c.count = count;
  c.sizes.assign(size_t(count) + 1, 0);
  for (int64_t i = 0; i < nruns; ++i) c.sizes[P[i]] += R[i].x1 - R[i].x0;
}

void check_run_count(int64_t nruns) {
  if (nruns >= int64_t(UINT32_MAX))
    throw InputError("label_components: " + std::to_string(nruns) + " runs exceed the 32-bit label range");
}

void check_row_length(int64_t nx) {
  if (nx > INT32_MAX - 64) throw InputError("label_components: dims along x " + std::to_string(nx) + " too large");
}

}  // namespace

LabelRuns label_runs(const Mask& m, const Mask* roi, int connectivity) {
  check_connectivity(connectivity);
  const Geometry& g = m.geometry();
  if (roi && !roi->geometry().same_dims(g))
    throw InputError("label_components: ROI dims differ from the mask dims (" + describe(roi->geometry()) + " vs " +
                     describe(g) + ")");
  const uint8_t* rmask = roi ? roi->data() : nullptr;
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2];
  check_row_length(nx);
  LabelRuns c;
  c.geometry = g;
  c.sizes.assign(1, 0);
  const int64_t nrows = ny * nz;
  c.row_begin.assign(size_t(nrows) + 1, 0);  // run counts first, then offsets
  if (m.size() == 0) return c;
  const uint8_t* mask = m.data();

  // Slabs of z, one per thread: scan 1 extracts a slab's runs and unites them within the slab
  // (a slab touches only its own runs); the slab boundaries are united afterwards, in order.
  const std::vector<int64_t> slab_z = thread_slabs(nz);
  const int64_t nslabs = int64_t(slab_z.size()) - 1;
  Buffer<int64_t>& row_begin = c.row_begin;
  using RunBuffer = std::vector<Run, DefaultInitAllocator<Run>>;
  std::vector<RunBuffer> slab_runs(static_cast<size_t>(nslabs));

  const bool use_avx2 = simd_level() >= Simd::avx2;
  // Scan 1a: the runs of each slab's rows, into the slab's own buffer (one pass over the mask).
#pragma omp parallel for schedule(static, 1)
  for (int64_t s = 0; s < nslabs; ++s) {
    RunBuffer& v = slab_runs[size_t(s)];
    const size_t row_max = size_t(nx) / 2 + 1;  // most runs a row can hold
    size_t n = 0;
    for (int64_t r = slab_z[size_t(s)] * ny; r < slab_z[size_t(s) + 1] * ny; ++r) {
      if (n + row_max > v.size()) v.resize(std::max(2 * v.size(), n + row_max));
      const uint8_t* ra = rmask ? rmask + r * nx : nullptr;
      const int64_t k = use_avx2 ? fill_runs<true>(mask + r * nx, ra, int32_t(nx), v.data() + n)
                             : fill_runs<false>(mask + r * nx, ra, int32_t(nx), v.data() + n);
      row_begin[size_t(r) + 1] = k;
      n += size_t(k);
    }
    v.resize(n);
  }
  for (int64_t r = 0; r < nrows; ++r) row_begin[size_t(r) + 1] += row_begin[size_t(r)];
  const int64_t nruns = row_begin[size_t(nrows)];
  check_run_count(nruns);
  // Uninitialised: every element is written below by the thread of its slab.
  c.runs.resize(size_t(nruns));
  c.label.resize(size_t(nruns));
#pragma omp parallel for schedule(static, 1)
  for (int64_t s = 0; s < nslabs; ++s) {
    RunBuffer& v = slab_runs[size_t(s)];
    if (!v.empty()) std::memcpy(c.runs.data() + row_begin[size_t(slab_z[size_t(s)] * ny)], v.data(), v.size() * sizeof(Run));
    RunBuffer().swap(v);
  }
  link_and_label(c, connectivity, slab_z);
  return c;
}

RunCollector::RunCollector(const Geometry& g) {
  check_row_length(g.dims[0]);
  runs_.geometry = g;
  runs_.sizes.assign(1, 0);
  runs_.row_begin.assign(size_t(g.dims[1] * g.dims[2]) + 1, 0);
}

void RunCollector::add(const uint8_t* slices, int64_t nslices) {
  const int64_t nx = runs_.geometry.dims[0], ny = runs_.geometry.dims[1], nz = runs_.geometry.dims[2];
  if (nslices < 0 || z_ + nslices > nz)
    throw std::logic_error("RunCollector: slices " + std::to_string(z_) + " + " + std::to_string(nslices) +
                           " past the " + std::to_string(nz) + " slices");
  // One buffer per slice (filled in parallel), appended in order.
  using RunBuffer = std::vector<Run, DefaultInitAllocator<Run>>;
  std::vector<RunBuffer> per(static_cast<size_t>(nslices));
  const bool use_avx2 = simd_level() >= Simd::avx2;
  Buffer<int64_t>& row_begin = runs_.row_begin;
#pragma omp parallel for schedule(dynamic, 1)
  for (int64_t k = 0; k < nslices; ++k) {
    RunBuffer& v = per[size_t(k)];
    const size_t row_max = size_t(nx) / 2 + 1;
    size_t n = 0;
    for (int64_t y = 0; y < ny; ++y) {
      if (n + row_max > v.size()) v.resize(std::max(2 * v.size(), n + row_max));
      const uint8_t* row = slices + (k * ny + y) * nx;
      const int64_t c = use_avx2 ? fill_runs<true>(row, nullptr, int32_t(nx), v.data() + n)
                                 : fill_runs<false>(row, nullptr, int32_t(nx), v.data() + n);
      row_begin[size_t((z_ + k) * ny + y) + 1] = c;  // counts; offsets below
      n += size_t(c);
    }
    v.resize(n);
  }
  for (int64_t r = z_ * ny; r < (z_ + nslices) * ny; ++r) row_begin[size_t(r) + 1] += row_begin[size_t(r)];
  check_run_count(row_begin[size_t((z_ + nslices) * ny)]);
  for (const RunBuffer& v : per) runs_.runs.insert(runs_.runs.end(), v.begin(), v.end());
  z_ += nslices;
}

LabelRuns RunCollector::finish(int connectivity) {
  check_connectivity(connectivity);
  if (z_ != runs_.geometry.dims[2])
    throw std::logic_error("RunCollector: finish after " + std::to_string(z_) + " of " +
                           std::to_string(runs_.geometry.dims[2]) + " slices");
  LabelRuns c = std::move(runs_);
  c.label.resize(c.runs.size());
  if (!c.runs.empty()) link_and_label(c, connectivity, thread_slabs(c.geometry.dims[2]));
  return c;
}

LabelRuns relabel_runs(LabelRuns c, int connectivity) {
  check_connectivity(connectivity);
  c.label.resize(c.runs.size());
  c.sizes.assign(1, 0);
  c.count = 0;
  if (!c.runs.empty()) link_and_label(c, connectivity, thread_slabs(c.geometry.dims[2]));
  return c;
}

Image<uint32_t> label_volume(const LabelRuns& c) {
  // Zero without a pass over memory when large (fresh pages); only the runs are written, so
  // pages without foreground are never touched.
  Image<uint32_t> labels(c.geometry, Zeroed{});
  uint32_t* L = labels.data();
  const int64_t nx = c.geometry.dims[0], nrows = c.rows();
  if (labels.size() == 0) return labels;
#pragma omp parallel for schedule(static)
  for (int64_t r = 0; r < nrows; ++r) {
    uint32_t* row = L + r * nx;
    for (int64_t i = c.row_begin[size_t(r)]; i < c.row_begin[size_t(r) + 1]; ++i)
      std::fill(row + c.runs[size_t(i)].x0, row + c.runs[size_t(i)].x1, c.label[size_t(i)]);
  }
  return labels;
}

Components label_components(const Mask& m, const Mask* roi, int connectivity) {
  LabelRuns r = label_runs(m, roi, connectivity);
  Components c;
  c.labels = label_volume(r);
  c.count = r.count;
  c.sizes = std::move(r.sizes);
  return c;
}

}  // namespace pb
