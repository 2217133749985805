// Pre-filter kernels against ITK on the same 256^3 float volume (issue: median radius 1 >= 5x ITK
// MedianImageFilter). Run: porebench_bench --benchmark_filter=Median; ratio: bench/peers/bench_ratio.py
#include <benchmark/benchmark.h>
#include <itkMedianImageFilter.h>

#include "core/itk_bridge.hpp"
#include "bench/bench_volumes.hpp"
#include "core/parallel.hpp"
#include "methods/prefilter.hpp"

namespace {

const pb::VolumeF& volume256() { return pb::bench::noise_volume256(2); }

void BM_MedianR1_Ours(benchmark::State& state) {
  pb::set_threads(0);
  for (auto _ : state) benchmark::DoNotOptimize(pb::median_filter(volume256(), 1).data());
  state.counters["voxels_per_s"] = benchmark::Counter(double(volume256().size()), benchmark::Counter::kIsIterationInvariantRate);
}
BENCHMARK(BM_MedianR1_Ours)->Unit(benchmark::kMillisecond)->UseRealTime();

void BM_MedianR1_ITK(benchmark::State& state) {
  using Img = itk::Image<float, 3>;
  auto in = pb::itk_view(volume256());
  for (auto _ : state) {
    auto f = itk::MedianImageFilter<Img, Img>::New();
    f->SetInput(in);
    Img::SizeType r;
    r.Fill(1);
    f->SetRadius(r);
    f->SetNumberOfWorkUnits(unsigned(pb::thread_count()));
    f->Update();
    benchmark::DoNotOptimize(f->GetOutput()->GetBufferPointer());
  }
  state.counters["voxels_per_s"] = benchmark::Counter(double(volume256().size()), benchmark::Counter::kIsIterationInvariantRate);
}
BENCHMARK(BM_MedianR1_ITK)->Unit(benchmark::kMillisecond)->UseRealTime()->Iterations(2);

void BM_Gaussian_Sigma1(benchmark::State& state) {
  pb::set_threads(0);
  for (auto _ : state) benchmark::DoNotOptimize(pb::gaussian_filter(volume256(), {1, 1, 1}).data());
  state.counters["voxels_per_s"] = benchmark::Counter(double(volume256().size()), benchmark::Counter::kIsIterationInvariantRate);
}
BENCHMARK(BM_Gaussian_Sigma1)->Unit(benchmark::kMillisecond)->UseRealTime();

}  // namespace
