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

// Reverses the bytes of `count` items of `width` bytes (2, 4 or 8; other widths are left alone).
inline void swap_bytes(void* data, size_t count, int width) {
  auto* p = static_cast<uint8_t*>(data);
  if (width == 2)
    for (size_t i = 0; i < count; ++i) std::swap(p[2 * i], p[2 * i + 1]);
  else if (width == 4)
    for (size_t i = 0; i < count; ++i) {
      std::swap(p[4 * i], p[4 * i + 3]);
      std::swap(p[4 * i + 1], p[4 * i + 2]);
    }
  else if (width == 8)
    for (size_t i = 0; i < count; ++i)
      for (int k = 0; k < 4; ++k) std::swap(p[8 * i + size_t(k)], p[8 * i + 7 - size_t(k)]);
}

}  // namespace pb
