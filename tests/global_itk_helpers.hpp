#pragma once
// ITK 5.2's histogram threshold calculators as a reference for the global-threshold tests
// (test_global_itk.cpp, test_global_levels_itk.cpp). We hand ITK our own histogram with bin i
// spanning [i - 1/2, i + 1/2), so that ITK's GetMeasurement(i) (a bin centre) is the index i; its
// calculators return the centre of the last bin of the dark class, i.e. that bin index.
#include <itkHistogram.h>
#include <itkHuangThresholdCalculator.h>
#include <itkIntermodesThresholdCalculator.h>
#include <itkKittlerIllingworthThresholdCalculator.h>
#include <itkMaximumEntropyThresholdCalculator.h>
#include <itkMomentsThresholdCalculator.h>

#include <algorithm>
#include <cmath>
#include <tuple>
#include <type_traits>
#include <vector>

#include "core/histogram.hpp"

namespace pbtest {

using ItkHistogram = itk::Statistics::Histogram<double>;

inline ItkHistogram::Pointer to_itk(const pb::Histogram& h) {
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

// ITK's split (bin index of the last dark bin); intermodes uses the mean of the two modes.
template <class Calculator>
int itk_split(const pb::Histogram& h, bool intermode = true) {
  auto c = Calculator::New();
  if constexpr (std::is_same_v<Calculator, itk::IntermodesThresholdCalculator<ItkHistogram, double>>)
    c->SetUseInterMode(intermode);
  const auto ih = to_itk(h);
  c->SetInput(ih);
  c->Update();
  return int(std::lround(c->GetThreshold()));
}

// For each global method with an ITK 5.2 calculator (source: ITK 5.2 itk::*ThresholdCalculator,
// ports of ImageJ's auto-threshold methods): (method, our split bin, ITK's split bin). ours(name)
// gives our split bin for the method `name`.
template <class Ours>
std::vector<std::tuple<const char*, int, int>> itk_split_cases(const pb::Histogram& h, Ours ours) {
  return {
      {"huang", ours("huang"), itk_split<itk::HuangThresholdCalculator<ItkHistogram, double>>(h)},
      {"kittler-illingworth", ours("kittler-illingworth"),
       itk_split<itk::KittlerIllingworthThresholdCalculator<ItkHistogram, double>>(h)},
      {"kapur", ours("kapur"), itk_split<itk::MaximumEntropyThresholdCalculator<ItkHistogram, double>>(h)},
      {"moments", ours("moments"), itk_split<itk::MomentsThresholdCalculator<ItkHistogram, double>>(h)},
      {"intermodes", ours("intermodes"), itk_split<itk::IntermodesThresholdCalculator<ItkHistogram, double>>(h)},
  };
}

// Occupied bins in (min(a, b), max(a, b)]: the voxels' bins on which two splits disagree.
inline int occupied_between(const pb::Histogram& h, int a, int b) {
  int n = 0;
  for (int i = std::min(a, b) + 1; i <= std::max(a, b); ++i) n += h.counts[size_t(i)] > 0;
  return n;
}

}  // namespace pbtest
