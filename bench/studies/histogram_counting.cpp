// Study (issue 16, "histogram >= 50 % of one core's read bandwidth"): where the histogram kernel's
// time goes on this CPU, and which ways of counting were tried. Not part of the build; run it with
//   g++ -O3 -march=native -o /tmp/hc bench/studies/histogram_counting.cpp && /tmp/hc
// Data as BM_Histogram256Bins: 2^24 floats, normal(0.5, 0.2) (and a narrow 0.02 variant), 256 bins
// over [-0.5, 1.5], binned 512 at a time as core/histogram.cpp does, then counted by each scheme.
// "binning only" is the binning loop with no counting: the part that reads the data. Best of 15.
#include <immintrin.h>

#include <algorithm>
#include <chrono>
#include <cstdint>
#include <cstdio>
#include <random>
#include <vector>

namespace {

constexpr int kChunk = 512, kBins = 256, kSpare = 256, kSide = kBins + 1;
constexpr size_t kStride = 272;  // one table: the bins and the spare, 64-byte multiple

const char* const kNames[] = {"binning only", "1 table", "2 tables", "4 tables (core/histogram.cpp)", "8 tables",
                              "16 tables", "8 tables, offsets folded into the bins", "4 tables, 16-bit bins read 4 at a time",
                              "4 tables, bins taken from vector registers", "16 lane-private tables, AVX-512 gather + scatter",
                              "pair table (bins + 1)^2: one increment per two voxels"};
constexpr int kVariants = sizeof(kNames) / sizeof(kNames[0]);

template <int kTables>
void count_tables(const int32_t* idx, uint32_t* t) {
  for (int j = 0; j < kChunk; j += kTables)
    for (int k = 0; k < kTables; ++k) ++t[size_t(k) * kStride + size_t(idx[j + k])];
}

void count(int variant, int32_t* idx, uint32_t* t) {
  switch (variant) {
    case 0: asm volatile("" ::"r"(idx) : "memory"); break;
    case 1: count_tables<1>(idx, t); break;
    case 2: count_tables<2>(idx, t); break;
    case 3: count_tables<4>(idx, t); break;
    case 4: count_tables<8>(idx, t); break;
    case 5: count_tables<16>(idx, t); break;
    case 6:
      for (int j = 0; j < kChunk; ++j) idx[j] += (j & 7) * int(kStride);
      for (int j = 0; j < kChunk; ++j) ++t[idx[j]];
      break;
    case 7: {
      alignas(64) uint16_t i16[kChunk];
      for (int j = 0; j < kChunk; ++j) i16[j] = uint16_t(idx[j]);
      const auto* q = reinterpret_cast<const uint64_t*>(i16);
      for (int j = 0; j < kChunk / 4; ++j) {
        const uint64_t w = q[j];
        ++t[w & 0xffff], ++t[kStride + ((w >> 16) & 0xffff)], ++t[2 * kStride + ((w >> 32) & 0xffff)];
        ++t[3 * kStride + (w >> 48)];
      }
      break;
    }
    case 8:
      for (int j = 0; j < kChunk; j += 8) {
        const __m256i v = _mm256_load_si256(reinterpret_cast<const __m256i*>(idx + j));
        const __m128i lo = _mm256_castsi256_si128(v), hi = _mm256_extracti128_si256(v, 1);
        const uint64_t a = uint64_t(_mm_cvtsi128_si64(lo)), b = uint64_t(_mm_extract_epi64(lo, 1));
        const uint64_t c = uint64_t(_mm_cvtsi128_si64(hi)), e = uint64_t(_mm_extract_epi64(hi, 1));
        ++t[uint32_t(a)], ++t[kStride + (a >> 32)], ++t[2 * kStride + uint32_t(b)], ++t[3 * kStride + (b >> 32)];
        ++t[uint32_t(c)], ++t[kStride + (c >> 32)], ++t[2 * kStride + uint32_t(e)], ++t[3 * kStride + (e >> 32)];
      }
      break;
    case 9: {
      const __m512i lane = _mm512_set_epi32(15, 14, 13, 12, 11, 10, 9, 8, 7, 6, 5, 4, 3, 2, 1, 0);
      const __m512i one = _mm512_set1_epi32(1);
      for (int j = 0; j < kChunk; j += 16) {
        const __m512i k = _mm512_add_epi32(_mm512_slli_epi32(_mm512_load_si512(idx + j), 4), lane);
        const __m512i c = _mm512_i32gather_epi32(k, reinterpret_cast<const int*>(t), 4);
        _mm512_i32scatter_epi32(reinterpret_cast<int*>(t), k, _mm512_add_epi32(c, one), 4);
      }
      break;
    }
    case 10: {
      alignas(64) int32_t pair[kChunk / 2];
      for (int j = 0; j < kChunk / 2; ++j) pair[j] = idx[2 * j] * kSide + idx[2 * j + 1];
      for (int j = 0; j < kChunk / 2; ++j) ++t[pair[j]];
      break;
    }
  }
}

}  // namespace

int main() {
  const int64_t n = int64_t(1) << 24;
  std::vector<float> d(size_t(n), 0.0f);
  for (const float sigma : {0.2f, 0.02f}) {
    std::mt19937 rng(1);
    std::normal_distribution<float> nd(0.5f, sigma);
    for (auto& x : d) x = nd(rng);
    std::printf("normal(0.5, %.2f), %lld voxels, 256 bins:\n", double(sigma), static_cast<long long>(n));
    const float flo = -0.5f, scale = 128.0f, last = 255.0f;
    for (int variant = 0; variant < kVariants; ++variant) {
      double best = 1e9;
      uint64_t total = 0;
      for (int rep = 0; rep < 15; ++rep) {
        std::vector<uint32_t> table(size_t(kSide) * kSide + 16 * kStride, 0);
        const auto t0 = std::chrono::steady_clock::now();
        alignas(64) int32_t idx[kChunk];
        for (int64_t i = 0; i < n; i += kChunk) {
          for (int j = 0; j < kChunk; ++j) {  // as core/histogram.cpp's Binner (vectorises)
            const float v = d[size_t(i + j)];
            float f = (v - flo) * scale;
            f = f > 0.0f ? f : 0.0f;
            f = f < last ? f : last;
            idx[j] = v != v ? kSpare : int(f);
          }
          count(variant, idx, table.data());
        }
        best = std::min(best, std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count());
        total = 0;
        for (const auto c : table) total += c;
      }
      const uint64_t expect = variant == 0 ? 0 : variant == 10 ? uint64_t(n / 2) : uint64_t(n);
      std::printf("  %-55s %6.2f ms %5.2f Gvoxel/s %5.1f GB/s%s\n", kNames[variant], best * 1e3, double(n) / best / 1e9,
                  double(n) * 4 / best / 1e9, total == expect ? "" : "  COUNT WRONG");
    }
  }
}
