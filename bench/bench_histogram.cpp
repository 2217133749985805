// Histogram kernel on a 256^3 float volume, in voxels/s: the seed of the performance work.
#include <benchmark/benchmark.h>

#include "core/histogram.hpp"
#include "bench/bench_volumes.hpp"
#include "core/parallel.hpp"

namespace {

const pb::VolumeF& volume256() { return pb::bench::noise_volume256(1); }

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
