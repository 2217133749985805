// Intensity-based registration with ITK's v4 framework: Mattes mutual information (Mattes et al.
// (2003) "PET-CT image registration in the chest using free-form deformations", IEEE TMI
// 22(1):120-128), regular-step gradient descent, multi-resolution (shrink 2^(L-1)..1, Gaussian
// smoothing sigma = shrink/2 voxels, none at full resolution: common practice, no source), versor
// rigid (6 DOF) or similarity (7 DOF). Parameter scales from the physical shift each parameter
// causes (ITK's RegistrationParameterScalesFromPhysicalShift); the first step of each level is at
// most one voxel of that level, and a level stops when the relaxed step falls below min_step of
// that first step.
#include <itkCenteredTransformInitializer.h>
#include <itkCommand.h>
#include <itkImageRegistrationMethodv4.h>
#include <itkMattesMutualInformationImageToImageMetricv4.h>
#include <itkMultiThreaderBase.h>
#include <itkRegistrationParameterScalesFromPhysicalShift.h>
#include <itkRegularStepGradientDescentOptimizerv4.h>
#include <itkSimilarity3DTransform.h>
#include <itkVersorRigid3DTransform.h>

#include <algorithm>
#include <cmath>

#include "core/error.hpp"
#include "core/itk_bridge.hpp"
#include "core/parallel.hpp"
#include "core/registration.hpp"

namespace pb {

namespace {

using ImageF = itk::Image<float, 3>;
using Optimizer = itk::RegularStepGradientDescentOptimizerv4<double>;
using Metric = itk::MattesMutualInformationImageToImageMetricv4<ImageF, ImageF>;

// Counts iterations and sets each level's stop step relative to its first (estimated) step.
class LevelObserver : public itk::Command {
 public:
  using Self = LevelObserver;
  using Pointer = itk::SmartPointer<Self>;
  itkNewMacro(Self);
  int total = 0;
  double rel_min_step = 1e-3;
  void Execute(itk::Object* caller, const itk::EventObject& event) override {
    Execute(static_cast<const itk::Object*>(caller), event);
  }
  void Execute(const itk::Object* caller, const itk::EventObject& event) override {
    if (!itk::IterationEvent().CheckEvent(&event)) return;
    auto* opt = const_cast<Optimizer*>(dynamic_cast<const Optimizer*>(caller));
    if (!opt) return;
    ++total;
    if (opt->GetCurrentIteration() == 0) opt->SetMinimumStepLength(opt->GetLearningRate() * rel_min_step);
  }
};

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

  auto metric = Metric::New();
  metric->SetNumberOfHistogramBins(unsigned(opt.histogram_bins));
  metric->SetUseMovingImageGradientFilter(false);
  metric->SetUseFixedImageGradientFilter(false);

  auto optimizer = Optimizer::New();
  optimizer->SetLearningRate(1.0);
  optimizer->SetRelaxationFactor(0.5);
  optimizer->SetNumberOfIterations(itk::SizeValueType(opt.max_iterations));
  optimizer->SetGradientMagnitudeTolerance(1e-8);
  optimizer->SetDoEstimateLearningRateOnce(true);
  optimizer->SetDoEstimateLearningRateAtEachIteration(false);
  optimizer->SetReturnBestParametersAndValue(false);
  auto scales = itk::RegistrationParameterScalesFromPhysicalShift<Metric>::New();
  scales->SetMetric(metric);
  optimizer->SetScalesEstimator(scales);
  auto observer = LevelObserver::New();
  observer->rel_min_step = opt.min_step;
  optimizer->AddObserver(itk::IterationEvent(), observer);

  using Registration = itk::ImageRegistrationMethodv4<ImageF, ImageF, Transform>;
  auto reg = Registration::New();
  reg->SetFixedImage(fimg);
  reg->SetMovingImage(mimg);
  reg->SetMetric(metric);
  reg->SetOptimizer(optimizer);
  reg->SetInitialTransform(transform);
  reg->InPlaceOn();
  const int levels = std::clamp(opt.levels, 1, 6);
  typename Registration::ShrinkFactorsArrayType shrink(static_cast<unsigned>(levels));
  typename Registration::SmoothingSigmasArrayType sigma(static_cast<unsigned>(levels));
  typename Registration::MetricSamplingPercentageArrayType pct(static_cast<unsigned>(levels));
  const double voxels = double(fixed.geometry().voxels());
  for (int l = 0; l < levels; ++l) {
    const int s = 1 << (levels - 1 - l);
    shrink[unsigned(l)] = itk::SizeValueType(s);
    sigma[unsigned(l)] = s > 1 ? 0.5 * s : 0.0;
    pct[unsigned(l)] = std::min(1.0, double(opt.samples_per_level) / (voxels / (double(s) * s * s)));
  }
  reg->SetNumberOfLevels(itk::SizeValueType(levels));
  reg->SetShrinkFactorsPerLevel(shrink);
  reg->SetSmoothingSigmasPerLevel(sigma);
  reg->SmoothingSigmasAreSpecifiedInPhysicalUnitsOff();
  reg->SetMetricSamplingStrategy(Registration::MetricSamplingStrategyEnum::REGULAR);
  reg->SetMetricSamplingPercentagePerLevel(pct);
  reg->MetricSamplingReinitializeSeed(20260);  // deterministic jitter of the regular samples

  res.method = "intensity";
  res.metric_name = "Mattes mutual information (negated; lower is better)";
  try {
    reg->Update();
  } catch (const itk::ExceptionObject& e) {
    res.converged = false;
    res.stop_reason = std::string("ITK stopped: ") + e.GetDescription();
    res.iterations = observer->total;
    return res;
  }
  const auto* final_t = reg->GetTransform();
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
