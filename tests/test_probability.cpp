// Probability-map metrics (metrics/probability.cpp) against scikit-learn on the same voxels
// (tests/ref/probability_sklearn.py: average_precision_score, brier_score_loss,
// calibration.calibration_curve, jaccard_score; Debian python3-sklearn), and analytic cases.
#include <catch2/catch.hpp>

#include <cmath>
#include <random>

#include "core/json.hpp"
#include "metrics/probability.hpp"
#include "tests/helpers.hpp"

using namespace pb;

namespace {
// scikit-learn's figures on the ROI voxels of slices [z0, z1) (tests/ref/probability_sklearn.py).
nlohmann::json sklearn_reference(const VolumeF& prob, const Mask& ref, const Mask& roi, int64_t z0, int64_t z1) {
  pbtest::TempDir d;
  write_volume(prob, d / "p.npy");
  write_volume(ref, d / "r.npy");
  write_volume(roi, d / "o.npy");
  const auto r = pbtest::run_ref_script("probability_sklearn.py", d / "p.npy" + " " + d / "r.npy" + " " + d / "o.npy" +
                                                                      " " + std::to_string(z0) + " " + std::to_string(z1));
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  return nlohmann::json::parse(r.out);
}
}  // namespace

TEST_CASE("probability metrics equal scikit-learn's on the same voxels", "[probability]") {
  const Geometry g = pbtest::cube(24, 0.05);
  VolumeF prob(g, 0.f);
  Mask ref(g, 0), roi(g, 0);
  std::mt19937 rng(11);
  std::uniform_real_distribution<float> u(0.f, 1.f);
  for (int z = 0; z < 24; ++z)
    for (int y = 0; y < 24; ++y)
      for (int x = 0; x < 24; ++x) {
        const double r2 = (x - 11.5) * (x - 11.5) + (y - 11.5) * (y - 11.5) + (z - 11.5) * (z - 11.5);
        roi(x, y, z) = r2 < 11.0 * 11.0;
        const bool pore = std::sin(0.7 * x) * std::cos(0.5 * y) + 0.3 * std::sin(0.9 * z) > 0.8;
        ref(x, y, z) = pore;
        float p = pore ? 0.35f + 0.65f * u(rng) : 0.6f * u(rng) * u(rng);
        const int kind = int(u(rng) * 4);
        if (kind == 0) p = std::round(p * 16.f) / 16.f;                 // ties, and values on bin edges
        if (kind == 1) p = float(int(p * 10.f)) / 10.f;                 // 0.1, 0.2 ... exactly (float32)
        prob(x, y, z) = std::min(1.f, std::max(0.f, p));
      }
  const int64_t z0 = 3, z1 = 20;
  const auto sk = sklearn_reference(prob, ref, roi, z0, z1);
  const ProbabilityMetrics m = probability_metrics(prob, ref, &roi, z0, z1, 0.5);
  REQUIRE(m.voxels == sk["voxels"].get<int64_t>());
  REQUIRE(m.positives == sk["positives"].get<int64_t>());
  REQUIRE(m.positives > 100);
  // same voxels, sums in another order: agreement to rounding
  CHECK(m.average_precision == Approx(sk["average_precision"].get<double>()).epsilon(1e-12));
  CHECK(m.brier_score == Approx(sk["brier_score"].get<double>()).epsilon(1e-12));
  CHECK(m.ece == Approx(sk["ece"].get<double>()).epsilon(1e-12));
  REQUIRE(m.reliability.size() == sk["counts"].size());
  for (size_t b = 0; b < m.reliability.size(); ++b) {
    INFO("bin " << b);
    CHECK(m.reliability[b].count == sk["counts"][b].get<int64_t>());
    CHECK(m.reliability[b].fraction_positive == Approx(sk["prob_true"][b].get<double>()).epsilon(1e-12));
    CHECK(m.reliability[b].mean_predicted == Approx(sk["prob_pred"][b].get<double>()).epsilon(1e-12));
  }
  REQUIRE(m.thresholds.size() == 19);
  for (size_t k = 0; k < 19; ++k) {
    INFO("t = " << m.thresholds[k]);
    CHECK(m.jaccard_at[k] == Approx(sk["jaccard_at"][k].get<double>()).epsilon(1e-12));
    CHECK(m.porosity_bias_pp_at[k] == Approx(sk["porosity_bias_pp_at"][k].get<double>()).epsilon(1e-12));
  }
  const auto j = to_json(m);
  CHECK(j["chosen_threshold"] == 0.5);
  CHECK(j["reliability"].size() == m.reliability.size());
}

