// Histograms and statistics over float volumes (core/histogram.hpp): per-thread partials merged in
// thread order; grey-level counts (LevelCounts) for integer volumes, from which both are exact.
#include "core/histogram.hpp"

#include <omp.h>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <stdexcept>

namespace pb {

uint64_t Histogram::total() const {
  uint64_t t = 0;
  for (auto c : counts) t += c;
  return t;
}

int Histogram::bin_of(double v) const {
  const double f = (v - lo) / (hi - lo) * double(counts.size());
  if (!(f > 0)) return 0;                                         // below lo, -inf, NaN
  if (!(f < double(counts.size()))) return int(counts.size()) - 1;  // at or above hi, +inf
  return int(f);
}

namespace {

// Voxels per block: stats are reduced per block and the blocks merged in index order, so the mean
// does not depend on the number of threads (each thread takes whole blocks).
constexpr int64_t kBlock = int64_t(1) << 16;

struct Partial {
  float lo = std::numeric_limits<float>::infinity(), hi = -std::numeric_limits<float>::infinity();
  double sum = 0;
  int64_t count = 0, nan = 0;
};

// One block, four voxels at a time in SSE2 vectors (GCC vector extensions: the portable baseline),
// lanes merged in a fixed order; non-finite and masked-out voxels add nothing.
typedef float F4 __attribute__((vector_size(16)));
typedef int32_t I4 __attribute__((vector_size(16)));
typedef double D2 __attribute__((vector_size(16)));

template <bool kMask>
Partial block_stats(const float* d, const uint8_t* mask, int64_t b, int64_t e) {
  const float inf = std::numeric_limits<float>::infinity();
  F4 lo = {inf, inf, inf, inf}, hi = -lo;
  D2 sum_a = {0, 0}, sum_b = {0, 0};
  I4 count = {0, 0, 0, 0}, nan = count;
  const int64_t m = b + (e - b) / 4 * 4;
  for (int64_t i = b; i < m; i += 4) {
    F4 v;
    std::memcpy(&v, d + i, sizeof v);
    I4 in = {-1, -1, -1, -1};
    if constexpr (kMask) in = I4{mask[i], mask[i + 1], mask[i + 2], mask[i + 3]} != 0;
    const I4 finite = ((v - v) == 0.0f) & in;  // false for NaN and +-inf
    lo = finite & (v < lo) ? v : lo;
    hi = finite & (v > hi) ? v : hi;
    const F4 z = finite ? v : F4{0, 0, 0, 0};
    sum_a += D2{double(z[0]), double(z[1])};
    sum_b += D2{double(z[2]), double(z[3])};
    count -= finite;
    nan -= (v != v) & in;
  }
  Partial p;
  for (int j = 0; j < 4; ++j) {
    p.lo = std::min(p.lo, lo[j]);
    p.hi = std::max(p.hi, hi[j]);
    p.count += count[j];
    p.nan += nan[j];
  }
  p.sum = (sum_a[0] + sum_a[1]) + (sum_b[0] + sum_b[1]);
  for (int64_t i = m; i < e; ++i) {
    const float v = d[i];
    const bool in = !kMask || mask[i];
    if (in && v - v == 0.0f) p.lo = std::min(p.lo, v), p.hi = std::max(p.hi, v), p.sum += double(v), ++p.count;
    p.nan += in && v != v;
  }
  return p;
}

}  // namespace

Stats compute_stats(const float* d, int64_t n, const uint8_t* mask) {
  const int64_t blocks = (n + kBlock - 1) / kBlock;
  std::vector<Partial> part(size_t(std::max<int64_t>(blocks, 1)));
#pragma omp parallel for schedule(static)
  for (int64_t k = 0; k < blocks; ++k)
    part[size_t(k)] = mask ? block_stats<true>(d, mask, k * kBlock, std::min(n, (k + 1) * kBlock))
                           : block_stats<false>(d, mask, k * kBlock, std::min(n, (k + 1) * kBlock));
  Stats s;
  double sum = 0, lo = std::numeric_limits<double>::infinity(), hi = -lo;
  for (int64_t k = 0; k < blocks; ++k) {  // in block order: the same sum for any thread count
    const Partial& p = part[size_t(k)];
    lo = std::min(lo, double(p.lo));
    hi = std::max(hi, double(p.hi));
    sum += p.sum;
    s.count += p.count;
    s.nan_count += p.nan;
  }
  if (s.count > 0) {
    s.min = lo;
    s.max = hi;
    s.mean = sum / double(s.count);
  }
  return s;
}

namespace {

// The bin of a value, in float as compute_histogram has always counted: monotone non-decreasing in
// v (rounding, a positive scale and the clamps all are), NaN in bin 0.
struct Binner {
  float flo, scale, last;
  explicit Binner(const Histogram& h)
      : flo(float(h.lo)), scale(float(double(h.bins()) / (h.hi - h.lo))), last(float(h.bins() - 1)) {}
  int operator()(float v) const {
    float f = (v - flo) * scale;  // +-inf stay +-inf (scale is finite and > 0)
    f = f > 0.0f ? f : 0.0f;      // below lo, -inf and NaN: the first bin
    f = f < last ? f : last;      // above hi and +inf: the last bin
    return int(f);
  }
};

// Counting: the bins of 512 voxels are computed together (a loop that vectorises), then counted
// into four interleaved tables of 32-bit counters, so that runs of one bin do not wait on each
// other's increments. NaN and masked-out voxels go to a spare bin past the last. 512 rather than
// 64: the counting loop then reads bins stored long before, not from vector stores still in flight
// (loads that wait for a wide store to forward stalled the 64-voxel version; BM_Histogram256Bins).
constexpr int kTables = 4;
constexpr int kChunk = 512;
constexpr int64_t kFlush = int64_t(1) << 30;  // voxels counted before the 32-bit tables are emptied

template <bool kMask>
__attribute__((always_inline)) inline void count_range(const float* d, const uint8_t* mask, int64_t b, int64_t e,
                                                       const Binner& bin, int spare, uint32_t* tables, size_t stride) {
  alignas(64) int32_t idx[kChunk];
  int64_t i = b;
  for (; i + kChunk <= e; i += kChunk) {
    for (int j = 0; j < kChunk; ++j) {  // vectorises
      const float v = d[i + j];
      const int k = bin(v);
      int in = 1;
      if constexpr (kMask) in = mask[i + j];
      idx[j] = (v != v) | (in == 0) ? spare : k;
    }
    for (int j = 0; j < kChunk; j += kTables)
      for (int t = 0; t < kTables; ++t) ++tables[size_t(t) * stride + size_t(idx[j + t])];
  }
  for (; i < e; ++i) {
    const float v = d[i];
    bool skip = v != v;
    if constexpr (kMask) skip = skip || !mask[i];
    ++tables[skip ? size_t(spare) : size_t(bin(v))];
  }
}

// The binning loops take the widest vectors the CPU has (clones picked at run time; the same float
// operations at any width, so the same counts).
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__)
#define PB_HIST_CLONES __attribute__((target_clones("avx512f", "avx2", "default")))
#else
#define PB_HIST_CLONES
#endif
PB_HIST_CLONES void count_plain(const float* d, int64_t b, int64_t e, const Binner& bin, int spare, uint32_t* tables,
                                size_t stride) {
  count_range<false>(d, nullptr, b, e, bin, spare, tables, stride);
}
PB_HIST_CLONES void count_masked(const float* d, const uint8_t* mask, int64_t b, int64_t e, const Binner& bin, int spare,
                                 uint32_t* tables, size_t stride) {
  count_range<true>(d, mask, b, e, bin, spare, tables, stride);
}

}  // namespace

