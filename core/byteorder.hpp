#pragma once
// Byte order helpers for the readers and writers of raw and .npy data (core/io.cpp, core/npy.cpp).
#include <cstddef>
#include <cstdint>
#include <cstring>
#include <utility>

namespace pb {

inline bool host_is_little_endian() {
  const uint16_t one = 1;
  uint8_t b;
  std::memcpy(&b, &one, 1);
  return b == 1;
}

// Reverses the bytes of `count` items of `width` bytes (2 or 4; other widths are left alone).
inline void swap_bytes(void* data, size_t count, int width) {
  auto* p = static_cast<uint8_t*>(data);
  if (width == 2)
    for (size_t i = 0; i < count; ++i) std::swap(p[2 * i], p[2 * i + 1]);
  else if (width == 4)
    for (size_t i = 0; i < count; ++i) {
      std::swap(p[4 * i], p[4 * i + 3]);
      std::swap(p[4 * i + 1], p[4 * i + 2]);
    }
}

}  // namespace pb
