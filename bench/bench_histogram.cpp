// Histogram kernel on a 256^3 float volume, in voxels/s: the seed of the performance work.
#include <benchmark/benchmark.h>

#include <random>

#include "core/histogram.hpp"
#include "core/parallel.hpp"

namespace {

const pb::VolumeF& volume256() {
  static pb::VolumeF v = [] {
    pb::Geometry g;
    g.dims = {256, 256, 256};
    pb::VolumeF out(g);
    std::mt19937 rng(1);
    std::normal_distribution<float> n(0.5f, 0.2f);
    for (int64_t i = 0; i < out.size(); ++i) out[i] = n(rng);
    return out;
  }();
  return v;
}

void BM_Histogram256Bins(benchmark::State& state) {
  const auto& v = volume256();
  pb::set_threads(int(state.range(0)));
  for (auto _ : state) {
    auto h = pb::compute_histogram(v.data(), v.size(), -0.5, 1.5, 256);
    benchmark::DoNotOptimize(h.counts.data());
  }
  state.SetItemsProcessed(state.iterations() * v.size());
  state.counters["voxels_per_s"] = benchmark::Counter(double(v.size()), benchmark::Counter::kIsIterationInvariantRate);
}
BENCHMARK(BM_Histogram256Bins)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

void BM_Stats(benchmark::State& state) {
  const auto& v = volume256();
  pb::set_threads(0);
  for (auto _ : state) benchmark::DoNotOptimize(pb::compute_stats(v));
  state.counters["voxels_per_s"] = benchmark::Counter(double(v.size()), benchmark::Counter::kIsIterationInvariantRate);
}
BENCHMARK(BM_Stats)->Unit(benchmark::kMillisecond)->UseRealTime();

}  // namespace
