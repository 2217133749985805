// Metrics kernels: connected-component labelling (26-connectivity) of a random p = 0.5 256^3 mask
// and of a sparse pore mask (balls, ~3 % foreground), per thread count, and the full scoring bundle
// on a 512^3 pair (counter: voxels/s). Volumes: bench/bench_metrics.hpp (same voxels as the peer
// script bench/peers/ccl_vs_scipy.py). ITK's filter: bench/bench_metrics_itk.cpp.
#include <benchmark/benchmark.h>
#include <omp.h>

#include <chrono>

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

// Scoring a noisy prediction (issue 16: "surface distances <= the rest of the bundle"): 384^3,
// reference = pore balls (the 256^3 density), prediction = the same balls shifted by one voxel
// along x plus salt noise (each voxel with p = 0.012 by the counter hash): about 500k predicted
// components, nearly all of them one to a few voxels. Each iteration scores the pair without
// surface distances (the rest of the bundle: labelling, overlap, pores, matching, POD, sizes),
// then times surface_distances() alone on the labelled runs; the iteration time is their sum
// (= the whole bundle). Counters: the two parts per iteration, surface / rest, predicted pores.
const pb::Mask& noisy_ref384() {
  static const pb::Mask m = pbbench::pore_mask(384, int(3.375 * pbbench::kPoreBalls256), 5);
  return m;
}
const pb::Mask& noisy_pred384() {
  static const pb::Mask p = [] {
    const pb::Mask& ref = noisy_ref384();
    pb::Mask out(ref.geometry());
    out[0] = 0;
    for (int64_t i = 1; i < ref.size(); ++i) out[i] = ref[i - 1] || pbbench::unit(uint64_t(i) + 6) < 0.012;
    return out;
  }();
  return p;
}

void BM_ScoreNoisy384(benchmark::State& st) {
  const pb::Mask& ref = noisy_ref384();
  const pb::Mask& pred = noisy_pred384();
  const int before = omp_get_max_threads();
  omp_set_num_threads(int(st.range(0)));
  pb::ScoreOptions o;
  o.surface_distances = false;
  double rest_s = 0, surface_s = 0;
  int64_t pores_pred = 0;
  using clock = std::chrono::steady_clock;
  for (auto _ : st) {
    const auto t0 = clock::now();
    const auto r = pb::score(pred, ref, nullptr, o);
    const auto t1 = clock::now();
    benchmark::DoNotOptimize(r.overlap.jaccard);
    pores_pred = int64_t(r.pores_pred.size());
    const auto cp = pb::label_runs(pred, nullptr, o.connectivity);
    const auto cr = pb::label_runs(ref, nullptr, o.connectivity);
    const auto t2 = clock::now();
    const auto s = pb::surface_distances(cp, cr);
    const auto t3 = clock::now();
    benchmark::DoNotOptimize(s.hd95_mm);
    const double rest = std::chrono::duration<double>(t1 - t0).count();
    const double surf = std::chrono::duration<double>(t3 - t2).count();
    rest_s += rest, surface_s += surf;
    st.SetIterationTime(rest + surf);
  }
  omp_set_num_threads(before);
  const double n = double(st.iterations());
  st.counters["pores_pred"] = double(pores_pred);
  st.counters["rest_ms"] = 1000 * rest_s / n;
  st.counters["surface_ms"] = 1000 * surface_s / n;
  st.counters["surface_over_rest"] = surface_s / rest_s;
  st.counters["voxels_per_s"] = benchmark::Counter(double(ref.size()), benchmark::Counter::kIsIterationInvariantRate);
}

}  // namespace

BENCHMARK(BM_CCL26_Random256)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_CCL26_Pores256)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_Score512)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime()->Iterations(3);
BENCHMARK(BM_ScoreNoisy384)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseManualTime()->Iterations(3);