Histogram compute_histogram(const float* d, int64_t n, double lo, double hi, int bins, const uint8_t* mask) {
  if (!std::isfinite(lo) || !std::isfinite(hi) || bins < 1)
    throw std::invalid_argument("compute_histogram: the range must be finite and bins >= 1");
  Histogram h;
  h.lo = lo;
  h.hi = hi > lo ? hi : lo + 1.0;  // a constant volume still gets a valid bin width
  h.counts.assign(size_t(bins), 0);
  const Binner bin(h);
  const size_t stride = (size_t(bins) + 1 + 15) & ~size_t(15);  // the spare bin; tables 64-byte apart
  const int nt = omp_get_max_threads();
  std::vector<std::vector<uint64_t>> local(static_cast<size_t>(nt));
#pragma omp parallel num_threads(nt)
  {
    const int t = omp_get_thread_num(), used = omp_get_num_threads();
    std::vector<uint64_t>& out = local[size_t(t)];
    out.assign(size_t(bins), 0);
    std::vector<uint32_t> tables(stride * kTables, 0);
    const int64_t b = n * t / used, e = n * (t + 1) / used;
    for (int64_t c = b; c < e; c += kFlush) {
      const int64_t ce = std::min(e, c + kFlush);
      if (mask) count_masked(d, mask, c, ce, bin, bins, tables.data(), stride);
      else count_plain(d, c, ce, bin, bins, tables.data(), stride);
      for (int k = 0; k < kTables; ++k)
        for (int b2 = 0; b2 < bins; ++b2) out[size_t(b2)] += tables[size_t(k) * stride + size_t(b2)];
      std::fill(tables.begin(), tables.end(), 0u);
    }
  }
  for (const auto& l : local)  // integer counts: the same for any thread count
    for (size_t b = 0; b < l.size(); ++b) h.counts[b] += l[b];
  return h;
}

LevelCounts::LevelCounts(VoxelType t)
    : offset_(t == VoxelType::i16 ? -32768 : 0), levels_(t == VoxelType::u8 ? 256 : 65536), counts_(size_t(levels_), 0) {
  if (t == VoxelType::f32) throw std::invalid_argument("LevelCounts: float32 has no grey levels to count");
}

