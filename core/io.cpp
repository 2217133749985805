// Volume input and output (core/io.hpp) outside ITK: format dispatch, raw and .npy files, the
// non-finite check, atomic writes (AtomicOutput), folder locks (FolderLock, WaitLock) and the
// clean-up of killed writers' temporaries. ITK formats are read and written in core/io_itk.cpp.
#include "core/io.hpp"

#include "core/io_atomic.hpp"

#include <fcntl.h>
#include <signal.h>
#include <sys/file.h>
#include <sys/stat.h>
#include <sys/statvfs.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cstdio>
#include <cmath>
#include <cstring>
#include <ctime>
#include <limits>
#include <filesystem>
#include <fstream>
#include <regex>
#include <sstream>

#include "core/byteorder.hpp"
#include "core/dicom.hpp"
#include "core/error.hpp"
#include "core/io_header.hpp"
#include "core/memory.hpp"
#include "core/npy.hpp"

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

bool dicom_file(const fs::path& p) {
  if (lower_extension(p.string()) == ".dcm") return true;
  std::ifstream f(p, std::ios::binary);
  char mark[4] = {};
  return f.seekg(128) && f.read(mark, 4) && std::memcmp(mark, "DICM", 4) == 0;
}

}  // namespace

bool is_dicom(const std::string& path) {
  std::error_code ec;
  if (!fs::is_directory(path, ec)) return fs::is_regular_file(path, ec) && dicom_file(path);
  // A folder: DICOM when its first regular files (by name) are DICOM files; TIFF slices are not.
  std::vector<fs::path> files;
  for (auto it = fs::directory_iterator(path, ec); !ec && it != fs::directory_iterator(); it.increment(ec))
    if (it->is_regular_file(ec) && it->path().filename().string()[0] != '.') files.push_back(it->path());
  std::sort(files.begin(), files.end());
  if (files.empty()) return false;
  for (size_t i = 0; i < std::min<size_t>(files.size(), 3); ++i)
    if (!dicom_file(files[i])) return false;
  return true;
}

bool spacing_unknown(const std::string& path) {
  if (is_dicom(path)) return false;
  std::error_code ec;
  const std::string ext = lower_extension(path);
  return fs::is_directory(path, ec) || ext == ".tif" || ext == ".tiff" || ext == ".raw" || ext == ".npy" || ext.empty();
}

namespace {

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

}  // namespace

uint64_t check_raw_file(const std::string& path, const RawSpec& spec) {
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
  const int width = voxel_type_bytes(spec.type);
  const uint64_t data_bytes =
      saturating_product({uint64_t(spec.dims[0]), uint64_t(spec.dims[1]), uint64_t(spec.dims[2]), uint64_t(width)});
  const uint64_t expected = data_bytes > UINT64_MAX - spec.header_bytes ? UINT64_MAX : spec.header_bytes + data_bytes;
  if (actual != expected) {
    std::ostringstream s;
    s << "raw file " << path << (actual < expected ? " is truncated" : " is larger than its geometry") << ": expected "
      << expected << " bytes (header " << spec.header_bytes << " + " << spec.dims[0] << " x " << spec.dims[1]
      << " x " << spec.dims[2] << " voxels x " << width << " bytes " << voxel_type_name(spec.type) << "), found "
      << actual << "; check the raw dims, voxel type and header bytes";
    throw InputError(s.str());
  }
  return data_bytes;
}

namespace {

AnyVolume read_raw(const std::string& path, const RawSpec& spec) {
  const uint64_t data_bytes = check_raw_file(path, spec);
  Geometry g;
  g.dims = spec.dims;
  g.spacing_mm = spec.spacing_mm;
  const int width = voxel_type_bytes(spec.type);
  check_memory(data_bytes, "raw file " + path);
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError("cannot read " + path + ": " + std::strerror(errno));
  AnyVolume v = allocate(spec.type, g);
  in.seekg(std::streamoff(spec.header_bytes));
  in.read(static_cast<char*>(v.raw()), std::streamsize(v.bytes()));
  if (!in) throw InputError("cannot read " + path + ": short read");
  if (spec.big_endian == host_is_little_endian()) swap_bytes(v.raw(), size_t(g.voxels()), width);
  return v;
}

std::atomic<unsigned> g_tmp_counter{0};

}  // namespace

