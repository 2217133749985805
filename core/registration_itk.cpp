// Intensity-based registration with ITK's v4 framework: Mattes mutual information (Mattes et al.
// (2003) "PET-CT image registration in the chest using free-form deformations", IEEE TMI
// 22(1):120-128), regular-step gradient descent, multi-resolution (shrink 2^(L-1)..1, Gaussian
// smoothing sigma = shrink/2 voxels, none at full resolution: common practice, no source), versor
// rigid (6 DOF) or similarity (7 DOF). Parameter scales from the physical shift each parameter
// causes (ITK's RegistrationParameterScalesFromPhysicalShift); the first step of each level is at
// most one voxel of that level, and a level stops when the relaxed step falls below min_step of
// that first step.
// Each level is its own ITK registration on a real pyramid: the scans smoothed and subsampled
// (ImageRegistrationMethodv4's own levels subsample only the sample grid and interpolate the
// smoothed full-size scans, whose random reads dominate the time), and the moving scan's gradient
// is the analytic gradient of its trilinear interpolant (core/linear_gradient_itk.hpp) instead of
// six more interpolations per sample. ITK estimates the maximum step once, from the coarsest
// level's voxel, and keeps it for every later level; here it is set per level (issue 12: at 256^3
// the full-resolution level's first step of 4 voxels threw the rotation 0.4 deg off).
#include <itkCenteredTransformInitializer.h>
#include <itkCommand.h>
#include <itkImageRegistrationMethodv4.h>
#include <itkMattesMutualInformationImageToImageMetricv4.h>
#include <itkMultiThreaderBase.h>
#include <itkRegistrationParameterScalesFromPhysicalShift.h>
#include <itkRegularStepGradientDescentOptimizerv4.h>
#include <itkShrinkImageFilter.h>
#include <itkSmoothingRecursiveGaussianImageFilter.h>
#include <itkSimilarity3DTransform.h>
#include <itkVersorRigid3DTransform.h>

#include <algorithm>
#include <cmath>
#include <string>

#include "core/error.hpp"
#include "core/itk_bridge.hpp"
#include "core/linear_gradient_itk.hpp"
#include "core/parallel.hpp"
#include "core/registration.hpp"

namespace pb {

namespace {

using ImageF = itk::Image<float, 3>;
using Optimizer = itk::RegularStepGradientDescentOptimizerv4<double>;
using Metric = itk::MattesMutualInformationImageToImageMetricv4<ImageF, ImageF>;

// Counts iterations, sets each level's stop step relative to its first (estimated) step, and lets
// the step grow again. Regular-step gradient descent halves the step at every reversal of the
// gradient direction and never lengthens it: after the well-determined parameters have settled,
// a weakly determined one (the rotation about a nearly symmetric part's axis) is left to crawl at
// the halved step for hundreds of iterations. Here the step grows by 1.5 after two successive
// steps in a consistent direction (up to the level's first step): the "bold driver" rule (Battiti
// 1989, "Accelerated backpropagation learning: two optimization methods", Complex Systems 3:331-342;
// from memory), applied to the optimiser's relaxation. A halving still follows every reversal, so
// a level still ends when the step falls below min_step.
class LevelObserver : public itk::Command {
 public:
  using Self = LevelObserver;
  using Pointer = itk::SmartPointer<Self>;
  itkNewMacro(Self);
  int total = 0;
  double rel_min_step = 1e-3;
  static constexpr double kGrow = 1.5;
  static constexpr int kConsistentSteps = 2;
  void Execute(itk::Object* caller, const itk::EventObject& event) override {
    Execute(static_cast<const itk::Object*>(caller), event);
  }
  void Execute(const itk::Object* caller, const itk::EventObject& event) override {
    if (!itk::IterationEvent().CheckEvent(&event)) return;
    auto* opt = const_cast<Optimizer*>(dynamic_cast<const Optimizer*>(caller));
    if (!opt) return;
    ++total;
    const auto& g = opt->GetGradient();
    if (opt->GetCurrentIteration() == 0) {
      opt->SetMinimumStepLength(opt->GetLearningRate() * rel_min_step);
      previous_ = g;
      consistent_ = 0;
      return;
    }
    double dot = 0;
    for (unsigned i = 0; i < g.Size(); ++i) dot += g[i] * previous_[i];
    previous_ = g;
    consistent_ = dot > 0 ? consistent_ + 1 : 0;
    if (consistent_ == kConsistentSteps) {
      opt->SetCurrentLearningRateRelaxation(std::min(1.0, opt->GetCurrentLearningRateRelaxation() * kGrow));
      consistent_ = 0;
    }
  }

