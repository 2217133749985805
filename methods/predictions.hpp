#pragma once
// The predictions method (methods/predictions.cpp): segmentations made elsewhere, read from files.
// What the suite preflight and the method share: reading a prediction against a scan's geometry,
// checking its values for its kind, and the runtime sidecar.
#include <string>

#include "core/volume.hpp"

namespace pb {

enum class PredictionKind { automatic, mask, label, probability };
PredictionKind parse_prediction_kind(const std::string& s);  // auto, mask, label, probability
// automatic: float32 = probability, integer = mask.
PredictionKind resolve_kind(PredictionKind k, VoxelType t);

// Reads `path` (read_volume); a .npy takes `scan`'s spacing and origin; then the geometry must be
// `scan`'s (InputError naming "prediction PATH" and `scan_name` otherwise).
AnyVolume read_prediction(const std::string& path, const Geometry& scan, const std::string& scan_name);

// probability: float32, every voxel in [0, 1] (NaN refused); label: some voxel equals pore_label.
// InputError naming the file, the count and the first bad value.
void check_prediction_values(const AnyVolume& v, PredictionKind kind, int64_t pore_label, const std::string& path);

// The runtime measured where the prediction was made: FILE.json, or STEM.json beside FILE
// ({"runtime_s": S}, S >= 0). NaN when there is none (*found = false). A sidecar that is not JSON,
// or whose runtime_s is not a non-negative number: InputError naming it.
double read_runtime_sidecar(const std::string& path, bool* found);

}  // namespace pb
