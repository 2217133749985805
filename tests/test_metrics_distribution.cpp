// Size distributions and surface distances: KS and Wasserstein-1 against scipy.stats, hd95/assd
// against scipy.ndimage distance transforms, hand-computed cases, and the shared log bins.
#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>
#include <fstream>

#include "core/components.hpp"
#include "core/cpu.hpp"
#include "core/json.hpp"
#include "metrics/distribution.hpp"
#include "metrics/surface.hpp"
#include "tests/helpers.hpp"

using namespace pb;

TEST_CASE("KS and Wasserstein-1 by hand", "[metrics][sizes]") {
  // a = {1, 2, 3}, b = {2, 4}: F_a - F_b on [1,2): 1/3, [2,3): 2/3 - 1/2 = 1/6, [3,4): 1 - 1/2 = 1/2.
  // KS = 1/2; W1 = 1/3 * 1 + 1/6 * 1 + 1/2 * 1 = 1.
  CHECK(ks_distance({1, 2, 3}, {2, 4}) == Approx(0.5));
  CHECK(wasserstein1({1, 2, 3}, {2, 4}) == Approx(1.0));
  CHECK(std::isnan(ks_distance({}, {1})));
  CHECK(std::isnan(wasserstein1({1}, {})));
  // Shared log bins, 10 per decade: 20..300 um -> edges 10^(13/10) = 19.95 .. 10^(25/10) = 316.2.
  const auto e = log_bin_edges({20, 300}, {55}, 10);
  REQUIRE(e.size() == 13);
  CHECK(e.front() == Approx(std::pow(10.0, 1.3)));
  CHECK(e.back() == Approx(std::pow(10.0, 2.5)));
  const auto s = compare_sizes({20, 300, 25}, {55}, 10);
  int64_t n_ref = 0, n_pred = 0;
  for (size_t k = 0; k < s.count_ref.size(); ++k) n_ref += s.count_ref[k], n_pred += s.count_pred[k];
  CHECK(n_ref == 3);
  CHECK(n_pred == 1);
}

TEST_CASE("KS and Wasserstein-1 agree with scipy.stats on random samples", "[metrics][sizes][ref]") {
  // Reference: scipy.stats.ks_2samp(a, b).statistic and scipy.stats.wasserstein_distance (python3-scipy).
  std::mt19937_64 rng(9);
  std::lognormal_distribution<double> ra(4.0, 0.5), rb(4.2, 0.6);
  std::vector<double> a(137), b(90);
  for (auto& v : a) v = ra(rng);
  for (auto& v : b) v = rb(rng);
  b[3] = a[5];  // a tie across samples
  pbtest::TempDir d;
  for (auto [name, v] : {std::pair{"a.csv", &a}, std::pair{"b.csv", &b}}) {
    std::ofstream f(d / name);
    f << std::setprecision(17);
    for (double x : *v) f << x << '\n';
  }
  const auto out = pbtest::run_ref_script("metrics_sizes.py", d / "a.csv" + " " + d / "b.csv");
  INFO(out.err);
  REQUIRE(out.exit_code == 0);
  const auto j = nlohmann::json::parse(out.out);
  CHECK(ks_distance(a, b) == Approx(j["ks"].get<double>()).epsilon(1e-12));
  CHECK(wasserstein1(a, b) == Approx(j["w1"].get<double>()).epsilon(1e-10));
}

TEST_CASE("surface distances by hand: two slabs one voxel apart", "[metrics][surface]") {
  // ref: plane x = 2; pred: plane x = 3, in a 6 x 4 x 4 volume, spacing 0.5 mm along x. Every
  // voxel of a one-voxel plane is a surface voxel; each has the other plane 0.5 mm away.
  Geometry g;
  g.dims = {6, 4, 4};
  g.spacing_mm = {0.5, 0.2, 0.2};
  Mask a(g), b(g);
  for (int z = 0; z < 4; ++z)
    for (int y = 0; y < 4; ++y) a(3, y, z) = 1, b(2, y, z) = 1;
  const LabelRuns ra = label_runs(a, nullptr, 26), rb = label_runs(b, nullptr, 26);
  const SurfaceDistances s = surface_distances(ra, rb);
  CHECK(s.hd95_mm == Approx(0.5));
  CHECK(s.assd_mm == Approx(0.5));
  CHECK(s.surface_voxels_ref == 16);
  const Mask none(g);
  CHECK(std::isnan(surface_distances(ra, label_runs(none, nullptr, 26)).hd95_mm));
  CHECK(percentile_linear({1, 2, 3, 4}, 95) == Approx(3.85));  // numpy.percentile([1,2,3,4], 95) = 3.85 by hand
}

