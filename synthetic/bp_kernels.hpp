#pragma once
// Back-projection kernels of FBP (fbp.cpp), internal to synthetic/. Pixel (i, j) of an angle reads
// the filtered projection at u = u00 + i du + j su (in bins), with linear interpolation
// q[k] + w dq[k], k = floor(u), w = u - k, dq[k] = q[k+1] - q[k]. Every pixel sums its angles in
// order 0..N-1, whatever the kernel's tiling and the thread count.
//
// SIMD kernels (AVX-512: 16 pixels, AVX2: 8 pixels of one image row per register; a tile is R
// rows, its accumulators stay in registers over a chunk of angles) avoid gathers: the bins a tile
// needs for one angle fit, for pixels no coarser than bins, in a window of 2 x lanes floats
// (Window below). The window is loaded once per angle and tile (two registers of q, two of dq) and
// every row picks its values with a two-source permute. Steeper angles take one window per row
// (|du| <= kMaxDu), then gathers.
#include <cstddef>
#include <vector>

namespace pb::synth::bp {

constexpr double kMaxDu = 1.8;   // 15 x 1.8 + 3 < 32 (AVX-512) and 7 x 1.8 + 3 < 16 (AVX2)
constexpr int kFront = 32;       // zero bins before each padded row: tail lanes may reach u ~ -27
// Rows per tile; with |du|, |su| <= 1 one window serves the tile at every angle.
constexpr int kRows512 = 16;  // 16 accumulators; 15 |du| + 15 |su| + 3 <= 24.3 < 32 bins
constexpr int kRows256 = 8;   // 8 accumulators; 7 |du| + 7 |su| + 3 <= 12.9 < 16 bins
constexpr int kAngleChunk = 64;  // angles per pass over a row group (their rows stay in L2)

inline int round_up(int n, int m) { return (n + m - 1) / m * m; }

// q and dq of every angle in zero-padded rows of length L (q at 0, dq at L), with per-angle
// coordinates in padded bins.
struct BpPlan {
  int L = 0;
  float* rows = nullptr;  // angles x 2L, from allocate_buffer, every float written by its angle's thread
  size_t bytes = 0;
  BpPlan() = default;
  BpPlan(const BpPlan&) = delete;
  BpPlan& operator=(const BpPlan&) = delete;
  ~BpPlan();
  void allocate(int angles, int bins);  // sets L and rows
  std::vector<double> u00, du, su;  // u of pixel (0, 0) in padded bins; steps per pixel and row
  std::vector<float> du_f;
  float* q(int a) const { return rows + size_t(a) * 2 * size_t(L); }
};

// R rows x lanes pixels from (i0, j0), angles [a0, a1), adding into acc (row stride `stride`).
using TileFn = void (*)(const BpPlan&, int j0, int i0, int a0, int a1, float* acc, int stride);

#if defined(__x86_64__) && defined(__GNUC__)
constexpr bool kSimdBuilt = true;
#else
constexpr bool kSimdBuilt = false;
#endif
// The tile of `rows` rows (1..kRows512, 1..kRows256); nullptr where the kernels are not built.
TileFn tile_avx512(int rows);
TileFn tile_avx2(int rows);

}  // namespace pb::synth::bp
