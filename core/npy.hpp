#pragma once
// NumPy .npy files (format versions 1.0, 2.0 and 3.0, as numpy.lib.format describes them: magic
// "\x93NUMPY", version bytes, a little-endian header length of 2 bytes (1.0) or 4 bytes (2.0,
// 3.0; 3.0 allows UTF-8 in the header), then a Python dict literal with 'descr', 'fortran_order'
// and 'shape', then the voxels). Voxel types: |u1 |b1 (read as uint8), u2, i2, f4, little ('<')
// or big ('>') endian; other dtypes are refused naming the descr.
// Axes: a 3-D array is indexed [z, y, x] and a 2-D array [y, x] (one slice), the scikit-image
// convention, whatever its memory order: a C-order array is our x-fastest layout as it is, a
// Fortran-order array is transposed on reading. Writing gives C order, shape (nz, ny, nx), little
// endian, format 1.0.
// A .npy stores no voxel size or origin: read_volume gives spacing 1 mm and origin 0 unless the
// caller passes the spacing (ReadOptions::spacing_mm, --spacing), and writing drops them.
// Checks before allocation: header length and literal, shape (positive, at most 2^31-1 per axis,
// no overflow), the memory budget, then the file size against the header in both directions.
// Every failure is an InputError naming the file, the field and the value.
#include <array>
#include <cstdint>
#include <functional>
#include <string>
#include <string_view>
#include <vector>

#include "core/volume.hpp"

namespace pb {

struct NpyHeader {
  int major = 0, minor = 0;
  std::string descr;            // as written, e.g. "<f4"
  VoxelType type = VoxelType::u8;
  int item_bytes = 1;  // as stored (8 for f8)
  bool float64 = false;  // f8, read as float32
  bool big_endian = false;
  bool fortran_order = false;
  std::vector<int64_t> shape;   // as written (numpy order)
  std::array<int64_t, 3> dims{1, 1, 1};  // x, y, z
  uint64_t data_offset = 0;     // bytes before the voxels
  uint64_t expected_bytes = 0;  // voxels x item bytes
};

// True for ".npy" (by extension).
bool is_npy_path(const std::string& path);

// Parses the magic, version and header dict from the first bytes of a file. `path` is for
// messages only. Pure: no file access, no allocation from input sizes (used by the fuzzer).
NpyHeader parse_npy_header(std::string_view head, const std::string& path);

// Reads a .npy file (header checks, memory budget, file size, then the voxels). Spacing 1 mm.
AnyVolume read_npy(const std::string& path);

// Where read_npy tells what the user should know but is no error (float64 values rounded to
// float32). The command line logs it to stderr, the Python module warns; none set: dropped.
void set_read_note(std::function<void(const std::string&)> sink);

// float64 -> float32 for n values (f8 .npy files, float64 NumPy arrays): a finite value beyond
// float32's range is an InputError naming `what` and the value; non-finite values stay non-finite.
struct Float64Narrowing {
  int64_t values = 0, rounded = 0;  // rounded: values float32 does not hold exactly
  double max_rel_change = 0;        // of the rounded ones, |float32 - float64| / |float64|
  void add(const Float64Narrowing& o);
  std::string note(const std::string& what) const;  // "" when nothing was rounded
};
Float64Narrowing narrow_float64(const double* src, int64_t n, float* dst, const std::string& what);

// Writes a .npy file atomically (AtomicOutput, size checked): C order, shape (nz, ny, nx).
void write_npy(const void* data, VoxelType type, const Geometry& g, const std::string& path);

// Arrays of any shape (1 to 8 axes, C order; numpy order of axes): the training patches of
// export-patches, a model's test input and expected output. Read: every type read_npy reads,
// converted to float32 (same header, size and memory checks; Fortran order refused). Write: like
// write_npy, shape as given.
struct NpyArray {
  std::vector<int64_t> shape;
  std::vector<float> data;
};
NpyArray read_npy_array(const std::string& path);
void write_npy_array(const void* data, VoxelType type, const std::vector<int64_t>& shape, const std::string& path);

// A volume read from a file that stores no geometry (.npy) takes the spacing and origin of the
// volume it is paired with (a reference, a scan), when the dims agree; returns whether it did.
bool adopt_geometry(AnyVolume& v, const Geometry& from);

}  // namespace pb
