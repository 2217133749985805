#pragma once
// SHA-256 (FIPS 180-4) of byte buffers and files, as lowercase hex, for input/output fingerprints.
#include <cstddef>
#include <cstdint>
#include <string>

namespace pb {

class Sha256 {
 public:
  Sha256();
  void update(const void* data, size_t n);
  std::string hex();  // finishes the digest

 private:
  void block(const uint8_t* p);
  uint32_t h_[8];
  uint8_t buf_[64];
  size_t fill_ = 0;
  uint64_t length_ = 0;
};

std::string sha256_hex(const void* data, size_t n);
std::string sha256_file(const std::string& path);  // throws InputError if unreadable

}  // namespace pb
