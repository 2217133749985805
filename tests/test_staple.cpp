// STAPLE consensus (Warfield, Zou & Wells 2004, IEEE TMI 23(7):903-921) through ITK: a hand case,
// a simulated case whose raters' sensitivities and specificities are known (the paper's own kind of
// validation, Sec. IV), and the paper's EM equations in numpy (tests/ref/staple_em.py).
#include <catch2/catch.hpp>

#include <filesystem>
#include <fstream>
#include <random>

#include "core/error.hpp"
#include "core/io.hpp"
#include "core/json.hpp"
#include "metrics/staple.hpp"
#include "tests/helpers.hpp"

using namespace pb;

namespace {

// Truth: a few balls in a 48^3 volume (about 9 % foreground); raters flip truth voxels with their
// own known sensitivity p and specificity q, independently per voxel (fixed seeds).
struct Simulated {
  Mask truth;
  std::vector<Mask> raters;
};
Simulated simulate(const std::vector<std::pair<double, double>>& pq) {
  Simulated s;
  const Geometry g = pbtest::cube(48);
  s.truth = Mask(g);
  const int balls[][4] = {{12, 12, 12, 7}, {33, 14, 30, 9}, {20, 34, 24, 6}, {36, 36, 10, 5}};
  for (int z = 0; z < 48; ++z)
    for (int y = 0; y < 48; ++y)
      for (int x = 0; x < 48; ++x)
        for (const auto& b : balls)
          if ((x - b[0]) * (x - b[0]) + (y - b[1]) * (y - b[1]) + (z - b[2]) * (z - b[2]) <= b[3] * b[3])
            s.truth(x, y, z) = 1;
  std::mt19937_64 rng(20041);
  std::uniform_real_distribution<double> u(0, 1);
  for (const auto& [p, q] : pq) {
    Mask m(g);
    for (int64_t i = 0; i < m.size(); ++i)
      m.data()[i] = s.truth.data()[i] ? (u(rng) < p ? 1 : 0) : (u(rng) < q ? 0 : 1);
    s.raters.push_back(std::move(m));
  }
  return s;
}

}  // namespace

TEST_CASE("STAPLE: identical raters are perfect and their mask is the consensus", "[staple]") {
  // Hand case: with D1 = D2, the EM fixed point is p = q = 1 and W = g / (g + 0) = 1 on the mask,
  // 0 off it (Warfield et al. 2004, eq. 14 with p = q = 1).
  const Geometry g = pbtest::cube(6);
  Mask a(g);
  a(1, 1, 1) = a(2, 1, 1) = a(4, 5, 3) = 1;
  const Mask b = a;
  const auto r = staple({&a, &b}, {"a", "b"});
  CHECK(r.sensitivity[0] == Approx(1.0).margin(1e-9));
  CHECK(r.specificity[1] == Approx(1.0).margin(1e-9));
  CHECK(r.consensus_voxels == 3);
  CHECK(r.consensus(4, 5, 3) == 1);
  CHECK(r.prior == Approx(3.0 / 216));
  CHECK(r.converged);
}

TEST_CASE("STAPLE recovers the known sensitivities and specificities of simulated raters", "[staple]") {
  const std::vector<std::pair<double, double>> pq = {{0.95, 0.98}, {0.80, 0.995}, {0.90, 0.99}};
  const auto s = simulate(pq);
  std::vector<const Mask*> in;
  for (const auto& m : s.raters) in.push_back(&m);
  const auto r = staple(in, {"r1", "r2", "r3"});
  REQUIRE(r.converged);
  // About 10,000 truth voxels: the sampling error of a rater's p is sqrt(p(1-p)/10^4) <= 0.004, of
  // q about 0.001; the EM estimate with its fixed prior stays within a few of those.
  for (size_t i = 0; i < pq.size(); ++i) {
    INFO("rater " << i);
    CHECK(r.sensitivity[i] == Approx(pq[i].first).margin(0.015));
    CHECK(r.specificity[i] == Approx(pq[i].second).margin(0.002));
  }
  // The consensus is closer to the truth than the best single rater (the point of STAPLE).
  auto errors = [&](const Mask& m) {
    int64_t e = 0;
    for (int64_t i = 0; i < m.size(); ++i) e += (m.data()[i] != 0) != (s.truth.data()[i] != 0);
    return e;
  };
  int64_t best = errors(s.raters[0]);
  for (const auto& m : s.raters) best = std::min(best, errors(m));
  CHECK(errors(r.consensus) < best);
}

