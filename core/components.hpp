#pragma once
// 3D connected-component labelling of a binary mask (non-zero = foreground) with 6-, 18- or
// 26-connectivity. Run-based two-scan labelling with union-find: He, Chao & Suzuki (2008) "A
// run-based two-scan labeling algorithm", IEEE Trans. Image Process. 17(5):749-756, extended to
// 3D. Labels are 1..count in raster order (x fastest, then y, then z) of each component's first
// voxel; 0 is background. The result does not depend on the thread count.
#include <cstdint>
#include <vector>

#include "core/volume.hpp"

namespace pb {

// A labelled mask as runs: the maximal foreground runs [x0, x1) along x of every row (row r = y +
// ny * z), in raster order, each with its component label. Scoring works on these (a sparse pore
// mask has few runs); label_volume() writes them out as a voxel volume.
struct Run {
  int32_t x0, x1;  // [x0, x1)
};
struct LabelRuns {
  Geometry geometry;
  Buffer<int64_t> row_begin;       // runs of row r: [row_begin[r], row_begin[r + 1])
  std::vector<Run, DefaultInitAllocator<Run>> runs;
  std::vector<uint32_t, DefaultInitAllocator<uint32_t>> label;  // label of each run, 1..count
  uint32_t count = 0;
  std::vector<int64_t> sizes;      // sizes[k] = voxels of label k; sizes[0] = 0
  int64_t rows() const { return geometry.dims[1] * geometry.dims[2]; }
  int64_t row_of(int64_t y, int64_t z) const { return z * geometry.dims[1] + y; }
};

// Labels the voxels that are non-zero in m (and in roi, unless nullptr).
LabelRuns label_runs(const Mask& m, const Mask* roi, int connectivity);
// The same labelling for a mask given slab by slab in z order (volumes larger than memory): add()
// keeps the runs of each slab, finish() unites them across the slab faces, so that a component
// crossing a face is one component, and labels them exactly as label_runs() labels the whole mask
// (same runs, labels, sizes). Memory: the runs and one row offset per row, not the mask.
class RunCollector {
 public:
  explicit RunCollector(const Geometry& g);  // of the whole mask
  // The next nslices slices (nslices * nx * ny bytes, non-zero = foreground).
  void add(const uint8_t* slices, int64_t nslices);
  int64_t next_z() const { return z_; }
  LabelRuns finish(int connectivity);  // after the last slice; the collector is then spent

 private:
  LabelRuns runs_;
  int64_t z_ = 0;
};
// The runs of c labelled anew with another connectivity (e.g. 6-connected air runs as 26-connected pores).
LabelRuns relabel_runs(LabelRuns c, int connectivity);
// The label volume of runs (0 = background).
Image<uint32_t> label_volume(const LabelRuns& r);

struct Components {
  Image<uint32_t> labels;      // same geometry as the mask
  uint32_t count = 0;          // number of components
  std::vector<int64_t> sizes;  // sizes[k] = voxels of label k (k = 1..count); sizes[0] = 0
};

// connectivity: 6 (faces), 18 (faces + edges) or 26 (faces + edges + corners); anything else
// throws InputError naming the value.
Components label_components(const Mask& m, int connectivity = 26);
// Labels the voxels that are non-zero in both m and roi (roi may be nullptr: whole volume).
Components label_components(const Mask& m, const Mask* roi, int connectivity);

// Throws InputError unless connectivity is 6, 18 or 26; `field` names the option in the message.
void check_connectivity(int connectivity, const char* field = "connectivity");

}  // namespace pb
