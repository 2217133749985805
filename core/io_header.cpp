// Header and size checks for MetaImage, NRRD and NIfTI-1 files (see io_header.hpp). Field names
// and meanings: MetaIO documentation (Kitware, "MetaIO" file format description), NRRD format
// definition (teem, "NRRD0004"), NIfTI-1 header (nifti1.h, NIfTI Data Format Working Group).
// Limits that are ours: at most 3 dimensions, each dim 1..2^31-1 voxels (common practice, no
// source: ITK stores sizes as unsigned long; the limit keeps the products meaningful).
#include "core/io_header.hpp"

#include <zlib.h>

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <vector>

#include "core/error.hpp"
#include "core/io.hpp"
#include "core/memory.hpp"

namespace fs = std::filesystem;

namespace pb {
namespace {

constexpr size_t kHeadBytes = size_t(1) << 20;  // headers longer than 1 MiB are refused
constexpr int64_t kMaxDim = (int64_t(1) << 31) - 1;

std::string trim(std::string_view s) {
  size_t a = 0, b = s.size();
  while (a < b && (s[a] == ' ' || s[a] == '\t' || s[a] == '\r')) ++a;
  while (b > a && (s[b - 1] == ' ' || s[b - 1] == '\t' || s[b - 1] == '\r')) --b;
  return std::string(s.substr(a, b - a));
}

std::string lower(std::string s) {
  std::transform(s.begin(), s.end(), s.begin(), [](unsigned char c) { return char(std::tolower(c)); });
  return s;
}

// A value quoted for messages: printable, at most 60 characters.
std::string shown(std::string_view v) {
  std::string o;
  for (char c : v.substr(0, 60)) o += (c >= 32 && c < 127) ? c : '?';
  if (v.size() > 60) o += "...";
  return "'" + o + "'";
}

[[noreturn]] void fail(const std::string& path, const std::string& what) {
  throw InputError("input " + path + ": " + what);
}

std::vector<std::string> words(std::string_view s) {
  std::vector<std::string> w;
  std::istringstream in{std::string(s)};
  std::string t;
  while (in >> t) w.push_back(t);
  return w;
}

// A whole number in [lo, hi], digits only (an optional leading '-'); anything else names the field.
int64_t parse_int(const std::string& text, int64_t lo, int64_t hi, const std::string& field,
                  const std::string& path) {
  const std::string t = trim(text);
  size_t i = 0;
  bool neg = false;
  if (i < t.size() && (t[i] == '-' || t[i] == '+')) neg = t[i++] == '-';
  if (i == t.size()) fail(path, field + " = " + shown(t) + " is not a whole number");
  int64_t v = 0;
  for (; i < t.size(); ++i) {
    if (t[i] < '0' || t[i] > '9') fail(path, field + " = " + shown(t) + " is not a whole number");
    if (v > (INT64_MAX - 9) / 10) fail(path, field + " = " + shown(t) + " is out of range [" + std::to_string(lo) + ", " + std::to_string(hi) + "]");
    v = v * 10 + (t[i] - '0');
  }
  if (neg) v = -v;
  if (v < lo || v > hi)
    fail(path, field + " = " + shown(t) + " is out of range [" + std::to_string(lo) + ", " + std::to_string(hi) + "]");
  return v;
}

double parse_real(const std::string& text, const std::string& field, const std::string& path) {
  const std::string t = trim(text);
  if (t.empty()) fail(path, field + " has an empty value");
  char* end = nullptr;
  errno = 0;
  const double v = std::strtod(t.c_str(), &end);
  if (end == t.c_str() || *end != '\0') fail(path, field + " value " + shown(t) + " is not a number");
  return v;
}

void check_spacing(double v, int axis, const std::string& field, const std::string& path) {
  if (!std::isfinite(v) || !(v > 0)) {
    std::ostringstream s;
    s << field << " along " << "xyz"[axis] << " is " << v << "; a voxel size must be a finite positive number (mm)";
    fail(path, s.str());
  }
}

void finish(VolumeHeader& h, const std::string& path) {
  if (h.ndims < 2 || h.ndims > 3) fail(path, "has " + std::to_string(h.ndims) + " dimensions; expected a 2D or 3D image");
  uint64_t n = 1;
  for (int i = 0; i < 3; ++i) n = saturating_product({n, uint64_t(h.dims[i])});
  h.voxels = n;
  h.expected_bytes = saturating_product({n, uint64_t(h.type_bytes)});
}

std::string dims_text(const VolumeHeader& h) {
  std::ostringstream s;
  s << h.dims[0];
  for (int i = 1; i < h.ndims; ++i) s << " x " << h.dims[i];
  s << " voxels of " << voxel_type_name(h.type);
  return s.str();
}

const char* kSupported = " (supported: uint8, uint16, int16, float32)";

// The line of a text header at pos (without its '\n'; last: no line end follows), counted in
// line_no; pos moves past it.
struct HeaderLine {
  std::string_view text;
  bool last;
};
HeaderLine next_line(std::string_view head, size_t& pos, size_t& line_no) {
  size_t eol = head.find('\n', pos);
  const bool last = eol == std::string_view::npos;
  if (last) eol = head.size();
  const std::string_view line = head.substr(pos, eol - pos);
  ++line_no;
  pos = last ? head.size() : eol + 1;
  return {line, last};
}

// The dimension count and sizes of a text header (MetaImage NDims/DimSize, NRRD dimension/sizes),
// with messages in the header's own spelling: "NDims = 4", "dimension: 4".
struct DimFields {
  const char* count;  // "NDims", "dimension"
  const char* sizes;  // "DimSize", "sizes"
  const char* eq;     // " = ", ": "
  const char* what;   // what a 2D or 3D one is: "image", "scalar image"
  const char* missing_count;
  const char* missing_sizes;
};

void parse_dims(const DimFields& f, const std::string* count, const std::string* sizes, VolumeHeader& h, const std::string& path) {
  if (!count) fail(path, f.missing_count);
  h.ndims = int(parse_int(*count, 1, 1 << 20, f.count, path));
  if (h.ndims < 2 || h.ndims > 3)
    fail(path, std::string(f.count) + f.eq + std::to_string(h.ndims) + ": expected a 2D or 3D " + f.what + " (" + f.count + " 2 or 3)");
  if (!sizes) fail(path, f.missing_sizes);
  const auto w = words(*sizes);
  if (int(w.size()) != h.ndims)
    fail(path, std::string(f.sizes) + f.eq + shown(*sizes) + " has " + std::to_string(w.size()) + " values, " + f.count + f.eq +
                   std::to_string(h.ndims));
  for (int i = 0; i < h.ndims; ++i) h.dims[i] = parse_int(w[size_t(i)], 1, kMaxDim, f.sizes, path);
}

}  // namespace

// ---- MetaImage --------------------------------------------------------------------------------

VolumeHeader parse_metaimage_header(std::string_view head, const std::string& path) {
  head = head.substr(0, std::min(head.size(), kHeadBytes));
  VolumeHeader h;
  h.format = "MetaImage";
  std::string ndims, dimsize, spacing, elsize, type, channels = "1", compressed = "False", csize, binary = "True",
                                                    hsize = "0", datafile, objtype, msb = "False", offset;
  bool have_ndims = false, have_dims = false, have_type = false, have_file = false;
  size_t pos = 0, line_no = 0;
  while (pos < head.size()) {
    const auto [line, last] = next_line(head, pos, line_no);
    if (trim(line).empty()) continue;
    const size_t eq = line.find('=');
    if (eq == std::string_view::npos)
      fail(path, "MetaImage header line " + std::to_string(line_no) + " " + shown(line) +
                     " is not 'Key = Value' (not a MetaImage file, or its header is damaged)");
    const std::string key = lower(trim(line.substr(0, eq)));
    const std::string value = trim(line.substr(eq + 1));
    if (key == "ndims") ndims = value, have_ndims = true;
    else if (key == "dimsize") dimsize = value, have_dims = true;
    else if (key == "elementspacing") spacing = value;
    else if (key == "elementsize") elsize = value;
    else if (key == "elementtype") type = value, have_type = true;
    else if (key == "elementnumberofchannels") channels = value;
    else if (key == "compresseddata") compressed = value;
    else if (key == "compresseddatasize") csize = value;
    else if (key == "binarydata") binary = value;
    else if (key == "headersize") hsize = value;
    else if (key == "objecttype") objtype = value;
    else if (key == "binarydatabyteordermsb" || key == "elementbyteordermsb") msb = value;
    else if (key == "offset" || key == "origin" || key == "position") offset = value;
    else if (key == "elementdatafile") {
      datafile = value;
      have_file = true;
      if (last) fail(path, "the header ends without data (no line end after ElementDataFile)");
      h.data_offset = pos;
      break;
    }
  }
  if (!have_file) {
    if (pos >= kHeadBytes) fail(path, "no ElementDataFile line in the first 1 MiB: not a MetaImage header");
    fail(path, "MetaImage header has no ElementDataFile line (a header with no data?)");
  }
  if (!objtype.empty() && lower(objtype) != "image") fail(path, "ObjectType = " + shown(objtype) + " is not Image");
  parse_dims({"NDims", "DimSize", " = ", "image", "MetaImage header has no NDims", "MetaImage header has no DimSize"},
             have_ndims ? &ndims : nullptr, have_dims ? &dimsize : nullptr, h, path);
  const std::string& sp = !spacing.empty() ? spacing : elsize;
  const char* spfield = !spacing.empty() ? "ElementSpacing" : "ElementSize";
  if (!sp.empty()) {
    const auto sw = words(sp);
    if (int(sw.size()) < h.ndims)
      fail(path, std::string(spfield) + " = " + shown(sp) + " has " + std::to_string(sw.size()) + " values, NDims = " + std::to_string(h.ndims));
    for (int i = 0; i < h.ndims; ++i) {
      h.spacing_mm[i] = parse_real(sw[size_t(i)], spfield, path);
      check_spacing(h.spacing_mm[i], i, spfield, path);
    }
  }
  if (!offset.empty()) {
    const auto ow = words(offset);
    if (int(ow.size()) < h.ndims)
      fail(path, "Offset = " + shown(offset) + " has " + std::to_string(ow.size()) + " values, NDims = " + std::to_string(h.ndims));
    for (int i = 0; i < h.ndims; ++i) h.origin_mm[i] = parse_real(ow[size_t(i)], "Offset", path);
  }
  if (!have_type) fail(path, "MetaImage header has no ElementType");
  if (type == "MET_UCHAR") h.type = VoxelType::u8;
  else if (type == "MET_USHORT") h.type = VoxelType::u16;
  else if (type == "MET_SHORT") h.type = VoxelType::i16;
  else if (type == "MET_FLOAT") h.type = VoxelType::f32;
  else fail(path, "ElementType = " + shown(type) + " is not supported" + kSupported);
  h.type_bytes = voxel_type_bytes(h.type);
  if (parse_int(channels, 1, 1 << 20, "ElementNumberOfChannels", path) != 1)
    fail(path, "ElementNumberOfChannels = " + channels + "; expected a scalar (grey-value) image (1)");
  const std::string b = lower(binary);
  if (b != "true" && b != "1") fail(path, "BinaryData = " + shown(binary) + ": text (ASCII) voxels are not supported");
  const std::string c = lower(compressed);
  if (c == "true" || c == "1") h.compressed = true;
  else if (c != "false" && c != "0") fail(path, "CompressedData = " + shown(compressed) + " is neither True nor False");
  const std::string order = lower(msb);
  if (order == "true" || order == "1") h.big_endian = true;
  else if (order != "false" && order != "0") fail(path, "BinaryDataByteOrderMSB = " + shown(msb) + " is neither True nor False");
  if (!csize.empty()) h.compressed_bytes = uint64_t(parse_int(csize, 0, INT64_MAX, "CompressedDataSize", path));
  const int64_t hs = parse_int(hsize, -1, INT64_MAX / 2, "HeaderSize", path);
  if (hs == -1) {
    if (h.compressed) fail(path, "HeaderSize = -1 with CompressedData = True is not supported");
    h.data_at_end = true;
  }
  const std::string df = lower(datafile);
  if (df == "local") {
    if (hs > 0) h.data_offset += uint64_t(hs);
  } else {
    if (datafile.empty()) fail(path, "ElementDataFile is empty");
    if (df == "list" || datafile.find('%') != std::string::npos || words(datafile).size() > 1)
      fail(path, "ElementDataFile = " + shown(datafile) + ": file lists and patterns are not supported (one data file)");
    h.data_file = datafile;
    h.data_offset = hs > 0 ? uint64_t(hs) : 0;
  }
  finish(h, path);
  return h;
}

// ---- NRRD -------------------------------------------------------------------------------------

VolumeHeader parse_nrrd_header(std::string_view head, const std::string& path) {
  head = head.substr(0, std::min(head.size(), kHeadBytes));
  VolumeHeader h;
  h.format = "NRRD";
  if (head.size() < 8 || head.substr(0, 7) != "NRRD000" || head[7] < '1' || head[7] > '9')
    fail(path, "does not start with the NRRD magic 'NRRD000x' (not a NRRD file)");
  std::string dimension, sizes, type, encoding, spacings, directions, datafile, lineskip = "0", byteskip = "0",
                                                                                 endian = "little", origin;
  bool have_dim = false, have_sizes = false, have_type = false, have_enc = false, ended = false;
  size_t pos = head.find('\n');
  if (pos == std::string_view::npos) fail(path, "the header ends after its first line (no fields, no data)");
  ++pos;
  size_t line_no = 1;
  while (pos < head.size()) {
    const auto [line, last] = next_line(head, pos, line_no);
    if (trim(line).empty()) {
      ended = true;
      break;
    }
    if (line[0] == '#') continue;
    const size_t kv = line.find(":=");
    const size_t colon = line.find(": ");
    if (kv != std::string_view::npos && (colon == std::string_view::npos || kv < colon)) continue;  // key/value pair
    if (colon == std::string_view::npos)
      fail(path, "NRRD header line " + std::to_string(line_no) + " " + shown(line) + " is not 'field: value'");
    std::string field = lower(trim(line.substr(0, colon)));
    field.erase(std::remove(field.begin(), field.end(), ' '), field.end());
    const std::string value = trim(line.substr(colon + 2));
    if (field == "dimension") dimension = value, have_dim = true;
    else if (field == "sizes") sizes = value, have_sizes = true;
    else if (field == "type") type = value, have_type = true;
    else if (field == "encoding") encoding = value, have_enc = true;
    else if (field == "spacings") spacings = value;
    else if (field == "spacedirections") directions = value;
    else if (field == "datafile") datafile = value;
    else if (field == "lineskip") lineskip = value;
    else if (field == "byteskip") byteskip = value;
    else if (field == "endian") endian = value;
    else if (field == "spaceorigin") origin = value;
  }
  parse_dims({"dimension", "sizes", ": ", "scalar image", "NRRD header has no 'dimension' field",
              "NRRD header has no 'sizes' field"},
             have_dim ? &dimension : nullptr, have_sizes ? &sizes : nullptr, h, path);
  if (!have_type) fail(path, "NRRD header has no 'type' field");
  const std::string t = lower(type);
  if (t == "uchar" || t == "unsigned char" || t == "uint8" || t == "uint8_t") h.type = VoxelType::u8;
  else if (t == "ushort" || t == "unsigned short" || t == "unsigned short int" || t == "uint16" || t == "uint16_t")
    h.type = VoxelType::u16;
  else if (t == "short" || t == "short int" || t == "signed short" || t == "signed short int" || t == "int16" || t == "int16_t")
    h.type = VoxelType::i16;
  else if (t == "float") h.type = VoxelType::f32;
  else fail(path, "type: " + shown(type) + " is not supported" + kSupported);
  h.type_bytes = voxel_type_bytes(h.type);
  const std::string en = lower(endian);
  if (en == "big") h.big_endian = h.type_bytes > 1;
  else if (en != "little") fail(path, "endian: " + shown(endian) + " is neither little nor big");
  if (!have_enc) fail(path, "NRRD header has no 'encoding' field");
  const std::string e = lower(encoding);
  if (e == "gzip" || e == "gz") h.compressed = true;
  else if (e != "raw") fail(path, "encoding: " + shown(encoding) + " is not supported (raw or gzip)");
  if (!spacings.empty()) {
    const auto pw = words(spacings);
    if (int(pw.size()) != h.ndims)
      fail(path, "spacings: " + shown(spacings) + " has " + std::to_string(pw.size()) + " values, dimension: " + std::to_string(h.ndims));
    for (int i = 0; i < h.ndims; ++i) {
      h.spacing_mm[i] = parse_real(pw[size_t(i)], "spacings", path);
      check_spacing(h.spacing_mm[i], i, "spacings", path);
    }
  } else if (!directions.empty()) {
    // "(a,b,c) (d,e,f) ..." or "none": the voxel size along an axis is the length of its vector.
    const auto dw = words(directions);
    if (int(dw.size()) != h.ndims)
      fail(path, "space directions: " + shown(directions) + " has " + std::to_string(dw.size()) + " vectors, dimension: " + std::to_string(h.ndims));
    for (int i = 0; i < h.ndims; ++i) {
      std::string v = dw[size_t(i)];
      if (lower(v) == "none") fail(path, "space directions: axis " + std::to_string(i) + " is 'none'; expected a spatial axis");
      if (v.size() < 2 || v.front() != '(' || v.back() != ')')
        fail(path, "space directions: " + shown(v) + " is not a vector '(a,b,c)'");
      v = v.substr(1, v.size() - 2);
      std::replace(v.begin(), v.end(), ',', ' ');
      double sq = 0;
      const auto cw = words(v);
      if (cw.empty() || cw.size() > 3) fail(path, "space directions: " + shown(dw[size_t(i)]) + " is not a vector '(a,b,c)'");
      for (const auto& c : cw) {
        const double x = parse_real(c, "space directions", path);
        sq += x * x;
      }
      h.spacing_mm[i] = std::sqrt(sq);
      check_spacing(h.spacing_mm[i], i, "space directions", path);
    }
  }
  if (!origin.empty()) {
    // "(x,y,z)": one value per spatial axis.
    std::string o = origin;
    if (o.size() < 2 || o.front() != '(' || o.back() != ')') fail(path, "space origin: " + shown(origin) + " is not a vector '(x,y,z)'");
    o = o.substr(1, o.size() - 2);
    std::replace(o.begin(), o.end(), ',', ' ');
    const auto ow = words(o);
    if (int(ow.size()) < h.ndims) fail(path, "space origin: " + shown(origin) + " has " + std::to_string(ow.size()) + " values, dimension: " + std::to_string(h.ndims));
    for (int i = 0; i < h.ndims; ++i) h.origin_mm[i] = parse_real(ow[size_t(i)], "space origin", path);
  }
  h.line_skip = parse_int(lineskip, 0, 1 << 30, "line skip", path);
  const int64_t bs = parse_int(byteskip, -1, INT64_MAX / 2, "byte skip", path);
  if (bs == -1) {
    if (h.compressed) fail(path, "byte skip: -1 with encoding gzip is not supported");
    h.data_at_end = true;
  }
  if (!datafile.empty()) {
    if (lower(datafile).rfind("list", 0) == 0 || datafile.find('%') != std::string::npos || words(datafile).size() > 1)
      fail(path, "data file: " + shown(datafile) + ": file lists and patterns are not supported (one data file)");
    h.data_file = datafile;
    h.data_offset = bs > 0 ? uint64_t(bs) : 0;
  } else {
    if (!ended) fail(path, "no blank line ends the NRRD header and no 'data file' is named (a header with no data?)");
    h.data_offset = pos + (bs > 0 ? uint64_t(bs) : 0);
  }
  finish(h, path);
  return h;
}

// ---- NIfTI-1 ----------------------------------------------------------------------------------

VolumeHeader parse_nifti_header(std::string_view head, const std::string& path) {
  VolumeHeader h;
  h.format = "NIfTI-1";
  if (head.size() < 348) fail(path, "holds " + std::to_string(head.size()) + " bytes, fewer than a NIfTI-1 header (348)");
  auto i32 = [&](size_t o, bool swap) {
    uint32_t v;
    std::memcpy(&v, head.data() + o, 4);
    if (swap) v = __builtin_bswap32(v);
    return int32_t(v);
  };
  auto i16 = [&](size_t o, bool swap) {
    uint16_t v;
    std::memcpy(&v, head.data() + o, 2);
    if (swap) v = __builtin_bswap16(v);
    return int16_t(v);
  };
  auto f32 = [&](size_t o, bool swap) {
    uint32_t v;
    std::memcpy(&v, head.data() + o, 4);
    if (swap) v = __builtin_bswap32(v);
    float f;
    std::memcpy(&f, &v, 4);
    return f;
  };
  bool swap = false;
  if (i32(0, false) != 348) {
    if (i32(0, true) != 348) fail(path, "sizeof_hdr is " + std::to_string(i32(0, false)) + ", not 348: not a NIfTI-1 file");
    swap = true;
  }
  const int16_t nd = i16(40, swap);
  if (nd < 1 || nd > 7) fail(path, "dim[0] = " + std::to_string(nd) + " is out of range [1, 7]");
  for (int i = 4; i <= nd; ++i)
    if (i16(size_t(40 + 2 * i), swap) != 1)
      fail(path, "dim[" + std::to_string(i) + "] = " + std::to_string(i16(size_t(40 + 2 * i), swap)) + ": expected a 2D or 3D scalar image");
  h.ndims = std::min<int>(nd, 3);
  for (int i = 0; i < h.ndims; ++i) {
    const int16_t d = i16(size_t(42 + 2 * i), swap);
    if (d < 1) fail(path, "dim[" + std::to_string(i + 1) + "] = " + std::to_string(d) + " is not positive");
    h.dims[i] = d;
    const float s = f32(size_t(80 + 4 * i), swap);
    if (!std::isfinite(s)) fail(path, "pixdim[" + std::to_string(i + 1) + "] is not a finite number");
    h.spacing_mm[i] = s;
  }
  const int16_t dt = i16(70, swap);
  switch (dt) {
    case 2: h.type = VoxelType::u8; break;
    case 4: h.type = VoxelType::i16; break;
    case 16: h.type = VoxelType::f32; break;
    case 512: h.type = VoxelType::u16; break;
    default: fail(path, "datatype = " + std::to_string(dt) + " is not supported" + kSupported);
  }
  h.type_bytes = voxel_type_bytes(h.type);
  const float off = f32(108, swap);
  if (!std::isfinite(off) || off < 348 || off > float(kHeadBytes))
    fail(path, "vox_offset = " + std::to_string(off) + " is out of range [348, 1048576]");
  const std::string magic(head.substr(344, 3));
  if (magic == "ni1") fail(path, "is a NIfTI header/image pair (.hdr/.img); give a single .nii file");
  if (magic != "n+1") fail(path, "magic " + shown(magic) + " is not 'n+1': not a NIfTI-1 file");
  h.data_offset = uint64_t(off);
  if (h.ndims < 2) fail(path, "has 1 dimension; expected a 2D or 3D image");
  finish(h, path);
  return h;
}

// ---- sizes ------------------------------------------------------------------------------------

namespace {

// Inflates a zlib or gzip stream from `in`, in 64 KiB blocks, counting at most `limit` bytes out.
struct Inflater {
  std::istream& in;
  z_stream z{};
  std::vector<unsigned char> ibuf = std::vector<unsigned char>(size_t(1) << 16);
  uint64_t consumed = 0;  // compressed bytes fed
  bool ended = false;
  std::string error;
  explicit Inflater(std::istream& s) : in(s) {
    if (inflateInit2(&z, 15 + 32) != Z_OK) throw std::bad_alloc();
  }
  ~Inflater() { inflateEnd(&z); }
  // Up to n bytes into out (may be null: counted only); returns the number produced.
  uint64_t read(unsigned char* out, uint64_t n) {
    static thread_local std::vector<unsigned char> sink(size_t(1) << 16);
    uint64_t got = 0;
    while (got < n && !ended && error.empty()) {
      if (z.avail_in == 0) {
        in.read(reinterpret_cast<char*>(ibuf.data()), std::streamsize(ibuf.size()));
        const auto r = in.gcount();
        if (r <= 0) break;
        z.next_in = ibuf.data();
        z.avail_in = unsigned(r);
        consumed += uint64_t(r);
      }
      const uint64_t want = std::min<uint64_t>(n - got, out ? (uint64_t(1) << 30) : sink.size());
      z.next_out = out ? out + got : sink.data();
      z.avail_out = unsigned(want);
      const int rc = inflate(&z, Z_NO_FLUSH);
      got += want - z.avail_out;
      if (rc == Z_STREAM_END) ended = true;
      else if (rc == Z_BUF_ERROR && z.avail_in == 0) continue;
      else if (rc != Z_OK) error = z.msg ? z.msg : "zlib error " + std::to_string(rc);
    }
    return got;
  }
  uint64_t trailing() const { return z.avail_in; }  // compressed bytes read past the stream end
};

std::string bytes_text(uint64_t b) { return std::to_string(b) + " bytes"; }

// Checks the data of `h` in `data` (positioned at the start of the data file) of `data_size` bytes.
void check_data(const VolumeHeader& h, std::istream& data, uint64_t data_size, const std::string& path,
                const std::string& data_path) {
  uint64_t start = h.data_offset;
  if (h.line_skip > 0) {
    data.seekg(std::streamoff(h.data_offset));
    std::string line;
    for (int64_t i = 0; i < h.line_skip; ++i)
      if (!std::getline(data, line)) fail(path, "line skip: " + std::to_string(h.line_skip) + " is past the end of " + data_path);
    start = uint64_t(data.tellg());
  }
  const std::string need = dims_text(h) + " need " + bytes_text(h.expected_bytes);
  if (start > data_size)
    fail(path, "is truncated: its data would start at byte " + std::to_string(start) + " of " + data_path +
                   ", which holds " + bytes_text(data_size));
  const uint64_t avail = data_size - start;
  if (!h.compressed) {
    if (avail < h.expected_bytes)
      fail(path, "is truncated: " + need + " of voxel data, " + data_path + " holds " + bytes_text(avail) +
                     " after the " + std::to_string(start) + "-byte header (expected vs actual)");
    if (avail > h.expected_bytes && !h.data_at_end)
      fail(path, "is longer than its header says: " + need + " of voxel data, " + data_path + " holds " +
                     bytes_text(avail) + " after the " + std::to_string(start) + "-byte header (" +
                     std::to_string(avail - h.expected_bytes) + " bytes too many)");
    return;
  }
  if (h.compressed_bytes && h.compressed_bytes != avail)
    fail(path, "CompressedDataSize = " + std::to_string(h.compressed_bytes) + " but " + data_path + " holds " +
                   bytes_text(avail) + " of compressed data after the header");
  data.clear();
  data.seekg(std::streamoff(start));
  Inflater z(data);
  const uint64_t got = z.read(nullptr, h.expected_bytes + 1);
  if (!z.error.empty())
    fail(path, "compressed data is corrupt after " + std::to_string(got) + " of " + std::to_string(h.expected_bytes) +
                   " bytes (zlib: " + z.error + ")");
  if (got > h.expected_bytes)
    fail(path, "compressed data inflates to more than the " + need + " (longer than its header says)");
  if (!z.ended)
    fail(path, "is truncated: compressed data ends after " + std::to_string(got) + " of the " + std::to_string(h.expected_bytes) +
                   " bytes that " + dims_text(h) + " need (the stream is cut short)");
  if (got < h.expected_bytes)
    fail(path, "compressed data inflates to " + bytes_text(got) + ", " + need + " (expected vs actual)");
  const uint64_t rest = z.trailing() + (data_size - std::min<uint64_t>(data_size, start + z.consumed));
  if (rest > 0)
    fail(path, "is longer than its header says: " + bytes_text(rest) + " follow the end of the compressed data in " + data_path);
}

std::string open_error(const std::string& path) {
  std::error_code ec;
  if (!fs::exists(path, ec)) return "input file not found: " + path;
  if (fs::is_directory(path, ec)) return "input " + path + " is a folder, expected a file";
  return "cannot read " + path + ": " + std::strerror(errno);
}

VolumeHeader parse_by_ext(std::string_view head, const std::string& path, const std::string& ext) {
  if (ext == ".mha" || ext == ".mhd") return parse_metaimage_header(head, path);
  if (ext == ".nrrd" || ext == ".nhdr") return parse_nrrd_header(head, path);
  return parse_nifti_header(head, path);
}

}  // namespace

bool has_checked_header(const std::string& path) {
  const std::string e = lower_extension(path);
  return e == ".mha" || e == ".mhd" || e == ".nrrd" || e == ".nhdr" || e == ".nii" || e == ".nii.gz";
}

VolumeHeader check_volume_file(const std::string& path, bool within_budget) {
  const std::string ext = lower_extension(path);
  errno = 0;
  std::ifstream f(path, std::ios::binary);
  if (!f) throw InputError(open_error(path));
  std::error_code ec;
  const uint64_t size = fs::file_size(path, ec);
  if (ec) throw InputError("cannot read " + path + ": " + ec.message());
  if (size == 0) fail(path, "is empty (0 bytes)");
  if (ext == ".nii.gz") {
    Inflater z(f);
    std::string head(352, '\0');
    const uint64_t n = z.read(reinterpret_cast<unsigned char*>(head.data()), head.size());
    if (!z.error.empty()) fail(path, "is not a valid gzip file (zlib: " + z.error + ")");
    head.resize(size_t(n));
    VolumeHeader h = parse_nifti_header(head, path);
    h.compressed = true;
    check_memory(h.expected_bytes, "input " + path + " (" + dims_text(h) + ")");
    if (h.data_offset > n) z.read(nullptr, h.data_offset - n);
    const uint64_t got = z.read(nullptr, h.expected_bytes + 1);
    if (!z.error.empty()) fail(path, "compressed data is corrupt (zlib: " + z.error + ")");
    if (got > h.expected_bytes) fail(path, "inflates to more than the " + dims_text(h) + " need (longer than its header says)");
    if (got < h.expected_bytes)
      fail(path, "is truncated: " + dims_text(h) + " need " + bytes_text(h.expected_bytes) + ", the file inflates to " +
                     bytes_text(got) + " after the header");
    return h;
  }
  std::string head(size_t(std::min<uint64_t>(size, kHeadBytes)), '\0');
  f.read(head.data(), std::streamsize(head.size()));
  if (uint64_t(f.gcount()) != head.size()) throw InputError("cannot read " + path + ": short read of its header");
  const VolumeHeader h = parse_by_ext(head, path, ext);
  if (within_budget) check_memory(h.expected_bytes, "input " + path + " (" + dims_text(h) + ")");
  if (h.data_file.empty()) {
    f.clear();
    check_data(h, f, size, path, path);
  } else {
    const fs::path dp = fs::path(h.data_file).is_absolute() ? fs::path(h.data_file) : fs::path(path).parent_path() / h.data_file;
    const std::string field = h.format == "NRRD" ? "data file" : "ElementDataFile";
    if (!fs::exists(dp, ec)) fail(path, field + " " + shown(h.data_file) + " not found (looked for " + dp.string() + ")");
    errno = 0;
    std::ifstream d(dp, std::ios::binary);
    if (!d) fail(path, field + " " + dp.string() + " cannot be read: " + std::strerror(errno));
    const uint64_t dsize = fs::file_size(dp, ec);
    if (ec) fail(path, field + " " + dp.string() + " cannot be read: " + ec.message());
    check_data(h, d, dsize, path, dp.string());
  }
  return h;
}

VolumeHeader check_volume_bytes(std::string_view file, const std::string& path) {
  const std::string ext = lower_extension(path);
  if (ext == ".nii.gz") throw InputError("check_volume_bytes: .nii.gz is checked from files only");
  const VolumeHeader h = parse_by_ext(file, path, ext);
  check_memory(h.expected_bytes, "input " + path + " (" + dims_text(h) + ")");
  if (h.data_file.empty()) {
    std::istringstream in{std::string(file)};
    check_data(h, in, file.size(), path, path);
  }
  return h;
}

}  // namespace pb
