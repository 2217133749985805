// Kernels of Joseph's projector (Joseph 1982, IEEE TMI 1:192): the portable line kernel (with an
// AVX2 clone) and the AVX-512 window kernel. Conventions: projector_kernels.hpp.
#include "synthetic/projector_kernels.hpp"

#include <algorithm>
#include <cmath>

#if defined(__x86_64__) && defined(__GNUC__)
// GCC 12 warns about the _mm512_undefined_* values inside its own intrinsic headers (a false positive).
#pragma GCC diagnostic push
#pragma GCC diagnostic ignored "-Wmaybe-uninitialized"
#include <immintrin.h>
#pragma GCC diagnostic pop
#endif

// Hot loops get an AVX2 clone picked at run time (the binary stays portable x86-64).
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__)
#define PB_SIMD_CLONES __attribute__((target_clones("avx2", "default")))
#else
#define PB_SIMD_CLONES
#endif

namespace pb::synth::kernels {

PB_SIMD_CLONES
void joseph_line(const float* __restrict line, float f0, float df, int k0, int k1, float w, float* __restrict row) {
  for (int k = k0; k <= k1; ++k) {
    const float f = f0 + float(k) * df + 1.0f;
    const int ip = int(f);
    const float fr = f - float(ip);
    row[k] += w * (line[ip] + fr * (line[ip + 1] - line[ip]));
  }
}

#if defined(__x86_64__) && defined(__GNUC__)
__attribute__((target("avx512f,avx512bw,avx512vl,avx512dq"))) void joseph_line_avx512(
    const float* line, const float* dline, double f0, double df, int k0, int k1, float w, float* row) {
  const __m512 lane = _mm512_setr_ps(0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15);
  const __m512 dfv = _mm512_set1_ps(float(df)), wv = _mm512_set1_ps(w);
  const double lo = std::min(0.0, 15 * df);
  for (int kb = k0; kb <= k1; kb += 16) {
    const __mmask16 m = __mmask16((1u << std::min(16, k1 - kb + 1)) - 1);
    const double fk = f0 + kb * df + 1.0;
    const int kmin = int(std::floor(fk + lo)) - 1;
    const __m512 t = _mm512_fmadd_ps(lane, dfv, _mm512_set1_ps(float(fk - kmin)));
    const __m512i idx = _mm512_cvttps_epi32(t);
    const __m512 fr = _mm512_sub_ps(t, _mm512_cvtepi32_ps(idx));
    const __m512 lv = _mm512_permutex2var_ps(_mm512_loadu_ps(line + kmin), idx, _mm512_loadu_ps(line + kmin + 16));
    const __m512 dv = _mm512_permutex2var_ps(_mm512_loadu_ps(dline + kmin), idx, _mm512_loadu_ps(dline + kmin + 16));
    const __m512 r = _mm512_fmadd_ps(wv, _mm512_fmadd_ps(fr, dv, lv), _mm512_maskz_loadu_ps(m, row + kb));
    _mm512_mask_storeu_ps(row + kb, m, r);
  }
}
#endif

}  // namespace pb::synth::kernels
