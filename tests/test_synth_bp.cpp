// Back-projection kernels (issue 3, performance): the gather-free SIMD kernels (AVX-512, AVX2) agree
// with the generic kernel on random sinograms, all three are exact on a linear projection (an
// analytic case: linear interpolation reproduces a linear function), and results do not depend on
// the thread count. Kernels this CPU lacks are left out (the INFO line names what ran).
#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <cstring>
#include <random>

#include "core/cpu.hpp"
#include "core/error.hpp"
#include "core/parallel.hpp"
#include "synthetic/ct_phantoms.hpp"
#include "synthetic/fbp.hpp"
#include "synthetic/projector.hpp"

using namespace pb;
using namespace pb::synth;

namespace {

std::vector<BpKernel> simd_kernels() {
  std::vector<BpKernel> k;
  for (BpKernel c : {BpKernel::Avx2, BpKernel::Avx512})
    if (bp_kernel_supported(c)) k.push_back(c);
  return k;
}

ParallelGeometry geometry(int angles, double arc, double start, int nx, int ny, double pixel_mm) {
  ParallelGeometry g;
  g.angles = angles;
  g.arc_deg = arc;
  g.start_deg = start;
  g.bin_mm = 1;
  g.bins = detector_bins_for(nx, ny, pixel_mm, 1.0);
  return g;
}

std::vector<float> backproject(const Fbp& fbp, const Sinogram& s, int nx, int ny, double pixel_mm, BpKernel k) {
  std::vector<float> img(size_t(nx) * size_t(ny), 0.f);
  fbp.backproject(s, nx, ny, pixel_mm, img.data(), true, k);
  return img;
}

}  // namespace

TEST_CASE("SIMD back-projection kernels agree with the generic kernel on random sinograms", "[synth][ct][bp]") {
  // Angle counts with and without factors 4 and 16, odd and even sizes, non-square slices (row
  // groups with leftover rows), 180 and 360 degree arcs, pixels finer than bins (|du| < 1) and
  // coarser (|du| up to 2: steep angles take the gather path).
  struct Case {
    int nx, ny, angles;
    double arc, start, pixel_mm;
  };
  const Case cases[] = {{37, 37, 1, 180, 0, 1.0},    {37, 41, 7, 360, 0, 1.0},     {256, 256, 400, 180, 0, 1.0},
                        {257, 257, 101, 360, 0, 1.0}, {256, 259, 64, 180, 11.5, 1.0}, {257, 250, 33, 180, 0, 0.7},
                        {37, 37, 90, 360, 3, 2.0},    {100, 97, 17, 180, 0, 1.6}};
  const auto kernels = simd_kernels();
  std::mt19937 rng(3);
  std::uniform_real_distribution<float> uni(-1.f, 1.f);
  for (const Case& c : cases) {
    const ParallelGeometry g = geometry(c.angles, c.arc, c.start, c.nx, c.ny, c.pixel_mm);
    const Fbp fbp(g, RampWindow::RamLak);
    Sinogram s(g);
    for (float& v : s.data) v = uni(rng);
    const auto ref = backproject(fbp, s, c.nx, c.ny, c.pixel_mm, BpKernel::Generic);
    const auto mm = std::minmax_element(ref.begin(), ref.end());
    const double range = double(*mm.second) - double(*mm.first);
    REQUIRE(range > 0);
    for (BpKernel k : kernels) {
      const auto got = backproject(fbp, s, c.nx, c.ny, c.pixel_mm, k);
      double worst = 0;
      for (size_t i = 0; i < ref.size(); ++i) worst = std::max(worst, std::abs(double(got[i]) - double(ref[i])));
      INFO(bp_kernel_name(k) << " " << c.nx << "x" << c.ny << ", " << c.angles << " angles over " << c.arc
                             << " deg, pixel " << c.pixel_mm << " bins: max diff / range " << worst / range);
      CHECK(worst <= 1e-5 * range);  // float rounding only (u is float in the SIMD kernels)
    }
  }
  INFO("SIMD kernels run here: " << kernels.size());
  CHECK(bp_kernel_supported(BpKernel::Generic));
}

