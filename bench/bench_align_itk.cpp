// Issue 12 performance: intensity registration (Mattes MI, versor rigid, moments start) of an N^3
// pair, ours at 3 levels (core/registration_itk.cpp: REDUCE pyramid, iRprop-) against plain ITK at
// a single full resolution with the same metric, samples and start and ITK's regular-step
// gradient descent (register_intensity_itk_plain), and the phase-correlation alarm (FFTW, 128^3
// after block averaging).
// bench/peers/align_vs_single.sh prints them side by side with scipy's phase correlation.
// Pair: the rendered test phantom (tests/align_helpers.hpp: invented gear-blank cylinder with
// pores and six reference spheres) in two poses, rotation 1.45 deg and shift (1, -3, 2.5) voxels,
// noise sigma 0.05, drawn with partial volume (2x2x2 subsamples per voxel) at every size: drawn
// by point sampling (as above 128^3 before), the two poses alias differently and the registration
// settled 0.3-0.5 deg off at 256^3, depending on the metric's sample seed. The 3-level run is
// repeated for three sample seeds (second argument), so the spread is seen.
// PB_ALIGN_BENCH_DUMP=DIR writes the pair as float32 raw for the peer script.
#include <benchmark/benchmark.h>

#include <cstdlib>
#include <map>

#include "core/io.hpp"
#include "core/parallel.hpp"
#include "core/registration.hpp"
#include "tests/align_helpers.hpp"

namespace {

struct Pair {
  pbtest::AlignPhantom ph;
  pb::SimilarityTransform truth;
  pb::VolumeF fixed, moving;
  double spacing = 0.02;
};

const Pair& pair(int64_t n) {
  static std::map<int64_t, Pair> cache;
  auto it = cache.find(n);
  if (it != cache.end()) return it->second;
  Pair p;
  pb::Geometry g;
  g.dims = {n, n, n};
  g.spacing_mm = {p.spacing, p.spacing, p.spacing};
  p.ph = pbtest::align_phantom(n, p.spacing);
  p.truth = pbtest::pose_about(p.ph.centre, Eigen::Vector3d(0.8, -1.0, 0.7), Eigen::Vector3d(1, -3, 2.5) * p.spacing, 1.0);
  p.fixed = pbtest::render_scan(p.ph, g, pb::SimilarityTransform{}, 0.05, 1);
  p.moving = pbtest::render_scan(p.ph, g, p.truth, 0.05, 2);
  if (const char* dir = std::getenv("PB_ALIGN_BENCH_DUMP")) {
    const std::string d(dir);
    pb::write_raw(pb::AnyVolume(p.fixed), d + "/fixed-" + std::to_string(n) + ".raw");
    pb::write_raw(pb::AnyVolume(p.moving), d + "/moving-" + std::to_string(n) + ".raw");
  }
  return cache.emplace(n, std::move(p)).first->second;
}

void run_intensity(benchmark::State& st, bool plain_itk) {
  const Pair& p = pair(st.range(0));
  pb::RegistrationOptions o;
  o.method = pb::RegMethod::intensity;
  o.sample_seed += unsigned(st.range(1)) * 100;  // seed offset (plain ITK: 0)
  pb::RegistrationResult r;
  for (auto _ : st)
    r = plain_itk ? pb::register_intensity_itk_plain(p.moving, p.fixed, o)
                  : pb::register_intensity_itk(p.moving, p.fixed, o, nullptr);
  st.counters["iterations"] = r.iterations;
  st.counters["converged"] = r.converged;
  st.counters["tre_voxel"] = pbtest::max_tre_mm(p.ph, r.T, p.truth) / p.spacing;
  st.counters["rot_err_deg"] = pb::rotation_difference_deg(r.T.R, p.truth.R);
  st.counters["threads"] = pb::thread_count();
}

void BM_AlignIntensity3Levels(benchmark::State& st) { run_intensity(st, false); }
void BM_AlignIntensity1Level(benchmark::State& st) { run_intensity(st, true); }

void BM_AlignPhaseCorrelation(benchmark::State& st) {
  const Pair& p = pair(st.range(0));
  pb::ShiftEstimate e;
  for (auto _ : st) e = pb::estimate_shift(p.fixed, p.moving, 128);
  st.counters["shift_voxel"] = e.magnitude_vox;
}

}  // namespace

BENCHMARK(BM_AlignIntensity3Levels)->ArgsProduct({{128, 256, 512}, {0, 1, 2}})->Unit(benchmark::kSecond)->Iterations(1)->UseRealTime();
BENCHMARK(BM_AlignIntensity1Level)->Args({128, 0})->Args({256, 0})->Args({512, 0})->Unit(benchmark::kSecond)->Iterations(1)->UseRealTime();
BENCHMARK(BM_AlignPhaseCorrelation)->Arg(128)->Arg(256)->Arg(512)->Unit(benchmark::kSecond)->Iterations(1)->UseRealTime();
