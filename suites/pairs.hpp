#pragma once
// Paired real scans in a suite: per-file geometry and bringing the reference onto each fast
// scan's grid (the grid the decision is about). Called by the dataset preparation of the runner.
// - parse_file_entry: a file of a paired dataset is a path, or a table
//     { path = "...", spacing_mm = [x, y, z], raw = { dims = [..], type = "uint16",
//       endian = "little", header_bytes = 0 } }
//   A TIFF file or folder, or a raw file, without spacing_mm is an input error naming the file.
// - align_reference: align = "auto" | "markers" | "intensity" registers the reference scan onto
//   the fast scan (core/registration.hpp) and resamples the reference pores there (nearest
//   neighbour); "none" keeps the pose, resamples only when the grids differ, and runs the
//   misalignment alarm (phase correlation, warning above 0.5 voxel with the fix to use).
//   A registration that does not converge throws RegistrationFailed: reported, never scored.
#include <string>
#include <toml++/toml.h>
#include <vector>

#include "core/error.hpp"
#include "core/io.hpp"
#include "core/json.hpp"
#include "core/registration.hpp"
#include "core/volume.hpp"
#include "suites/suite.hpp"

namespace pb::suite {

using FileEntry = FileSpec;  // suites/suite.hpp

// `n` is a string or a table as above; relative paths resolve against base_dir. Throws InputError
// naming `where`, the key and the value. `extra_keys`: further keys the caller reads from the same
// table (e.g. a fast scan's label and projections). `check_exists` = false leaves the file to the preflight
// (suites/paired.hpp), so a suite parses before its files are made.
FileEntry parse_file_entry(const toml::node& n, const std::string& base_dir, const std::string& where,
                           bool check_exists = true, const std::vector<std::string>& extra_keys = {});

struct RegistrationFailed : InputError {
  using InputError::InputError;
};

enum class AlignMode { none, auto_select, markers, intensity };
AlignMode parse_align_mode(const std::string& s, const std::string& where);  // InputError naming where
const char* align_mode_name(AlignMode m);

struct AlignedReference {
  Mask pores;                      // reference pores on the fast scan's grid
  SimilarityTransform T;           // fast-scan mm -> reference mm (identity for align = "none")
  nlohmann::ordered_json record;   // "alignment" block for results.json and the report
  std::vector<std::string> warnings;
};

// A transform file: the T.json of `porebench align` ({"registration": {"transform": ...}}), or a
// {"transform": ...} block, or the block itself: rotation (3x3), translation_mm, scale (default 1);
// fast-scan mm -> reference mm. InputError naming the file and the field.
SimilarityTransform read_transform_json(const std::string& path);

// The reference pores brought onto the fast scan by a known transform (no registration).
AlignedReference apply_known_transform(const VolumeF& fast, const Mask& ref_pores, const SimilarityTransform& T,
                                       const std::string& source);


// ref_scan may be null when the reference is a mask only (then only align = "none" works and the
// alarm cannot run). ref_pores lies on ref_scan's grid.
AlignedReference align_reference(AlignMode mode, const VolumeF& fast, const std::string& fast_name,
                                 const VolumeF* ref_scan, const std::string& ref_name, const Mask& ref_pores,
                                 const RegistrationOptions& base = {});

}  // namespace pb::suite
