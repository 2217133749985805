// Slab views of volume files (core/slabs.hpp): a slab is mapped read-only (mmap of the byte range
// of its slices, page-aligned), converted, and unmapped, so resident memory stays at one slab
// however large the file. Header and size checks are those of read_volume (core/io_header.hpp).
#include "core/slabs.hpp"

#include <fcntl.h>
#include <sys/mman.h>
#include <unistd.h>

#include <algorithm>
#include <cctype>
#include <cerrno>
#include <cstdlib>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <limits>
#include <sstream>
#include <vector>

#include "core/byteorder.hpp"
#include "core/error.hpp"
#include "core/io_header.hpp"
#include "core/memory.hpp"
#include "core/sha256.hpp"

namespace fs = std::filesystem;

namespace pb {
namespace {

bool slab_format(const std::string& path) {
  const std::string e = lower_extension(path);
  return e == ".mha" || e == ".mhd" || e == ".nrrd" || e == ".nhdr";
}

// The reason `path` cannot be read by slabs, or "" when it can (header read, not the data).
std::string slab_refusal(const std::string& path, const ReadOptions& opt, VolumeHeader* out) {
  if (opt.raw) return "";
  if (!slab_format(path)) return "only raw, MetaImage (.mha/.mhd) and NRRD (.nrrd/.nhdr) files are read by slabs";
  const VolumeHeader h = check_volume_file(path, false);
  if (out) *out = h;
  if (h.compressed) return "its voxel data are compressed (" + h.format + "); slabs need uncompressed data";
  if (h.line_skip > 0) return "NRRD line skip " + std::to_string(h.line_skip) + " is not read by slabs";
  return "";
}

class Fd {
 public:
  explicit Fd(const std::string& path) : fd_(::open(path.c_str(), O_RDONLY | O_CLOEXEC)) {
    if (fd_ < 0) throw InputError("cannot read " + path + ": " + std::strerror(errno));
  }
  ~Fd() { ::close(fd_); }
  int get() const { return fd_; }