TEST_CASE("every back-projection kernel is exact on a linear projection", "[synth][ct][bp]") {
  // Analytic case: q_theta(t) = alpha t + beta at every angle. Linear interpolation reproduces it,
  // so pixel (x, y) gets pi/N sum_theta (alpha (x cos theta + y sin theta) + beta) (Kak & Slaney
  // eq. 3.60 without the filter), summed here in double straight from the definition.
  const int nx = 45, ny = 38;
  const double alpha = 0.01, beta = 1.0;
  for (double pixel_mm : {1.0, 1.9}) {
    const ParallelGeometry g = geometry(99, 360, 7, nx, ny, pixel_mm);
    const Fbp fbp(g, RampWindow::RamLak);
    Sinogram s(g);
    for (int a = 0; a < g.angles; ++a)
      for (int k = 0; k < g.bins; ++k) s.row(a)[k] = float(alpha * g.bin_t_mm(k) + beta);
    std::vector<BpKernel> all = simd_kernels();
    all.push_back(BpKernel::Generic);
    for (BpKernel k : all) {
      const auto img = backproject(fbp, s, nx, ny, pixel_mm, k);
      double worst = 0;
      for (int j = 0; j < ny; ++j)
        for (int i = 0; i < nx; ++i) {
          const double x = (i - (nx - 1) / 2.0) * pixel_mm, y = (j - (ny - 1) / 2.0) * pixel_mm;
          double ref = 0;
          for (int a = 0; a < g.angles; ++a)
            ref += alpha * (x * std::cos(g.angle_rad(a)) + y * std::sin(g.angle_rad(a))) + beta;
          ref *= M_PI / g.angles;
          worst = std::max(worst, std::abs(img[size_t(j) * nx + size_t(i)] - ref));
        }
      INFO(bp_kernel_name(k) << ", pixel " << pixel_mm << " bins: max error " << worst);
      CHECK(worst < 1e-5 * M_PI * beta * 2);  // float sums of 99 terms near 1.0
    }
  }
}

TEST_CASE("back-projection is bit-identical for 1 and 2 threads and with the fused filter, and checks its kernel", "[synth][ct][bp]") {
  const int n = 131;
  const ParallelGeometry g = geometry(203, 180, 0, n, n, 1.0);
  const Fbp fbp(g, RampWindow::RamLak);
  Sinogram s(g);
  std::mt19937 rng(5);
  std::normal_distribution<float> nd(0.f, 1.f);
  for (float& v : s.data) v = nd(rng);
  std::vector<BpKernel> all = simd_kernels();
  all.push_back(BpKernel::Generic);
  for (BpKernel k : all) {
    set_threads(1);
    const auto a = backproject(fbp, s, n, n, 1.0, k);
    set_threads(2);
    const auto b = backproject(fbp, s, n, n, 1.0, k);
    set_threads(0);
    INFO(bp_kernel_name(k));
    CHECK(std::memcmp(a.data(), b.data(), a.size() * sizeof(float)) == 0);
  }
  // reconstruct() filters the rows inside the back-projection's parallel region: the same image
  // as filter() then backproject(), bit for bit, for any thread count.
  Fbp fbp2(g, RampWindow::Hann);
  Sinogram filtered = s;
  fbp2.filter(filtered);
  const auto two_steps = backproject(fbp2, filtered, n, n, 1.0, BpKernel::Auto);
  for (int threads : {1, 2}) {
    set_threads(threads);
    const auto fused = fbp2.reconstruct(s, n, n, 1.0, true);
    set_threads(0);
    INFO(threads << " thread(s)");
    CHECK(std::memcmp(fused.data(), two_steps.data(), fused.size() * sizeof(float)) == 0);
  }
  for (BpKernel k : {BpKernel::Avx2, BpKernel::Avx512})
    if (!bp_kernel_supported(k)) CHECK_THROWS_AS(backproject(fbp, s, n, n, 1.0, k), InputError);
  std::vector<float> small(size_t(n) * n);
  CHECK_THROWS_AS(fbp.backproject(s, n + 20, n + 20, 1.0, small.data(), false), InputError);  // detector too narrow
}

