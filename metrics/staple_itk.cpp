// STAPLE consensus through ITK's STAPLEImageFilter (Warfield, Zou & Wells 2004, IEEE TMI
// 23(7):903-921): our masks are handed to ITK as zero-copy views, the probability image W is
// thresholded straight into our consensus mask.
#include <itkSTAPLEImageFilter.h>

#include <algorithm>

#include "core/error.hpp"
#include "core/itk_bridge.hpp"
#include "metrics/staple.hpp"

namespace pb {

StapleResult staple(const std::vector<const Mask*>& masks, const std::vector<std::string>& names,
                    double threshold, int max_iterations) {
  if (masks.size() < 2) throw InputError("STAPLE needs at least two masks, got " + std::to_string(masks.size()));
  if (names.size() != masks.size()) throw std::logic_error("staple: one name per mask");
  if (!(threshold > 0 && threshold < 1))
    throw InputError("STAPLE threshold must lie in (0, 1), got " + std::to_string(threshold));
  const Geometry& g = masks[0]->geometry();
  for (size_t i = 0; i < masks.size(); ++i) {
    if (i) check_same_geometry(masks[i]->geometry(), names[i], g, names[0]);
    const uint8_t* p = masks[i]->data();
    const auto bad = std::find_if(p, p + masks[i]->size(), [](uint8_t v) { return v > 1; });
    if (bad != p + masks[i]->size())
      throw InputError(names[i] + ": STAPLE takes 0/1 masks, found the value " + std::to_string(int(*bad)) +
                       " at voxel " + std::to_string(bad - p));
  }
  using In = itk::Image<uint8_t, 3>;
  using Out = itk::Image<float, 3>;
  auto filter = itk::STAPLEImageFilter<In, Out>::New();
  std::vector<In::Pointer> views;  // keep the views alive while the filter runs
  for (size_t i = 0; i < masks.size(); ++i) {
    views.push_back(itk_view(*masks[i]));
    filter->SetInput(unsigned(i), views.back());
  }
  filter->SetForegroundValue(1);
  filter->SetMaximumIterations(max_iterations);
  filter->Update();

  StapleResult r;
  r.sensitivity = filter->GetSensitivity();
  r.specificity = filter->GetSpecificity();
  r.iterations = int(filter->GetElapsedIterations());
  r.converged = r.iterations < max_iterations;
  // ITK does not expose its prior; it is the mean foreground fraction of the inputs (its GenerateData).
  double sum = 0;
  for (const Mask* m : masks) sum += double(std::count(m->data(), m->data() + m->size(), uint8_t(1)));
  r.prior = sum / (double(masks.size()) * double(g.voxels()));
  r.consensus = Mask(g, Uninitialized{});
  const float* w = filter->GetOutput()->GetBufferPointer();
  const float t = float(threshold);
  int64_t n = 0;
  for (int64_t i = 0; i < r.consensus.size(); ++i) n += (r.consensus.data()[i] = w[i] >= t ? 1 : 0);
  r.consensus_voxels = n;
  return r;
}

}  // namespace pb
