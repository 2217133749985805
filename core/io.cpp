#include "core/io.hpp"

#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "core/error.hpp"

namespace fs = std::filesystem;

namespace pb {

std::string lower_extension(const std::string& path) {
  std::string name = fs::path(path).filename().string();
  std::transform(name.begin(), name.end(), name.begin(), [](unsigned char c) { return std::tolower(c); });
  if (name.size() > 7 && name.compare(name.size() - 7, 7, ".nii.gz") == 0) return ".nii.gz";
  auto dot = name.rfind('.');
  return dot == std::string::npos || dot == 0 ? std::string() : name.substr(dot);
}

namespace {

bool host_is_little_endian() {
  const uint16_t one = 1;
  uint8_t b;
  std::memcpy(&b, &one, 1);
  return b == 1;
}

void swap_bytes(void* data, size_t count, int width) {
  auto* p = static_cast<uint8_t*>(data);
  if (width == 2)
    for (size_t i = 0; i < count; ++i) std::swap(p[2 * i], p[2 * i + 1]);
  else if (width == 4)
    for (size_t i = 0; i < count; ++i) {
      std::swap(p[4 * i], p[4 * i + 3]);
      std::swap(p[4 * i + 1], p[4 * i + 2]);
    }
}

template <class T>
AnyVolume make_empty(const Geometry& g) {
  return AnyVolume(Image<T>(g));
}

AnyVolume allocate(VoxelType t, const Geometry& g) {
  switch (t) {
    case VoxelType::u8: return make_empty<uint8_t>(g);
    case VoxelType::u16: return make_empty<uint16_t>(g);
    case VoxelType::i16: return make_empty<int16_t>(g);
    case VoxelType::f32: return make_empty<float>(g);
  }
  throw InputError("unsupported voxel type");
}

AnyVolume read_raw(const std::string& path, const RawSpec& spec) {
  for (int i = 0; i < 3; ++i)
    if (spec.dims[i] <= 0)
      throw InputError("raw file " + path + ": dims must be positive, got " + std::to_string(spec.dims[i]) +
                       " along " + "xyz"[i]);
  for (int i = 0; i < 3; ++i)
    if (!(spec.spacing_mm[i] > 0))
      throw InputError("raw file " + path + ": spacing must be positive, got " + std::to_string(spec.spacing_mm[i]));
  std::error_code ec;
  const auto actual = fs::file_size(path, ec);
  if (ec) throw InputError("cannot read " + path + ": " + ec.message());
  Geometry g;
  g.dims = spec.dims;
  g.spacing_mm = spec.spacing_mm;
  const int width = voxel_type_bytes(spec.type);
  const uint64_t expected = spec.header_bytes + uint64_t(g.voxels()) * uint64_t(width);
  if (actual != expected) {
    std::ostringstream s;
    s << "raw file " << path << (actual < expected ? " is truncated" : " is larger than its geometry") << ": expected "
      << expected << " bytes (header " << spec.header_bytes << " + " << spec.dims[0] << " x " << spec.dims[1]
      << " x " << spec.dims[2] << " voxels x " << width << " bytes " << voxel_type_name(spec.type) << "), found "
      << actual << "; check the raw dims, voxel type and header bytes";
    throw InputError(s.str());
  }
  AnyVolume v = allocate(spec.type, g);
  std::ifstream in(path, std::ios::binary);
  in.seekg(std::streamoff(spec.header_bytes));
  in.read(static_cast<char*>(v.raw()), std::streamsize(v.bytes()));
  if (!in) throw InputError("cannot read " + path + ": short read");
  if (spec.big_endian == host_is_little_endian()) swap_bytes(v.raw(), size_t(g.voxels()), width);
  return v;
}

std::atomic<unsigned> g_tmp_counter{0};

}  // namespace

AnyVolume read_volume(const std::string& path, const ReadOptions& opt) {
  if (!fs::exists(path)) throw InputError("input file not found: " + path);
  AnyVolume v;
  if (opt.raw) {
    v = read_raw(path, *opt.raw);
  } else if (fs::is_directory(path)) {
    v = detail::itk_read_tiff_folder(path);
  } else {
    const std::string ext = lower_extension(path);
    if (ext == ".raw" || ext == ".bin" || ext == ".vol")
      throw InputError("input " + path + " is a raw file: give its geometry (--raw-dims, --raw-type, ...)");
    v = detail::itk_read(path);
  }
  if (opt.spacing_mm) {
    for (double s : *opt.spacing_mm)
      if (!(s > 0)) throw InputError("spacing override for " + path + " must be positive, got " + std::to_string(s));
    v.set_spacing(*opt.spacing_mm);
  }
  for (int i = 0; i < 3; ++i)
    if (!(v.geometry().spacing_mm[i] > 0))
      throw InputError("input " + path + " has non-positive spacing " + std::to_string(v.geometry().spacing_mm[i]) +
                       " along " + "xyz"[i] + "; give the spacing explicitly");
  return v;
}

void write_volume(const void* data, VoxelType type, const Geometry& g, const std::string& path,
                  const WriteOptions& opt) {
  const std::string ext = lower_extension(path);
  if (ext == ".mhd" || ext == ".nhdr")
    throw InputError("output " + path + ": detached-header formats are not written; use .mha or .nrrd");
  if (ext != ".mha" && ext != ".nrrd" && ext != ".nii" && ext != ".nii.gz" && ext != ".tif" && ext != ".tiff")
    throw InputError("output " + path + ": unsupported extension '" + ext + "' (use .mha or .nrrd)");
  AtomicOutput out(path);
  detail::itk_write(data, type, g, out.tmp_path(), opt.compress);
  out.commit();
}

void write_raw(const AnyVolume& v, const std::string& path, bool big_endian, uint64_t header_bytes) {
  AtomicOutput out(path);
  {
    std::ofstream f(out.tmp_path(), std::ios::binary);
    std::string pad(header_bytes, '\0');
    f.write(pad.data(), std::streamsize(pad.size()));
    std::vector<char> buf(static_cast<const char*>(v.raw()), static_cast<const char*>(v.raw()) + v.bytes());
    if (big_endian == host_is_little_endian()) swap_bytes(buf.data(), size_t(v.geometry().voxels()), voxel_type_bytes(v.type()));
    f.write(buf.data(), std::streamsize(buf.size()));
    if (!f) throw InputError("cannot write " + path);
  }
  out.commit();
}

void check_writable(const std::string& path) {
  fs::path p(path);
  fs::path dir = p.has_parent_path() ? p.parent_path() : fs::path(".");
  if (!fs::is_directory(dir)) throw InputError("output folder does not exist: " + dir.string() + " (for " + path + ")");
  if (::access(dir.c_str(), W_OK) != 0) throw InputError("output folder is not writable: " + dir.string() + " (for " + path + ")");
  if (fs::is_directory(p)) throw InputError("output " + path + " is a folder, expected a file name");
}

void write_text_atomic(const std::string& path, const std::string& text) {
  AtomicOutput out(path);
  {
    std::ofstream f(out.tmp_path(), std::ios::binary);
    f << text;
    f.flush();
    if (!f) throw InputError("cannot write " + path);
  }
  out.commit();
}

AtomicOutput::AtomicOutput(std::string final_path) : final_(std::move(final_path)) {
  check_writable(final_);
  fs::path p(final_);
  const std::string ext = lower_extension(final_);
  std::string stem = p.filename().string();
  stem = stem.substr(0, stem.size() - ext.size());
  tmp_ = (p.parent_path() / ("." + stem + ".partial-" + std::to_string(::getpid()) + "-" +
                             std::to_string(g_tmp_counter++) + ext)).string();
}

AtomicOutput::~AtomicOutput() {
  if (!done_) {
    std::error_code ec;
    fs::remove(tmp_, ec);
  }
}

void AtomicOutput::commit() {
  std::error_code ec;
  fs::rename(tmp_, final_, ec);
  if (ec) throw InputError("cannot write " + final_ + ": " + ec.message());
  done_ = true;
}

}  // namespace pb
