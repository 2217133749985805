#pragma once
// Our own checks of MetaImage (.mha/.mhd), NRRD (.nrrd/.nhdr) and NIfTI-1 (.nii/.nii.gz) files,
// run before ITK reads them: the header is parsed by us (every field we rely on is checked for
// absurd values: NDims 4294967296, DimSize 1e308, NaN spacing), the data size the header implies
// is checked against the memory budget, and then against the bytes the file really holds, in both
// directions (truncated, or longer than the header says); compressed data is inflated in small
// blocks and counted (never allocated, never past the expected size + 1), and a stated compressed
// size is compared with the bytes present. Every failure is an InputError naming the file, the
// field and the value, or both sizes.
#include <array>
#include <cstdint>
#include <string>
#include <string_view>

#include "core/volume.hpp"

namespace pb {

struct VolumeHeader {
  std::string format;               // "MetaImage", "NRRD" or "NIfTI-1"
  int ndims = 0;
  std::array<int64_t, 3> dims{1, 1, 1};
  std::array<double, 3> spacing_mm{1, 1, 1};
  std::array<double, 3> origin_mm{0, 0, 0};  // MetaImage Offset/Origin/Position, NRRD space origin
  VoxelType type = VoxelType::u8;
  int type_bytes = 1;
  bool compressed = false;          // zlib (MetaImage), gzip (NRRD, .nii.gz)
  bool big_endian = false;          // MetaImage BinaryDataByteOrderMSB/ElementByteOrderMSB, NRRD endian
  std::string data_file;            // empty: the data follows the header in the same file
  uint64_t data_offset = 0;         // where the data starts in the data file (after skips)
  bool data_at_end = false;         // MetaImage HeaderSize = -1 / NRRD byte skip -1: the data ends the file
  int64_t line_skip = 0;            // NRRD: lines to skip in the data file before byte skip
  uint64_t compressed_bytes = 0;    // MetaImage CompressedDataSize when stated (0: not stated)
  uint64_t voxels = 0;
  uint64_t expected_bytes = 0;      // voxels x type_bytes (uncompressed)
};

// Parses a header from the first bytes of a file (`head`, at most 1 MiB are looked at).
// `path` is for messages only. Pure: no file access, used by the fuzzer.
VolumeHeader parse_metaimage_header(std::string_view head, const std::string& path);
VolumeHeader parse_nrrd_header(std::string_view head, const std::string& path);
VolumeHeader parse_nifti_header(std::string_view head, const std::string& path);

// True for the extensions checked here (.mha .mhd .nrrd .nhdr .nii .nii.gz).
bool has_checked_header(const std::string& path);

// Reads and parses the header of `path`, checks the memory budget, then the data size against the
// data file (inflating compressed data in blocks). Throws InputError; returns the parsed header.
// within_budget = false leaves out the memory budget check (a volume read by slabs, core/slabs.hpp).
VolumeHeader check_volume_file(const std::string& path, bool within_budget = true);

// Raw files: dims and spacing positive, and the file size = header bytes + voxel bytes (InputError
// with both sizes otherwise). Returns the voxel bytes. No memory budget check (read_volume adds it).
struct RawSpec;
uint64_t check_raw_file(const std::string& path, const RawSpec& spec);

// The same checks on a whole file held in memory (data in the same file only; a named data file is
// not looked at). For the fuzzer and tests; `path` gives the format by its extension.
VolumeHeader check_volume_bytes(std::string_view file, const std::string& path);

}  // namespace pb
