#pragma once
// Volumes larger than memory. SlabFile is a read-only view of a volume file by slabs of z slices:
// raw files (RawSpec), and uncompressed MetaImage (.mha/.mhd) and NRRD (.nrrd/.nhdr) files, whose
// voxels lie in the file as they lie in memory. Each slab is memory-mapped while it is read and
// unmapped afterwards, so the process holds one slab, never the file. SlabMaskWriter writes a
// uint8 mask (.mha or .nrrd, uncompressed) slab by slab to a temporary name and renames it when
// every slice is written (core/io.hpp AtomicOutput): a failed run leaves no file that looks done.
// Errors are InputError naming the file, the field and the value.
#include <cstdint>
#include <string>

#include "core/io.hpp"
#include "core/volume.hpp"

namespace pb {

// "" when `path` (with `opt`) can be read by slabs: raw with a RawSpec, or an uncompressed
// MetaImage/NRRD file with one data file and no NRRD line skip; else why not. Reads the header only.
std::string slab_read_refusal(const std::string& path, const ReadOptions& opt);

class SlabFile {
 public:
  // Checks the header and the data size (as read_volume does, without the memory budget). Float
  // volumes: non-finite voxels are refused or turned into NaN as read_volume does, checked when the
  // slabs are read (check_finite() reads them all; the pipelines call it before any other work).
  SlabFile(const std::string& path, const ReadOptions& opt);

  const std::string& path() const { return path_; }
  const Geometry& geometry() const { return geo_; }
  VoxelType type() const { return type_; }
  uint64_t voxel_bytes() const { return uint64_t(geo_.voxels()) * uint64_t(voxel_type_bytes(type_)); }

  // Slices [z0, z1) as float32 (geometry: dims[2] = z1 - z0, origin moved to slice z0), or as a mask
  // (voxel != 0).
  VolumeF read_float(int64_t z0, int64_t z1) const;
  // The same into `out`, whose buffer is reused when it holds as many voxels (no fresh pages per slab).
  void read_float(int64_t z0, int64_t z1, VolumeF& out) const;
  Mask read_mask(int64_t z0, int64_t z1) const;
  void read_mask(int64_t z0, int64_t z1, Mask& out) const;  // into out, its buffer reused as read_float's
  // Float volumes: counts the non-finite voxels in one pass over the file and refuses them unless
  // allow_nonfinite (the message of read_volume). Integer volumes: nothing to do.
  void check_finite() const;
  // SHA-256 of the voxels as stored, in the host's byte order (what read_volume's buffer hashes to).
  std::string sha256() const;

 private:
  template <class F> void with_slab(int64_t z0, int64_t z1, F&& f) const;

  std::string path_, data_path_;
  Geometry geo_;
  VoxelType type_ = VoxelType::u8;
  bool swap_ = false;
  bool allow_nonfinite_ = false;
  uint64_t offset_ = 0;  // first voxel byte in data_path_
};

// Writes a uint8 mask slab by slab (in z order) to an uncompressed .mha or .nrrd.
class SlabMaskWriter {
 public:
  SlabMaskWriter(const std::string& path, const Geometry& g);  // InputError for other formats
  ~SlabMaskWriter();
  SlabMaskWriter(const SlabMaskWriter&) = delete;
  SlabMaskWriter& operator=(const SlabMaskWriter&) = delete;
  // The next nslices slices (nslices * nx * ny bytes).
  void write(const uint8_t* slices, int64_t nslices);
  // After the last slice: flushes, checks the size, renames to the final name.
  void commit();

 private:
  AtomicOutput out_;
  Geometry geo_;
  int fd_ = -1;
  int64_t z_ = 0;
  uint64_t bytes_ = 0;
};

// Default --memory-limit of segment and score: half the memory budget (the machine's memory, or the
// container's limit, or PB_MEMORY_BUDGET_MB: core/memory.hpp).
uint64_t default_memory_limit();

// --memory-limit: bytes, or a number with K, M, G or T (powers of 1024; "12G", "512MiB", "3.5GB" as
// GiB). InputError naming `option` and the text otherwise, or when the value is 0.
uint64_t parse_memory_limit(const std::string& text, const std::string& option);

// The geometry and voxel type of a volume file from its header alone (raw: the RawSpec; MetaImage,
// NRRD, NIfTI: our header check), without reading the voxels or checking the memory budget; false
// for formats whose size is only known once read (TIFF, DICOM, .npy).
bool volume_size_from_header(const std::string& path, const ReadOptions& opt, Geometry& g, VoxelType& type);

// "2048 x 2048 x 1024 voxels of uint16, 8589934592 bytes (8192 MiB)".
std::string size_text(const Geometry& g, VoxelType type);
std::string bytes_text(uint64_t bytes);  // "8589934592 bytes (8192 MiB)"

// Throws InputError unless `path` is a mask output SlabMaskWriter can write (.mha or .nrrd, in a
// writable folder); `option` names it in the message.
void check_slab_output(const std::string& path, const std::string& option);

// Geometry of slices [z0, z1) of g.
inline Geometry slab_geometry(const Geometry& g, int64_t z0, int64_t z1) {
  Geometry s = g;
  s.dims[2] = z1 - z0;
  s.origin_mm[2] += double(z0) * g.spacing_mm[2];
  return s;
}

// out shaped as slices [z0, z1) of g; its buffer is reused when it holds as many voxels.
template <class T>
void shape_slab(Image<T>& out, const Geometry& g, int64_t z0, int64_t z1) {
  const Geometry s = slab_geometry(g, z0, z1);
  if (out.geometry().dims == s.dims)
    out.set_geometry_keep_dims(s);
  else
    out = Image<T>(s, Uninitialized{});
}

}  // namespace pb
