// Detector noise of the simulated scans (issue 3): photon counts Poisson(I0 T) plus independent
// Gaussian electronic noise, and the -log line integral. Checked against textbook facts: the
// variance of a Poisson count equals its mean, variances (and all cumulants) of independent
// variables add, and the delta method gives var(-log X) ~ var(X) / E[X]^2. Tolerances follow from
// the sample size through the standard error of a variance estimate.
#include <catch2/catch.hpp>
#include <cmath>
#include <random>
#include <vector>

#include "synthetic/phantom.hpp"
#include "synthetic/scan.hpp"

using namespace pb::synth;

namespace {

struct Moments {
  double mean = 0, var = 0;  // sample mean and unbiased sample variance (two passes)
};
Moments moments(const std::vector<double>& x) {
  Moments m;
  for (double v : x) m.mean += v;
  m.mean /= double(x.size());
  for (double v : x) m.var += (v - m.mean) * (v - m.mean);
  m.var /= double(x.size() - 1);
  return m;
}

// Standard error of the sample variance of n draws with variance s2 and fourth cumulant k4:
// var(s^2) = k4 / n + 2 s2^2 / (n - 1) (e.g. Kendall & Stuart, The Advanced Theory of Statistics,
// vol. 1, sampling moments; from memory). For normal data k4 = 0 and (n-1) s^2 / s2 is chi-square
// with n - 1 degrees of freedom, whose standard deviation sqrt(2 (n-1)) gives the same 2 s2^2 / (n-1).
double se_variance(double s2, double k4, double n) { return std::sqrt(k4 / n + 2 * s2 * s2 / (n - 1)); }

}  // namespace

TEST_CASE("detector counts: variance I0 T + sigma_e^2 and mean I0 T (Poisson plus independent Gaussian)",
          "[synth][noise]") {
  // Poisson: mean = variance = every cumulant = lambda (e.g. Feller, An Introduction to Probability
  // Theory vol. 1, ch. IX; from memory). Independent Gaussian read noise adds sigma^2 to the
  // variance and nothing to the mean or the fourth cumulant (cumulants of independent sums add).
  // Both Poisson branches of Rng::poisson are covered: lambda < 10 (Knuth) and above (PTRS).
  struct Case {
    double expected, sigma;
  };
  const Case c = GENERATE(Case{1000, 0}, Case{1000, 20}, Case{1000, 60}, Case{50, 10}, Case{5, 2}, Case{3.5, 0});
  INFO("I0 T = " << c.expected << ", sigma_e = " << c.sigma);
  const int n = 200000;
  Rng rng(mix_seed(2024, uint64_t(c.expected * 1000 + c.sigma)));
  std::vector<double> x(n);
  for (double& v : x) v = detector_counts(rng, c.expected, c.sigma);
  const Moments m = moments(x);
  const double var = c.expected + c.sigma * c.sigma;
  INFO("mean " << m.mean << ", variance " << m.var << " (expected " << var << ")");
  // 5 standard errors: the seed is fixed, and a correct sampler fails this with p < 1e-6.
  CHECK(std::abs(m.mean - c.expected) < 5 * std::sqrt(var / n));
  CHECK(std::abs(m.var - var) < 5 * se_variance(var, c.expected, n));
  // Without electronic noise the counts are whole photons.
  if (c.sigma == 0)
    for (int i = 0; i < 100; ++i) CHECK(x[size_t(i)] == std::floor(x[size_t(i)]));
}

TEST_CASE("log transmission: variance (I0 T + sigma_e^2) / (I0 T)^2 by the delta method", "[synth][noise]") {
  // p = -log(X / I0) with X = counts: var(p) ~ var(X) / E[X]^2 (delta method, e.g. Casella & Berger,
  // Statistical Inference, 2nd ed., 5.5.4; from memory). The next terms are smaller by about
  // var(X) / E[X]^2 itself (<= 0.2 % here), added to the tolerance. Flat field (T = 1) and a path
  // with line integral 2 (T = e^-2); the mean of p is the line integral to the same order.
  struct Case {
    double i0, line_integral, sigma;
  };
  const Case c = GENERATE(Case{1e4, 0, 0}, Case{1e4, 0, 50}, Case{1000, 0, 20}, Case{2e4, 2, 40});
  INFO("I0 = " << c.i0 << ", line integral " << c.line_integral << ", sigma_e = " << c.sigma);
  const double expected = c.i0 * std::exp(-c.line_integral);
  const int n = 200000;
  Rng rng(mix_seed(77, uint64_t(c.i0 + c.sigma + 10 * c.line_integral)));
  std::vector<double> p(n);
  for (double& v : p) v = log_transmission(detector_counts(rng, expected, c.sigma), c.i0);
  const Moments m = moments(p);
  const double v = (expected + c.sigma * c.sigma) / (expected * expected);
  INFO("mean " << m.mean << ", variance " << m.var << " (delta method " << v << ")");
  // p is close to normal here (skewness and excess kurtosis of the counts ~ 1/sqrt(I0 T), 1/(I0 T)).
  CHECK(std::abs(m.var - v) < 5 * se_variance(v, 0, n) + 2 * v * v);
  CHECK(std::abs(m.mean - c.line_integral) < 5 * std::sqrt(v / n) + v);
}

TEST_CASE("log transmission clamps at half a photon, and zero noise adds nothing", "[synth][noise]") {
  // Hand values: -log(0.5 / 1000) = log 2000 = 7.6009; -log(1000 / 1000) = 0.
  CHECK(log_transmission(0, 1000) == Approx(std::log(2000.0)));
  CHECK(log_transmission(-3, 1000) == Approx(std::log(2000.0)));
  CHECK(log_transmission(1000, 1000) == 0);
  // sigma_e = 0 draws no normal: the stream is the Poisson stream alone.
  Rng a(5), b(5);
  for (int i = 0; i < 1000; ++i) CHECK(detector_counts(a, 300, 0) == double(b.poisson(300)));
}

