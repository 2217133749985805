#pragma once
// Segmentation of volumes larger than memory: the volume is read by slabs of z slices
// (core/slabs.hpp) and never held whole. The result is the in-memory path's, voxel for voxel:
//   - histogram methods (otsu and the other global methods): the grey-value histogram in one
//     streaming pass (integer volumes: a count per grey level, from which every statistic and
//     histogram the method asks for is exact; float volumes: a statistics pass and a histogram
//     pass), then air below the threshold by slabs;
//   - pre-filter median (FILTER+METHOD): each slab is filtered with a halo of the window radius;
//   - the local methods of the window mean and std (niblack, sauvola, phansalkar, local-mean): the
//     window sums run through the slices in z order over a ring of window + batch slices
//     (methods/integral.hpp);
//   - pore extraction: the runs of the air mask of every slab, united across the slab faces
//     (core/components.hpp RunCollector), so a pore that crosses a face is one pore;
//   - the mask written by slabs (temporary name, renamed when complete).
// What does not stream: an ROI (part mask), the other local methods (wolf, bernsen, local-gaussian),
// the other pre-filters, neural methods and predictions; above the memory limit they are refused.
// Bit identity holds for integer volumes (uint8, uint16, int16); for float32 volumes the local
// methods' centring mean is summed in another order and may differ in its last bits.
#include <cstdint>
#include <functional>
#include <string>
#include <utility>
#include <vector>

#include "core/slabs.hpp"
#include "methods/registry.hpp"

namespace pb {

// Bytes the in-memory path of segment needs at its peak, estimated: the stored voxels, the float
// copy, a float copy per pre-filter, and three masks (air, the open mask, the output).
uint64_t segment_memory_bytes(const Geometry& g, VoxelType stored, const std::string& method);

// "" when `method` (a registered method or FILTER+METHOD) can run by slabs without an ROI, else why not.
std::string slab_refusal_of_method(const std::string& method, bool roi);

// How segment reads its input under --memory-limit `limit`: in memory when the in-memory estimate
// fits (or the size is only known once read: TIFF, DICOM, .npy); by slabs above it when the input
// (raw, uncompressed MetaImage/NRRD) and the method can; otherwise InputError (exit 2) naming the
// file, its size, the estimate, the limit and what cannot stream. Reads the header only.
struct SegmentPlan {
  bool by_slabs = false;
  uint64_t need_bytes = 0;  // the in-memory estimate (0: size unknown before reading)
};
SegmentPlan plan_segment(const std::string& input, const ReadOptions& ro, const std::string& method, bool roi,
                         uint64_t limit);

struct SlabSegmentResult {
  std::vector<std::pair<std::string, double>> chosen;
  std::vector<std::string> warnings;
  int64_t pore_voxels = 0, part_voxels = 0;
  double runtime_s = 0;
  int64_t slab_slices = 0;  // as used
};

struct SlabSegmentOptions {
  int64_t slab_slices = 0;  // slices per slab; 0: about 256 MiB of float voxels per slab
  // Called with the result when the mask is fully written but not yet renamed to its final name:
  // a caller writes its companion files' temporaries here and renames them after the call, so that
  // a failure leaves neither the mask nor its companions (segment --json).
  std::function<void(const SlabSegmentResult&)> before_commit;
};

// Runs `method` with `params` (parsed against Registry::get(method)) on `in` by slabs and writes the
// pore mask to `output` (.mha or .nrrd). InputError when the method cannot run by slabs.
SlabSegmentResult segment_by_slabs(const std::string& method, const ParamValues& params, const SlabFile& in,
                                   const std::string& output, const SlabSegmentOptions& opt = {});

}  // namespace pb
