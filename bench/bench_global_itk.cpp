// otsu (histogram + apply, as `porebench segment otsu` runs it) against ITK's
// OtsuThresholdImageFilter on the same 256^3 float volume, both timed in wall time per run with
// the same thread count (issue 4: ours >= 10x faster; bench/peers/otsu_vs_itk.sh prints the
// ratio). The apply step is also timed in its parts (air_below, air_to_pores) to show where the
// time goes. Volume: an invented gear-blank-like cylinder of material (grey 1) in air (grey 0)
// with a lattice of spherical pores, Gaussian noise sigma 0.08.
#include <benchmark/benchmark.h>

#include <itkMultiThreaderBase.h>
#include <itkOtsuThresholdImageFilter.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <random>

#include "core/itk_bridge.hpp"
#include "core/parallel.hpp"
#include "methods/pores.hpp"
#include "methods/threshold.hpp"

namespace {

// A noisy cylinder with a lattice of pores, n^3 voxels (256: the ITK comparisons; 512: a volume
// far larger than the caches, for the two-read (integer data) vs three-read Otsu binarise).
pb::VolumeF make_part(int64_t n) {
    pb::Geometry g;
    g.dims = {n, n, n};
    pb::VolumeF out(g);
    std::mt19937 rng(4);
    std::normal_distribution<float> noise(0.f, 0.08f);
    const double c = (n - 1) / 2.0, radius = 110.0 * n / 256, lattice = 20, pore_r = 4;
    for (int64_t z = 0; z < n; ++z)
      for (int64_t y = 0; y < n; ++y)
        for (int64_t x = 0; x < n; ++x) {
          const bool inside = std::hypot(x - c, y - c) <= radius && z >= 8 && z < n - 8;
          auto d = [&](double p) { return p - lattice * std::round(p / lattice); };  // offset to the lattice node
          const bool pore = d(double(x)) * d(double(x)) + d(double(y)) * d(double(y)) + d(z + 10.0) * d(z + 10.0) <=
                            pore_r * pore_r;
          out(x, y, z) = (inside && !pore ? 1.f : 0.f) + noise(rng);
        }
    return out;
}

const pb::VolumeF& part256() {
  static const pb::VolumeF v = make_part(256);
  return v;
}
const pb::VolumeF& part(int64_t n) {
  if (n == 256) return part256();
  static const pb::VolumeF v = make_part(512);
  return v;
}

void same_threads() {
  pb::set_threads(0);
  itk::MultiThreaderBase::SetGlobalDefaultNumberOfThreads(unsigned(pb::thread_count()));
}

void BM_OtsuPorebench(benchmark::State& state) {
  const auto& v = part256();
  same_threads();
  const pb::MethodInfo& m = pb::Registry::instance().get("otsu");
  const pb::ParamValues p = pb::parse_params(m, {});
  for (auto _ : state) {
    pb::MethodOutput out = m.run(pb::MethodInput{v}, p);
    benchmark::DoNotOptimize(out.pores.data());
  }
  state.counters["voxels_per_s"] = benchmark::Counter(double(v.size()), benchmark::Counter::kIsIterationInvariantRate);
}
BENCHMARK(BM_OtsuPorebench)->Unit(benchmark::kMillisecond)->UseRealTime();

void BM_OtsuItk(benchmark::State& state) {
  const auto& v = part256();
  same_threads();
  using Filter = itk::OtsuThresholdImageFilter<itk::Image<float, 3>, itk::Image<uint8_t, 3>>;
  const auto in = pb::itk_view(v);
  for (auto _ : state) {
    auto f = Filter::New();  // a fresh filter per run: nothing cached between runs
    f->SetInput(in);
    f->SetNumberOfHistogramBins(256);  // as ours
    f->Update();
    benchmark::DoNotOptimize(f->GetOutput()->GetBufferPointer());
  }
  state.counters["voxels_per_s"] = benchmark::Counter(double(v.size()), benchmark::Counter::kIsIterationInvariantRate);
}
BENCHMARK(BM_OtsuItk)->Unit(benchmark::kMillisecond)->UseRealTime();

// The parts of BM_OtsuPorebench.
void BM_OtsuPart_Histogram(benchmark::State& state) {  // stats + histogram + Otsu's split
  const auto& v = part256();
  same_threads();
  const pb::MethodInfo& m = pb::Registry::instance().get("otsu");
  const pb::ParamValues p = pb::parse_params(m, {});
  for (auto _ : state) benchmark::DoNotOptimize(pb::otsu_split(pb::method_histogram(pb::MethodInput{v}, p)));
}
BENCHMARK(BM_OtsuPart_Histogram)->Unit(benchmark::kMillisecond)->UseRealTime();

void BM_OtsuPart_AirBelow(benchmark::State& state) {
  const auto& v = part256();
  same_threads();
  for (auto _ : state) {
    pb::Mask air = pb::air_below(v, 0.5, nullptr);
    benchmark::DoNotOptimize(air.data());
  }
}
BENCHMARK(BM_OtsuPart_AirBelow)->Unit(benchmark::kMillisecond)->UseRealTime();

void BM_OtsuPart_AirToPores(benchmark::State& state) {  // pore extraction (CCL of air + outside)
  const auto& v = part256();
  same_threads();
  const pb::Mask air = pb::air_below(v, 0.5, nullptr);
  for (auto _ : state) {
    state.PauseTiming();
    pb::Mask m = air;
    state.ResumeTiming();
    benchmark::DoNotOptimize(pb::air_to_pores(m, nullptr));
  }
}
BENCHMARK(BM_OtsuPart_AirToPores)->Unit(benchmark::kMillisecond)->UseRealTime();

// Like for like with ITK's filter, which thresholds and binarises but extracts no pores:
// histogram, Otsu's split and the binary air mask, as the otsu method runs it (threshold_air).
// Second argument: the voxel type the volume was stored as, 0 float32 (statistics, histogram,
// comparison: three reads), 1 uint16 (the part quantised to whole levels, 10,000 levels per unit:
// grey-level counts, comparison: two reads).
pb::ThresholdChoice otsu_choice(const pb::Histogram& h, const pb::ParamValues&) {
  return {h.edge(pb::otsu_split(h) + 1), {}};
}

const pb::VolumeF& stored_part(int64_t n, bool u16) {
  if (!u16) return part(n);
  static std::map<int64_t, pb::VolumeF> levels;
  auto it = levels.find(n);
  if (it == levels.end()) {
    pb::VolumeF q = part(n);
    for (int64_t i = 0; i < q.size(); ++i) q[i] = std::clamp(std::round(q[i] * 10000.f + 20000.f), 0.f, 65535.f);
    it = levels.emplace(n, std::move(q)).first;
  }
  return it->second;
}

// The path every registered histogram method takes in memory (threshold_air): for uint16 data one
// read counting the grey levels, then the comparison; for float data statistics, histogram,
// comparison.
void BM_OtsuBinarise(benchmark::State& state) {
  const bool u16 = state.range(1) == 1;
  const auto& v = stored_part(state.range(0), u16);
  same_threads();
  const pb::MethodInfo& m = pb::Registry::instance().get("otsu");
  const pb::ParamValues p = pb::parse_params(m, {});
  const pb::MethodInput in{v, nullptr, u16 ? pb::VoxelType::u16 : pb::VoxelType::f32};
  for (auto _ : state) {
    pb::ThresholdAir a = pb::threshold_air(in, p, otsu_choice);
    benchmark::DoNotOptimize(a.air.data());
  }
  state.counters["voxels_per_s"] = benchmark::Counter(double(v.size()), benchmark::Counter::kIsIterationInvariantRate);
}
BENCHMARK(BM_OtsuBinarise)->ArgsProduct({{256, 512}, {0, 1}})->Unit(benchmark::kMillisecond)->UseRealTime();

// The same result in three reads of the same data (statistics, histogram, comparison), as float
// data are read: the reference the two-read path of integer data is measured against.
void BM_OtsuBinarise3Reads(benchmark::State& state) {
  const bool u16 = state.range(1) == 1;
  const auto& v = stored_part(state.range(0), u16);
  same_threads();
  const pb::MethodInfo& m = pb::Registry::instance().get("otsu");
  const pb::ParamValues p = pb::parse_params(m, {});
  const pb::VoxelType t = u16 ? pb::VoxelType::u16 : pb::VoxelType::f32;
  for (auto _ : state) {
    const pb::Histogram h = pb::method_histogram(pb::compute_stats(v), false, t, p, [&](double lo, double hi, int bins) {
      return pb::compute_histogram(v.data(), v.size(), lo, hi, bins);
    });
    pb::Mask air = pb::air_below(v, otsu_choice(h, p).threshold, nullptr);
    benchmark::DoNotOptimize(air.data());
  }
  state.counters["voxels_per_s"] = benchmark::Counter(double(v.size()), benchmark::Counter::kIsIterationInvariantRate);
}
BENCHMARK(BM_OtsuBinarise3Reads)->ArgsProduct({{256, 512}, {1}})->Unit(benchmark::kMillisecond)->UseRealTime();

}  // namespace