TEST_CASE("scan: electronic noise raises the reconstructed variance of air by (I0 + sigma_e^2) / I0", "[synth][noise]") {
  // Slices above a small part see air only (T = 1 on every ray), so the -log data have variance
  // (I0 + sigma_e^2) / I0^2 (delta method, above) and FBP, being linear, scales the image variance
  // by the same factor. Pixels of one slice are correlated through the ramp filter, so the
  // tolerance is empirical (10 %, against a factor of 1.9), not a standard error.
  Recipe r;
  r.dims = {64, 64, 16};
  Shape s;
  s.kind = "cylinder";
  s.radius_mm = 0.03;
  s.height_mm = 0.04;  // slices |z| < 0.02 mm: 4..11 of 16; 0..3 and 12..15 are air only
  r.shapes = {s};
  r.pores.clear();
  r.detector_subsamples = 1;
  const Phantom ph = build_phantom(r);
  const double i0 = 1000, sigma = 30;
  auto air_variance = [&](double sigma_e) {
    Recipe q = r;
    q.electronic_noise = sigma_e;
    const pb::VolumeF v = simulate_scan(ph, q, ScanSpec{90, i0, false});
    std::vector<double> x;
    for (int64_t z : {0, 1, 2, 3, 12, 13, 14, 15})
      for (int64_t j = 0; j < 64; ++j)
        for (int64_t i = 0; i < 64; ++i)
          if (std::hypot(i - 31.5, j - 31.5) < 25) x.push_back(v(i, j, z));
    return moments(x).var;
  };
  const double v0 = air_variance(0), v1 = air_variance(sigma);
  INFO("air variance " << v0 << " -> " << v1 << " (1/mm^2)");
  CHECK(v1 / v0 == Approx((i0 + sigma * sigma) / i0).epsilon(0.10));
}

namespace {
// The Poisson sampler as published, every constant derived from the mean inside the call: products
// of uniforms below 10 (Knuth, TAOCP vol. 2, 3.4.1) and PTRS above (Hoermann 1993, Insurance:
// Math. Econ. 12:39, as numpy's random_poisson_ptrs writes it), on the same uniforms as Rng.
int64_t poisson_as_published(Rng& g, double lam) {
  if (lam <= 0) return 0;
  if (lam < 10) {
    const double limit = std::exp(-lam);
    double prod = g.uniform();
    int64_t k = 0;
    while (prod > limit) {
      prod *= g.uniform();
      ++k;
    }
    return k;
  }
  const double slam = std::sqrt(lam), loglam = std::log(lam);
  const double b = 0.931 + 2.53 * slam, a = -0.059 + 0.02483 * b;
  const double invalpha = 1.1239 + 1.1328 / (b - 3.4), vr = 0.9277 - 3.6224 / (b - 2);
  for (;;) {
    const double U = g.uniform() - 0.5, V = g.uniform(), us = 0.5 - std::abs(U);
    const double k = std::floor((2 * a / us + b) * U + lam + 0.43);
    if (us >= 0.07 && V <= vr) return int64_t(k);
    if (k < 0 || (us < 0.013 && V > us)) continue;
    if (std::log(V) + std::log(invalpha) - std::log(a / (us * us) + b) <= -lam + k * loglam - std::lgamma(k + 1))
      return int64_t(k);
  }
}
}  // namespace

TEST_CASE("Poisson draws with the mean's constants taken once equal the published sampler draw for draw",
          "[synth][noise][speed]") {
  // The scan simulation reuses Rng::PoissonMean across rays of one mean (the air around a part);
  // the draws, and so the stream position after each, must be those of the sampler as published.
  const double mean = GENERATE(0.0, 0.3, 3.5, 9.999, 10.0, 55.5, 1000.0, 2e5);
  INFO("mean " << mean);
  Rng a(mix_seed(77, uint64_t(mean * 1000))), b = a;
  const Rng::PoissonMean once(mean);
  int64_t differ = 0;
  for (int i = 0; i < 20000; ++i) {
    const int64_t x = i % 3 == 0 ? a.poisson(mean) : a.poisson(once);
    differ += x != poisson_as_published(b, mean);
  }
  CHECK(differ == 0);
  CHECK(a.g() == b.g());  // the same number of uniforms used
  // detector_counts with the constants taken once: the same counts as with the mean.
  Rng c(9), d(9);
  for (int i = 0; i < 2000; ++i) CHECK(detector_counts(c, once, 3.0) == detector_counts(d, mean, 3.0));
}

TEST_CASE("Mt19937_64 is std::mt19937_64: the standard's 10000th output and the same sequence", "[synth][noise][speed]") {
  // C++ [rand.predef]: the 10000th consecutive invocation of a default-constructed mt19937_64
  // produces 9981545732273789042. Then the library's engine, output for output, on other seeds.
  Mt19937_64 d;
  uint64_t x = 0;
  for (int i = 0; i < 10000; ++i) x = d();
  CHECK(x == 9981545732273789042ULL);
  for (uint64_t seed : {uint64_t(0), uint64_t(1), mix_seed(3, 4), ~uint64_t(0)}) {
    Mt19937_64 ours(seed);
    std::mt19937_64 ref(seed);
    int64_t differ = 0;
    for (int i = 0; i < 100000; ++i) differ += ours() != ref();
    CHECK(differ == 0);
  }
}
