// The volume types (core/volume.hpp): checked allocation sizes, geometry text, voxel type names,
// AnyVolume's accessors and conversions to float and mask.
#include "core/volume.hpp"
#include "core/volume_view.hpp"

#include <cmath>
#include <cstdint>
#include <sstream>

#include "core/error.hpp"

namespace pb {

size_t checked_voxels(const Geometry& g, size_t elem_bytes) {
  for (int i = 0; i < 3; ++i)
    if (g.dims[i] < 0)
      throw InputError("volume dims must not be negative, got " + std::to_string(g.dims[i]) + " along " + "xyz"[i]);
  const uint64_t n = saturating_product({uint64_t(g.dims[0]), uint64_t(g.dims[1]), uint64_t(g.dims[2])});
  const uint64_t bytes = saturating_product({n, uint64_t(elem_bytes)});
  if (bytes > uint64_t(PTRDIFF_MAX) || bytes > memory_budget_bytes()) {
    std::ostringstream s;
    s << "a volume of " << g.dims[0] << " x " << g.dims[1] << " x " << g.dims[2] << " voxels x " << elem_bytes
      << " bytes";
    check_memory(bytes, s.str());
  }
  return size_t(n);
}

std::string describe(const Geometry& g) {
  std::ostringstream s;
  s << g.dims[0] << " x " << g.dims[1] << " x " << g.dims[2] << " voxels, spacing " << g.spacing_mm[0]
    << " x " << g.spacing_mm[1] << " x " << g.spacing_mm[2] << " mm";
  return s.str();
}

void check_same_geometry(const Geometry& a, const std::string& na, const Geometry& b,
                         const std::string& nb, double rel_tol) {
  static const char* axis = "xyz";
  for (int i = 0; i < 3; ++i)
    if (a.dims[i] != b.dims[i]) {
      std::ostringstream s;
      s << "geometry mismatch: dims along " << axis[i] << " differ: " << na << " has " << a.dims[i] << ", "
        << nb << " has " << b.dims[i] << " (" << describe(a) << " vs " << describe(b) << ")";
      throw InputError(s.str());
    }
  for (int i = 0; i < 3; ++i) {
    const double tol = rel_tol * std::max(std::abs(a.spacing_mm[i]), std::abs(b.spacing_mm[i]));
    if (std::abs(a.spacing_mm[i] - b.spacing_mm[i]) > tol) {
      std::ostringstream s;
      s << "geometry mismatch: spacing along " << axis[i] << " differs: " << na << " has " << a.spacing_mm[i]
        << " mm, " << nb << " has " << b.spacing_mm[i] << " mm";
      throw InputError(s.str());
    }
  }
  for (int i = 0; i < 3; ++i) {
    // Origins agree when they differ by less than a tenth of a voxel.
    const double tol = 0.1 * std::abs(a.spacing_mm[i]);
    if (std::abs(a.origin_mm[i] - b.origin_mm[i]) > tol) {
      std::ostringstream s;
      s << "geometry mismatch: origin along " << axis[i] << " differs: " << na << " has " << a.origin_mm[i]
        << " mm, " << nb << " has " << b.origin_mm[i] << " mm";
      throw InputError(s.str());
    }
  }
}

const char* voxel_type_name(VoxelType t) {
  switch (t) {
    case VoxelType::u8: return "uint8";
    case VoxelType::u16: return "uint16";
    case VoxelType::i16: return "int16";
    case VoxelType::f32: return "float32";
  }
  return "?";
}

VoxelType parse_voxel_type(const std::string& n) {
  if (n == "uint8" || n == "u8") return VoxelType::u8;
  if (n == "uint16" || n == "u16") return VoxelType::u16;
  if (n == "int16" || n == "i16") return VoxelType::i16;
  if (n == "float32" || n == "f32" || n == "float") return VoxelType::f32;
  throw InputError("unsupported voxel type '" + n + "' (supported: uint8, uint16, int16, float32)");
}

int voxel_type_bytes(VoxelType t) {
  switch (t) {
    case VoxelType::u8: return 1;
    case VoxelType::u16:
    case VoxelType::i16: return 2;
    case VoxelType::f32: return 4;
  }
  return 0;
}

VoxelType AnyVolume::type() const {
  return visit([](const auto& img) { return VoxelTraits<typename std::decay_t<decltype(img)>::value_type>::type; });
}
const Geometry& AnyVolume::geometry() const {
  return visit([](const auto& img) -> const Geometry& { return img.geometry(); });
}
void AnyVolume::set_spacing(const std::array<double, 3>& sp) {
  visit([&](auto& img) {
    Geometry g = img.geometry();
    g.spacing_mm = sp;
    img.set_geometry_keep_dims(g);
  });
}
const void* AnyVolume::raw() const {
  return visit([](const auto& img) -> const void* { return img.data(); });
}
void* AnyVolume::raw() {
  return visit([](auto& img) -> void* { return img.data(); });
}
size_t AnyVolume::bytes() const {
  return visit([](const auto& img) { return img.buffer().size() * sizeof(typename std::decay_t<decltype(img)>::value_type); });
}

VolumeF to_float(const VolumeView& v) {
  VolumeF out(v.geometry);
  float* d = out.data();
  v.visit([d](const auto* s, int64_t n) {
#pragma omp parallel for schedule(static)
    for (int64_t i = 0; i < n; ++i) d[i] = float(s[i]);
  });
  return out;
}

Mask to_mask(const VolumeView& v) {
  Mask out(v.geometry);
  uint8_t* d = out.data();
  v.visit([d](const auto* s, int64_t n) {
#pragma omp parallel for schedule(static)
    for (int64_t i = 0; i < n; ++i) d[i] = s[i] != 0;
  });
  return out;
}

VolumeF AnyVolume::to_float() const { return pb::to_float(view_of(*this)); }

Mask AnyVolume::to_mask(int64_t label) const {
  if (label < 0) return pb::to_mask(view_of(*this));
  return visit([label](const auto& img) {
    Mask out(img.geometry());
    const auto* s = img.data();
    uint8_t* d = out.data();
    const int64_t n = img.size();
#pragma omp parallel for schedule(static)
    for (int64_t i = 0; i < n; ++i) d[i] = double(s[i]) == double(label);
    return out;
  });
}

}  // namespace pb