 private:
  Optimizer::DerivativeType previous_;
  int consistent_ = 0;
};

// Shrink factor of pyramid level l of `levels` (coarsest first): 2^(levels-1-l), halved while a
// scan would have fewer than 8 voxels along an axis at that level.
int level_shrink(const Geometry& a, const Geometry& b, int levels, int l) {
  int s = 1 << (levels - 1 - l);
  const int64_t smallest = std::min({a.dims[0], a.dims[1], a.dims[2], b.dims[0], b.dims[1], b.dims[2]});
  while (s > 1 && smallest / s < 8) s /= 2;
  return s;
}

// A pyramid level: the scan smoothed with a Gaussian of sigma = shrink/2 voxels (ITK's recursive
// Gaussian) and subsampled every `shrink` voxels (ITK's ShrinkImageFilter). The shrink filter
// centres the output grid on the input's and takes the nearest input voxel, up to half an input
// voxel away; the origin is set to the voxel it really took, so the level's geometry is exact.
ImageF::ConstPointer pyramid_level(const ImageF* full, int shrink) {
  using Smooth = itk::SmoothingRecursiveGaussianImageFilter<ImageF, ImageF>;
  auto smooth = Smooth::New();
  smooth->SetInput(full);
  typename Smooth::SigmaArrayType sigma;
  for (unsigned d = 0; d < 3; ++d) sigma[d] = 0.5 * shrink * full->GetSpacing()[d];
  smooth->SetSigmaArray(sigma);
  auto sub = itk::ShrinkImageFilter<ImageF, ImageF>::New();
  sub->SetInput(smooth->GetOutput());
  sub->SetShrinkFactors(unsigned(shrink));
  sub->Update();
  ImageF::Pointer out = sub->GetOutput();
  out->DisconnectPipeline();
  ImageF::PointType first;
  out->TransformIndexToPhysicalPoint(out->GetLargestPossibleRegion().GetIndex(), first);
  const auto taken = full->TransformPhysicalPointToIndex(first);
  ImageF::PointType taken_mm;
  full->TransformIndexToPhysicalPoint(taken, taken_mm);
  out->SetOrigin(out->GetOrigin() + (taken_mm - first));
  return out;
}

template <class Transform>
RegistrationResult run(const VolumeF& moving, const VolumeF& fixed, const RegistrationOptions& opt,
                       const SimilarityTransform* init) {
  itk::MultiThreaderBase::SetGlobalDefaultNumberOfThreads(unsigned(std::max(1, thread_count())));
  const auto fimg = itk_view(fixed);
  const auto mimg = itk_view(moving);

  auto transform = Transform::New();
  RegistrationResult res;
  if (init) {
    // ITK: T(x) = M (x - c) + c + translation with M = scale * R; ours: scale * R x + t.
    const Geometry& g = fixed.geometry();
    typename Transform::InputPointType c;
    for (unsigned k = 0; k < 3; ++k) c[k] = g.origin_mm[k] + 0.5 * double(g.dims[k] - 1) * g.spacing_mm[k];
    itk::Matrix<double, 3, 3> R;
    for (unsigned r = 0; r < 3; ++r)
      for (unsigned k = 0; k < 3; ++k) R(r, k) = init->R(int(r), int(k));
    itk::Versor<double> v;
    v.Set(R);
    transform->SetCenter(c);
    transform->SetRotation(v);
    if constexpr (std::is_same_v<Transform, itk::Similarity3DTransform<double>>) transform->SetScale(init->scale);
    const Eigen::Vector3d cc(c[0], c[1], c[2]);
    const Eigen::Vector3d tr = init->t - cc + init->scale * (init->R * cc);
    typename Transform::OutputVectorType trv;
    for (unsigned k = 0; k < 3; ++k) trv[k] = tr[int(k)];
    transform->SetTranslation(trv);
    res.initialisation = "markers";
  } else {
    using Init = itk::CenteredTransformInitializer<Transform, ImageF, ImageF>;
    auto ini = Init::New();
    ini->SetTransform(transform);
    ini->SetFixedImage(fimg);
    ini->SetMovingImage(mimg);
    ini->MomentsOn();
    ini->InitializeTransform();
    res.initialisation = "moments";
  }

  const int levels = std::clamp(opt.levels, 1, 6);
  const auto& sp = fixed.geometry().spacing_mm;
  const double voxel_mm = std::min({sp[0], sp[1], sp[2]});
  auto observer = LevelObserver::New();
  observer->rel_min_step = opt.min_step;
  res.method = "intensity";
  res.metric_name = "Mattes mutual information (negated; lower is better)";
  typename Optimizer::Pointer optimizer;
  for (int l = 0; l < levels; ++l) {
    const int s = level_shrink(fixed.geometry(), moving.geometry(), levels, l);
    const ImageF::ConstPointer F = s > 1 ? pyramid_level(fimg, s) : ImageF::ConstPointer(fimg);
    const ImageF::ConstPointer M = s > 1 ? pyramid_level(mimg, s) : ImageF::ConstPointer(mimg);

    auto metric = Metric::New();
    metric->SetNumberOfHistogramBins(unsigned(opt.histogram_bins));
    metric->SetUseMovingImageGradientFilter(false);
    metric->SetUseFixedImageGradientFilter(false);
    metric->SetMovingImageGradientCalculator(LinearGradientImageFunction<ImageF>::New());

    optimizer = Optimizer::New();
    optimizer->SetLearningRate(1.0);
    optimizer->SetRelaxationFactor(0.5);
    optimizer->SetNumberOfIterations(itk::SizeValueType(opt.max_iterations));
    optimizer->SetGradientMagnitudeTolerance(1e-8);
    optimizer->SetDoEstimateLearningRateOnce(true);
    optimizer->SetDoEstimateLearningRateAtEachIteration(false);
    optimizer->SetReturnBestParametersAndValue(false);
    optimizer->SetMaximumStepSizeInPhysicalUnits(double(s) * voxel_mm);  // one voxel of this level
    auto scales = itk::RegistrationParameterScalesFromPhysicalShift<Metric>::New();
    scales->SetMetric(metric);
    optimizer->SetScalesEstimator(scales);
    optimizer->AddObserver(itk::IterationEvent(), observer);

    using Registration = itk::ImageRegistrationMethodv4<ImageF, ImageF, Transform>;
    auto reg = Registration::New();
    reg->SetFixedImage(F);
    reg->SetMovingImage(M);
    reg->SetMetric(metric);
    reg->SetOptimizer(optimizer);
    reg->SetInitialTransform(transform);
    reg->InPlaceOn();  // each level refines `transform` itself
    reg->SetNumberOfLevels(1);
    typename Registration::ShrinkFactorsArrayType one(1);
    one[0] = 1;
    typename Registration::SmoothingSigmasArrayType none(1);
    none[0] = 0.0;
    reg->SetShrinkFactorsPerLevel(one);
    reg->SetSmoothingSigmasPerLevel(none);
    typename Registration::MetricSamplingPercentageArrayType pct(1);
    pct[0] = std::min(1.0, double(opt.samples_per_level) / double(F->GetLargestPossibleRegion().GetNumberOfPixels()));
    reg->SetMetricSamplingStrategy(Registration::MetricSamplingStrategyEnum::REGULAR);
    reg->SetMetricSamplingPercentagePerLevel(pct);
    reg->MetricSamplingReinitializeSeed(20260 + l);  // deterministic jitter of the regular samples
    try {
      reg->Update();
    } catch (const itk::ExceptionObject& e) {
      res.converged = false;
      res.stop_reason = std::string("ITK stopped: ") + e.GetDescription();
      res.iterations = observer->total;
      return res;
    }
  }
  const auto* final_t = transform.GetPointer();
  const auto M = final_t->GetMatrix();
  const auto off = final_t->GetOffset();
  double scale = 1.0;
  if constexpr (std::is_same_v<Transform, itk::Similarity3DTransform<double>>) scale = final_t->GetScale();
  for (int r = 0; r < 3; ++r) {
    for (int k = 0; k < 3; ++k) res.T.R(r, k) = M(unsigned(r), unsigned(k)) / scale;
    res.T.t[r] = off[unsigned(r)];
  }
  res.T.scale = scale;
  res.metric = optimizer->GetValue();
  res.iterations = observer->total;
  const auto stop = optimizer->GetStopCondition();
  res.converged = stop == itk::StopConditionObjectToObjectOptimizerEnum::STEP_TOO_SMALL ||
                  stop == itk::StopConditionObjectToObjectOptimizerEnum::GRADIENT_MAGNITUDE_TOLEARANCE;
  res.stop_reason = optimizer->GetStopConditionDescription();
  return res;
}

}  // namespace

RegistrationResult register_intensity_itk(const VolumeF& moving, const VolumeF& fixed, const RegistrationOptions& opt,
                                          const SimilarityTransform* init) {
  if (opt.dof == RegDof::rigid) return run<itk::VersorRigid3DTransform<double>>(moving, fixed, opt, init);
  return run<itk::Similarity3DTransform<double>>(moving, fixed, opt, init);
}

}  // namespace pb