std::string NonFinite::text() const {
  std::ostringstream s;
  s << total() << " non-finite voxel" << (total() == 1 ? "" : "s") << " (" << nan << " NaN, " << pos_inf << " +Inf, "
    << neg_inf << " -Inf)";
  return s.str();
}

NonFinite count_nonfinite(const AnyVolume& v) {
  NonFinite r;
  if (v.type() != VoxelType::f32) return r;
  const float* d = static_cast<const float*>(v.raw());
  const int64_t n = v.geometry().voxels();
  int64_t nan = 0, pos = 0, neg = 0;
#pragma omp parallel for schedule(static) reduction(+ : nan, pos, neg)
  for (int64_t i = 0; i < n; ++i) {
    const float x = d[i];
    if (x != x) ++nan;
    else if (x == std::numeric_limits<float>::infinity()) ++pos;
    else if (x == -std::numeric_limits<float>::infinity()) ++neg;
  }
  r.nan = nan, r.pos_inf = pos, r.neg_inf = neg;
  return r;
}

AnyVolume read_volume(const std::string& path, const ReadOptions& opt) {
  std::error_code ec;
  if (!fs::exists(path, ec)) throw InputError("input file not found: " + path);
  if (::access(path.c_str(), R_OK) != 0)
    throw InputError("cannot read " + path + ": " + std::strerror(errno));
  AnyVolume v;
  if (opt.raw) {
    v = read_raw(path, *opt.raw);
  } else if (is_dicom(path)) {
    v = detail::itk_read_dicom(path, opt.spacing_mm.has_value());  // refused without its geometry tags (core/dicom.hpp)
  } else if (fs::is_directory(path)) {
    v = detail::itk_read_tiff_folder(path);
  } else {
    const std::string ext = lower_extension(path);
    if (ext == ".raw" || ext == ".bin" || ext == ".vol")
      throw InputError("input " + path + " is a raw file: give its geometry (--raw-dims, --raw-type, ...)");
    if (ext == ".npy") {
      v = read_npy(path);  // no spacing stored: 1 mm unless opt.spacing_mm
    } else {
      if (has_checked_header(path)) check_volume_file(path);  // our header and size checks first
      v = detail::itk_read(path);
    }
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
  const NonFinite nf = count_nonfinite(v);
  if (opt.nonfinite_out) *opt.nonfinite_out = nf;
  if (nf.total() > 0) {
    if (!opt.allow_nonfinite)
      throw InputError("input " + path + " has " + nf.text() + " of " + std::to_string(v.geometry().voxels()) +
                       "; pass --allow-nonfinite to accept them (they are then treated as NaN: never air, left out of "
                       "histograms and statistics)");
    float* d = static_cast<float*>(v.raw());
    const int64_t n = v.geometry().voxels();
#pragma omp parallel for schedule(static)
    for (int64_t i = 0; i < n; ++i)
      if (std::isinf(d[i])) d[i] = std::numeric_limits<float>::quiet_NaN();
  }
  return v;
}

namespace {
void check_output_extension(const std::string& path) {
  const std::string ext = lower_extension(path);
  if (ext == ".mhd" || ext == ".nhdr")
    throw InputError("output " + path + ": detached-header formats are not written; use .mha, .nrrd, .nii or .nii.gz");
  if (ext != ".mha" && ext != ".nrrd" && ext != ".nii" && ext != ".nii.gz" && ext != ".tif" && ext != ".tiff" &&
      ext != ".npy")
    throw InputError("output " + path + ": unsupported extension '" + ext +
                     "' (written: .mha, .nrrd, .nii, .nii.gz; .npy without spacing)");
}
}  // namespace

void check_volume_output(const std::string& path) {
  check_output_extension(path);
  const std::string ext = lower_extension(path);
  if (ext == ".tif" || ext == ".tiff")
    throw InputError("output " + path + ": TIFF stores no z spacing (a volume would read back with 1 mm slices); "
                     "write .mha, .nrrd, .nii or .nii.gz");
  check_writable(path);
}

void write_volume(const void* data, VoxelType type, const Geometry& g, const std::string& path,
                  const WriteOptions& opt) {
  check_output_extension(path);
  check_writable(path);
  for (int i = 0; i < 3; ++i)
    if (g.dims[i] < 1 || g.dims[i] > (int64_t(1) << 31) - 1)
      throw InputError("output " + path + ": cannot write dims " + std::to_string(g.dims[i]) + " along " + "xyz"[i]);
  if (lower_extension(path) == ".npy") return write_npy(data, type, g, path);  // drops spacing and origin
  AtomicOutput out(path);
  // Refuse up front when even the uncompressed voxels cannot fit.
  const uint64_t raw_bytes = saturating_product({uint64_t(g.dims[0]), uint64_t(g.dims[1]), uint64_t(g.dims[2]),
                                                 uint64_t(voxel_type_bytes(type))});
  const uint64_t free_b = free_bytes_at(out.tmp_path());
  if (!opt.compress && free_b < raw_bytes)
    throw InputError("cannot write " + path + ": No space left on device (" + std::to_string(raw_bytes) +
                     " bytes of voxels, " + std::to_string(free_b) + " bytes free)");
  detail::itk_write(data, type, g, out.tmp_path(), opt.compress);
  // ITK does not report every failed write (a full disk leaves a short file): check what was
  // written with our own header and size checks before it gets its final name.
  if (has_checked_header(path)) {
    try {
      const VolumeHeader h = check_volume_file(out.tmp_path());
      if (h.dims[0] != g.dims[0] || h.dims[1] != g.dims[1] || h.dims[2] != g.dims[2])
        throw InputError("the written header has other dims");
    } catch (const InputError& e) {
      const std::string cause = free_bytes_at(out.tmp_path()) == 0 ? "No space left on device" : "the written file is incomplete";
      throw InputError("cannot write " + path + ": " + cause + " (" + e.what() + ")");
    }
    std::error_code ec;
    out.commit(fs::file_size(out.tmp_path(), ec));  // verified above
    return;
  }
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
    f.close();
    if (!f) throw InputError("cannot write " + path + ": " + std::strerror(errno));
  }
  out.commit(header_bytes + v.bytes());
}

