// The record of `porebench segment --json` (methods/segment_record.hpp).
#include "methods/segment_record.hpp"

#include <cmath>

#include "core/context.hpp"
#include "methods/pores.hpp"

namespace pb {

nlohmann::ordered_json segment_record(const MethodInfo& m, const ParamValues& params, const MethodOutput& out,
                                      int64_t voxels, const SegmentRecordInputs& io, std::optional<int64_t> counted) {
  const int64_t pore_voxels = counted ? *counted : count_nonzero(out.pores);
  const double porosity = out.part_voxels > 0 ? 100.0 * double(pore_voxels) / double(out.part_voxels) : NAN;
  nlohmann::ordered_json j;
  j["context"] = run_context();
  j["method"] = m.name;
  j["family"] = m.family;
  j["params"] = params.text();
  j["chosen"] = nlohmann::ordered_json::object();
  for (const auto& [k, v] : out.chosen) j["chosen"][k] = v;
  j["runtime_s"] = out.runtime_s;
  j["voxels"] = voxels;
  j["part_voxels"] = out.part_voxels;
  j["pore_voxels"] = pore_voxels;
  j["porosity_pct"] = std::isfinite(porosity) ? nlohmann::ordered_json(porosity) : nlohmann::ordered_json();
  j["warnings"] = out.warnings;
  j["input"] = {{"path", io.input_path}, {"sha256_voxels", io.input_sha256}};
  if (io.roi) j["roi"] = *io.roi;
  j["output"] = io.output;
  return j;
}

}  // namespace pb
