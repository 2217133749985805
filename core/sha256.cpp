// SHA-256 through OpenSSL's libcrypto (EVP). The algorithm is fetched once per process (OpenSSL 3
// otherwise looks it up in its provider tables at every init).
#include "core/sha256.hpp"

#include <fcntl.h>
#include <openssl/evp.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>
#include <stdexcept>
#include <vector>

#include "core/error.hpp"

namespace pb {
namespace {

const EVP_MD* sha256_md() {
  static EVP_MD* md = [] {
    EVP_MD* m = EVP_MD_fetch(nullptr, "SHA256", nullptr);
    if (!m) throw std::runtime_error("OpenSSL: SHA256 is not available");
    return m;
  }();
  return md;
}

}  // namespace

struct Sha256::Ctx {
  EVP_MD_CTX* c = EVP_MD_CTX_new();
  Ctx() {
    if (!c || EVP_DigestInit_ex(c, sha256_md(), nullptr) != 1) throw std::runtime_error("OpenSSL: SHA256 init failed");
  }
  ~Ctx() { EVP_MD_CTX_free(c); }
};

Sha256::Sha256() : ctx_(std::make_unique<Ctx>()) {}
Sha256::~Sha256() = default;
Sha256::Sha256(Sha256&&) noexcept = default;
Sha256& Sha256::operator=(Sha256&&) noexcept = default;

void Sha256::update(const void* data, size_t n) {
  if (n && EVP_DigestUpdate(ctx_->c, data, n) != 1) throw std::runtime_error("OpenSSL: SHA256 update failed");
}

std::string Sha256::hex() {
  unsigned char md[EVP_MAX_MD_SIZE];
  unsigned int len = 0;
  if (EVP_DigestFinal_ex(ctx_->c, md, &len) != 1 || EVP_DigestInit_ex(ctx_->c, sha256_md(), nullptr) != 1)
    throw std::runtime_error("OpenSSL: SHA256 final failed");
  static const char* digits = "0123456789abcdef";
  std::string out(2 * len, '0');
  for (unsigned i = 0; i < len; ++i) {
    out[2 * i] = digits[md[i] >> 4];
    out[2 * i + 1] = digits[md[i] & 15];
  }
  return out;
}

std::string sha256_hex(const void* data, size_t n) {
  Sha256 s;
  s.update(data, n);
  return s.hex();
}

std::string sha256_file(const std::string& path) {
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) throw InputError("cannot read " + path + ": " + std::strerror(errno));
  ::posix_fadvise(fd, 0, 0, POSIX_FADV_SEQUENTIAL);
  Sha256 s;
  std::vector<char> buf(size_t(1) << 20);  // 1 MiB: stays in L2, large enough for few syscalls
  for (;;) {
    const ssize_t got = ::read(fd, buf.data(), buf.size());
    if (got < 0) {
      if (errno == EINTR) continue;
      const int e = errno;
      ::close(fd);
      throw InputError("cannot read " + path + ": " + std::strerror(e));
    }
    if (got == 0) break;
    s.update(buf.data(), size_t(got));
  }
  ::close(fd);
  return s.hex();
}

}  // namespace pb
