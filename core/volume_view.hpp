#pragma once
// A read-only view of voxels held elsewhere (an AnyVolume, or a caller's buffer such as a NumPy
// array): pointer, stored voxel type and geometry, in porebench's layout (one contiguous buffer,
// x fastest, then y, then z). Readers that only read (mask reading, probability metrics, hashes)
// take a view, so that a buffer they do not own is read in place, without a copy.
#include <cstddef>
#include <cstdint>

#include "core/volume.hpp"

namespace pb {

struct VolumeView {
  const void* data = nullptr;
  VoxelType type = VoxelType::u8;
  Geometry geometry;

  size_t bytes() const { return size_t(geometry.voxels()) * size_t(voxel_type_bytes(type)); }
  // Calls f(const T* voxels, int64_t count) with the stored type.
  template <class F> decltype(auto) visit(F&& f) const {
    const int64_t n = geometry.voxels();
    switch (type) {
      case VoxelType::u8: return f(static_cast<const uint8_t*>(data), n);
      case VoxelType::u16: return f(static_cast<const uint16_t*>(data), n);
      case VoxelType::i16: return f(static_cast<const int16_t*>(data), n);
      default: return f(static_cast<const float*>(data), n);
    }
  }
};

inline VolumeView view_of(const AnyVolume& v) { return VolumeView{v.raw(), v.type(), v.geometry()}; }

// Copies into a float32 volume (what methods take), as AnyVolume::to_float does.
VolumeF to_float(const VolumeView& v);
// A mask: voxel != 0, as AnyVolume::to_mask() does.
Mask to_mask(const VolumeView& v);

}  // namespace pb
