#pragma once
// Segmentation of volumes larger than memory: the volume is read by slabs of z slices
// (core/slabs.hpp) and never held whole. The result is the in-memory path's, voxel for voxel:
//   - histogram methods (otsu and the other global methods): the grey-value histogram in one
//     streaming pass (integer volumes: a count per grey level, from which every statistic and
//     histogram the method asks for is exact; float volumes: a statistics pass and a histogram
//     pass), then air below the threshold by slabs;
//   - pre-filter median (FILTER+METHOD): a slab's own slices are filtered from the slab read with
//     a halo of the radius (median_filter_slices), kept in a temporary file for the second pass;
//   - the local methods of the window mean and std (niblack, sauvola, phansalkar, wolf, local-mean):
//     the window sums run through the slices in z order over a ring of window + batch slices
//     (methods/integral.hpp); wolf takes a first such pass for its largest window std;
//   - bernsen (window min/max) and local-gaussian (separable FIR): each slab is filtered with a
//     halo of the window radius;
//   - pore extraction: the runs of the air mask of every slab, united across the slab faces
//     (core/components.hpp RunCollector), so a pore that crosses a face is one pore;
//   - the mask written by slabs (temporary name, renamed when complete).
// An ROI (part mask) is read by slabs beside the volume, twice (wolf: three times): in the summary
// pass, for the histograms and grey ranges of the voxels inside it, and beside the air, for the
// open mask (air or outside the ROI) and the runs outside it, whose components are background.
// A method streams when its family sets MethodInfo::slabs (methods/slab_method.hpp). What does not:
// manual, the region methods, the other pre-filters, neural methods and predictions; above the
// memory limit they are refused (slab_refusal_of_method).
// Bit identity holds for integer volumes (uint8, uint16, int16); for float32 volumes the centring
// mean of the window mean/std methods is summed in another order and may differ in its last bits.
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

// "" when `method` (a registered method or FILTER+METHOD) can run by slabs (its MethodInfo::slabs is
// set; pre-filters: median), else why not, naming the methods that can.
std::string slab_refusal_of_method(const std::string& method);

// How segment reads its input under --memory-limit `limit`: in memory when the in-memory estimate
// fits (or the size is only known once read: TIFF, DICOM, .npy); by slabs above it when the input
// (raw, uncompressed MetaImage/NRRD), the ROI file `roi` (if not empty: uncompressed MetaImage/NRRD)
// and the method can; otherwise InputError (exit 2) naming the file, its size, the estimate, the
// limit and what cannot stream. Reads the headers only.
struct SegmentPlan {
  bool by_slabs = false;
  uint64_t need_bytes = 0;  // the in-memory estimate (0: size unknown before reading)
};
SegmentPlan plan_segment(const std::string& input, const ReadOptions& ro, const std::string& method,
                         const std::string& roi, uint64_t limit);

// InputError unless the ROI `roi` has the dims of `in` and a non-zero voxel (as segment checks in
// memory); reads the ROI by slabs up to its first non-zero slab.
void check_slab_roi(const SlabFile& in, const SlabFile& roi);

struct SlabSegmentResult {
  std::vector<std::pair<std::string, double>> chosen;
  std::vector<std::string> warnings;
  int64_t pore_voxels = 0, part_voxels = 0;
  double runtime_s = 0;
  int64_t slab_slices = 0;  // as used
  // Why slab_slices is more than asked (SlabSegmentOptions::slab_slices), or empty: a method whose
  // slabs read a halo (bernsen, local-gaussian: window/2 slices beyond each face) takes slabs of at
  // least twice its halo, as the default does, so that no slice is read and filtered more than twice.
  std::string slab_note;
};

struct SlabSegmentOptions {
  int64_t slab_slices = 0;  // slices per slab; 0: about 16 MiB of float voxels, at least 2 slices; either way
                            // at least twice the method's halo (SlabSegmentResult::slab_note)
  // Called with the result when the mask is fully written but not yet renamed to its final name:
  // a caller writes its companion files' temporaries here and renames them after the call, so that
  // a failure leaves neither the mask nor its companions (segment --json).
  std::function<void(const SlabSegmentResult&)> before_commit;
  // The part mask (non-zero: inside), read by slabs as well; only voxels inside are classified, as
  // in memory. Checked first: the volume's dims, and not empty (InputError).
  const SlabFile* roi = nullptr;
};

// Runs `method` with `params` (parsed against Registry::get(method)) on `in` by slabs and writes the
// pore mask to `output` (.mha or .nrrd). InputError when the method cannot run by slabs.
SlabSegmentResult segment_by_slabs(const std::string& method, const ParamValues& params, const SlabFile& in,
                                   const std::string& output, const SlabSegmentOptions& opt = {});

}  // namespace pb
