// Global thresholds against ITK 5.2's histogram threshold calculators as a second reference
// (issue 4): huang, kittler-illingworth, kapur (itk::MaximumEntropyThresholdCalculator),
// moments, intermodes, on the three mixtures of tests/global_helpers.hpp, within one histogram bin.
// (ITK's minimum variant smooths differently from scikit-image, minimum's reference: not used.)
//
// Bin convention: we hand ITK our own histogram with bin i spanning [i - 1/2, i + 1/2), so that
// ITK's GetMeasurement(i) (a bin centre) is the index i. ITK's calculators return the centre of
// the last bin of the dark class; ours the upper edge of that bin. Both are turned into that bin
// index. Where the valley between the classes has empty bins, every split inside it gives the same
// two classes (and the same criterion), so "within one bin" counts occupied bins: at most one
// occupied bin may lie between our split and ITK's.
#include <catch2/catch.hpp>

#include <itkHistogram.h>
#include <itkHuangThresholdCalculator.h>
#include <itkIntermodesThresholdCalculator.h>
#include <itkKittlerIllingworthThresholdCalculator.h>
#include <itkMaximumEntropyThresholdCalculator.h>
#include <itkMomentsThresholdCalculator.h>

#include "tests/global_helpers.hpp"

using namespace pb;
using namespace pbtest;

namespace {

using ItkHistogram = itk::Statistics::Histogram<double>;

ItkHistogram::Pointer to_itk(const Histogram& h) {
  auto out = ItkHistogram::New();
  out->SetMeasurementVectorSize(1);
  ItkHistogram::SizeType size(1);
  size[0] = itk::SizeValueType(h.bins());
  ItkHistogram::MeasurementVectorType lower(1), upper(1);
  lower[0] = -0.5;
  upper[0] = h.bins() - 0.5;
  out->Initialize(size, lower, upper);
  for (int i = 0; i < h.bins(); ++i) out->SetFrequency(ItkHistogram::InstanceIdentifier(i), double(h.counts[size_t(i)]));
  return out;
}

template <class Calculator>
int itk_split(const Histogram& h, bool intermode = true) {
  auto c = Calculator::New();
  if constexpr (std::is_same_v<Calculator, itk::IntermodesThresholdCalculator<ItkHistogram, double>>)
    c->SetUseInterMode(intermode);
  const auto ih = to_itk(h);
  c->SetInput(ih);
  c->Update();
  return int(std::lround(c->GetThreshold()));
}

// Occupied bins in (min(a, b), max(a, b)]: the voxels' bins on which two splits disagree.
int occupied_between(const Histogram& h, int a, int b) {
  int n = 0;
  for (int i = std::min(a, b) + 1; i <= std::max(a, b); ++i) n += h.counts[size_t(i)] > 0;
  return n;
}

}  // namespace

TEST_CASE("global thresholds agree with ITK's histogram threshold calculators within one bin", "[global][ref][itk]") {
  for (const auto& [name, v] : global_test_volumes()) {
    INFO(name);
    const Histogram h = full_histogram(v);
    auto ours = [&](const char* m) { return split_index(h, chosen(run_named(m, v), "threshold")); };
    // Source: ITK 5.2 itk::*ThresholdCalculator (ports of ImageJ's auto-threshold methods).
    const std::vector<std::tuple<const char*, int, int>> cases = {
        {"huang", ours("huang"), itk_split<itk::HuangThresholdCalculator<ItkHistogram, double>>(h)},
        {"kittler-illingworth", ours("kittler-illingworth"),
         itk_split<itk::KittlerIllingworthThresholdCalculator<ItkHistogram, double>>(h)},
        {"kapur", ours("kapur"), itk_split<itk::MaximumEntropyThresholdCalculator<ItkHistogram, double>>(h)},
        {"moments", ours("moments"), itk_split<itk::MomentsThresholdCalculator<ItkHistogram, double>>(h)},
        {"intermodes", ours("intermodes"), itk_split<itk::IntermodesThresholdCalculator<ItkHistogram, double>>(h, true)},
    };
    for (const auto& [m, k_ours, k_itk] : cases) {
      INFO(m << ": our split bin " << k_ours << ", ITK's " << k_itk);
      if (std::string(m) == "kittler-illingworth" && name == "low-porosity") {
        // ITK (after ImageJ) iterates the paper's stationarity condition with log10 where
        // Kittler & Illingworth (1986) have ln, and does not converge here (it prints a warning);
        // ours minimises the paper's criterion J over all splits. Checked below against J instead.
        continue;
      }
      CHECK(occupied_between(h, k_ours, k_itk) <= 1);
    }
  }
}

TEST_CASE("kittler-illingworth minimises the minimum-error criterion over all splits", "[global][property]") {
  // Kittler & Illingworth (1986) eq. 15: J(k) = 1 + 2[P0 ln s0 + P1 ln s1] - 2[P0 ln P0 + P1 ln P1]
  // (s = class standard deviation in bins, floored at the one-bin value sqrt(1/12) as ours is).
  for (const auto& [name, v] : global_test_volumes()) {
    INFO(name);
    const Histogram h = full_histogram(v);
    const int k = split_index(h, chosen(run_named("kittler-illingworth", v), "threshold"));
    auto J = [&](int t) {
      double n0 = 0, s0 = 0, q0 = 0, n1 = 0, s1 = 0, q1 = 0;
      for (int i = 0; i < h.bins(); ++i) {
        const double c = double(h.counts[size_t(i)]);
        (i <= t ? n0 : n1) += c;
        (i <= t ? s0 : s1) += c * i;
        (i <= t ? q0 : q1) += c * double(i) * i;
      }
      if (n0 == 0 || n1 == 0) return double(INFINITY);
      const double N = n0 + n1, P0 = n0 / N, P1 = n1 / N;
      const double sd0 = std::sqrt(std::max(q0 / n0 - (s0 / n0) * (s0 / n0), 1.0 / 12));
      const double sd1 = std::sqrt(std::max(q1 / n1 - (s1 / n1) * (s1 / n1), 1.0 / 12));
      return 1 + 2 * (P0 * std::log(sd0) + P1 * std::log(sd1)) - 2 * (P0 * std::log(P0) + P1 * std::log(P1));
    };
    const double jk = J(k);
    for (int t = 0; t + 1 < h.bins(); ++t) {
      INFO("split " << t << " vs ours " << k);
      CHECK(jk <= J(t) + 1e-12);
    }
  }
}