void check_writable(const std::string& path) {
  fs::path p(path);
  fs::path dir = p.has_parent_path() ? p.parent_path() : fs::path(".");
  if (!fs::is_directory(dir)) throw InputError("output folder does not exist: " + dir.string() + " (for " + path + ")");
  if (::access(dir.c_str(), W_OK) != 0) throw InputError("output folder is not writable: " + dir.string() + " (for " + path + ")");
  if (fs::is_directory(p)) throw InputError("output " + path + " is a folder, expected a file name");
}

void prepare_output_folder(const std::string& dir) {
  std::error_code ec;
  if (fs::exists(dir, ec) && !fs::is_directory(dir, ec))
    throw InputError("output folder " + dir + " is an existing file; give a folder name (-o)");
  fs::create_directories(dir, ec);
  if (ec) throw InputError("cannot create output folder " + dir + ": " + ec.message());
  if (::access(dir.c_str(), W_OK) != 0)
    throw InputError("output folder " + dir + " is not writable: " + std::strerror(errno));
}

void write_text_atomic(const std::string& path, const std::string& text) {
  AtomicOutput out(path);
  write_text_to(out, text);
  out.commit(text.size());
}

void write_text_to(const AtomicOutput& out, const std::string& text) {
  const std::string& path = out.final_path();
  const int fd = ::open(out.tmp_path().c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd < 0) throw InputError("cannot write " + path + ": " + std::strerror(errno));
  size_t done = 0;
  while (done < text.size()) {
    const ssize_t w = ::write(fd, text.data() + done, text.size() - done);
    if (w < 0 && errno == EINTR) continue;
    if (w <= 0) {
      const int err = w < 0 ? errno : ENOSPC;
      ::close(fd);
      throw InputError("cannot write " + path + ": " + std::strerror(err));
    }
    done += size_t(w);
  }
  if (::close(fd) != 0) throw InputError("cannot write " + path + ": " + std::strerror(errno));
}

