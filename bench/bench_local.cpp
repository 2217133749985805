// Local adaptive thresholds on a 256^3 float volume (issue 4: sauvola time at window 63 <= 1.2x
// the time at window 15). Each benchmark computes the air mask (window statistics, thresholds,
// compare), not the shared pore extraction. Run:
//   porebench_bench --benchmark_filter=Local   (argument: threads)
// Window ratio and the scikit-image comparison: bench/peers/sauvola_vs_skimage.py.
#include <benchmark/benchmark.h>

#include <random>

#include "core/parallel.hpp"
#include "methods/integral.hpp"

namespace {

// Dark spheres in a drifting material plus noise: every window sees texture.
const pb::VolumeF& volume256() {
  static pb::VolumeF v = [] {
    pb::Geometry g;
    g.dims = {256, 256, 256};
    pb::VolumeF out(g);
    std::mt19937 rng(4);
    std::normal_distribution<float> n(0.0f, 0.03f);
    for (int64_t z = 0; z < 256; ++z)
      for (int64_t y = 0; y < 256; ++y)
        for (int64_t x = 0; x < 256; ++x) {
          const int64_t cx = x % 32 - 16, cy = y % 32 - 16, cz = z % 32 - 16;
          const bool pore = cx * cx + cy * cy + cz * cz < 25;
          out(x, y, z) = (pore ? 0.15f : 0.45f + 0.3f * float(x) / 256.0f) + n(rng);
        }
    return out;
  }();
  return v;
}

// Argument: worker threads (1 gives CPU-bound timings that a loaded machine disturbs least).
void run_local(benchmark::State& state, const char* method, int64_t window) {
  pb::set_threads(int(state.range(0)));
  const auto& v = volume256();
  const pb::MethodInput in{v};
  const std::vector<std::string> kv = {"window=" + std::to_string(window)};
  for (auto _ : state) benchmark::DoNotOptimize(pb::local_air(method, in, kv).air.data());
  state.counters["voxels_per_s"] = benchmark::Counter(double(v.size()), benchmark::Counter::kIsIterationInvariantRate);
}

void BM_LocalSauvolaW15(benchmark::State& s) { run_local(s, "sauvola", 15); }
void BM_LocalSauvolaW31(benchmark::State& s) { run_local(s, "sauvola", 31); }
void BM_LocalSauvolaW63(benchmark::State& s) { run_local(s, "sauvola", 63); }
void BM_LocalNiblackW15(benchmark::State& s) { run_local(s, "niblack", 15); }
void BM_LocalWolfW15(benchmark::State& s) { run_local(s, "wolf", 15); }
void BM_LocalBernsenW15(benchmark::State& s) { run_local(s, "bernsen", 15); }
void BM_LocalBernsenW63(benchmark::State& s) { run_local(s, "bernsen", 63); }
void BM_LocalGaussianW15(benchmark::State& s) { run_local(s, "local-gaussian", 15); }
BENCHMARK(BM_LocalSauvolaW15)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime()->MinTime(2);
BENCHMARK(BM_LocalSauvolaW31)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime()->MinTime(2);
BENCHMARK(BM_LocalSauvolaW63)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime()->MinTime(2);
BENCHMARK(BM_LocalNiblackW15)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_LocalWolfW15)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_LocalBernsenW15)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_LocalBernsenW63)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_LocalGaussianW15)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

}  // namespace
