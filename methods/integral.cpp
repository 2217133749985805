// Window statistics for local thresholds (methods/integral.hpp): running sums for box mean and
// standard deviation, slice by slice (SliceMoments), box min/max, Gaussian mean.
#include "methods/integral.hpp"

#include <omp.h>

#include <algorithm>
#include <cmath>

#include "core/slabs.hpp"

namespace pb {

namespace {

int64_t reflect(int64_t i, int64_t n) { return i < 0 ? -i : (i >= n ? 2 * (n - 1) - i : i); }

}  // namespace

// ---- box mean and standard deviation ------------------------------------------------------------
// Window sum along an axis, written as a running sum: S(i) = S(i-1) + d(i+h) - d(i-1-h), started
// from S(0) = d(0) + 2 * (d(1) + ... + d(h)) (the mirror makes the window at 0 symmetric). This is
// the difference of a 1D summed table at the two window ends, taken on the fly; doing it along x,
// y, then z gives the 3D summed-volume box sum at O(1) work per voxel for any window.

namespace {

// Window sums over x and y of slice z, channels d = v - c and (Std) d^2, into s1 and s2 (one thread).
template <bool Std>
void plane_sums(const float* sl, int64_t nx, int64_t ny, int64_t h, double c, double* s1, double* s2, std::vector<double>& scratch) {
  const int64_t m = nx + 2 * h;
  scratch.resize(size_t(2 * nx * ny + 2 * m));
  double* x1 = scratch.data();
  double* x2 = x1 + nx * ny;
  double* p1 = x2 + nx * ny;
  double* p2 = p1 + m;
  // x: each row mirrored into p1/p2 (position i is x = i - h), then a running sum.
  for (int64_t y = 0; y < ny; ++y) {
    const float* row = sl + y * nx;
    for (int64_t i = 0; i < m; ++i) {
      const float f = row[reflect(i - h, nx)];
      const double d = std::isfinite(f) ? double(f) - c : 0.0;
      p1[i] = d;
      if constexpr (Std) p2[i] = d * d;
    }
    double r1 = p1[h], r2 = Std ? p2[h] : 0.0;  // window at x = 0: voxel 0 plus twice voxels 1..h (mirror)
    for (int64_t j = 1; j <= h; ++j) {
      r1 += 2 * p1[h + j];
      if constexpr (Std) r2 += 2 * p2[h + j];
    }
    double* o1 = x1 + y * nx;
    double* o2 = x2 + y * nx;
    o1[0] = r1;
    if constexpr (Std) o2[0] = r2;
    for (int64_t x = 1; x < nx; ++x) {
      r1 += p1[x + 2 * h] - p1[x - 1];
      o1[x] = r1;
      if constexpr (Std) {
        r2 += p2[x + 2 * h] - p2[x - 1];
        o2[x] = r2;
      }
    }
  }
  // y: whole rows at a time; the window at y = 0 is row 0 plus twice rows 1..h (mirror).
  for (int64_t x = 0; x < nx; ++x) {
    s1[x] = x1[x];
    if constexpr (Std) s2[x] = x2[x];
  }
  for (int64_t j = 1; j <= h; ++j)
    for (int64_t x = 0; x < nx; ++x) {
      s1[x] += 2 * x1[j * nx + x];
      if constexpr (Std) s2[x] += 2 * x2[j * nx + x];
    }
  for (int64_t y = 1; y < ny; ++y) {
    const double* e1 = x1 + reflect(y + h, ny) * nx;
    const double* e2 = x2 + reflect(y + h, ny) * nx;
    const double* l1 = x1 + reflect(y - 1 - h, ny) * nx;
    const double* l2 = x2 + reflect(y - 1 - h, ny) * nx;
    double* o1 = s1 + y * nx;
    const double* q1 = o1 - nx;
    for (int64_t x = 0; x < nx; ++x) o1[x] = q1[x] + e1[x] - l1[x];
    if constexpr (Std) {  // s2 is null without Std: no offset from it (undefined behaviour)
      double* o2 = s2 + y * nx;
      const double* q2 = o2 - nx;
      for (int64_t x = 0; x < nx; ++x) o2[x] = q2[x] + e2[x] - l2[x];
    }
  }
}

struct PlaneJob {
  int64_t z;
  double *s1, *s2;  // s2 unused without Std
};

// Computes the jobs' plane sums in parallel, one plane per thread at a time. The slices are looked
// up first, in job order, from this thread (a SliceOf need not be thread-safe).
template <bool Std>
void run_plane_jobs(const Geometry& g, const SliceOf& slice, int64_t h, double c, const std::vector<PlaneJob>& jobs) {
  const int64_t n = int64_t(jobs.size());
  std::vector<const float*> src(jobs.size());
  for (size_t j = 0; j < jobs.size(); ++j) src[j] = slice(jobs[j].z);
#pragma omp parallel
  {
    std::vector<double> scratch;
#pragma omp for schedule(static)
    for (int64_t j = 0; j < n; ++j)
      plane_sums<Std>(src[size_t(j)], g.dims[0], g.dims[1], h, c, jobs[size_t(j)].s1, jobs[size_t(j)].s2, scratch);
  }
}

}  // namespace

// Along z: Z(z) = Z(z-1) + P(z+h) - P(z-1-h) over the planes P of x,y window sums, from
// Z(0) = P(0) + 2 (P(1) + ... + P(h)). Planes are computed in parallel a batch at a time; the
// recurrence itself is serial and in fixed order.
SliceMoments::SliceMoments(const VolumeF& v, int64_t window, double centre, bool with_std)
    : SliceMoments(v.geometry(), [&v](int64_t z) { return v.slice(z); }, window, centre, with_std) {}

SliceMoments::SliceMoments(const Geometry& g, SliceOf slice, int64_t window, double centre, bool with_std)
    : g_(g), slice_(std::move(slice)), h_(window / 2), batch_(std::clamp<int64_t>(g.dims[2] / 16, 1, 8)), c_(centre),
      with_std_(with_std) {
  const size_t nxy = size_t(g.slice_voxels()), channels = with_std ? 2 : 1;
  z1_.assign(nxy, 0.0);
  if (with_std) z2_.assign(nxy, 0.0);
  e_.assign(nxy * channels * size_t(batch_), 0.0);
  l_.assign(nxy * channels * size_t(batch_), 0.0);
}

int64_t SliceMoments::next(double* mean, double* stdev) {
  return with_std_ ? next_slices<true>(mean, stdev) : next_slices<false>(mean, nullptr);
}

template <bool Std>
int64_t SliceMoments::next_slices(double* mean, double* stdev) {
  const int64_t nz = g_.dims[2], h = h_, nxy = g_.slice_voxels();
  const int64_t n = std::min(batch_, nz - z_);
  if (n <= 0) return 0;
  constexpr int64_t channels = Std ? 2 : 1;
  double* z1 = z1_.data();
  double* z2 = z2_.data();
  auto e1 = [&](int64_t t) { return e_.data() + channels * t * nxy; };
  auto l1 = [&](int64_t t) { return l_.data() + channels * t * nxy; };
  auto second = [&](auto* first) { return Std ? first + nxy : nullptr; };  // the d^2 channel
  if (z_ == 0) {  // Z(0) from planes 0..h, a batch at a time, summed in order j = 0, 1, ..., h
    for (int64_t j0 = 0; j0 <= h; j0 += batch_) {
      std::vector<PlaneJob> jobs;
      for (int64_t j = j0; j <= std::min(h, j0 + batch_ - 1); ++j) jobs.push_back({j, e1(j - j0), second(e1(j - j0))});
      run_plane_jobs<Std>(g_, slice_, h, c_, jobs);
      const int64_t nj = int64_t(jobs.size());
#pragma omp parallel for schedule(static)
      for (int64_t i = 0; i < nxy; ++i)
        for (int64_t t = 0; t < nj; ++t) {
          const double f = jobs[size_t(t)].z == 0 ? 1.0 : 2.0;
          z1[i] += f * jobs[size_t(t)].s1[i];
          if constexpr (Std) z2[i] += f * jobs[size_t(t)].s2[i];
        }
    }
  }
  // Planes entering and leaving the window for slices z_ .. z_+n-1 (none for slice 0).
  std::vector<PlaneJob> jobs;
  std::vector<char> moves(size_t(n), 0);
  for (int64_t t = 0; t < n; ++t) {
    const int64_t z = z_ + t;
    if (z == 0) continue;
    const int64_t e = reflect(z + h, nz), l = reflect(z - 1 - h, nz);
    if (e == l) continue;  // the mirror brings back the plane that leaves
    moves[size_t(t)] = 1;
    jobs.push_back({e, e1(t), second(e1(t))});
    jobs.push_back({l, l1(t), second(l1(t))});
  }
  run_plane_jobs<Std>(g_, slice_, h, c_, jobs);
  const double w = double(2 * h + 1), inv = 1.0 / (w * w * w), c = c_;
  // Serial in z, parallel over the slice: each thread keeps the same band of voxels for every
  // slice (static schedule over the same range), so no barrier is needed between slices.
#pragma omp parallel
  for (int64_t t = 0; t < n; ++t) {
    const double* ea = e1(t);
    const double* eb = second(ea);
    const double* la = l1(t);
    const double* lb = second(la);
    double* mo = mean + t * nxy;
    double* so = Std ? stdev + t * nxy : nullptr;
    const bool move = moves[size_t(t)];
#pragma omp for schedule(static) nowait
    for (int64_t i = 0; i < nxy; ++i) {
      if (move) {
        z1[i] += ea[i] - la[i];
        if constexpr (Std) z2[i] += eb[i] - lb[i];
      }
      const double m = z1[i] * inv;
      mo[i] = c + m;
      if constexpr (Std) so[i] = std::sqrt(std::max(0.0, z2[i] * inv - m * m));
    }
  }
  z_ += n;
  return n;
}

// ---- separable line filters ---------------------------------------------------------------------
namespace {

constexpr int64_t kLanes = 16;  // lines of y and z passes are gathered 16 at a time (adjacent in x)

// Runs fn(pad, lanes, out) on every line of src along `axis`, writing dst (which may be src).
// pad holds the line mirrored by h on each side, interleaved by lane: pad[i * lanes + l] is
// position i - h of lane l; out[i * lanes + l] receives position i.
template <class Fn>
void for_lines(const VolumeF& src, VolumeF& dst, int axis, int64_t h, Fn fn) {
  const int64_t nx = src.nx(), ny = src.ny(), nz = src.nz();
  const int64_t n = src.geometry().dims[size_t(axis)], m = n + 2 * h;
  const int64_t stride = axis == 0 ? 1 : axis == 1 ? nx : nx * ny;
  // Lines: x rows (one lane each), or bundles of kLanes adjacent-in-x lines along y or z.
  const int64_t xblocks = (nx + kLanes - 1) / kLanes;
  const int64_t count = axis == 0 ? ny * nz : axis == 1 ? xblocks * nz : xblocks * ny;
  const float* s = src.data();
  float* d = dst.data();
#pragma omp parallel
  {
    std::vector<float> pad(size_t(m * kLanes)), out(size_t(n * kLanes));
#pragma omp for schedule(static)
    for (int64_t k = 0; k < count; ++k) {
      int64_t base, lanes;
      if (axis == 0) {
        base = k * nx;
        lanes = 1;
      } else {
        const int64_t xb = k % xblocks, other = k / xblocks;
        base = xb * kLanes + other * (axis == 1 ? nx * ny : nx);
        lanes = std::min(kLanes, nx - xb * kLanes);
      }
      for (int64_t i = 0; i < m; ++i) {
        const float* p = s + base + reflect(i - h, n) * stride;
        for (int64_t l = 0; l < lanes; ++l) pad[size_t(i * lanes + l)] = p[l];
      }
      fn(pad.data(), m, lanes, out.data());
      for (int64_t i = 0; i < n; ++i) {
        float* p = d + base + i * stride;
        for (int64_t l = 0; l < lanes; ++l) p[l] = out[size_t(i * lanes + l)];
      }
    }
  }
}

// van Herk / Gil-Werman running extremum of w = 2h+1 over a mirrored line of m positions: with
// blocks of w starting at 0, g = running op from each block start, r = running op back from each
// block end; the window [i, i+w-1] spans at most two blocks, so out(i) = op(r(i), g(i+w-1)).
// Three op calls per position for any w.
template <class Op>
struct VanHerk {
  int64_t w;
  Op op;
  std::vector<float> g, r;
  void operator()(const float* pad, int64_t m, int64_t L, float* out) {
    g.resize(size_t(m * L));
    r.resize(size_t(m * L));
    for (int64_t i = 0; i < m; ++i)
      for (int64_t l = 0; l < L; ++l) {
        const size_t j = size_t(i * L + l);
        g[j] = i % w == 0 ? pad[j] : op(g[j - size_t(L)], pad[j]);
      }
    for (int64_t i = m - 1; i >= 0; --i)
      for (int64_t l = 0; l < L; ++l) {
        const size_t j = size_t(i * L + l);
        r[j] = (i == m - 1 || (i + 1) % w == 0) ? pad[j] : op(r[j + size_t(L)], pad[j]);
      }
    const int64_t n = m - (w - 1);
    for (int64_t i = 0; i < n; ++i)
      for (int64_t l = 0; l < L; ++l) {
        const size_t j = size_t(i * L + l);
        out[j] = op(r[j], g[j + size_t((w - 1) * L)]);
      }
  }
};

// NaN is skipped (as std::fmin/fmax do): a window is NaN only when all its voxels are.
struct MinOp {
  float operator()(float a, float b) const { return (b < a || a != a) ? b : a; }
};
struct MaxOp {
  float operator()(float a, float b) const { return (b > a || a != a) ? b : a; }
};

template <class Op>
void box_extremum(const VolumeF& v, int64_t window, VolumeF& out) {
  const int64_t h = window / 2;
  shape_slab(out, v.geometry(), 0, v.nz());  // shaped as v; the x pass writes every voxel
  for (int axis = 0; axis < 3; ++axis) {
    // Scratch per thread, reused across line bundles.
    for_lines(axis == 0 ? v : out, out, axis, h, [&](const float* pad, int64_t m, int64_t L, float* o) {
      thread_local VanHerk<Op> vh{0, Op{}, {}, {}};
      vh.w = window;
      vh(pad, m, L, o);
    });
  }
}

}  // namespace

void box_min_max(const VolumeF& v, int64_t window, VolumeF& vmin, VolumeF& vmax) {
  box_extremum<MinOp>(v, window, vmin);
  box_extremum<MaxOp>(v, window, vmax);
}

VolumeF gaussian_mean(const VolumeF& v, int64_t window, double sigma_vox) {
  VolumeF out;
  gaussian_mean(v, window, sigma_vox, out);
  return out;
}

void gaussian_mean(const VolumeF& v, int64_t window, double sigma_vox, VolumeF& out) {
  const int64_t h = window / 2;
  std::vector<float> kern(size_t(2 * h + 1));
  double sum = 0;
  for (int64_t k = -h; k <= h; ++k) sum += kern[size_t(k + h)] = float(std::exp(-double(k * k) / (2 * sigma_vox * sigma_vox)));
  for (auto& k : kern) k = float(k / sum);
  shape_slab(out, v.geometry(), 0, v.nz());  // shaped as v; the x pass writes every voxel
  for (int axis = 0; axis < 3; ++axis)
    for_lines(axis == 0 ? v : out, out, axis, h, [&](const float* pad, int64_t m, int64_t L, float* o) {
      const int64_t nL = (m - 2 * h) * L;
      for (int64_t j = 0; j < nL; ++j) o[j] = 0;
      for (int64_t k = 0; k <= 2 * h; ++k) {
        const float wk = kern[size_t(k)];
        const float* p = pad + k * L;
        for (int64_t j = 0; j < nL; ++j) o[j] += wk * p[j];
      }
    });
}

}  // namespace pb
