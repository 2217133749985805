// Back-projection tiles of FBP: AVX-512 (16 pixels per register) and AVX2 (8 pixels) kernels that
// read a window of the filtered projection instead of gathering (bp_kernels.hpp), and the one place
// that decides which window serves which tile (Window). Conventions: bp_kernels.hpp, ct_geometry.hpp.
#include "synthetic/bp_kernels.hpp"

#include <algorithm>
#include <cmath>

#include "core/memory.hpp"

#if defined(__x86_64__) && defined(__GNUC__)
// GCC 12 warns about the _mm512_undefined_* values inside its own intrinsic headers (a false positive).
#pragma GCC diagnostic push
#pragma GCC diagnostic ignored "-Wmaybe-uninitialized"
#include <immintrin.h>
#pragma GCC diagnostic pop
#endif

namespace pb::synth::bp {

BpPlan::~BpPlan() {
  if (rows) free_buffer(rows, bytes);
}

void BpPlan::allocate(int angles, int bins) {
  // Tail lanes reach (lanes - 1) kMaxDu bins past either end of the detector, and a window reads
  // 2 x lanes floats from kmin.
  L = round_up(kFront + bins + 2 * 16 + 32, 16);
  bytes = sizeof(float) * size_t(angles) * 2 * size_t(L);
  rows = static_cast<float*>(allocate_buffer(bytes));
}

namespace {

// The window logic of a tile of R rows x Lanes pixels at one angle (u = v at its first pixel,
// steps du per pixel and su per row, in bins). Its reads span (Lanes-1)|du| + (R-1)|su| bins plus
// the interpolation neighbour, from kmin = floor(min u) - 1: a window of 2 x Lanes floats from
// kmin holds them while that span is at most 2 Lanes - 4 (one window for the tile). Otherwise each
// row takes its own window from its own kmin while (Lanes-1)|du| + 3 < 2 Lanes, i.e. |du| <= kMaxDu
// for both widths; steeper angles gather.
template <int Lanes, int R>
struct Window {
  static constexpr double kSpan = 2 * Lanes - 4;
  static bool whole_tile(double du, double su) { return (Lanes - 1) * std::abs(du) + (R - 1) * std::abs(su) <= kSpan; }
  static double lo_du(double du) { return std::min(0.0, (Lanes - 1) * du); }  // lowest lane offset of a row
  static int tile_kmin(double v, double du, double su) { return int(v + lo_du(du) + (R - 1) * std::min(0.0, su)) - 1; }
  static bool per_row(double du) { return std::abs(du) <= kMaxDu; }
};
static_assert(15 * kMaxDu + 3 < 32 && 7 * kMaxDu + 3 < 16, "one window per row at |du| <= kMaxDu");

#if defined(__x86_64__) && defined(__GNUC__)
// Broadcasts of per-row values stored by a tile: from memory they take a load port, where the
// compiler's own choice (a shuffle and a register broadcast of the value it still holds) takes
// two ALU slots.
__attribute__((target("avx512f"))) inline __m512 bcast16(const float& x) {
  __m512 v;
  __asm__("vbroadcastss %1, %0" : "=v"(v) : "m"(x));
  return v;
}
__attribute__((target("avx2"))) inline __m256 bcast8(const float& x) {
  __m256 v;
  __asm__("vbroadcastss %1, %0" : "=x"(v) : "m"(x));
  return v;
}

// R rows x 16 pixels from (i0, j0), angles [a0, a1), adding into acc (row stride `stride`).
template <int R>
__attribute__((target("avx512f,avx512bw,avx512vl,avx512dq"))) void bp_tile_avx512(
    const BpPlan& p, int j0, int i0, int a0, int a1, float* acc, int stride) {
  static_assert(R >= 1 && R <= 16, "rows per tile");
  using W = Window<16, R>;
  __m512 s[R];
#pragma GCC unroll 16
  for (int r = 0; r < R; ++r) s[r] = _mm512_loadu_ps(acc + size_t(r) * size_t(stride));
  const __m512 lane = _mm512_setr_ps(0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15);
  const __m512d rows = _mm512_setr_pd(0, 1, 2, 3, 4, 5, 6, 7), eight = _mm512_set1_pd(8);
  const __m512i last = _mm512_set1_epi32(p.L - 2);
  alignas(32) float base[16];
  alignas(32) int kmin[16];
  for (int a = a0; a < a1; ++a) {
    const float* q = p.q(a);
    const float* dq = q + p.L;
    const double du = p.du[size_t(a)], su = p.su[size_t(a)], v = p.u00[size_t(a)] + i0 * du + j0 * su;
    const __m512 duv = _mm512_set1_ps(p.du_f[size_t(a)]);
    // u of each row's lane 0, rows 0-7 and 8-15
    const __m512d ur = _mm512_fmadd_pd(rows, _mm512_set1_pd(su), _mm512_set1_pd(v));
    const __m512d ur8 = _mm512_fmadd_pd(_mm512_add_pd(rows, eight), _mm512_set1_pd(su), _mm512_set1_pd(v));
    const double lo_du = W::lo_du(du);
    if (W::whole_tile(du, su)) {
      const int k0 = W::tile_kmin(v, du, su);
      _mm256_store_ps(base, _mm512_cvtpd_ps(_mm512_sub_pd(ur, _mm512_set1_pd(k0))));
      if (R > 8) _mm256_store_ps(base + 8, _mm512_cvtpd_ps(_mm512_sub_pd(ur8, _mm512_set1_pd(k0))));
      const __m512 q0 = _mm512_loadu_ps(q + k0), q1 = _mm512_loadu_ps(q + k0 + 16);
      const __m512 d0 = _mm512_loadu_ps(dq + k0), d1 = _mm512_loadu_ps(dq + k0 + 16);
#pragma GCC unroll 16
      for (int r = 0; r < R; ++r) {
        const __m512 t = _mm512_fmadd_ps(lane, duv, bcast16(base[r]));
        const __m512i idx = _mm512_cvttps_epi32(t);
        const __m512 w = _mm512_sub_ps(t, _mm512_cvtepi32_ps(idx));
        s[r] = _mm512_add_ps(s[r], _mm512_fmadd_ps(w, _mm512_permutex2var_ps(d0, idx, d1),
                                                   _mm512_permutex2var_ps(q0, idx, q1)));
      }
    } else if (W::per_row(du)) {
      const __m256i km = _mm256_sub_epi32(_mm512_cvttpd_epi32(_mm512_add_pd(ur, _mm512_set1_pd(lo_du))),
                                          _mm256_set1_epi32(1));
      _mm256_store_si256(reinterpret_cast<__m256i*>(kmin), km);
      _mm256_store_ps(base, _mm512_cvtpd_ps(_mm512_sub_pd(ur, _mm512_cvtepi32_pd(km))));
      if (R > 8) {
        const __m256i km8 = _mm256_sub_epi32(_mm512_cvttpd_epi32(_mm512_add_pd(ur8, _mm512_set1_pd(lo_du))),
                                             _mm256_set1_epi32(1));
        _mm256_store_si256(reinterpret_cast<__m256i*>(kmin + 8), km8);
        _mm256_store_ps(base + 8, _mm512_cvtpd_ps(_mm512_sub_pd(ur8, _mm512_cvtepi32_pd(km8))));
      }
#pragma GCC unroll 16
      for (int r = 0; r < R; ++r) {
        const int k = kmin[r];
        const __m512 t = _mm512_fmadd_ps(lane, duv, bcast16(base[r]));
        const __m512i idx = _mm512_cvttps_epi32(t);
        const __m512 w = _mm512_sub_ps(t, _mm512_cvtepi32_ps(idx));
        const __m512 qv = _mm512_permutex2var_ps(_mm512_loadu_ps(q + k), idx, _mm512_loadu_ps(q + k + 16));
        const __m512 dv = _mm512_permutex2var_ps(_mm512_loadu_ps(dq + k), idx, _mm512_loadu_ps(dq + k + 16));
        s[r] = _mm512_add_ps(s[r], _mm512_fmadd_ps(w, dv, qv));
      }
    } else {  // gathers
      _mm256_store_ps(base, _mm512_cvtpd_ps(ur));
      if (R > 8) _mm256_store_ps(base + 8, _mm512_cvtpd_ps(ur8));
#pragma GCC unroll 16
      for (int r = 0; r < R; ++r) {
        const __m512 t = _mm512_fmadd_ps(lane, duv, bcast16(base[r]));
        // Tail lanes past the row end may leave the detector: clamp them (their sums are dropped).
        const __m512i idx = _mm512_min_epi32(_mm512_max_epi32(_mm512_cvttps_epi32(t), _mm512_setzero_si512()), last);
        const __m512 w = _mm512_sub_ps(t, _mm512_cvtepi32_ps(idx));
        const __m512 qv = _mm512_i32gather_ps(idx, q, 4), dv = _mm512_i32gather_ps(idx, dq, 4);
        s[r] = _mm512_add_ps(s[r], _mm512_fmadd_ps(w, dv, qv));
      }
    }
  }
#pragma GCC unroll 16
  for (int r = 0; r < R; ++r) _mm512_storeu_ps(acc + size_t(r) * size_t(stride), s[r]);
}

// The AVX2 twin: 8 pixels, window of 16 bins, two one-source permutes and a blend per table.
__attribute__((target("avx2,fma"))) inline __m256 pick16(__m256 lo, __m256 hi, __m256i idx, __m256 upper) {
  return _mm256_blendv_ps(_mm256_permutevar8x32_ps(lo, idx), _mm256_permutevar8x32_ps(hi, idx), upper);
}

template <int R>
__attribute__((target("avx2,fma"))) void bp_tile_avx2(const BpPlan& p, int j0, int i0, int a0, int a1, float* acc,
                                                      int stride) {
  static_assert(R >= 1 && R <= 8, "rows per tile");
  using W = Window<8, R>;
  __m256 s[R];
#pragma GCC unroll 8
  for (int r = 0; r < R; ++r) s[r] = _mm256_loadu_ps(acc + size_t(r) * size_t(stride));
  const __m256 lane = _mm256_setr_ps(0, 1, 2, 3, 4, 5, 6, 7);
  const __m256d rows = _mm256_setr_pd(0, 1, 2, 3), four = _mm256_set1_pd(4);
  const __m256i last = _mm256_set1_epi32(p.L - 2);
  alignas(32) float base[8];
  alignas(32) int kmin[8];
  for (int a = a0; a < a1; ++a) {
    const float* q = p.q(a);
    const float* dq = q + p.L;
    const double du = p.du[size_t(a)], su = p.su[size_t(a)], v = p.u00[size_t(a)] + i0 * du + j0 * su;
    const __m256 duv = _mm256_set1_ps(p.du_f[size_t(a)]);
    const __m256d ur = _mm256_fmadd_pd(rows, _mm256_set1_pd(su), _mm256_set1_pd(v));  // rows 0-3, 4-7
    const __m256d ur4 = _mm256_fmadd_pd(_mm256_add_pd(rows, four), _mm256_set1_pd(su), _mm256_set1_pd(v));
    const double lo_du = W::lo_du(du);
    if (W::whole_tile(du, su)) {
      const int k0 = W::tile_kmin(v, du, su);
      _mm_store_ps(base, _mm256_cvtpd_ps(_mm256_sub_pd(ur, _mm256_set1_pd(k0))));
      if (R > 4) _mm_store_ps(base + 4, _mm256_cvtpd_ps(_mm256_sub_pd(ur4, _mm256_set1_pd(k0))));
      const __m256 q0 = _mm256_loadu_ps(q + k0), q1 = _mm256_loadu_ps(q + k0 + 8);
      const __m256 d0 = _mm256_loadu_ps(dq + k0), d1 = _mm256_loadu_ps(dq + k0 + 8);
#pragma GCC unroll 8
      for (int r = 0; r < R; ++r) {
        const __m256 t = _mm256_fmadd_ps(lane, duv, bcast8(base[r]));
        const __m256i idx = _mm256_cvttps_epi32(t);
        const __m256 w = _mm256_sub_ps(t, _mm256_cvtepi32_ps(idx));
        const __m256 upper = _mm256_castsi256_ps(_mm256_slli_epi32(idx, 28));  // sign bit = (idx & 8)
        s[r] = _mm256_add_ps(s[r], _mm256_fmadd_ps(w, pick16(d0, d1, idx, upper), pick16(q0, q1, idx, upper)));
      }
    } else if (W::per_row(du)) {
      _mm_store_si128(reinterpret_cast<__m128i*>(kmin),
                      _mm_sub_epi32(_mm256_cvttpd_epi32(_mm256_add_pd(ur, _mm256_set1_pd(lo_du))), _mm_set1_epi32(1)));
      _mm_store_si128(reinterpret_cast<__m128i*>(kmin + 4),
                      _mm_sub_epi32(_mm256_cvttpd_epi32(_mm256_add_pd(ur4, _mm256_set1_pd(lo_du))), _mm_set1_epi32(1)));
#pragma GCC unroll 8
      for (int r = 0; r < R; ++r) {
        const int k = kmin[r];
        base[r] = float((r < 4 ? ur[r] : ur4[r - 4]) - k);
        const __m256 t = _mm256_fmadd_ps(lane, duv, _mm256_set1_ps(base[r]));
        const __m256i idx = _mm256_cvttps_epi32(t);
        const __m256 w = _mm256_sub_ps(t, _mm256_cvtepi32_ps(idx));
        const __m256 upper = _mm256_castsi256_ps(_mm256_slli_epi32(idx, 28));
        const __m256 qv = pick16(_mm256_loadu_ps(q + k), _mm256_loadu_ps(q + k + 8), idx, upper);
        const __m256 dv = pick16(_mm256_loadu_ps(dq + k), _mm256_loadu_ps(dq + k + 8), idx, upper);
        s[r] = _mm256_add_ps(s[r], _mm256_fmadd_ps(w, dv, qv));
      }
    } else {  // gathers
      _mm_store_ps(base, _mm256_cvtpd_ps(ur));
      _mm_store_ps(base + 4, _mm256_cvtpd_ps(ur4));
#pragma GCC unroll 8
      for (int r = 0; r < R; ++r) {
        const __m256 t = _mm256_fmadd_ps(lane, duv, bcast8(base[r]));
        const __m256i idx = _mm256_min_epi32(_mm256_max_epi32(_mm256_cvttps_epi32(t), _mm256_setzero_si256()), last);
        const __m256 w = _mm256_sub_ps(t, _mm256_cvtepi32_ps(idx));
        const __m256 qv = _mm256_i32gather_ps(q, idx, 4), dv = _mm256_i32gather_ps(dq, idx, 4);
        s[r] = _mm256_add_ps(s[r], _mm256_fmadd_ps(w, dv, qv));
      }
    }
  }
#pragma GCC unroll 8
  for (int r = 0; r < R; ++r) _mm256_storeu_ps(acc + size_t(r) * size_t(stride), s[r]);
}

#endif

}  // namespace

#if defined(__x86_64__) && defined(__GNUC__)
TileFn tile_avx512(int rows) {
  static const TileFn tiles[16] = {&bp_tile_avx512<1>,  &bp_tile_avx512<2>,  &bp_tile_avx512<3>,  &bp_tile_avx512<4>,
                                   &bp_tile_avx512<5>,  &bp_tile_avx512<6>,  &bp_tile_avx512<7>,  &bp_tile_avx512<8>,
                                   &bp_tile_avx512<9>,  &bp_tile_avx512<10>, &bp_tile_avx512<11>, &bp_tile_avx512<12>,
                                   &bp_tile_avx512<13>, &bp_tile_avx512<14>, &bp_tile_avx512<15>, &bp_tile_avx512<16>};
  return tiles[rows - 1];
}
TileFn tile_avx2(int rows) {
  static const TileFn tiles[8] = {&bp_tile_avx2<1>, &bp_tile_avx2<2>, &bp_tile_avx2<3>, &bp_tile_avx2<4>,
                                  &bp_tile_avx2<5>, &bp_tile_avx2<6>, &bp_tile_avx2<7>, &bp_tile_avx2<8>};
  return tiles[rows - 1];
}
#else
TileFn tile_avx512(int) { return nullptr; }
TileFn tile_avx2(int) { return nullptr; }
#endif

}  // namespace pb::synth::bp
