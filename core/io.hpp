#pragma once
// Volume input/output. Formats by file name: MetaImage (.mha/.mhd), NRRD (.nrrd/.nhdr), NIfTI
// (.nii/.nii.gz), TIFF (.tif/.tiff, multi-page = 3D), a folder of numbered TIFF slices, and raw
// files whose geometry is given by a RawSpec. Writing: .mha (optionally compressed), .nrrd, and for
// tests and interchange .nii/.nii.gz/.tif. Writes go to a temporary name and are renamed when
// complete, so a failed command never leaves a file that looks finished.
// Errors are InputError naming the file, the field and the value.
#include <array>
#include <optional>
#include <string>

#include "core/volume.hpp"

namespace pb {

struct RawSpec {
  std::array<int64_t, 3> dims{0, 0, 0};
  VoxelType type = VoxelType::u16;
  bool big_endian = false;
  uint64_t header_bytes = 0;
  std::array<double, 3> spacing_mm{1, 1, 1};
};

struct ReadOptions {
  std::optional<RawSpec> raw;                            // read as raw with this geometry
  std::optional<std::array<double, 3>> spacing_mm;       // override the file's spacing
};

struct WriteOptions {
  bool compress = false;  // MetaImage/NRRD zlib compression
};

AnyVolume read_volume(const std::string& path, const ReadOptions& opt = {});

void write_volume(const void* data, VoxelType type, const Geometry& g, const std::string& path,
                  const WriteOptions& opt = {});
template <class T>
void write_volume(const Image<T>& img, const std::string& path, const WriteOptions& opt = {}) {
  write_volume(img.data(), VoxelTraits<T>::type, img.geometry(), path, opt);
}
inline void write_volume(const AnyVolume& v, const std::string& path, const WriteOptions& opt = {}) {
  write_volume(v.raw(), v.type(), v.geometry(), path, opt);
}

// Raw writer for tests and for handing data to other tools (little- or big-endian, header padding).
void write_raw(const AnyVolume& v, const std::string& path, bool big_endian = false, uint64_t header_bytes = 0);

// Throws InputError unless `path` could be created: its folder exists and is writable.
void check_writable(const std::string& path);

// Writes `text` to `path` atomically (temporary name, then rename).
void write_text_atomic(const std::string& path, const std::string& text);

// A temporary file beside `final_path` (same extension, hidden name) that becomes `final_path`
// on commit(); removed on destruction if never committed.
class AtomicOutput {
 public:
  explicit AtomicOutput(std::string final_path);
  ~AtomicOutput();
  AtomicOutput(const AtomicOutput&) = delete;
  AtomicOutput& operator=(const AtomicOutput&) = delete;
  const std::string& tmp_path() const { return tmp_; }
  void commit();

 private:
  std::string final_, tmp_;
  bool done_ = false;
};

std::string lower_extension(const std::string& path);  // ".mha", ".nii.gz", "" for none

namespace detail {  // implemented in io_itk.cpp, the only I/O unit that sees ITK
AnyVolume itk_read(const std::string& path);
AnyVolume itk_read_tiff_folder(const std::string& folder);
void itk_write(const void* data, VoxelType type, const Geometry& g, const std::string& path, bool compress);
}  // namespace detail

}  // namespace pb
