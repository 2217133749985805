#pragma once
// SHA-256 (FIPS 180-4) of byte buffers and files, as lowercase hex, for input/output fingerprints.
// Computed by OpenSSL's libcrypto (EVP interface: it uses the CPU's SHA extensions where present).
#include <cstddef>
#include <memory>
#include <string>

namespace pb {

class Sha256 {
 public:
  Sha256();
  ~Sha256();
  Sha256(Sha256&&) noexcept;
  Sha256& operator=(Sha256&&) noexcept;
  void update(const void* data, size_t n);
  std::string hex();  // finishes the digest; the object then starts a new one

 private:
  struct Ctx;
  std::unique_ptr<Ctx> ctx_;
};

std::string sha256_hex(const void* data, size_t n);
std::string sha256_file(const std::string& path);  // throws InputError if unreadable

}  // namespace pb
