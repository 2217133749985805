// Pre-filters that compose with any method ("FILTER+METHOD", see methods/registry.hpp).
//   median:   3D median over a (2r+1)^3 cube (Tukey 1977, Exploratory Data Analysis), computed
//             with a pruned Batcher odd-even merge sorting network (Batcher 1968, AFIPS SJCC)
//             over 16 voxels at a time (for 3x3x3 with AVX: built at compile time, unrolled, the
//             wires in registers, 8 voxels at a time); borders reflect (scipy.ndimage 'reflect').
//   gaussian: separable 3D Gaussian, sigma in mm or voxels, kernel truncated at 4 sigma, borders
//             reflect (as scipy.ndimage.gaussian_filter).
//   nlm:      non-local means (Buades, Coll & Morel 2005, CVPR), slice by slice (axial) with
//             OpenCV's fastNlMeansDenoising on 16-bit-quantised slices.
#include <omp.h>
#if defined(__SSE2__)
#include <immintrin.h>
#endif

#include <algorithm>
#include <array>
#include <cmath>
#include <limits>
#include <opencv2/photo.hpp>
#include <utility>
#include <vector>

#include "core/cpu.hpp"
#include "core/error.hpp"
#include "core/histogram.hpp"
#include "methods/prefilter.hpp"
#include "methods/registry.hpp"