namespace {

std::string lock_holder(int fd) {
  std::string holder(512, '\0');
  const ssize_t n = ::pread(fd, holder.data(), holder.size(), 0);
  holder.resize(n > 0 ? size_t(n) : 0);
  while (!holder.empty() && (holder.back() == '\n' || holder.back() == '\0')) holder.pop_back();
  return holder.empty() ? std::string("holder unknown") : holder;
}

void write_lock_holder(int fd, const std::string& command) {
  char host[256] = "?";
  ::gethostname(host, sizeof(host) - 1);
  const std::time_t now = std::time(nullptr);
  char when[32];
  std::strftime(when, sizeof(when), "%Y-%m-%dT%H:%M:%SZ", std::gmtime(&now));
  const std::string rec = "pid " + std::to_string(::getpid()) + " on " + host + ", '" + command + "', since " + when + "\n";
  if (::ftruncate(fd, 0) == 0) {
    const ssize_t w = ::pwrite(fd, rec.data(), rec.size(), 0);
    (void)w;  // the record only helps messages; the lock is what counts
  }
}

// Opens DIR/NAME and takes flock OP|LOCK_NB; returns the fd, or throws naming the holder.
int take_lock(const std::string& dir, const std::string& name, int op, const std::string& busy, const std::string& advice) {
  const std::string path = (fs::path(dir) / name).string();
  const int fd = ::open(path.c_str(), O_RDWR | O_CREAT | O_CLOEXEC, 0644);
  if (fd < 0) throw InputError("cannot lock output folder " + dir + ": " + path + ": " + std::strerror(errno));
  if (::flock(fd, op | LOCK_NB) != 0) {
    const int err = errno;
    const std::string holder = lock_holder(fd);
    ::close(fd);
    if (err == EWOULDBLOCK) throw InputError(busy + " (" + holder + ")" + advice);
    throw InputError("cannot lock output folder " + dir + ": " + std::strerror(err));
  }
  return fd;
}

}  // namespace

FolderLock::FolderLock(const std::string& dir, const std::string& command) : FolderLock(dir, command, 0, 1) {}

FolderLock::FolderLock(const std::string& dir, const std::string& command, int shard_index, int shard_count) {
  prepare_output_folder(dir);
  if (shard_count <= 1) {
    fd_ = take_lock(dir, ".porebench.lock", LOCK_EX,
                    "output folder " + dir + " is in use by another porebench process", "; wait for it to finish, or use another -o");
    write_lock_holder(fd_, command);
    return;
  }
  fd_ = take_lock(dir, ".porebench.lock", LOCK_SH,
                  "output folder " + dir + " is in use by a porebench process that is not a shard of this run",
                  "; wait for it to finish, or use another -o");
  const std::string shard = std::to_string(shard_index + 1) + "-of-" + std::to_string(shard_count);
  try {
    shard_fd_ = take_lock(dir, ".porebench-shard-" + shard + ".lock", LOCK_EX,
                          "shard " + std::to_string(shard_index + 1) + "/" + std::to_string(shard_count) +
                              " of the run in " + dir + " is already running", "");
  } catch (...) {
    ::close(fd_);
    fd_ = -1;
    throw;
  }
  write_lock_holder(shard_fd_, command);
}

