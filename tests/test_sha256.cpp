// SHA-256 by OpenSSL beyond the short FIPS examples of test_io.cpp: the million-'a' message and
// files read in pieces across the 1 MiB read buffer agree with one in-memory digest.
#include <catch2/catch.hpp>

#include <cstdio>
#include <fstream>
#include <string>

#include "core/error.hpp"
#include "core/sha256.hpp"

using namespace pb;

TEST_CASE("SHA-256 of one million 'a' matches FIPS 180-2 B.3", "[sha256]") {
  // Source: FIPS PUB 180-2, Appendix B.3 (message of 1,000,000 repetitions of 'a').
  const std::string m(1000000, 'a');
  CHECK(sha256_hex(m.data(), m.size()) == "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0");
  // The same digest from a file, read in 1 MiB pieces, and from an object reused after hex().
  const std::string path = "pb_test_sha256_a.bin";
  { std::ofstream(path, std::ios::binary) << m; }
  CHECK(sha256_file(path) == sha256_hex(m.data(), m.size()));
  std::remove(path.c_str());
  Sha256 s;
  s.update("abc", 3);
  (void)s.hex();
  s.update(m.data(), m.size());
  CHECK(s.hex() == "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0");
}

TEST_CASE("SHA-256 of a file spanning several read buffers equals the in-memory digest", "[sha256]") {
  std::string m(3 * (1 << 20) + 12345, '\0');
  for (size_t i = 0; i < m.size(); ++i) m[i] = char((i * 2654435761u) >> 13);
  const std::string path = "pb_test_sha256_b.bin";
  { std::ofstream(path, std::ios::binary) << m; }
  CHECK(sha256_file(path) == sha256_hex(m.data(), m.size()));
  // Cross-check with coreutils' sha256sum (an independent implementation) where it exists.
  if (FILE* p = popen(("sha256sum " + path + " 2>/dev/null").c_str(), "r")) {
    char out[65] = {0};
    if (std::fread(out, 1, 64, p) == 64) CHECK(std::string(out) == sha256_hex(m.data(), m.size()));
    pclose(p);
  }
  std::remove(path.c_str());
  CHECK_THROWS_AS(sha256_file("pb_test_sha256_missing.bin"), InputError);
}