namespace pb {

namespace {

// A comparator of a sorting network: afterwards wire a holds the lower value, wire b the higher.
struct Comparator {
  int a = 0, b = 0;
};

// A vector of fixed capacity usable in constant expressions (std::vector is not, in C++17), so
// that one builder makes both the run-time networks (on std::vector) and the compile-time 3x3x3
// network below (on this).
template <class T, size_t N>
struct StaticVec {
  T items[N] = {};
  size_t count = 0;
  constexpr void push_back(const T& x) { items[count++] = x; }
  constexpr void assign(size_t n, const T& x) {
    for (count = 0; count < n;) items[count++] = x;
  }
  constexpr size_t size() const { return count; }
  constexpr T& operator[](size_t i) { return items[i]; }
  constexpr const T& operator[](size_t i) const { return items[i]; }
};
template <class T>
using DynamicVec = std::vector<T>;

// Batcher's odd-even merge sort network for n = 2^k wires, as (low, high) comparators.
template <class Out>
constexpr void batcher_merge(int lo, int n, int r, Out& out) {
  const int step = r * 2;
  if (step < n) {
    batcher_merge(lo, n, step, out);
    batcher_merge(lo + r, n, step, out);
    for (int i = lo + r; i + r < lo + n; i += step) out.push_back({i, i + r});
  } else {
    out.push_back({lo, lo + r});
  }
}
template <class Out>
constexpr void batcher_sort(int lo, int n, Out& out) {
  if (n > 1) {
    const int m = n / 2;
    batcher_sort(lo, m, out);
    batcher_sort(lo + m, m, out);
    batcher_merge(lo, n, 1, out);
  }
}

template <template <class> class Vec>
struct BasicMedianNetwork {
  int wires = 0;      // power of two >= window size
  int low_pad = 0;    // wires filled with -inf before the data
  int out_wire = 0;   // wire holding the median after the network
  Vec<Comparator> comparators;  // pruned to those that reach out_wire
};
using MedianNetwork = BasicMedianNetwork<DynamicVec>;

enum WireKind : char { kLow, kData, kHigh };

// The median network of `count` values: Batcher's sort of the next power of two wires, padded
// with -inf below and +inf above, pruned by constant propagation and to what reaches the median.
template <template <class> class Vec>
constexpr BasicMedianNetwork<Vec> make_median_network(int count) {
  BasicMedianNetwork<Vec> net;
  net.wires = 1;
  while (net.wires < count) net.wires *= 2;
  const int pad = net.wires - count;
  net.low_pad = pad / 2;  // -inf below, +inf above: the median of the data stays in the middle
  Vec<Comparator> all;
  batcher_sort(0, net.wires, all);
  // Constant propagation: a comparator whose inputs are already ordered (-inf low or +inf high)
  // is dropped; one whose inputs are surely reversed becomes a relabelling of wires.
  Vec<char> kind;
  Vec<int> slot;  // logical wire -> physical slot
  kind.assign(size_t(net.wires), kData);
  slot.assign(size_t(net.wires), 0);
  for (int i = 0; i < net.wires; ++i) {
    slot[size_t(i)] = i;
    kind[size_t(i)] = i < net.low_pad ? kLow : i >= net.low_pad + count ? kHigh : kData;
  }
  Vec<Comparator> kept;
  for (size_t c = 0; c < all.size(); ++c) {
    const size_t a = size_t(all[c].a), b = size_t(all[c].b);
    const char ka = kind[a], kb = kind[b];
    if (ka == kLow || kb == kHigh) continue;
    if (ka == kHigh || kb == kLow) {
      kind[a] = kb, kind[b] = ka;
      const int sa = slot[a];
      slot[a] = slot[b], slot[b] = sa;
      continue;
    }
    kept.push_back({slot[a], slot[b]});
  }
  net.out_wire = slot[size_t(net.low_pad + count / 2)];
  // Keep only comparators on which the output depends (walk the network backwards).
  Vec<char> needed;
  needed.assign(size_t(net.wires), 0);
  needed[size_t(net.out_wire)] = 1;
  Vec<Comparator> backwards;
  for (size_t c = kept.size(); c-- > 0;)
    if (needed[size_t(kept[c].a)] || needed[size_t(kept[c].b)]) {
      needed[size_t(kept[c].a)] = needed[size_t(kept[c].b)] = 1;
      backwards.push_back(kept[c]);
    }
  for (size_t c = backwards.size(); c-- > 0;) net.comparators.push_back(backwards[c]);
  return net;
}

constexpr int kLanes = 16;  // voxels along x processed together

inline int64_t reflect(int64_t i, int64_t n) {  // scipy 'reflect': d c b a | a b c d | d c b a
  while (i < 0 || i >= n) i = i < 0 ? -i - 1 : 2 * n - i - 1;
  return i;
}

// One compare-exchange over the lanes: SSE min/max on x86-64 (always available there), plain
// loops elsewhere.
void apply_network(const MedianNetwork& net, float* v) {
  for (const auto& [a, b] : net.comparators) {
    float* pa = v + a * kLanes;
    float* pb = v + b * kLanes;
#if defined(__SSE2__)
    for (int k = 0; k < kLanes; k += 4) {
      const __m128 x = _mm_load_ps(pa + k), y = _mm_load_ps(pb + k);
      _mm_store_ps(pa + k, _mm_min_ps(x, y));
      _mm_store_ps(pb + k, _mm_max_ps(x, y));
    }
#else
    for (int k = 0; k < kLanes; ++k) {
      const float lo = std::min(pa[k], pb[k]), hi = std::max(pa[k], pb[k]);
      pa[k] = lo;
      pb[k] = hi;
    }
#endif
  }
}

#if defined(__x86_64__)
// The same in 256-bit registers, for processors with AVX (chosen at run time: the binary
// stays portable to any x86-64).
__attribute__((target("avx"))) void apply_network_avx(const MedianNetwork& net, float* v) {
  for (const auto& [a, b] : net.comparators) {
    float* pa = v + a * kLanes;
    float* pb = v + b * kLanes;
    const __m256 x0 = _mm256_load_ps(pa), y0 = _mm256_load_ps(pb);
    const __m256 x1 = _mm256_load_ps(pa + 8), y1 = _mm256_load_ps(pb + 8);
    _mm256_store_ps(pa, _mm256_min_ps(x0, y0));
    _mm256_store_ps(pb, _mm256_max_ps(x0, y0));
    _mm256_store_ps(pa + 8, _mm256_min_ps(x1, y1));
    _mm256_store_ps(pb + 8, _mm256_max_ps(x1, y1));
  }
}
#endif

// For the common 3x3x3 window, the same network built at compile time and unrolled, so that the
// 32 wires live in registers instead of memory (AVX, chosen at run time).
template <class T>
using Vec27 = StaticVec<T, 256>;  // Batcher's network on 32 wires has 191 comparators
constexpr BasicMedianNetwork<Vec27> kMedian27 = make_median_network<Vec27>(27);
static_assert(kMedian27.wires == 32, "the 3x3x3 median runs on 32 wires");

#if defined(__x86_64__)
template <size_t... I>
__attribute__((target("avx"), always_inline)) inline void run_median27(__m256* w, std::index_sequence<I...>) {
  auto cx = [](__m256& x, __m256& y) __attribute__((target("avx"), always_inline)) {
    const __m256 lo = _mm256_min_ps(x, y);
    y = _mm256_max_ps(x, y);
    x = lo;
  };
  (cx(w[kMedian27.comparators[I].a], w[kMedian27.comparators[I].b]), ...);
}

// Median of the 27 neighbours of 8 consecutive voxels: rows[r] points at the padded row r
// (r = dz*3 + dy) at the first voxel's x - 1.
__attribute__((target("avx"))) void median27_block(const float* const* rows, int64_t x0, float* out) {
  __m256 w[kMedian27.wires];
  for (int i = 0; i < kMedian27.low_pad; ++i) w[i] = _mm256_set1_ps(-std::numeric_limits<float>::infinity());
  for (int i = kMedian27.low_pad + 27; i < kMedian27.wires; ++i) w[i] = _mm256_set1_ps(std::numeric_limits<float>::infinity());
  int wire = kMedian27.low_pad;
  for (int r = 0; r < 9; ++r)
    for (int dx = 0; dx < 3; ++dx) w[wire++] = _mm256_loadu_ps(rows[r] + x0 + dx);
  run_median27(w, std::make_index_sequence<kMedian27.comparators.size()>{});
  _mm256_storeu_ps(out, w[kMedian27.out_wire]);
}
#endif

using NetworkFn = void (*)(const MedianNetwork&, float*);

}  // namespace

VolumeF median_filter(const VolumeF& in, int radius) {
  VolumeF out(in.geometry(), Uninitialized{});  // every voxel written below (no serial zero-fill)
  median_filter_slices(in, radius, 0, in.nz(), out.data());
  return out;
}

void median_filter_slices(const VolumeF& in, int radius, int64_t z0, int64_t z1, float* out) {
  const int64_t nx = in.nx(), ny = in.ny(), nz = in.nz();
  const int w = 2 * radius + 1, count = w * w * w;
  const MedianNetwork net = make_median_network<DynamicVec>(count);
  // The AVX kernels run from the AVX2 level of core/cpu.hpp on (so --simd generic reaches the
  // portable network too); min/max networks give the same medians on every path.
#if defined(__x86_64__)
  const bool has_avx = simd_level() >= Simd::avx2;
  const bool fast27 = radius == 1 && has_avx;
  const NetworkFn run_network = has_avx ? apply_network_avx : apply_network;
#else
  const NetworkFn run_network = apply_network;
#endif
  constexpr int L = kLanes;
  const int64_t padded = nx + 2 * radius + L;
#pragma omp parallel
  {
    std::vector<float> rows(size_t(w * w * padded));
    struct alignas(32) Block { float f[kLanes]; };
    std::vector<Block> lanes_buf(size_t(net.wires));
    float* v = lanes_buf.data()->f;
#pragma omp for schedule(static) collapse(2)
    for (int64_t z = z0; z < z1; ++z)
      for (int64_t y = 0; y < ny; ++y) {
        // The w*w input rows around (y, z), padded by reflection along x.
        for (int dz = 0; dz < w; ++dz)
          for (int dy = 0; dy < w; ++dy) {
            const float* src = in.slice(reflect(z + dz - radius, nz)) + reflect(y + dy - radius, ny) * nx;
            float* dst = rows.data() + size_t(dz * w + dy) * size_t(padded);
            std::copy(src, src + nx, dst + radius);
            for (int64_t x = 0; x < radius; ++x) dst[x] = src[reflect(x - radius, nx)];
            for (int64_t x = nx + radius; x < padded; ++x) dst[x] = src[reflect(std::min(x - radius, nx - 1 + radius), nx)];
          }
        float* o = out + ((z - z0) * ny + y) * nx;
#if defined(__x86_64__)
        if (fast27) {
          const float* row_ptr[9];
          for (int r = 0; r < 9; ++r) row_ptr[r] = rows.data() + size_t(r) * size_t(padded);
          alignas(32) float tail[8];
          for (int64_t x0 = 0; x0 < nx; x0 += 8) {
            if (x0 + 8 <= nx) {
              median27_block(row_ptr, x0, o + x0);
            } else {
              median27_block(row_ptr, x0, tail);
              std::copy(tail, tail + (nx - x0), o + x0);
            }
          }
          continue;
        }
#endif
        for (int64_t x0 = 0; x0 < nx; x0 += L) {
          for (int i = 0; i < net.low_pad; ++i)
            for (int k = 0; k < L; ++k) v[size_t(i * L + k)] = -std::numeric_limits<float>::infinity();
          for (int i = net.low_pad + count; i < net.wires; ++i)
            for (int k = 0; k < L; ++k) v[size_t(i * L + k)] = std::numeric_limits<float>::infinity();
          int wire = net.low_pad;
          for (int r = 0; r < w * w; ++r) {
            const float* row = rows.data() + size_t(r) * size_t(padded) + x0;
            for (int dx = 0; dx < w; ++dx, ++wire)
              for (int k = 0; k < L; ++k) v[size_t(wire * L + k)] = row[dx + k];
          }
          run_network(net, v);
          const int64_t lanes = std::min<int64_t>(L, nx - x0);
          for (int64_t k = 0; k < lanes; ++k) o[x0 + k] = v[size_t(net.out_wire * L + k)];
        }
      }
  }
}

std::vector<float> gaussian_kernel(double sigma_vox) {
  // scipy.ndimage.gaussian_filter: radius = int(truncate * sigma + 0.5), truncate = 4.
  const int r = int(4.0 * sigma_vox + 0.5);
  std::vector<double> k(size_t(2 * r + 1));
  double sum = 0;
  for (int i = -r; i <= r; ++i) sum += k[size_t(i + r)] = std::exp(-0.5 * i * i / (sigma_vox * sigma_vox));
  std::vector<float> out(k.size());
  for (size_t i = 0; i < k.size(); ++i) out[i] = float(k[i] / sum);
  return out;
}

VolumeF gaussian_filter(const VolumeF& in, const std::array<double, 3>& sigma_vox) {
  VolumeF cur = in, next(in.geometry());
  const std::array<int64_t, 3> n = in.geometry().dims;
  const std::array<int64_t, 3> stride = {1, n[0], n[0] * n[1]};
  for (int axis = 0; axis < 3; ++axis) {
    if (!(sigma_vox[size_t(axis)] > 0)) continue;
    const std::vector<float> k = gaussian_kernel(sigma_vox[size_t(axis)]);
    const int r = int(k.size() / 2);
    const int64_t len = n[size_t(axis)], st = stride[size_t(axis)];
    const int a1 = (axis + 1) % 3, a2 = (axis + 2) % 3;
    const int64_t lines = n[size_t(a1)] * n[size_t(a2)];
#pragma omp parallel
    {
      std::vector<float> line(size_t(len + 2 * r));
#pragma omp for schedule(static)
      for (int64_t l = 0; l < lines; ++l) {
        const int64_t i1 = l % n[size_t(a1)], i2 = l / n[size_t(a1)];
        const int64_t base = i1 * stride[size_t(a1)] + i2 * stride[size_t(a2)];
        for (int64_t i = -r; i < len + r; ++i) line[size_t(i + r)] = cur[base + reflect(i, len) * st];
        for (int64_t i = 0; i < len; ++i) {
          float acc = 0;
          const float* p = line.data() + i;
          for (size_t j = 0; j < k.size(); ++j) acc += k[j] * p[j];
          next[base + i * st] = acc;
        }
      }
    }
    std::swap(cur, next);
  }
  return cur;
}

VolumeF nlm_filter(const VolumeF& in, double h_rel, int patch, int search) {
  const Stats s = compute_stats(in);
  const double lo = s.min, span = s.max > s.min ? s.max - s.min : 1.0;
  const float h = float(h_rel * 65535.0);
  VolumeF out(in.geometry());
  const int rows = int(in.ny()), cols = int(in.nx());
#pragma omp parallel for schedule(static)
  for (int64_t z = 0; z < in.nz(); ++z) {
    cv::Mat src(rows, cols, CV_32F, const_cast<float*>(in.slice(z)));
    cv::Mat q, d;
    src.convertTo(q, CV_16U, 65535.0 / span, -lo * 65535.0 / span);
    cv::fastNlMeansDenoising(q, d, std::vector<float>{h}, patch, search, cv::NORM_L1);
    cv::Mat dst(rows, cols, CV_32F, out.slice(z));
    d.convertTo(dst, CV_32F, span / 65535.0, lo);
  }
  return out;
}

namespace {

FilterInfo median_info() {
  return {"median",
          "3D median over a (2r+1)^3 cube",
          "Tukey J.W. (1977) Exploratory Data Analysis. Addison-Wesley",
          {{"radius", ParamType::Int, "1", 1, 3, {}, "voxels", "half-width r of the cubic window (1 = 3x3x3)"}},
          [](const VolumeF& v, const ParamValues& p) { return median_filter(v, int(p.integer("radius"))); }};
}

FilterInfo gaussian_info() {
  return {"gaussian",
          "separable 3D Gaussian smoothing, truncated at 4 sigma",
          "Gaussian smoothing; e.g. Gonzalez R.C. & Woods R.E. (2008) Digital Image Processing, 3rd ed., ch. 3",
          {{"sigma", ParamType::Float, "1", 0.001, 1e6, {}, "voxels or mm", "standard deviation of the kernel"},
           {"unit", ParamType::Enum, "voxels", -1e300, 1e300, {"voxels", "mm"}, "", "unit of sigma"}},
          [](const VolumeF& v, const ParamValues& p) {
            std::array<double, 3> s{};
            for (int i = 0; i < 3; ++i)
              s[size_t(i)] = p.choice("unit") == "mm" ? p.num("sigma") / v.geometry().spacing_mm[size_t(i)] : p.num("sigma");
            return gaussian_filter(v, s);
          }};
}

FilterInfo nlm_info() {
  return {"nlm",
          "non-local means, slice by slice (axial), on 16-bit-quantised grey values",
          "Buades A., Coll B., Morel J.-M. (2005) A non-local algorithm for image denoising. CVPR 2:60-65",
          {{"h", ParamType::Float, "0.05", 1e-4, 1, {}, "fraction of grey range", "filter strength relative to the grey-value range"},
           {"patch", ParamType::Int, "5", 3, 11, {}, "pixels", "patch edge (odd)"},
           {"search", ParamType::Int, "11", 5, 35, {}, "pixels", "search window edge (odd)"}},
          [](const VolumeF& v, const ParamValues& p) {
            if (p.integer("patch") % 2 == 0) throw InputError("nlm: parameter 'patch' must be odd, got " + p.text().at("patch"));
            if (p.integer("search") % 2 == 0) throw InputError("nlm: parameter 'search' must be odd, got " + p.text().at("search"));
            return nlm_filter(v, p.num("h"), int(p.integer("patch")), int(p.integer("search")));
          }};
}

}  // namespace

PB_REGISTER_FILTER(median_info());
PB_REGISTER_FILTER(gaussian_info());
PB_REGISTER_FILTER(nlm_info());

}  // namespace pb
