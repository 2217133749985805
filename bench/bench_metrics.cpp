// Metrics kernels: connected-component labelling (26-connectivity) of a random p = 0.5 256^3 mask
// and of a sparse pore mask (balls, ~3 % foreground), per thread count, and the full scoring bundle
// on a 512^3 pair (counter: voxels/s). Volumes: bench/bench_metrics.hpp (same voxels as the peer
// script bench/peers/ccl_vs_scipy.py). ITK's filter: bench/bench_metrics_itk.cpp.
#include <benchmark/benchmark.h>
#include <omp.h>

#include "bench/bench_metrics.hpp"
#include "core/components.hpp"
#include "metrics/score.hpp"

namespace {

const pb::Mask& random256() {
  static const pb::Mask m = pbbench::random_mask(256, 0.5, 1);
  return m;
}
const pb::Mask& pores256() {
  static const pb::Mask m = pbbench::pore_mask(256, pbbench::kPoreBalls256, 2);
  return m;
}

void run_ccl(benchmark::State& st, const pb::Mask& m) {
  const int before = omp_get_max_threads();
  omp_set_num_threads(int(st.range(0)));
  uint32_t count = 0;
  for (auto _ : st) {
    auto c = pb::label_components(m, 26);
    count = c.count;
    benchmark::DoNotOptimize(c.labels.data());
  }
  omp_set_num_threads(before);
  st.counters["components"] = count;
  st.counters["voxels_per_s"] = benchmark::Counter(double(m.size()), benchmark::Counter::kIsIterationInvariantRate);
}

void BM_CCL26_Random256(benchmark::State& st) { run_ccl(st, random256()); }
void BM_CCL26_Pores256(benchmark::State& st) { run_ccl(st, pores256()); }

// Full scoring bundle (labels, overlap, pores, matching, POD, distributions, surface distances) on
// a 512^3 pair: reference = pore balls, prediction = the same balls shifted by one voxel along x
// plus other balls (false calls), so that every part of the bundle has work.
void BM_Score512(benchmark::State& st) {
  static const pb::Mask ref = pbbench::pore_mask(512, 8 * pbbench::kPoreBalls256, 3);
  static const pb::Mask pred = [] {
    pb::Mask p = pbbench::pore_mask(512, 800, 4);
    for (int64_t i = 1; i < ref.size(); ++i)
      if (ref[i - 1]) p[i] = 1;
    return p;
  }();
  const int before = omp_get_max_threads();
  omp_set_num_threads(int(st.range(0)));
  pb::ScoreOptions o;
  o.bootstrap_samples = 2000;
  int64_t pores = 0;
  for (auto _ : st) {
    const auto r = pb::score(pred, ref, nullptr, o);
    pores = int64_t(r.pores_ref.size());
    benchmark::DoNotOptimize(r.overlap.jaccard);
  }
  omp_set_num_threads(before);
  st.counters["pores_ref"] = double(pores);
  st.counters["voxels_per_s"] = benchmark::Counter(double(ref.size()), benchmark::Counter::kIsIterationInvariantRate);
}

}  // namespace

BENCHMARK(BM_CCL26_Random256)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_CCL26_Pores256)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_Score512)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime()->Iterations(3);
