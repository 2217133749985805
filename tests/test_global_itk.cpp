// Global thresholds against ITK 5.2's histogram threshold calculators as a second reference
// (issue 4): huang, kittler-illingworth, kapur (itk::MaximumEntropyThresholdCalculator),
// moments, intermodes, on the three mixtures of tests/global_helpers.hpp, within one histogram bin.
// (ITK's minimum variant smooths differently from scikit-image, minimum's reference: not used.)
//
// Bin convention: ITK gets our histogram (tests/global_itk_helpers.hpp) and returns the index of
// the last bin of the dark class; ours (the upper edge of that bin) is turned into that index. Where the valley between the classes has empty bins, every split inside it gives the same
// two classes (and the same criterion), so "within one bin" counts occupied bins: at most one
// occupied bin may lie between our split and ITK's.
#include <catch2/catch.hpp>

#include <itkHuangThresholdCalculator.h>
#include <itkKittlerIllingworthThresholdCalculator.h>
#include <itkMaximumEntropyThresholdCalculator.h>
#include <itkMomentsThresholdCalculator.h>

#include "tests/global_helpers.hpp"
#include "tests/global_itk_helpers.hpp"

using namespace pb;
using namespace pbtest;


TEST_CASE("global thresholds agree with ITK's histogram threshold calculators within one bin", "[global][ref][itk]") {
  for (const auto& [name, volume] : global_test_volumes()) {
    INFO(name);
    const auto& v = volume;  // a structured binding cannot be captured by a lambda in C++17 (clang refuses)
    const Histogram h = full_histogram(v);
    auto ours = [&](const char* m) { return split_index(h, chosen(run_named(m, v), "threshold")); };
    // Source: ITK 5.2 itk::*ThresholdCalculator (ports of ImageJ's auto-threshold methods).
    const auto cases = itk_split_cases(h, ours);
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
  // Kittler & Illingworth (1986) eq. 15 (tests/global_helpers.hpp).
  for (const auto& [name, volume] : global_test_volumes()) {
    INFO(name);
    const auto& v = volume;  // a structured binding cannot be captured by a lambda in C++17 (clang refuses)
    const Histogram h = full_histogram(v);
    const int k = split_index(h, chosen(run_named("kittler-illingworth", v), "threshold"));
    auto J = [&](int t) { return minimum_error_criterion(h, t); };
    const double jk = J(k);
    for (int t = 0; t + 1 < h.bins(); ++t) {
      INFO("split " << t << " vs ours " << k);
      CHECK(jk <= J(t) + 1e-12);
    }
  }
}
