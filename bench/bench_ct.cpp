// Parallel-beam CT kernels on a 256^2 Shepp-Logan slice with 400 angles (the case that
// bench/peers/ct_vs_skimage.py times with scikit-image): Joseph forward projection, back-projection
// (the kernel this CPU gets, named in the label, and the AVX2 and generic kernels), full FBP, in
// updates/s = pixels x angles / s. Also one simulated phantom slice (analytic projection + noise +
// FBP) of demo-small.
#include <benchmark/benchmark.h>

#include "core/parallel.hpp"
#include "synthetic/ct_phantoms.hpp"
#include "synthetic/fbp.hpp"
#include "synthetic/projector.hpp"
#include "synthetic/scan.hpp"

namespace {

using namespace pb::synth;
constexpr int kN = 256, kAngles = 400;

const std::vector<float>& slice256() {
  static const std::vector<float> img = rasterize_ellipses(shepp_logan(kN * 0.45, true), kN, kN, 1.0, 2);
  return img;
}

ParallelGeometry geo() {
  ParallelGeometry g;
  g.angles = kAngles;
  g.bins = detector_bins_for(kN, kN, 1.0, 1.0);
  return g;
}

void set_rate(benchmark::State& state) {
  state.counters["updates_per_s"] =
      benchmark::Counter(double(kN) * kN * kAngles, benchmark::Counter::kIsIterationInvariantRate);
}

void BM_ForwardProjectJoseph(benchmark::State& state) {
  pb::set_threads(int(state.range(0)));
  const auto& img = slice256();
  for (auto _ : state) {
    Sinogram s = project_image(img.data(), kN, kN, 1.0, geo());
    benchmark::DoNotOptimize(s.data.data());
  }
  set_rate(state);
}
BENCHMARK(BM_ForwardProjectJoseph)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

void back_project(benchmark::State& state, BpKernel kernel) {
  if (!bp_kernel_supported(kernel)) {
    state.SkipWithError("kernel not supported by this CPU");
    return;
  }
  pb::set_threads(int(state.range(0)));
  const ParallelGeometry g = geo();
  Fbp fbp(g, RampWindow::RamLak);
  Sinogram s = project_image(slice256().data(), kN, kN, 1.0, g);
  fbp.filter(s);
  std::vector<float> out(size_t(kN) * kN);
  for (auto _ : state) {
    std::fill(out.begin(), out.end(), 0.f);
    fbp.backproject(s, kN, kN, 1.0, out.data(), true, kernel);
    benchmark::DoNotOptimize(out.data());
  }
  set_rate(state);
  state.SetLabel(bp_kernel_name(kernel == BpKernel::Auto ? best_bp_kernel() : kernel));
}
// The kernel this CPU gets (label), and the others for comparison.
void BM_BackProject(benchmark::State& state) { back_project(state, BpKernel::Auto); }
void BM_BackProjectAvx2(benchmark::State& state) { back_project(state, BpKernel::Avx2); }
void BM_BackProjectGeneric(benchmark::State& state) { back_project(state, BpKernel::Generic); }
BENCHMARK(BM_BackProject)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_BackProjectAvx2)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_BackProjectGeneric)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

void BM_FbpFilterAndBackProject(benchmark::State& state) {
  pb::set_threads(int(state.range(0)));
  const ParallelGeometry g = geo();
  Fbp fbp(g, RampWindow::RamLak);
  const Sinogram s = project_image(slice256().data(), kN, kN, 1.0, g);
  for (auto _ : state) {
    auto img = fbp.reconstruct(s, kN, kN, 1.0, true);
    benchmark::DoNotOptimize(img.data());
  }
  set_rate(state);
}
BENCHMARK(BM_FbpFilterAndBackProject)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

// One full simulated slice of demo-small at 400 projections: transmission, Poisson noise, FBP.
void BM_SimulatedSliceDemoSmall(benchmark::State& state) {
  pb::set_threads(1);
  Recipe r = preset("demo-small");
  r.dims[2] = 8;
  r.shapes[0].height_mm = 0.04;
  r.pores.clear();
  const Phantom ph = build_phantom(r);
  for (auto _ : state) {
    auto v = simulate_scan(ph, r, {400, r.i0[0]});
    benchmark::DoNotOptimize(v.data());
  }
  state.counters["slices_per_s"] = benchmark::Counter(8.0, benchmark::Counter::kIsIterationInvariantRate);
}
BENCHMARK(BM_SimulatedSliceDemoSmall)->Unit(benchmark::kMillisecond)->UseRealTime();

}  // namespace
