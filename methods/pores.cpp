// Shared pore extraction (methods/pores.hpp): air below a threshold, air connected to the border or
// to the outside of the ROI removed, small pores dropped.
#include "methods/pores.hpp"

#include <algorithm>
#include <stdexcept>
#include <vector>

#include "core/components.hpp"

namespace pb {

Mask air_below(const VolumeF& v, double threshold, const Mask* roi) {
  Mask air(v.geometry(), Uninitialized{});  // every voxel written below
  air_below(v.data(), v.size(), threshold, roi ? roi->data() : nullptr, air.data());
  return air;
}

void air_below(const float* d, int64_t n, double threshold, const uint8_t* r, uint8_t* a) {
  const float t = float(threshold);
  // Note: in float, v < t with t rounded to float; NaN compares false, so NaN is never air.
#pragma omp parallel for schedule(static)
  for (int64_t i = 0; i < n; ++i) a[i] = (d[i] < t) && (!r || r[i]);
}

int64_t air_to_pores(Mask& m, const Mask* roi) {
  // Label air and the outside of the ROI together (6-connected, run-based CCL); a component that
  // reaches the volume border or holds an outside voxel is background. The same as a flood fill
  // from the outside through air, but parallel, and on runs instead of a label volume.
  const Geometry& g = m.geometry();
  const int64_t nx = g.dims[0], n = m.size();
  uint8_t* a = m.data();
  const uint8_t* r = roi ? roi->data() : nullptr;
  Mask open(g, Uninitialized{});
  uint8_t* o = open.data();
#pragma omp parallel for schedule(static)
  for (int64_t i = 0; i < n; ++i) o[i] = a[i] || (r && !r[i]);
  const LabelRuns c = label_runs(open, nullptr, 6);
  const int64_t nrows = c.rows();
  const std::vector<uint8_t> outside = outside_components(c, r);
  // Background runs leave the air.
#pragma omp parallel for schedule(static)
  for (int64_t row = 0; row < nrows; ++row) {
    const int64_t base = row * nx;
    for (int64_t i = c.row_begin[size_t(row)]; i < c.row_begin[size_t(row) + 1]; ++i) {
      if (!outside[c.label[size_t(i)]]) continue;
      const Run& u = c.runs[size_t(i)];
      std::fill(a + base + u.x0, a + base + u.x1, uint8_t(0));
    }
  }
  return part_voxels(c, outside);
}

namespace {

// Per label of c: 1 when one of its runs is on the volume border (border rows, x = 0 or nx - 1) or
// is marked by mark_row(row, run_out), which sets run_out[i] for the runs i of that row that hold a
// voxel outside the ROI.
template <class MarkRow>
std::vector<uint8_t> outside_labels(const LabelRuns& c, MarkRow mark_row) {
  const Geometry& g = c.geometry;
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2], nrows = c.rows();
  std::vector<uint8_t> run_out(c.runs.size(), 0);
#pragma omp parallel for schedule(static)
  for (int64_t row = 0; row < nrows; ++row) {
    const int64_t y = row % ny, z = row / ny;
    const bool border_row = z == 0 || z == nz - 1 || y == 0 || y == ny - 1;
    for (int64_t i = c.row_begin[size_t(row)]; i < c.row_begin[size_t(row) + 1]; ++i) {
      const Run& u = c.runs[size_t(i)];
      run_out[size_t(i)] = border_row || u.x0 == 0 || u.x1 == nx;
    }
    mark_row(row, run_out.data());
  }
  std::vector<uint8_t> outside(size_t(c.count) + 1, 0);
  for (size_t i = 0; i < run_out.size(); ++i)
    if (run_out[i]) outside[c.label[i]] = 1;
  return outside;
}

}  // namespace

std::vector<uint8_t> outside_components(const LabelRuns& c, const uint8_t* r) {
  const int64_t nx = c.geometry.dims[0];
  return outside_labels(c, [&](int64_t row, uint8_t* run_out) {
    if (!r) return;
    const uint8_t* line = r + row * nx;
    for (int64_t i = c.row_begin[size_t(row)]; i < c.row_begin[size_t(row) + 1]; ++i) {
      const Run& u = c.runs[size_t(i)];
      bool out = run_out[size_t(i)];
      for (int64_t x = u.x0; x < u.x1 && !out; ++x) out = !line[x];
      run_out[size_t(i)] = out;
    }
  });
}

std::vector<uint8_t> outside_components(const LabelRuns& c, const LabelRuns& q) {
  if (q.geometry.dims != c.geometry.dims || q.row_begin.size() != c.row_begin.size())
    throw std::logic_error("outside_components: the runs outside the ROI have other dims than the open mask");
  return outside_labels(c, [&](int64_t row, uint8_t* run_out) {
    // Both rows' runs are sorted and disjoint; every voxel outside the ROI is open, so each run of
    // q lies in one run of c: the run of c that holds its first voxel.
    int64_t i = c.row_begin[size_t(row)];
    const int64_t ie = c.row_begin[size_t(row) + 1];
    for (int64_t k = q.row_begin[size_t(row)]; k < q.row_begin[size_t(row) + 1]; ++k) {
      const int32_t x = q.runs[size_t(k)].x0;
      while (i < ie && c.runs[size_t(i)].x1 <= x) ++i;
      if (i == ie || c.runs[size_t(i)].x0 > x)
        throw std::logic_error("outside_components: a voxel outside the ROI is not in the open mask");
      run_out[size_t(i)] = 1;
    }
  });
}

int64_t part_voxels(const LabelRuns& c, const std::vector<uint8_t>& outside) {
  int64_t background = 0;
  for (uint32_t k = 1; k <= c.count; ++k)
    if (outside[k]) background += c.sizes[k];
  return c.geometry.voxels() - background;
}

int64_t count_nonzero(const Mask& m) {
  int64_t c = 0;
  const uint8_t* a = m.data();
  const int64_t n = m.size();
#pragma omp parallel for reduction(+ : c) schedule(static)
  for (int64_t i = 0; i < n; ++i) c += a[i] != 0;
  return c;
}

}  // namespace pb

namespace pb {

int64_t remove_small_pores(Mask& pores, int64_t min_voxels) {
  const Components c = label_components(pores, 26);
  std::vector<uint8_t> keep(size_t(c.count) + 1, 0);
  int64_t removed = 0;
  for (uint32_t k = 1; k <= c.count; ++k) {
    keep[k] = c.sizes[k] >= min_voxels;
    removed += !keep[k];
  }
  const uint32_t* l = c.labels.data();
  uint8_t* a = pores.data();
  const int64_t n = pores.size();
#pragma omp parallel for schedule(static)
  for (int64_t i = 0; i < n; ++i) a[i] = keep[l[i]];
  return removed;
}

}  // namespace pb