 private:
  int fd_;
};

std::string header_text(const Geometry& g, bool nrrd) {
  std::ostringstream s;
  s.precision(17);
  if (nrrd) {
    s << "NRRD0004\n# porebench mask, written by slabs\ntype: uint8\ndimension: 3\nsizes: " << g.dims[0] << ' '
      << g.dims[1] << ' ' << g.dims[2] << "\nspace dimension: 3\nspace directions: (" << g.spacing_mm[0] << ",0,0) (0,"
      << g.spacing_mm[1] << ",0) (0,0," << g.spacing_mm[2] << ")\nspace origin: (" << g.origin_mm[0] << ','
      << g.origin_mm[1] << ',' << g.origin_mm[2] << ")\nencoding: raw\n\n";
  } else {
    s << "ObjectType = Image\nNDims = 3\nBinaryData = True\nBinaryDataByteOrderMSB = False\nCompressedData = False\n"
      << "TransformMatrix = 1 0 0 0 1 0 0 0 1\nOffset = " << g.origin_mm[0] << ' ' << g.origin_mm[1] << ' '
      << g.origin_mm[2] << "\nElementSpacing = " << g.spacing_mm[0] << ' ' << g.spacing_mm[1] << ' ' << g.spacing_mm[2]
      << "\nDimSize = " << g.dims[0] << ' ' << g.dims[1] << ' ' << g.dims[2]
      << "\nElementType = MET_UCHAR\nElementDataFile = LOCAL\n";
  }
  return s.str();
}

void write_all(int fd, const void* data, size_t n, const std::string& path) {
  const char* p = static_cast<const char*>(data);
  while (n > 0) {
    const ssize_t w = ::write(fd, p, n);
    if (w < 0 && errno == EINTR) continue;
    if (w <= 0) throw InputError("cannot write " + path + ": " + std::strerror(w < 0 ? errno : ENOSPC));
    p += w;
    n -= size_t(w);
  }
}

}  // namespace

std::string slab_read_refusal(const std::string& path, const ReadOptions& opt) { return slab_refusal(path, opt, nullptr); }

SlabFile::SlabFile(const std::string& path, const ReadOptions& opt) : path_(path), data_path_(path) {
  std::error_code ec;
  if (!fs::exists(path, ec)) throw InputError("input file not found: " + path);
  if (::access(path.c_str(), R_OK) != 0) throw InputError("cannot read " + path + ": " + std::strerror(errno));
  allow_nonfinite_ = opt.allow_nonfinite;
  if (opt.raw) {
    check_raw_file(path, *opt.raw);
    geo_.dims = opt.raw->dims;
    geo_.spacing_mm = opt.raw->spacing_mm;
    type_ = opt.raw->type;
    swap_ = opt.raw->big_endian == host_is_little_endian();
    offset_ = opt.raw->header_bytes;
  } else {
    VolumeHeader h;
    const std::string why = slab_refusal(path, opt, &h);
    if (!why.empty()) throw InputError("input " + path + " cannot be read by slabs: " + why);
    geo_.dims = h.dims;
    geo_.spacing_mm = h.spacing_mm;
    geo_.origin_mm = h.origin_mm;
    type_ = h.type;
    swap_ = h.type_bytes > 1 && h.big_endian == host_is_little_endian();
    if (!h.data_file.empty())
      data_path_ = (fs::path(h.data_file).is_absolute() ? fs::path(h.data_file) : fs::path(path).parent_path() / h.data_file).string();
    const uint64_t size = fs::file_size(data_path_, ec);
    if (ec) throw InputError("cannot read " + data_path_ + ": " + ec.message());
    offset_ = h.data_at_end ? size - h.expected_bytes : h.data_offset;
  }
  if (opt.spacing_mm) {
    for (double s : *opt.spacing_mm)
      if (!(s > 0)) throw InputError("spacing override for " + path + " must be positive, got " + std::to_string(s));
    geo_.spacing_mm = *opt.spacing_mm;
  }
}

template <class F>
void SlabFile::with_slab(int64_t z0, int64_t z1, F&& f) const {
  if (z0 < 0 || z1 > geo_.dims[2] || z1 < z0)
    throw std::logic_error("SlabFile: slices [" + std::to_string(z0) + ", " + std::to_string(z1) + ") of " + path_);
  const uint64_t width = uint64_t(voxel_type_bytes(type_)), slice = uint64_t(geo_.slice_voxels()) * width;
  const uint64_t begin = offset_ + uint64_t(z0) * slice, len = uint64_t(z1 - z0) * slice;
  if (len == 0) return;
  static const uint64_t page = uint64_t(::sysconf(_SC_PAGESIZE));
  const uint64_t start = begin / page * page, lead = begin - start;
  Fd fd(data_path_);
  void* m = ::mmap(nullptr, size_t(len + lead), PROT_READ, MAP_SHARED, fd.get(), off_t(start));
  if (m == MAP_FAILED) throw InputError("cannot map " + data_path_ + ": " + std::strerror(errno));
  ::madvise(m, size_t(len + lead), MADV_SEQUENTIAL);
  struct Unmap {
    void* p;
    size_t n;
    ~Unmap() { ::munmap(p, n); }
  } unmap{m, size_t(len + lead)};
  f(static_cast<const uint8_t*>(m) + lead, int64_t(len / width));
}

namespace {

// Reads stored voxels of type T (byte-swapped when asked) into out[i] = conv(value).
template <class T, class Out, class Conv>
void convert(const uint8_t* src, int64_t n, bool swap, Out* out, Conv conv) {
#pragma omp parallel for schedule(static)
  for (int64_t i = 0; i < n; ++i) {
    T v;
    std::memcpy(&v, src + i * int64_t(sizeof(T)), sizeof(T));
    if (swap) swap_bytes(&v, 1, int(sizeof(T)));
    out[i] = conv(v);
  }
}

template <class Out, class Conv>
void convert_any(VoxelType t, const uint8_t* src, int64_t n, bool swap, Out* out, Conv conv) {
  switch (t) {
    case VoxelType::u8: return convert<uint8_t>(src, n, false, out, conv);
    case VoxelType::u16: return convert<uint16_t>(src, n, swap, out, conv);
    case VoxelType::i16: return convert<int16_t>(src, n, swap, out, conv);
    case VoxelType::f32: return convert<float>(src, n, swap, out, conv);
  }
}

}  // namespace

VolumeF SlabFile::read_float(int64_t z0, int64_t z1) const {
  VolumeF out;
  read_float(z0, z1, out);
  return out;
}

void SlabFile::read_float(int64_t z0, int64_t z1, VolumeF& out) const {
  shape_slab(out, geo_, z0, z1);
  const bool nan_inf = allow_nonfinite_;
  with_slab(z0, z1, [&](const uint8_t* src, int64_t n) {
    convert_any(type_, src, n, swap_, out.data(), [nan_inf](auto v) {
      const float f = float(v);
      return nan_inf && std::isinf(f) ? std::numeric_limits<float>::quiet_NaN() : f;
    });
  });
}

Mask SlabFile::read_mask(int64_t z0, int64_t z1) const {
  Mask out;
  read_mask(z0, z1, out);
  return out;
}

void SlabFile::read_mask(int64_t z0, int64_t z1, Mask& out) const {
  shape_slab(out, geo_, z0, z1);
  with_slab(z0, z1, [&](const uint8_t* src, int64_t n) {
    convert_any(type_, src, n, swap_, out.data(), [](auto v) { return uint8_t(v != 0); });
  });
}

void SlabFile::check_finite() const {
  if (type_ != VoxelType::f32) return;
  NonFinite nf;
  const int64_t step = std::max<int64_t>(1, (int64_t(64) << 20) / std::max<int64_t>(1, geo_.slice_voxels() * 4));
  for (int64_t z = 0; z < geo_.dims[2]; z += step)
    with_slab(z, std::min(geo_.dims[2], z + step), [&](const uint8_t* src, int64_t n) {
      int64_t nan = 0, pos = 0, neg = 0;
#pragma omp parallel for schedule(static) reduction(+ : nan, pos, neg)
      for (int64_t i = 0; i < n; ++i) {
        float x;
        std::memcpy(&x, src + 4 * i, 4);
        if (swap_) swap_bytes(&x, 1, 4);
        if (x != x) ++nan;
        else if (x == std::numeric_limits<float>::infinity()) ++pos;
        else if (x == -std::numeric_limits<float>::infinity()) ++neg;
      }
      nf.nan += nan, nf.pos_inf += pos, nf.neg_inf += neg;
    });
  if (nf.total() > 0 && !allow_nonfinite_)
    throw InputError("input " + path_ + " has " + nf.text() + " of " + std::to_string(geo_.voxels()) +
                     "; pass --allow-nonfinite to accept them (they are then treated as NaN: never air, left out of "
                     "histograms and statistics)");
}

std::string SlabFile::sha256() const {
  Sha256 h;
  const int64_t step = std::max<int64_t>(1, (int64_t(64) << 20) / std::max<int64_t>(1, geo_.slice_voxels() * voxel_type_bytes(type_)));
  std::vector<uint8_t> buf;
  for (int64_t z = 0; z < geo_.dims[2]; z += step)
    with_slab(z, std::min(geo_.dims[2], z + step), [&](const uint8_t* src, int64_t n) {
      const size_t bytes = size_t(n) * size_t(voxel_type_bytes(type_));
      if (!swap_) return h.update(src, bytes);
      buf.assign(src, src + bytes);
      swap_bytes(buf.data(), size_t(n), voxel_type_bytes(type_));
      h.update(buf.data(), bytes);
    });
  return h.hex();
}

uint64_t default_memory_limit() { return memory_budget_bytes() / 2; }

uint64_t parse_memory_limit(const std::string& text, const std::string& option) {
  auto bad = [&] {
    return InputError(option + " '" + text + "' is not a memory size; give bytes or a number with K, M, G or T (e.g. 12G)");
  };
  char* end = nullptr;
  errno = 0;
  const double v = std::strtod(text.c_str(), &end);
  if (end == text.c_str() || errno || !std::isfinite(v) || v <= 0) throw bad();
  std::string unit(end);
  for (auto& ch : unit) ch = char(std::toupper(static_cast<unsigned char>(ch)));
  double scale = 1;
  if (unit.empty() || unit == "B") scale = 1;
  else if (unit[0] == 'K') scale = 1024.0;
  else if (unit[0] == 'M') scale = 1024.0 * 1024;
  else if (unit[0] == 'G') scale = 1024.0 * 1024 * 1024;
  else if (unit[0] == 'T') scale = 1024.0 * 1024 * 1024 * 1024;
  else throw bad();
  if (unit.size() > 1 && unit.substr(1) != "B" && unit.substr(1) != "IB") throw bad();
  const double bytes = v * scale;
  if (!(bytes >= 1) || bytes > 1.8e19) throw bad();
  return uint64_t(bytes);
}

bool volume_size_from_header(const std::string& path, const ReadOptions& opt, Geometry& g, VoxelType& type) {
  if (opt.raw) {
    g.dims = opt.raw->dims;
    type = opt.raw->type;
    return true;
  }
  if (!has_checked_header(path)) return false;
  const VolumeHeader h = check_volume_file(path, false);
  g.dims = h.dims;
  g.spacing_mm = h.spacing_mm;
  type = h.type;
  return true;
}

std::string bytes_text(uint64_t bytes) {
  std::ostringstream s;
  s << bytes << " bytes (" << (bytes + (uint64_t(1) << 19)) / (uint64_t(1) << 20) << " MiB)";
  return s.str();
}

std::string size_text(const Geometry& g, VoxelType type) {
  std::ostringstream s;
  s << g.dims[0] << " x " << g.dims[1] << " x " << g.dims[2] << " voxels of " << voxel_type_name(type) << ", "
    << bytes_text(saturating_product({uint64_t(g.voxels()), uint64_t(voxel_type_bytes(type))}));
  return s.str();
}

void check_slab_output(const std::string& path, const std::string& option) {
  const std::string e = lower_extension(path);
  if (e != ".mha" && e != ".nrrd")
    throw InputError(option + " " + path + ": a mask written by slabs is .mha or .nrrd (uncompressed), not '" + e + "'");
  check_writable(path);
}

SlabMaskWriter::SlabMaskWriter(const std::string& path, const Geometry& g) : out_(path), geo_(g) {
  check_slab_output(path, "output");
  const std::string head = header_text(g, lower_extension(path) == ".nrrd");
  const uint64_t total = head.size() + uint64_t(g.voxels());
  if (free_bytes_at(out_.tmp_path()) < total)
    throw InputError("cannot write " + path + ": No space left on device (" + std::to_string(total) + " bytes needed, " +
                     std::to_string(free_bytes_at(out_.tmp_path())) + " bytes free)");
  fd_ = ::open(out_.tmp_path().c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd_ < 0) throw InputError("cannot write " + path + ": " + std::strerror(errno));
  write_all(fd_, head.data(), head.size(), path);
  bytes_ = head.size();
}

SlabMaskWriter::~SlabMaskWriter() {
  if (fd_ >= 0) ::close(fd_);
}

void SlabMaskWriter::write(const uint8_t* slices, int64_t nslices) {
  if (fd_ < 0 || nslices < 0 || z_ + nslices > geo_.dims[2])
    throw std::logic_error("SlabMaskWriter: slices past the end of " + out_.final_path());
  const size_t n = size_t(nslices * geo_.slice_voxels());
  write_all(fd_, slices, n, out_.final_path());
  bytes_ += n;
  z_ += nslices;
}

void SlabMaskWriter::commit() {
  if (z_ != geo_.dims[2])
    throw std::logic_error("SlabMaskWriter: " + std::to_string(z_) + " of " + std::to_string(geo_.dims[2]) +
                           " slices written to " + out_.final_path());
  const int fd = fd_;
  fd_ = -1;
  if (::close(fd) != 0) throw InputError("cannot write " + out_.final_path() + ": " + std::strerror(errno));
  out_.commit(bytes_);
}

}  // namespace pb
