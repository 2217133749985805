#pragma once
// The record of `porebench segment --json`, shared by the command line (apps/cmd_segment.cpp) and
// the Python module (porebench.segment returns it as a dict beside the mask): the method, its
// parameters, what it chose, its runtime, the counts and porosity, its warnings, the input (path or
// null, and the SHA-256 of its voxels as stored), the ROI and the output (paths or absent/null).
#include <optional>
#include <string>

#include "core/json.hpp"
#include "methods/registry.hpp"

namespace pb {

struct SegmentRecordInputs {
  nlohmann::ordered_json input_path;   // the file, or null
  std::string input_sha256;            // of the stored voxels
  std::optional<nlohmann::ordered_json> roi;  // the ROI file, null (an ROI not from a file); none: no ROI
  nlohmann::ordered_json output;       // the mask file, or null
};

// pore_voxels: counted from out.pores unless given (a mask written by slabs is not in out.pores).
nlohmann::ordered_json segment_record(const MethodInfo& m, const ParamValues& params, const MethodOutput& out,
                                      int64_t voxels, const SegmentRecordInputs& io,
                                      std::optional<int64_t> pore_voxels = std::nullopt);

}  // namespace pb