TEST_CASE("STAPLE through ITK equals the paper's EM equations in numpy", "[staple]") {
  const auto s = simulate({{0.9, 0.97}, {0.7, 0.999}, {0.85, 0.99}, {0.6, 0.995}});
  pbtest::TempDir d;
  std::string args = "48 48 48";
  std::vector<const Mask*> in;
  std::vector<std::string> names;
  for (size_t i = 0; i < s.raters.size(); ++i) {
    const std::string f = d / ("r" + std::to_string(i) + ".raw");
    write_raw(AnyVolume(s.raters[i]), f);
    args += " " + f;
    in.push_back(&s.raters[i]);
    names.push_back(f);
  }
  const auto out = pbtest::run_ref_script("staple_em.py", args);
  REQUIRE(out.exit_code == 0);
  const auto ref = nlohmann::json::parse(out.out);
  const auto r = staple(in, names);
  for (size_t i = 0; i < in.size(); ++i) {
    CHECK(r.sensitivity[i] == Approx(ref["p"][i].get<double>()).margin(1e-6));
    CHECK(r.specificity[i] == Approx(ref["q"][i].get<double>()).margin(1e-6));
  }
  CHECK(r.prior == Approx(ref["prior"].get<double>()).epsilon(1e-12));
  // W is float in ITK, double in numpy: voxels within 1e-4 of 0.5 may fall either way.
  CHECK(std::abs(r.consensus_voxels - ref["consensus_voxels"].get<int64_t>()) <= ref["near_half"].get<int64_t>());
}

TEST_CASE("STAPLE refuses what it cannot use, naming the mask", "[staple]") {
  const Geometry g = pbtest::cube(4);
  Mask a(g), b(g), c(pbtest::cube(5));
  b(0, 0, 0) = 255;
  CHECK_THROWS_AS(staple({&a}, {"a.mha"}), InputError);
  CHECK_THROWS_WITH(staple({&a, &b}, {"a.mha", "b.mha"}), Catch::Contains("b.mha") && Catch::Contains("255"));
  CHECK_THROWS_WITH(staple({&a, &c}, {"a.mha", "c.mha"}), Catch::Contains("c.mha"));
  CHECK_THROWS_WITH(staple({&a, &a}, {"a", "a"}, 1.0), Catch::Contains("threshold"));
}

TEST_CASE("porebench consensus writes the STAPLE mask and its record; bad input is exit 2", "[staple][cli]") {
  const auto s = simulate({{0.95, 0.98}, {0.80, 0.995}, {0.90, 0.99}});
  pbtest::TempDir d;
  std::string args;
  for (size_t i = 0; i < s.raters.size(); ++i) {
    const std::string f = d / ("m" + std::to_string(i) + ".mha");
    write_volume(s.raters[i], f);
    args += " " + f;
  }
  const auto r = pbtest::run_cli("consensus" + args + " -o " + d / "c.mha" + " --json " + d / "c.json");
  REQUIRE(r.exit_code == 0);
  std::vector<const Mask*> in;
  for (const auto& m : s.raters) in.push_back(&m);
  const auto lib = staple(in, {"a", "b", "c"});
  const Mask written = read_volume(d / "c.mha").to_mask();
  CHECK(std::equal(written.data(), written.data() + written.size(), lib.consensus.data()));
  std::ifstream jf(d / "c.json");
  const auto j = nlohmann::json::parse(jf);
  CHECK(j["inputs"][1]["sensitivity"].get<double>() == Approx(lib.sensitivity[1]));
  CHECK(j["consensus_voxels"].get<int64_t>() == lib.consensus_voxels);

  const auto one = pbtest::run_cli("consensus " + d / "m0.mha -o " + d / "x.mha");
  CHECK(one.exit_code == 2);
  CHECK_THAT(one.err, Catch::Contains("two or more"));
  CHECK_FALSE(std::filesystem::exists(d / "x.mha"));
  write_volume(Mask(pbtest::cube(5)), d / "small.mha");
  const auto geo = pbtest::run_cli("consensus " + d / "m0.mha " + d / "small.mha -o " + d / "x.mha");
  CHECK(geo.exit_code == 2);
  CHECK_THAT(geo.err, Catch::Contains("small.mha"));
  CHECK_FALSE(std::filesystem::exists(d / "x.mha"));
}