TEST_CASE("percentile_linear by selection equals numpy and the sorted definition", "[metrics][surface]") {
  // numpy 1.24.2: numpy.percentile(a, q) for q = 95, 50, 0, 100 (default 'linear' method).
  const std::vector<double> a = {0.01, 0.01, 0.02, 0.0141, 0, 0.5, 0.01, 0.03, 0.01, 0.0173};
  CHECK(percentile_linear(a, 95) == Approx(0.28849999999999953).epsilon(1e-15));
  CHECK(percentile_linear(a, 50) == Approx(0.01205).epsilon(1e-15));
  CHECK(percentile_linear(a, 0) == 0.0);
  CHECK(percentile_linear(a, 100) == 0.5);
  // The definition (numpy's 'linear'): sort, pos = q/100 (n - 1), v[lo] + (pos - lo)(v[lo+1] - v[lo]).
  // Selection must give the same bits: many ties (distances of a few lattice lengths), one value
  // alone, zeros, +inf, a negative value, -0.0.
  auto by_sort = [](std::vector<double> v, double q) {
    std::sort(v.begin(), v.end());
    const double pos = q / 100.0 * double(v.size() - 1);
    const size_t lo = size_t(std::floor(pos));
    const double hi = lo + 1 < v.size() ? v[lo + 1] : v[lo];
    return v[lo] + (pos - double(lo)) * (hi - v[lo]);
  };
  uint64_t state = 12345;
  auto next = [&] {  // splitmix64
    uint64_t z = (state += 0x9E3779B97F4A7C15ull);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return z ^ (z >> 31);
  };
  const double lattice[5] = {0.0, 0.01, 0.01 * std::sqrt(2.0), 0.01 * std::sqrt(3.0), 0.02};
  for (int t = 0; t < 200; ++t) {
    const size_t n = 1 + next() % (t < 100 ? 50 : 20000);
    std::vector<double> v(n);
    for (auto& x : v) {
      const uint64_t r = next();
      x = r % 4 ? lattice[r % 5] : double(r >> 11) * 0x1.0p-53 * 0.3;  // ties, and spread values
    }
    if (t % 7 == 0) v[next() % n] = INFINITY;
    if (t % 11 == 0) v[next() % n] = -0.25;
    if (t % 13 == 0) v[next() % n] = -0.0;
    for (double q : {0.0, 5.0, 50.0, 95.0, 99.9, 100.0}) {
      INFO("t = " << t << ", n = " << n << ", q = " << q);
      const double want = by_sort(v, q), got = percentile_linear(v, q);
      CHECK((got == want || (std::isnan(got) && std::isnan(want))));
    }
  }
  CHECK(std::isnan(percentile_linear({}, 95)));
}

TEST_CASE("hd95 and assd agree with scipy.ndimage distance transforms", "[metrics][surface][ref]") {
  // Reference: scipy.ndimage.binary_erosion surfaces and distance_transform_edt with sampling
  // (python3-scipy). Random balls, independently for the two sides (surfaces far apart: ring
  // searches), or the second side = the first moved one voxel along x plus a few balls (nearly
  // coincident surfaces: the 3x3x3 first look), or that plus 1 % isolated voxels (noise: many far
  // points a cell, searched together). Rows of 40 and of 130 voxels (two 64-voxel words and a
  // tail), and of 300 (75 grid cells a row: two words of cell occupancy bits).
  const int nx = GENERATE(40, 130, 300);
  const int mode = GENERATE(0, 1, 2);  // apart, near, near + noise
  const bool near = mode > 0;
  Geometry g;
  g.dims = {nx, 33, 27};
  g.spacing_mm = {0.02, 0.025, 0.03};
  std::mt19937_64 rng(17);
  std::uniform_real_distribution<double> u(0, 1);
  Mask p(g), r(g);
  auto balls = [&](Mask& m, int n) {
    for (int k = 0; k < n; ++k) {
      const double cx = u(rng) * nx, cy = u(rng) * 33, cz = u(rng) * 27, rad = 1 + 4 * u(rng);
      for (int z = 0; z < 27; ++z)
        for (int y = 0; y < 33; ++y)
          for (int x = 0; x < nx; ++x)
            if ((x - cx) * (x - cx) + (y - cy) * (y - cy) + (z - cz) * (z - cz) <= rad * rad) m(x, y, z) = 1;
    }
  };
  balls(p, 12 * nx / 40);
  if (near) {
    for (int64_t i = 1; i < p.size(); ++i) r[i] = p[i - 1];
    balls(r, 3);
    if (mode == 2)
      for (int64_t i = 0; i < r.size(); ++i)
        if (u(rng) < 0.01) r[i] = 1;
  } else {
    balls(r, 12 * nx / 40);
  }
  pbtest::TempDir d;
  write_raw(AnyVolume(p), d / "p.raw");
  write_raw(AnyVolume(r), d / "r.raw");
  const auto out = pbtest::run_ref_script("metrics_surface.py", d / "p.raw" + " " + d / "r.raw" + " " +
                                                                    std::to_string(nx) + " 33 27 0.02 0.025 0.03");
  INFO(out.err);
  REQUIRE(out.exit_code == 0);
  const auto j = nlohmann::json::parse(out.out);
  INFO("nx " << nx << " mode " << mode);
  const SurfaceDistances s = surface_distances(label_runs(p, nullptr, 26), label_runs(r, nullptr, 26));
  CHECK(s.surface_voxels_pred == j["n_pred"].get<int64_t>());
  CHECK(s.surface_voxels_ref == j["n_ref"].get<int64_t>());
  CHECK(s.hd95_mm == Approx(j["hd95"].get<double>()).epsilon(1e-9));
  CHECK(s.assd_mm == Approx(j["assd"].get<double>()).epsilon(1e-9));
  // The generic and the AVX2 scan of a cell's points round alike: the same bits.
  set_simd_cap(Simd::generic);
  const SurfaceDistances g0 = surface_distances(label_runs(p, nullptr, 26), label_runs(r, nullptr, 26));
  set_simd_cap(Simd::avx512);
  CHECK(g0.hd95_mm == s.hd95_mm);
  CHECK(g0.assd_mm == s.assd_mm);
}
