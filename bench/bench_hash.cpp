// Input hashing (issue 16 goal: >= 1.2 GB/s): SHA-256 by OpenSSL of a 64 MiB buffer in memory, and
// of a 64 MiB file in the page cache (sha256_file: read + hash), with a plain read of the same file
// as the reference (counter: bytes/s). Single-threaded, so rates are per CPU second (Google
// Benchmark's default): on a shared machine that is the hash's speed, not the scheduler's; the
// real-time column is printed beside it.
#include <benchmark/benchmark.h>
#include <fcntl.h>
#include <unistd.h>

#include <cstdio>
#include <cstdlib>
#include <string>
#include <vector>

#include "core/sha256.hpp"

namespace {

constexpr size_t kBytes = size_t(64) << 20;

const std::vector<unsigned char>& data() {
  static const std::vector<unsigned char> d = [] {
    std::vector<unsigned char> v(kBytes);
    uint64_t x = 0x9E3779B97F4A7C15ull;
    for (auto& b : v) {
      x ^= x << 13; x ^= x >> 7; x ^= x << 17;  // xorshift64: incompressible, deterministic
      b = static_cast<unsigned char>(x);
    }
    return v;
  }();
  return d;
}

const std::string& file() {
  static const std::string path = [] {
    char tmpl[] = "/tmp/pb_bench_hash_XXXXXX";
    const int fd = ::mkstemp(tmpl);
    if (fd < 0) std::abort();
    const auto& d = data();
    if (::write(fd, d.data(), d.size()) != ssize_t(d.size())) std::abort();
    ::close(fd);
    static const std::string keep = tmpl;
    std::atexit([] { std::remove(keep.c_str()); });
    return keep;
  }();
  return path;
}

void BM_Sha256_Memory(benchmark::State& st) {
  const auto& d = data();
  for (auto _ : st) benchmark::DoNotOptimize(pb::sha256_hex(d.data(), d.size()));
  st.SetBytesProcessed(int64_t(st.iterations()) * int64_t(d.size()));
}

void BM_Sha256_File(benchmark::State& st) {
  const auto& p = file();
  for (auto _ : st) benchmark::DoNotOptimize(pb::sha256_file(p));
  st.SetBytesProcessed(int64_t(st.iterations()) * int64_t(kBytes));
}

// Reading alone, with the same 1 MiB buffer: what hashing adds on top of I/O.
void BM_ReadFile(benchmark::State& st) {
  const auto& p = file();
  std::vector<char> buf(size_t(1) << 20);
  for (auto _ : st) {
    const int fd = ::open(p.c_str(), O_RDONLY);
    size_t total = 0;
    for (ssize_t got; (got = ::read(fd, buf.data(), buf.size())) > 0;) total += size_t(got);
    ::close(fd);
    benchmark::DoNotOptimize(total);
  }
  st.SetBytesProcessed(int64_t(st.iterations()) * int64_t(kBytes));
}

}  // namespace

BENCHMARK(BM_Sha256_Memory)->Unit(benchmark::kMillisecond);
BENCHMARK(BM_Sha256_File)->Unit(benchmark::kMillisecond);
BENCHMARK(BM_ReadFile)->Unit(benchmark::kMillisecond);
