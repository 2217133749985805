#pragma once
// Volume input/output. Formats by file name: MetaImage (.mha/.mhd), NRRD (.nrrd/.nhdr), NIfTI
// (.nii/.nii.gz), TIFF (.tif/.tiff, multi-page = 3D), a folder of numbered TIFF slices, DICOM and
// DICONDE (a series folder or one file, by content), and raw
// files whose geometry is given by a RawSpec. Writing: .mha (optionally compressed), .nrrd, and for
// tests and interchange .nii/.nii.gz/.tif. Writes go to a temporary name and are renamed when
// complete, so a failed command never leaves a file that looks finished.
// Errors are InputError naming the file, the field and the value.
#include <array>
#include <cstdint>
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

// Non-finite float voxels found in a volume.
struct NonFinite {
  int64_t nan = 0, pos_inf = 0, neg_inf = 0;
  int64_t total() const { return nan + pos_inf + neg_inf; }
  std::string text() const;  // "3 non-finite voxels (1 NaN, 1 +Inf, 1 -Inf)"
};
NonFinite count_nonfinite(const AnyVolume& v);  // zero for integer volumes

struct ReadOptions {
  std::optional<RawSpec> raw;                            // read as raw with this geometry
  std::optional<std::array<double, 3>> spacing_mm;       // override the file's spacing
  // Float volumes with NaN or +-Inf voxels are refused (InputError with the counts) unless this is
  // set; then every non-finite voxel is set to NaN, which no method calls air and no histogram or
  // statistic counts (--allow-nonfinite).
  bool allow_nonfinite = false;
  NonFinite* nonfinite_out = nullptr;  // when given, receives the counts found
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
// check_writable plus a volume format we write (by extension): call before any work.
void check_volume_output(const std::string& path);

// Throws InputError unless `dir` can be used as an output folder: it is created if missing (with
// its parents); an existing file of that name, or a folder that cannot be written, is refused.
void prepare_output_folder(const std::string& dir);

// Writes `text` to `path` atomically (temporary name, write, fsync, size check, rename); any
// failure removes the temporary and throws InputError with the cause ("No space left on device").
void write_text_atomic(const std::string& path, const std::string& text);

// A temporary file beside `final_path` (same extension, hidden name ".STEM.partial-PID-N.EXT")
// that becomes `final_path` on commit(); removed on destruction if never committed.
// commit() flushes the file to disk (fsync), checks its size (the expected size when given, else
// non-empty) and that the file system did not fill up while it was written, then renames it.
class AtomicOutput {
 public:
  explicit AtomicOutput(std::string final_path);
  ~AtomicOutput();
  AtomicOutput(const AtomicOutput&) = delete;
  AtomicOutput& operator=(const AtomicOutput&) = delete;
  const std::string& tmp_path() const { return tmp_; }
  const std::string& final_path() const { return final_; }
  static constexpr uint64_t kUnknownSize = ~uint64_t(0);
  void commit(uint64_t expected_bytes = kUnknownSize);

 private:
  std::string final_, tmp_;
  bool done_ = false;
};

// Removes leftover temporaries of AtomicOutput (".*.partial-PID-N*") under `dir` (recursively)
// whose process is no longer running; returns how many were removed. For --resume and report.
int remove_stale_partials(const std::string& dir);

// A lock on an output folder (flock on DIR/.porebench.lock, released when the process ends, however
// it ends). The lock file records the holder (pid, host, command, start time); a second process
// gets an InputError naming the holder. Folder created when missing.
// Declared shards of one run (--shard K/N, e.g. the tasks of a cluster job array) share the folder:
// each holds the folder lock shared and its own DIR/.porebench-shard-K-of-N.lock exclusively, so
// shards run side by side, the same shard twice is refused, and an unsharded run or a report waits
// for none of them but is refused while any runs. flock works across machines on NFSv4 and most
// cluster file systems (Lustre with flock enabled, GPFS/Spectrum Scale, BeeGFS).
class FolderLock {
 public:
  FolderLock(const std::string& dir, const std::string& command);
  // shard: 0-based index of count; count 1 is the exclusive lock above.
  FolderLock(const std::string& dir, const std::string& command, int shard_index, int shard_count);
  ~FolderLock();
  FolderLock(const FolderLock&) = delete;
  FolderLock& operator=(const FolderLock&) = delete;
  // A shard that finds every cell present tries to become the only holder (to write the reports);
  // false when another shard still holds the folder (that one, or a final --resume run, writes them).
  bool try_exclusive();

 private:
  int fd_ = -1, shard_fd_ = -1;
};

// Holds an exclusive lock on PATH (created when missing) until destroyed, waiting for it: used to
// let one of several processes prepare a shared resource (a dataset) while the others wait.
class WaitLock {
 public:
  explicit WaitLock(const std::string& path);
  ~WaitLock();
  WaitLock(const WaitLock&) = delete;
  WaitLock& operator=(const WaitLock&) = delete;

 private:
  int fd_ = -1;
};

// Free bytes for an unprivileged writer on the file system holding `path` (UINT64_MAX if unknown).
uint64_t free_bytes_at(const std::string& path);

std::string lower_extension(const std::string& path);  // ".mha", ".nii.gz", "" for none

// DICOM, and DICONDE (its NDT profile, ASTM E2339: the same file format): a folder holding a DICOM
// series (its files carry the Part 10 mark "DICM" at byte 128, or end in .dcm), or one such file
// (multi-frame = 3D). Read through ITK's GDCM reader; spacing and orientation come from the headers.
bool is_dicom(const std::string& path);

// True for inputs whose voxel size cannot be trusted from the file: TIFF files and folders, raw
// and .npy files, files without an extension (DICOM files and folders excepted).
bool spacing_unknown(const std::string& path);

namespace detail {  // implemented in io_itk.cpp, the only I/O unit that sees ITK
AnyVolume itk_read(const std::string& path);
AnyVolume itk_read_tiff_folder(const std::string& folder);
AnyVolume itk_read_dicom(const std::string& path);  // a DICOM series folder or one DICOM file
void itk_write(const void* data, VoxelType type, const Geometry& g, const std::string& path, bool compress);
}  // namespace detail

}  // namespace pb