TEST_CASE("probability metrics: analytic cases", "[probability]") {
  const Geometry g = pbtest::cube(8, 0.1);
  Mask ref(g, 0);
  for (int64_t i = 0; i < ref.size(); i += 3) ref[i] = 1;
  // a perfect, fully confident map: AP 1 (every positive ranked first), Brier 0, ECE 0
  VolumeF perfect(g, 0.f);
  for (int64_t i = 0; i < ref.size(); ++i) perfect[i] = ref[i] ? 1.f : 0.f;
  auto m = probability_metrics(perfect, ref, nullptr, 0, -1, 0.5);
  CHECK(m.average_precision == 1.0);
  CHECK(m.brier_score == 0.0);
  CHECK(m.ece == 0.0);
  for (double j : m.jaccard_at) CHECK(j == 1.0);
  // a constant map of 0.5: one distinct value, AP = the positive fraction (precision at full
  // recall); Brier 0.25; ECE = |positive fraction - 0.5| (one bin)
  VolumeF half(g, 0.5f);
  m = probability_metrics(half, ref, nullptr, 0, -1, 0.5);
  const double frac = double(m.positives) / double(m.voxels);
  CHECK(m.average_precision == Approx(frac));
  CHECK(m.brier_score == Approx(0.25));
  CHECK(m.ece == Approx(std::abs(frac - 0.5)));
  REQUIRE(m.reliability.size() == 1);
  CHECK(m.reliability[0].lo == Approx(0.4));  // 0.5 sits on an inner edge: the lower bin
  // no reference pore: AP undefined (null), Brier and ECE still defined
  m = probability_metrics(half, Mask(g, 0), nullptr, 0, -1, 0.5);
  CHECK(std::isnan(m.average_precision));
  CHECK(to_json(m)["average_precision"].is_null());
  CHECK(m.brier_score == Approx(0.25));
}

TEST_CASE("average precision in bounded memory equals scikit-learn's", "[probability]") {
  // 64^3 voxels, 60 % of them exactly 0 (one bucket of the float bits above the dense limit of
  // 131072 voxels), many distinct values close together (several per bucket) and ties; the working
  // memory from 1 byte (one bucket per pass) to the default. Reference: scikit-learn's
  // average_precision_score (tests/ref/probability_sklearn.py) on the same voxels.
  const Geometry g = pbtest::cube(64, 0.05);
  Mask roi(g, 1), ref(g, 0);
  VolumeF prob(g, 0.f);
  std::mt19937 rng(23);
  auto u = [&rng] { return std::uniform_real_distribution<float>(0.f, 1.f)(rng); };
  for (int64_t i = 0; i < prob.size(); ++i) {
    const bool pore = u() < 0.2f;
    ref[i] = pore;
    const float w = u();
    float p = 0.f;
    if (w >= 0.6f) p = pore ? 0.3f + 0.0001f * float(int(u() * 500)) : 0.3f + 0.0001f * float(int(u() * 300));
    if (w >= 0.9f) p = pore ? u() : 0.5f * u();
    prob[i] = p;
  }
  const double sk = sklearn_reference(prob, ref, roi, 0, 64)["average_precision"].get<double>();
  const double full = probability_metrics(prob, ref, &roi, 0, -1, 0.5).average_precision;
  CHECK(full == Approx(sk).epsilon(1e-12));
  for (size_t bytes : {size_t(1), size_t(4096), size_t(1) << 20}) {
    INFO("working memory " << bytes << " bytes");
    const double ap = probability_metrics(prob.data(), ref, &roi, 0, -1, 0.5, 10, bytes).average_precision;
    CHECK(ap == full);  // the same sums in the same order, whatever the passes
    CHECK(ap == Approx(sk).epsilon(1e-12));
  }
}
