// The neural family's speed (issue 13). Run:
//   porebench_bench --benchmark_filter=Neural      (argument: threads)
// Cards: $PB_BENCH_CARD (default: the shipped models/gear-unet-released) and $PB_BENCH_CARD_3D (a
// 3D TorchScript card; bench/peers/neural_vs_pytorch.py makes one and compares with PyTorch).
//   BM_NeuralForward        bare engine calls: a batch of 4 tiles of the card's size
//   BM_Neural3DForward      the same for the 3D card (LibTorch), batch 1
//   BM_NeuralHarness        the whole method on 256 x 256 x 8: normalise, tile, forward, blend,
//                           threshold, pore extraction
//   BM_NeuralHarnessBare    only the forward calls BM_NeuralHarness makes (same tiles, batches)
//   BM_NeuralScan256        the whole method on a 256^3 scan: voxels/s for bench/README.md
#include <benchmark/benchmark.h>

#include <cstdlib>
#include <random>

#include "core/parallel.hpp"
#include "methods/neural.hpp"
#include "methods/pores.hpp"
#include "methods/registry.hpp"

namespace {

std::string card_2d() {
  const char* e = std::getenv("PB_BENCH_CARD");
  return e && *e ? e : pb::models_folder() + "/gear-unet-released/card.json";
}

pb::VolumeF scan(int64_t nz) {
  pb::Geometry g;
  g.dims = {256, 256, nz};
  pb::VolumeF v(g);
  std::mt19937 rng(5);
  std::normal_distribution<float> n(0.0f, 0.004f);
  for (int64_t z = 0; z < nz; ++z)
    for (int64_t y = 0; y < 256; ++y)
      for (int64_t x = 0; x < 256; ++x) {
        const int64_t cx = x % 32 - 16, cy = y % 32 - 16, cz = z % 32 - 16;
        v(x, y, z) = (cx * cx + cy * cy + cz * cz < 16 ? 0.005f : 0.03f) + n(rng);
      }
  return v;
}

// Runs body(model) with the model of `card` on state.range(0) threads; a card that cannot be
// loaded skips the benchmark with the reason.
template <class Body>
void with_model(benchmark::State& state, const std::string& card, Body body) {
  const int threads = int(state.range(0));
  pb::set_threads(threads);
  try {
    pb::Model m(pb::read_model_card(card), threads);
    body(m);
  } catch (const std::exception& e) {
    state.SkipWithError(e.what());
  }
}

void forward_loop(benchmark::State& state, const std::string& card, int64_t batch) {
  with_model(state, card, [&](pb::Model& m) {
    std::vector<float> in(size_t(batch * m.card().channels() * m.tile_voxels()));
    std::mt19937 rng(3);
    std::uniform_real_distribution<float> u(0, 1);
    for (auto& x : in) x = u(rng);
    for (auto _ : state) benchmark::DoNotOptimize(m.forward(in.data(), batch));
    state.SetItemsProcessed(state.iterations() * batch * m.tile_voxels());
  });
}

void BM_NeuralForward(benchmark::State& state) { forward_loop(state, card_2d(), 4); }
BENCHMARK(BM_NeuralForward)->ArgName("threads")->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

void BM_Neural3DForward(benchmark::State& state) {
  const char* e = std::getenv("PB_BENCH_CARD_3D");
  if (!e || !*e) {
    state.SkipWithError("set PB_BENCH_CARD_3D (bench/peers/neural_vs_pytorch.py does)");
    return;
  }
  forward_loop(state, e, 1);
}
BENCHMARK(BM_Neural3DForward)->ArgName("threads")->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

void BM_NeuralHarness(benchmark::State& state) {
  const pb::VolumeF v = scan(8);
  with_model(state, card_2d(), [&](pb::Model& m) {
    for (auto _ : state) {
      const pb::VolumeF p = pb::predict_volume(m, v, nullptr, {m.card().overlap, 4});
      pb::Mask pores(v.geometry());
      for (int64_t i = 0; i < v.size(); ++i) pores[i] = p[i] >= float(m.card().pore_threshold);
      benchmark::DoNotOptimize(pb::air_to_pores(pores, nullptr));
    }
    state.SetItemsProcessed(state.iterations() * v.size());
  });
}
BENCHMARK(BM_NeuralHarness)->ArgName("threads")->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

void BM_NeuralHarnessBare(benchmark::State& state) {
  with_model(state, card_2d(), [&](pb::Model& m) {
    const auto& c = m.card();
    const int64_t tiles = 8 * int64_t(pb::tile_origins(256, c.tile[0], c.overlap).size() *
                                      pb::tile_origins(256, c.tile[1], c.overlap).size());
    std::vector<float> in(size_t(4 * c.channels() * m.tile_voxels()), 0.5f);
    for (auto _ : state)
      for (int64_t t = 0; t < tiles; t += 4) benchmark::DoNotOptimize(m.forward(in.data(), std::min<int64_t>(4, tiles - t)));
    state.SetItemsProcessed(state.iterations() * 256 * 256 * 8);
  });
}
BENCHMARK(BM_NeuralHarnessBare)->ArgName("threads")->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

void BM_NeuralScan256(benchmark::State& state) {
  const pb::VolumeF v = scan(256);
  with_model(state, card_2d(), [&](pb::Model& m) {
    const pb::MethodInfo& info = pb::Registry::instance().get(m.card().name);
    const pb::ParamValues p = pb::parse_params(info, {});
    for (auto _ : state) benchmark::DoNotOptimize(pb::run_method(info, p, pb::MethodInput{v}).part_voxels);
    state.SetItemsProcessed(state.iterations() * v.size());
  });
}
BENCHMARK(BM_NeuralScan256)->ArgName("threads")->Arg(1)->Arg(2)->Iterations(1)->Unit(benchmark::kSecond)->UseRealTime();

}  // namespace
