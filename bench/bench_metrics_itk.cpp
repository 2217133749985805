// ITK's ConnectedComponentImageFilter (FullyConnected = 26-connectivity) on the same volumes as
// BM_CCL26_* in bench_metrics.cpp, for the issue-5 goal "own CCL >= 1x ITK". ITK runs multi-threaded
// with its default pool; Arg = thread count given to ITK's global default.
#include <benchmark/benchmark.h>
#include <itkConnectedComponentImageFilter.h>
#include <itkMultiThreaderBase.h>

#include "bench/bench_metrics.hpp"
#include "core/itk_bridge.hpp"

namespace {

void run_itk(benchmark::State& st, const pb::Mask& m) {
  using In = itk::Image<uint8_t, 3>;
  using Out = itk::Image<uint32_t, 3>;
  itk::MultiThreaderBase::SetGlobalDefaultNumberOfThreads(int(st.range(0)));
  const auto view = pb::itk_view(m);
  uint64_t count = 0;
  for (auto _ : st) {
    auto f = itk::ConnectedComponentImageFilter<In, Out>::New();
    f->SetInput(view);
    f->SetFullyConnected(true);
    f->SetNumberOfWorkUnits(unsigned(st.range(0)));
    f->Update();
    count = f->GetObjectCount();
    benchmark::DoNotOptimize(f->GetOutput()->GetBufferPointer());
  }
  st.counters["components"] = double(count);
}

void BM_CCL26_Random256_ITK(benchmark::State& st) {
  static const pb::Mask m = pbbench::random_mask(256, 0.5, 1);
  run_itk(st, m);
}
void BM_CCL26_Pores256_ITK(benchmark::State& st) {
  static const pb::Mask m = pbbench::pore_mask(256, pbbench::kPoreBalls256, 2);
  run_itk(st, m);
}

}  // namespace

BENCHMARK(BM_CCL26_Random256_ITK)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_CCL26_Pores256_ITK)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
