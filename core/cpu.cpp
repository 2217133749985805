// Instruction-set detection (core/cpu.hpp): the CPU's AVX2/AVX-512 support, read once, capped by
// set_simd_cap or --simd.
#include "core/cpu.hpp"

#include <atomic>

namespace pb {

namespace {

Simd detect() {
#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
  __builtin_cpu_init();
  if (__builtin_cpu_supports("avx512f") && __builtin_cpu_supports("avx512bw") && __builtin_cpu_supports("avx512vl") &&
      __builtin_cpu_supports("avx512dq"))
    return Simd::avx512;
  if (__builtin_cpu_supports("avx2") && __builtin_cpu_supports("fma")) return Simd::avx2;
#endif
  return Simd::generic;
}

std::atomic<int> g_cap{int(Simd::avx512)};

}  // namespace

Simd simd_level() {
  static const Simd detected = detect();
  const int cap = g_cap.load(std::memory_order_relaxed);
  return int(detected) < cap ? detected : Simd(cap);
}

void set_simd_cap(Simd s) { g_cap.store(int(s), std::memory_order_relaxed); }

const char* simd_name(Simd s) {
  switch (s) {
    case Simd::avx512: return "avx512";
    case Simd::avx2: return "avx2";
    default: return "generic";
  }
}

}  // namespace pb