TEST_CASE("Joseph projector: the AVX-512 kernel agrees with the portable one", "[synth][ct][bp]") {
  // Same line integrals up to float rounding (the portable kernel is checked against Kak & Slaney
  // and scikit-image radon in test_synth_ct.cpp). Pixels of 0.7 bins make some angles too steep
  // for the windows (|df| > 1.9): those take the portable kernel inside the SIMD run.
  struct Case {
    int nx, ny, angles;
    double arc, pixel_mm;
  };
  if (!bp_kernel_supported(BpKernel::Avx512)) {
    WARN("no AVX-512 on this CPU: the SIMD Joseph kernel cannot be compared here");
    return;
  }
  const Case cases[] = {{37, 37, 7, 180, 1.0}, {256, 257, 101, 360, 1.0}, {64, 50, 33, 180, 0.7}, {129, 129, 400, 180, 1.0}};
  std::mt19937 rng(11);
  std::uniform_real_distribution<float> uni(0.f, 1.f);
  for (const Case& c : cases) {
    std::vector<float> img(size_t(c.nx) * size_t(c.ny));
    for (float& v : img) v = uni(rng);
    const ParallelGeometry g = geometry(c.angles, c.arc, 0, c.nx, c.ny, c.pixel_mm);
    const Sinogram ref = project_image(img.data(), c.nx, c.ny, c.pixel_mm, g, true, false);
    const Sinogram got = project_image(img.data(), c.nx, c.ny, c.pixel_mm, g, true, true);
    const auto mm = std::minmax_element(ref.data.begin(), ref.data.end());
    const double range = double(*mm.second) - double(*mm.first);
    REQUIRE(range > 0);
    double worst = 0;
    for (size_t i = 0; i < ref.data.size(); ++i) worst = std::max(worst, std::abs(double(got.data[i]) - double(ref.data[i])));
    INFO(c.nx << "x" << c.ny << ", " << c.angles << " angles over " << c.arc << " deg, pixel " << c.pixel_mm
              << " bins: max diff / range " << worst / range);
    CHECK(worst <= 1e-5 * range);
  }
}

TEST_CASE("the CT kernels follow the SIMD cap of core/cpu.hpp", "[synth][ct][bp]") {
  // Under a generic cap, Auto is the generic back-projection and the projector takes its portable
  // kernel: the same bits as forcing them.
  const int n = 40;
  const ParallelGeometry g = geometry(30, 180, 0, n, n, 1.0);
  std::vector<float> img(size_t(n) * n);
  std::mt19937 rng(2);
  std::uniform_real_distribution<float> uni(0.f, 1.f);
  for (float& v : img) v = uni(rng);
  const Fbp fbp(g, RampWindow::RamLak);
  const Sinogram portable = project_image(img.data(), n, n, 1.0, g, true, false);
  const auto generic = backproject(fbp, portable, n, n, 1.0, BpKernel::Generic);
  set_simd_cap(Simd::generic);
  const BpKernel capped = best_bp_kernel();
  const Sinogram s = project_image(img.data(), n, n, 1.0, g, true, true);
  const auto bp = backproject(fbp, s, n, n, 1.0, BpKernel::Auto);
  set_simd_cap(Simd::avx512);
  CHECK(capped == BpKernel::Generic);
  CHECK(std::memcmp(s.data.data(), portable.data.data(), s.data.size() * sizeof(float)) == 0);
  CHECK(std::memcmp(bp.data(), generic.data(), bp.size() * sizeof(float)) == 0);
}
