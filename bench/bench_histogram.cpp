// Histogram kernel on a 256^3 float volume, in voxels/s, against one core's read bandwidth measured
// by this binary (issue 16 goal: the histogram at >= 50 % of it, near-linear gain from a 2nd thread).
// BM_ReadBandwidth is the read reference alone (bytes/s).
#include <benchmark/benchmark.h>

#include <algorithm>
#include <chrono>
#include <cstring>
#include <vector>

#include "bench/bench_volumes.hpp"
#include "core/histogram.hpp"
#include "core/parallel.hpp"

namespace {

const pb::VolumeF& volume256() { return pb::bench::noise_volume256(1); }

// The read reference: every 32-bit word of the volume folded by XOR (integer, vectorised, nothing
// else per byte), one thread.
uint32_t read_all(const pb::VolumeF& v) {
  const auto* w = reinterpret_cast<const uint32_t*>(v.data());
  uint32_t acc[16] = {0};
  const int64_t n = v.size() / 16 * 16;
  for (int64_t i = 0; i < n; i += 16)
    for (int j = 0; j < 16; ++j) acc[j] ^= w[i + j];
  uint32_t x = 0;
  for (int j = 0; j < 16; ++j) x ^= acc[j];
  return x;
}

void BM_ReadBandwidth(benchmark::State& state) {
  const auto& v = volume256();
  for (auto _ : state) benchmark::DoNotOptimize(read_all(v));
  state.SetBytesProcessed(state.iterations() * v.size() * 4);
}
BENCHMARK(BM_ReadBandwidth)->Unit(benchmark::kMillisecond)->UseRealTime();

double median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  return v.empty() ? 0 : v[v.size() / 2];
}

// Counters: voxels_per_s, and of_read_bw = the histogram's speed over one core's read bandwidth:
// each iteration times one read pass (read_all, one thread, untimed by the benchmark) and then the
// histogram, alternating, and the ratio is of the medians, so that both see the same load.
void BM_Histogram256Bins(benchmark::State& state) {
  const auto& v = volume256();
  std::vector<double> read_s, hist_s;
  for (auto _ : state) {
    state.PauseTiming();
    pb::set_threads(1);
    auto t0 = std::chrono::steady_clock::now();
    benchmark::DoNotOptimize(read_all(v));
    read_s.push_back(std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count());
    pb::set_threads(int(state.range(0)));
    state.ResumeTiming();
    t0 = std::chrono::steady_clock::now();
    auto h = pb::compute_histogram(v.data(), v.size(), -0.5, 1.5, 256);
    benchmark::DoNotOptimize(h.counts.data());
    hist_s.push_back(std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count());
  }
  const double bytes = double(v.size()) * 4;
  state.SetItemsProcessed(state.iterations() * v.size());
  state.counters["voxels_per_s"] = benchmark::Counter(double(v.size()), benchmark::Counter::kIsIterationInvariantRate);
  state.counters["read_GBps"] = bytes / median(read_s) / 1e9;
  state.counters["hist_GBps"] = bytes / median(hist_s) / 1e9;
  state.counters["of_read_bw"] = median(read_s) / median(hist_s);
}
BENCHMARK(BM_Histogram256Bins)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

void BM_Stats(benchmark::State& state) {
  const auto& v = volume256();
  pb::set_threads(int(state.range(0)));
  for (auto _ : state) benchmark::DoNotOptimize(pb::compute_stats(v));
  state.counters["voxels_per_s"] = benchmark::Counter(double(v.size()), benchmark::Counter::kIsIterationInvariantRate);
}
BENCHMARK(BM_Stats)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

}  // namespace