namespace {

// Grey levels of [b, e) counted into c (levels + 1 entries: the last one takes masked-out voxels),
// 512 voxels at a time: their table indices first (a loop that vectorises; the widest vectors the
// CPU has), then the increments. Returns whether some voxel (inside the mask) is not a whole level
// in [off, off + levels - 1] (a range test before the conversion, which NaN fails; then a whole
// number).
template <bool kMask>
__attribute__((always_inline)) inline bool count_levels(const float* d, const uint8_t* mask, int64_t b, int64_t e,
                                                        int32_t off, int32_t levels, uint32_t* c) {
  const float lo = float(off), hi = float(off + levels - 1);
  alignas(64) int32_t idx[kChunk];
  int bad = 0;
  for (int64_t i = b; i < e; i += kChunk) {
    const int n = int(std::min<int64_t>(kChunk, e - i));
    for (int j = 0; j < n; ++j) {  // vectorises
      const float v = d[i + j];
      const int inside = (v >= lo) & (v <= hi);  // NaN: 0
      const int32_t k = int32_t(inside ? v : lo);
      int in = 1;
      if constexpr (kMask) in = mask[i + j] != 0;
      bad |= in & ((inside & int(float(k) == v)) ^ 1);
      idx[j] = in ? k - off : levels;
    }
    for (int j = 0; j < n; ++j) ++c[size_t(idx[j])];
    if (bad) return true;
  }
  return false;
}
PB_HIST_CLONES bool count_levels_plain(const float* d, int64_t b, int64_t e, int32_t off, int32_t levels, uint32_t* c) {
  return count_levels<false>(d, nullptr, b, e, off, levels, c);
}
PB_HIST_CLONES bool count_levels_masked(const float* d, const uint8_t* mask, int64_t b, int64_t e, int32_t off,
                                        int32_t levels, uint32_t* c) {
  return count_levels<true>(d, mask, b, e, off, levels, c);
}

}  // namespace

bool LevelCounts::add(const float* d, int64_t n, const uint8_t* mask) {
  const int32_t off = int32_t(offset_), levels = int32_t(levels_);
  const int nt = omp_get_max_threads();
  std::vector<std::vector<uint64_t>> local(static_cast<size_t>(nt));
  int bad = 0;
#pragma omp parallel num_threads(nt) reduction(| : bad)
  {
    const int t = omp_get_thread_num(), used = omp_get_num_threads();
    std::vector<uint64_t>& out = local[size_t(t)];
    out.assign(size_t(levels_), 0);
    std::vector<uint32_t> c(size_t(levels_) + 1, 0);  // 32-bit: a 256 KiB table stays in L2
    const int64_t b = n * t / used, e = n * (t + 1) / used;
    for (int64_t q = b; q < e && !bad; q += kFlush) {
      const int64_t qe = std::min(e, q + kFlush);
      bad |= mask ? count_levels_masked(d, mask, q, qe, off, levels, c.data()) : count_levels_plain(d, q, qe, off, levels, c.data());
      for (size_t k = 0; k < out.size(); ++k) out[k] += c[k];
      std::fill(c.begin(), c.end(), 0u);
    }
  }
  if (bad) return false;
  for (const auto& l : local)
    for (size_t k = 0; k < l.size(); ++k) counts_[k] += l[k];
  return true;
}

Stats LevelCounts::stats() const {
  Stats s;
  int64_t sum = 0;
  bool first = true;
  for (int64_t k = 0; k < levels_; ++k) {
    const uint64_t c = counts_[size_t(k)];
    if (!c) continue;
    if (first) s.min = double(k + offset_), first = false;
    s.max = double(k + offset_);
    sum += int64_t(c) * (k + offset_);
    s.count += int64_t(c);
  }
  if (s.count > 0) s.mean = double(sum) / double(s.count);
  return s;
}

Histogram LevelCounts::histogram(double lo, double hi, int bins) const {
  std::vector<float> levels;
  for (int64_t k = 0; k < levels_; ++k)
    if (counts_[size_t(k)]) levels.push_back(float(k + offset_));
  Histogram per_level = compute_histogram(levels.data(), int64_t(levels.size()), lo, hi, bins);
  Histogram h = per_level;
  size_t next = 0;
  for (int b = 0; b < bins; ++b) {
    uint64_t total = 0;
    for (uint64_t j = 0; j < per_level.counts[size_t(b)]; ++j, ++next)
      total += counts_[size_t(int64_t(levels[next]) - offset_)];
    h.counts[size_t(b)] = total;
  }
  return h;
}

double histogram_quantile(const Histogram& h, double fraction) {
  const double target = fraction * double(h.total());
  double acc = 0;
  for (int b = 0; b < h.bins(); ++b) {
    const double c = double(h.counts[size_t(b)]);
    if (acc + c >= target && c > 0) return h.edge(b) + h.width() * (target - acc) / c;
    acc += c;
  }
  return h.hi;
}

}  // namespace pb
