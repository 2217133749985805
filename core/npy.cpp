// NumPy .npy reading and writing (core/npy.hpp): header dict parsing, dtype and byte order, arrays
// of 1-8 axes as float32, volumes as AnyVolume.
#include "core/npy.hpp"

#include <fcntl.h>
#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <cctype>
#include <cerrno>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "core/byteorder.hpp"
#include "core/error.hpp"
#include "core/io.hpp"
#include "core/memory.hpp"

namespace fs = std::filesystem;

namespace pb {
namespace {

std::function<void(const std::string&)>& read_note() {
  static std::function<void(const std::string&)> sink;
  return sink;
}

constexpr uint64_t kMaxHeaderBytes = uint64_t(1) << 20;  // numpy writes < 100; 1 MiB is absurd already
constexpr char kMagic[] = "\x93NUMPY";

std::string printable(std::string_view s, size_t max = 60) {
  std::string out;
  for (char c : s.substr(0, max)) out += std::isprint(static_cast<unsigned char>(c)) ? c : '?';
  if (s.size() > max) out += "...";
  return out;
}

// A cursor over the header dict literal: {'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), }
struct DictReader {
  std::string_view s;
  size_t i = 0;
  const std::string& path;

  [[noreturn]] void fail(const std::string& what) const {
    throw InputError("npy file " + path + ": header dict: " + what + " at byte " + std::to_string(i) + " of '" +
                     printable(s, 200) + "'");
  }
  void ws() {
    while (i < s.size() && (s[i] == ' ' || s[i] == '\t' || s[i] == '\n' || s[i] == '\r')) ++i;
  }
  bool eat(char c) {
    ws();
    if (i < s.size() && s[i] == c) {
      ++i;
      return true;
    }
    return false;
  }
  void expect(char c) {
    if (!eat(c)) fail(std::string("expected '") + c + "'");
  }
  bool at(char c) {
    ws();
    return i < s.size() && s[i] == c;
  }
  std::string str() {
    ws();
    if (i >= s.size() || (s[i] != '\'' && s[i] != '"')) fail("expected a quoted string");
    const char q = s[i++];
    const size_t b = i;
    while (i < s.size() && s[i] != q) {
      if (s[i] == '\\') fail("escapes are not supported in header strings");
      ++i;
    }
    if (i >= s.size()) fail("unterminated string");
    return std::string(s.substr(b, i++ - b));
  }
  bool boolean() {
    ws();
    if (s.substr(i, 4) == "True") return i += 4, true;
    if (s.substr(i, 5) == "False") return i += 5, false;
    fail("fortran_order must be True or False");
  }
  int64_t integer() {
    ws();
    const size_t b = i;
    int64_t v = 0;
    while (i < s.size() && std::isdigit(static_cast<unsigned char>(s[i]))) {
      if (v > (int64_t(1) << 50)) fail("shape value too large: '" + printable(s.substr(b, 30)) + "'");
      v = v * 10 + (s[i++] - '0');
    }
    if (i == b) fail("shape values must be non-negative integers");
    if (i < s.size() && (s[i] == 'L' || s[i] == 'l')) ++i;  // Python 2 long suffix
    return v;
  }
  // skips a value we do not use (nested brackets, strings)
  void skip_value() {
    ws();
    int depth = 0;
    while (i < s.size()) {
      const char c = s[i];
      if (c == '\'' || c == '"') {
        str();
        continue;
      }
      if (c == '(' || c == '[' || c == '{') ++depth;
      if (c == ')' || c == ']' || c == '}') {
        if (depth == 0) return;
        --depth;
      }
      if (c == ',' && depth == 0) return;
      ++i;
    }
  }
};

void set_type(NpyHeader& h, const std::string& path) {
  const std::string& d = h.descr;
  auto refuse = [&](const std::string& why) -> void {
    throw InputError("npy file " + path + ": descr '" + printable(d) + "' " + why +
                     " (read: |u1, |b1, u2, i2, f4, f8 (as float32) little or big endian; e.g. "
                     "arr.astype(np.float32) or arr.astype(np.uint16) before np.save)");
  };
  if (d.size() < 3) refuse("is not a simple dtype");
  const char order = d[0];
  const std::string code = d.substr(1);
  if (order != '<' && order != '>' && order != '|' && order != '=') refuse("has an unknown byte order");
  if (code == "u1") h.type = VoxelType::u8;
  else if (code == "b1") h.type = VoxelType::u8;
  else if (code == "u2") h.type = VoxelType::u16;
  else if (code == "i2") h.type = VoxelType::i16;
  else if (code == "f4") h.type = VoxelType::f32;
  else if (code == "f8") h.type = VoxelType::f32, h.float64 = true;
  else refuse("is not a voxel type porebench reads");
  h.item_bytes = h.float64 ? 8 : voxel_type_bytes(h.type);
  if (h.item_bytes > 1 && order == '|') refuse("has no byte order for a multi-byte type");
  h.big_endian = order == '>' || (order == '=' && !host_is_little_endian());
}

}  // namespace

bool is_npy_path(const std::string& path) { return lower_extension(path) == ".npy"; }

namespace {

// Magic, version, header length and the dict ('descr', 'fortran_order', 'shape' up to 8 axes).
NpyHeader parse_header_dict(std::string_view head, const std::string& path) {
  NpyHeader h;
  if (head.size() < 10)
    throw InputError("npy file " + path + " is truncated: " + std::to_string(head.size()) +
                     " bytes, the magic, version and header length need 10");
  if (head.substr(0, 6) != std::string_view(kMagic, 6))
    throw InputError("npy file " + path + ": magic is '" + printable(head.substr(0, 6)) + "', expected '\\x93NUMPY'");
  h.major = static_cast<unsigned char>(head[6]);
  h.minor = static_cast<unsigned char>(head[7]);
  if ((h.major != 1 && h.major != 2 && h.major != 3) || h.minor != 0)
    throw InputError("npy file " + path + ": format version " + std::to_string(h.major) + "." +
                     std::to_string(h.minor) + " is not read (1.0, 2.0, 3.0)");
  uint64_t len = 0, prefix = 0;
  auto byte = [&](size_t k) { return uint64_t(static_cast<unsigned char>(head[k])); };
  if (h.major == 1) {
    len = byte(8) | byte(9) << 8;
    prefix = 10;
  } else {
    if (head.size() < 12)
      throw InputError("npy file " + path + " is truncated: " + std::to_string(head.size()) +
                       " bytes, a version " + std::to_string(h.major) + ".0 header length needs 12");
    len = byte(8) | byte(9) << 8 | byte(10) << 16 | byte(11) << 24;
    prefix = 12;
  }
  if (len > kMaxHeaderBytes)
    throw InputError("npy file " + path + ": header length " + std::to_string(len) + " bytes is absurd (at most " +
                     std::to_string(kMaxHeaderBytes) + ")");
  if (head.size() < prefix + len)
    throw InputError("npy file " + path + " is truncated: header length " + std::to_string(len) + " needs " +
                     std::to_string(prefix + len) + " bytes, found " + std::to_string(head.size()));
  h.data_offset = prefix + len;
  const std::string_view dict = head.substr(prefix, len);
  if (h.major < 3)
    for (char c : dict)
      if (static_cast<unsigned char>(c) > 127)
        throw InputError("npy file " + path + ": header of a version " + std::to_string(h.major) +
                         ".0 file holds a non-ASCII byte (UTF-8 is for version 3.0)");

  DictReader r{dict, 0, path};
  bool have_descr = false, have_order = false, have_shape = false;
  r.expect('{');
  while (!r.at('}')) {
    const std::string key = r.str();
    r.expect(':');
    if (key == "descr") {
      r.ws();
      if (r.at('[')) r.fail("descr is a structured dtype (a list); save a plain array");
      h.descr = r.str();
      have_descr = true;
    } else if (key == "fortran_order") {
      h.fortran_order = r.boolean();
      have_order = true;
    } else if (key == "shape") {
      r.expect('(');
      while (!r.at(')')) {
        if (h.shape.size() >= 8) r.fail("shape has too many axes");
        h.shape.push_back(r.integer());
        if (!r.eat(',')) break;
      }
      r.expect(')');
      have_shape = true;
    } else {
      r.fail("unknown key '" + printable(key) + "'");
    }
    if (!r.eat(',')) break;
  }
  r.expect('}');
  if (!have_descr) throw InputError("npy file " + path + ": header dict has no 'descr'");
  if (!have_order) throw InputError("npy file " + path + ": header dict has no 'fortran_order'");
  if (!have_shape) throw InputError("npy file " + path + ": header dict has no 'shape'");
  set_type(h, path);
  return h;
}

std::string shape_text(const std::vector<int64_t>& shape) {
  std::string t = "(";
  for (size_t k = 0; k < shape.size(); ++k) t += (k ? ", " : "") + std::to_string(shape[k]);
  return t + ")";
}

// The header of a file, read from its first bytes, and its size (checked against the header in both
// directions by `expected`).
struct OpenedNpy {
  NpyHeader h;
  uint64_t size = 0;
  std::ifstream in;
};

OpenedNpy open_npy(const std::string& path, NpyHeader (*parse)(std::string_view, const std::string&)) {
  OpenedNpy o;
  std::error_code ec;
  o.size = fs::file_size(path, ec);
  if (ec) throw InputError("cannot read " + path + ": " + ec.message());
  o.in.open(path, std::ios::binary);
  if (!o.in) throw InputError("cannot read " + path + ": " + std::strerror(errno));
  // the whole header, whatever its stated length, is within the first 12 + kMaxHeaderBytes bytes
  std::string head(size_t(std::min<uint64_t>(o.size, 12 + kMaxHeaderBytes)), '\0');
  o.in.read(head.data(), std::streamsize(head.size()));
  if (!o.in) throw InputError("cannot read " + path + ": short read");
  o.h = parse(head, path);
  const uint64_t expected = o.h.expected_bytes > UINT64_MAX - o.h.data_offset ? UINT64_MAX : o.h.data_offset + o.h.expected_bytes;
  if (o.size != expected) {
    std::ostringstream t;
    t << "npy file " << path << (o.size < expected ? " is truncated" : " is larger than its header says") << ": expected "
      << expected << " bytes (header " << o.h.data_offset << " + shape " << shape_text(o.h.shape) << " x " << o.h.item_bytes
      << " bytes '" << o.h.descr << "'), found " << o.size;
    throw InputError(t.str());
  }
  o.in.seekg(std::streamoff(o.h.data_offset));
  return o;
}

// The array header: any number of axes from 1 to 8 (0 allowed: an empty array), its byte count.
NpyHeader parse_array_header(std::string_view head, const std::string& path) {
  NpyHeader h = parse_header_dict(head, path);
  if (h.shape.empty()) throw InputError("npy file " + path + ": shape () is a scalar, not an array");
  uint64_t bytes = uint64_t(h.item_bytes);
  for (auto n : h.shape) bytes = saturating_product({bytes, uint64_t(n)});
  h.expected_bytes = bytes;
  return h;
}

}  // namespace

NpyHeader parse_npy_header(std::string_view head, const std::string& path) {
  NpyHeader h = parse_header_dict(head, path);
  const std::string text = shape_text(h.shape);
  if (h.shape.size() != 2 && h.shape.size() != 3)
    throw InputError("npy file " + path + ": shape " + text +
                     " has " + std::to_string(h.shape.size()) + " axes; a volume is (z, y, x) and a slice (y, x)");
  for (int64_t s : h.shape)
    if (s < 1 || s > (int64_t(1) << 31) - 1)
      throw InputError("npy file " + path + ": shape " + text + " holds " + std::to_string(s) +
                       "; every axis needs 1 to 2^31-1 voxels");
  const size_t n = h.shape.size();
  h.dims = {h.shape[n - 1], h.shape[n - 2], n == 3 ? h.shape[0] : 1};
  h.expected_bytes = saturating_product(
      {uint64_t(h.dims[0]), uint64_t(h.dims[1]), uint64_t(h.dims[2]), uint64_t(h.item_bytes)});
  return h;
}

AnyVolume read_npy(const std::string& path) {
  OpenedNpy o = open_npy(path, parse_npy_header);
  const NpyHeader& h = o.h;
  std::ifstream& in = o.in;
  check_memory(h.float64 ? h.expected_bytes / 2 + (size_t(8) << 20) : h.expected_bytes, "npy file " + path);
  Geometry g;
  g.dims = h.dims;
  AnyVolume v;
  switch (h.type) {
    case VoxelType::u8: v = AnyVolume(Image<uint8_t>(g, Uninitialized{})); break;
    case VoxelType::u16: v = AnyVolume(Image<uint16_t>(g, Uninitialized{})); break;
    case VoxelType::i16: v = AnyVolume(Image<int16_t>(g, Uninitialized{})); break;
    case VoxelType::f32: v = AnyVolume(Image<float>(g, Uninitialized{})); break;
  }
  const bool swap = h.big_endian == host_is_little_endian();
  const int w = h.item_bytes;        // as stored
  const int wv = h.float64 ? 4 : w;  // as held
  char* dst = static_cast<char*>(v.raw());
  // Reads k stored items into `buf` and writes them as held to `out` (swapped, float64 narrowed).
  std::vector<char> buf;
  Float64Narrowing narrowing;
  auto read_items = [&](char* out, size_t k) {
    char* target = h.float64 ? (buf.resize(k * 8), buf.data()) : out;
    in.read(target, std::streamsize(k * size_t(w)));
    if (!in) throw InputError("cannot read " + path + ": short read");
    if (swap) swap_bytes(target, k, w);
    if (h.float64)
      narrowing.add(narrow_float64(reinterpret_cast<const double*>(target), int64_t(k), reinterpret_cast<float*>(out),
                                   "npy file " + path));
  };
  if (!h.fortran_order) {
    const size_t total = size_t(g.voxels()), step = h.float64 ? size_t(1) << 20 : total;
    for (size_t i = 0; i < total; i += step) read_items(dst + i * size_t(wv), std::min(step, total - i));
  } else {
    // Fortran order: element [z, y, x] at z + Z * (y + Y * x). One x-plane (Y * Z items) at a time.
    const int64_t X = g.dims[0], Y = g.dims[1], Z = g.dims[2];
    std::vector<char> plane(size_t(Y * Z * wv));
    for (int64_t x = 0; x < X; ++x) {
      read_items(plane.data(), size_t(Y * Z));
      for (int64_t y = 0; y < Y; ++y)
        for (int64_t z = 0; z < Z; ++z)
          std::memcpy(dst + ((z * Y + y) * X + x) * wv, plane.data() + (z + Z * y) * wv, size_t(wv));
    }
  }
  const std::string note = narrowing.note("npy file " + path + " ('" + h.descr + "', read as float32)");
  if (!note.empty() && read_note()) read_note()(note);
  return v;
}

NpyArray read_npy_array(const std::string& path) {
  OpenedNpy o = open_npy(path, parse_array_header);
  const NpyHeader& h = o.h;
  if (h.fortran_order)
    throw InputError("npy file " + path + ": fortran_order True; arrays other than volumes are read in C order (np.ascontiguousarray before np.save)");
  uint64_t n = 1;
  for (int64_t a : h.shape) n *= uint64_t(a);  // bounded: expected_bytes equals the file's size
  check_memory(n * (sizeof(float) + uint64_t(h.item_bytes)), "npy file " + path);
  NpyArray r;
  r.shape = h.shape;
  r.data.resize(size_t(n));
  std::vector<char> raw(size_t(n) * size_t(h.item_bytes));
  o.in.read(raw.data(), std::streamsize(raw.size()));
  if (!o.in) throw InputError("cannot read " + path + ": short read");
  if (h.big_endian == host_is_little_endian()) swap_bytes(raw.data(), size_t(n), h.item_bytes);
  auto convert = [&](auto zero) {
    using T = decltype(zero);
    for (size_t i = 0; i < size_t(n); ++i) {
      T v;
      std::memcpy(&v, raw.data() + i * sizeof(T), sizeof(T));
      r.data[i] = float(v);
    }
  };
  if (h.float64) {
    const std::string note = narrow_float64(reinterpret_cast<const double*>(raw.data()), int64_t(n), r.data.data(), "npy file " + path)
                                 .note("npy file " + path + " ('" + h.descr + "', read as float32)");
    if (!note.empty() && read_note()) read_note()(note);
  } else if (h.type == VoxelType::u8) {
    convert(uint8_t{});
  } else if (h.type == VoxelType::u16) {
    convert(uint16_t{});
  } else if (h.type == VoxelType::i16) {
    convert(int16_t{});
  } else {
    convert(float{});
  }
  return r;
}

void set_read_note(std::function<void(const std::string&)> sink) { read_note() = std::move(sink); }

void Float64Narrowing::add(const Float64Narrowing& o) {
  values += o.values;
  rounded += o.rounded;
  max_rel_change = std::max(max_rel_change, o.max_rel_change);
}

std::string Float64Narrowing::note(const std::string& what) const {
  if (rounded == 0) return "";
  std::ostringstream s;
  s << what << ": " << rounded << " of " << values
    << " float64 values are not exactly float32 and were rounded (largest relative change " << max_rel_change
    << "; float32 holds about 7 significant digits)";
  return s.str();
}

Float64Narrowing narrow_float64(const double* src, int64_t n, float* dst, const std::string& what) {
  Float64Narrowing r;
  r.values = n;
  int64_t rounded = 0, overflow_at = -1;
  double max_rel = 0;
#pragma omp parallel for schedule(static) reduction(+ : rounded) reduction(max : max_rel, overflow_at)
  for (int64_t i = 0; i < n; ++i) {
    const double d = src[i];
    const float f = float(d);
    dst[i] = f;
    if (!std::isfinite(d)) continue;
    if (!std::isfinite(f)) overflow_at = std::max(overflow_at, i);
    else if (double(f) != d) ++rounded, max_rel = std::max(max_rel, std::abs(double(f) - d) / std::abs(d));
  }
  if (overflow_at >= 0) {
    std::ostringstream s;
    s.precision(17);
    s << what << ": float64 value " << src[overflow_at]
      << " is beyond float32's range (+-3.4e38); porebench holds voxels as float32";
    throw InputError(s.str());
  }
  r.rounded = rounded;
  r.max_rel_change = max_rel;
  return r;
}

void write_npy(const void* data, VoxelType type, const Geometry& g, const std::string& path) {
  write_npy_array(data, type, {g.dims[2], g.dims[1], g.dims[0]}, path);
}

void write_npy_array(const void* data, VoxelType type, const std::vector<int64_t>& shape, const std::string& path) {
  const char* descr = type == VoxelType::u8 ? "|u1" : type == VoxelType::u16 ? "<u2" : type == VoxelType::i16 ? "<i2" : "<f4";
  // Python's tuple literal: (n,) for one axis, (a, b) for more
  const std::string text = shape_text(shape);
  std::string dict = std::string("{'descr': '") + descr + "', 'fortran_order': False, 'shape': " +
                     (shape.size() == 1 ? text.substr(0, text.size() - 1) + ",)" : text) + ", }";
  // numpy pads with spaces so that the voxels start on a multiple of 64 bytes, ending with '\n'
  const size_t total = (10 + dict.size() + 1 + 63) / 64 * 64;
  dict.append(total - 10 - dict.size() - 1, ' ');
  dict += '\n';
  std::string head(kMagic, 6);
  head += char(1);
  head += char(0);
  head += char(dict.size() & 0xff);
  head += char(dict.size() >> 8);
  head += dict;
  const int w = voxel_type_bytes(type);
  uint64_t bytes = uint64_t(w);
  for (int64_t a : shape) bytes *= uint64_t(a);
  AtomicOutput out(path);
  const uint64_t free_b = free_bytes_at(out.tmp_path());
  if (free_b < bytes + head.size())
    throw InputError("cannot write " + path + ": No space left on device (" + std::to_string(bytes + head.size()) +
                     " bytes, " + std::to_string(free_b) + " bytes free)");
  const int fd = ::open(out.tmp_path().c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd < 0) throw InputError("cannot write " + path + ": " + std::strerror(errno));
  auto put = [&](const char* p, size_t n) {
    while (n > 0) {
      const ssize_t k = ::write(fd, p, n);
      if (k < 0 && errno == EINTR) continue;
      if (k <= 0) {
        const int err = k < 0 ? errno : ENOSPC;
        ::close(fd);
        throw InputError("cannot write " + path + ": " + std::strerror(err));
      }
      p += k;
      n -= size_t(k);
    }
  };
  put(head.data(), head.size());
  const char* src = static_cast<const char*>(data);
  if (host_is_little_endian() || w == 1) {
    put(src, size_t(bytes));
  } else {
    std::vector<char> block(size_t(1) << 20);
    for (uint64_t done = 0; done < bytes;) {
      const size_t n = size_t(std::min<uint64_t>(block.size(), bytes - done));
      std::memcpy(block.data(), src + done, n);
      swap_bytes(block.data(), n / size_t(w), w);
      put(block.data(), n);
      done += n;
    }
  }
  if (::close(fd) != 0) throw InputError("cannot write " + path + ": " + std::strerror(errno));
  out.commit(head.size() + bytes);
}

bool adopt_geometry(AnyVolume& v, const Geometry& from) {
  if (v.geometry().dims != from.dims) return false;
  v.visit([&](auto& img) { img.set_geometry_keep_dims(from); });
  return true;
}

}  // namespace pb