bool FolderLock::try_exclusive() {
  if (shard_fd_ < 0) return fd_ >= 0;
  // flock converts a shared lock by dropping it first; if that fails, this shard is about to end.
  if (::flock(fd_, LOCK_EX | LOCK_NB) != 0) return false;
  return true;
}

FolderLock::~FolderLock() {
  if (shard_fd_ >= 0) {
    if (::ftruncate(shard_fd_, 0) != 0) {}
    ::close(shard_fd_);
  }
  if (fd_ >= 0) {
    if (shard_fd_ < 0 && ::ftruncate(fd_, 0) != 0) {}
    ::close(fd_);  // releases the flock
  }
}

WaitLock::WaitLock(const std::string& path) {
  fd_ = ::open(path.c_str(), O_RDWR | O_CREAT | O_CLOEXEC, 0644);
  if (fd_ < 0) throw InputError("cannot lock " + path + ": " + std::strerror(errno));
  while (::flock(fd_, LOCK_EX) != 0) {
    if (errno == EINTR) continue;
    const int err = errno;
    ::close(fd_);
    throw InputError("cannot lock " + path + ": " + std::strerror(err));
  }
}

WaitLock::~WaitLock() {
  if (fd_ >= 0) ::close(fd_);
}

uint64_t free_bytes_at(const std::string& path) {
  struct statvfs s;
  fs::path p(path);
  fs::path dir = p.has_parent_path() ? p.parent_path() : fs::path(".");
  if (::statvfs(dir.c_str(), &s) != 0) return UINT64_MAX;
  return uint64_t(s.f_bavail) * uint64_t(s.f_frsize);
}

int remove_stale_partials(const std::string& dir) {
  static const std::regex partial(R"(^\..*\.partial-(\d+)-\d+(\..*)?$)");
  int removed = 0;
  std::error_code ec;
  if (!fs::is_directory(dir, ec)) return 0;
  std::vector<fs::path> stale;
  for (auto it = fs::recursive_directory_iterator(dir, fs::directory_options::skip_permission_denied, ec);
       !ec && it != fs::recursive_directory_iterator(); it.increment(ec)) {
    const std::string name = it->path().filename().string();
    std::smatch m;
    if (!std::regex_match(name, m, partial)) continue;
    const long pid = std::atol(m[1].str().c_str());
    const bool alive = pid > 0 && (::kill(pid_t(pid), 0) == 0 || errno == EPERM);
    if (!alive) stale.push_back(it->path());
  }
  for (const auto& p : stale) removed += fs::remove(p, ec) ? 1 : 0;
  return removed;
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

void AtomicOutput::commit(uint64_t expected_bytes) {
  const int fd = ::open(tmp_.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) throw InputError("cannot write " + final_ + ": " + std::strerror(errno));
  struct stat st {};
  const bool synced = ::fsync(fd) == 0;
  const int sync_err = errno;
  const bool stated = ::fstat(fd, &st) == 0;
  ::close(fd);
  if (!synced && sync_err != EINVAL && sync_err != EROFS)
    throw InputError("cannot write " + final_ + ": " + std::strerror(sync_err));
  if (!stated) throw InputError("cannot write " + final_ + ": " + std::strerror(errno));
  const uint64_t size = uint64_t(st.st_size);
  const bool known = expected_bytes != kUnknownSize;
  // Without an expected size, a file system left full may have cut the file short: refused.
  const bool full = free_bytes_at(tmp_) == 0;
  if (known ? size != expected_bytes : (size == 0 || full)) {
    const std::string why = full ? "No space left on device" : "short write";
    throw InputError("cannot write " + final_ + ": " + why + " (" + std::to_string(size) + " bytes written" +
                     (known ? " of " + std::to_string(expected_bytes) : std::string()) + ")");
  }
  std::error_code ec;
  fs::rename(tmp_, final_, ec);
  if (ec) throw InputError("cannot write " + final_ + ": " + ec.message());
  done_ = true;
}

}  // namespace pb
