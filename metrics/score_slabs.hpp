#pragma once
// Scoring masks larger than memory: the prediction and the reference are read by slabs
// (core/slabs.hpp), each slab's foreground runs are kept (core/components.hpp RunCollector, united
// across slab faces), and the score is computed from the runs (metrics/score.hpp score_runs): a
// pore mask is sparse, so its runs are small where its voxels are not. The result equals score()
// on the masks in memory.
// What streams: every figure of score() without an ROI: overlap (Jaccard, Dice, ...), per-slice
// figures and their intervals, porosity, pores and matching, POD, size distributions, surface
// distances (from runs). What does not: an ROI (--roi), float probability maps (their average
// precision, Brier score and calibration need every probability), and inputs that cannot be read
// by slabs (compressed, TIFF, NIfTI, DICOM, .npy); above --memory-limit they are refused.
#include <cstdint>
#include <string>

#include "core/slabs.hpp"
#include "metrics/score_record.hpp"

namespace pb {

// Bytes the in-memory score needs at its peak, estimated: both inputs as stored, and three masks.
uint64_t score_memory_bytes(const Geometry& g, VoxelType pred, VoxelType ref, bool roi);

// Whether score reads its inputs by slabs under `limit`: in memory when the estimate fits (or a size
// is only known once read); by slabs above it when both inputs and the options can; otherwise
// InputError (exit 2) naming the file, its size, the estimate, the limit and what cannot stream.
bool plan_score_by_slabs(const std::string& pred, const std::string& ref, const std::string& roi,
                         const ScoreSetup& s, uint64_t limit);

// The record of `porebench score` from inputs read by slabs (same fields as score_record; no ROI,
// no probability block). slab_slices 0: about 256 MiB of voxels per slab.
ScoreRecord score_record_by_slabs(const ScoreSetup& s, const SlabFile& pred, const SlabFile& ref, bool with_json,
                                  int64_t slab_slices = 0);

}  // namespace pb
