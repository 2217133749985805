// Intensity-based registration with ITK's v4 framework: Mattes mutual information (Mattes et al.
// (2003) "PET-CT image registration in the chest using free-form deformations", IEEE TMI
// 22(1):120-128), multi-resolution (shrink 2^(L-1)..1), versor rigid (6 DOF) or similarity (7
// DOF), moments or markers to start.
// - Each level is its own optimisation of ITK's metric (driven directly: see optimise_level) on a
//   real pyramid: the scans reduced by Burt & Adelson's REDUCE (core/pyramid.hpp; sigma about shrink/2
//   voxels, none at full resolution: common practice, no source). ITK's own levels smooth the
//   full-size scans with a recursive Gaussian and subsample only the sample grid: the smoothing and
//   the random reads into full-size scans were most of the time (issue 12).
// - The moving scan's gradient at each sample is the analytic gradient of its trilinear
//   interpolant (core/linear_gradient_itk.hpp), not six more interpolations per sample.
// - The optimiser is iRprop- (below) in mm of physical shift (ITK's
//   RegistrationParameterScalesFromPhysicalShift). ITK's regular-step gradient descent was used
//   before: it estimates its maximum step once, from the coarsest level's voxel, and kept it for
//   the finer levels (at 256^3 the last level's first step of 4 voxels threw the rotation 0.4 deg
//   off); and one step length for all parameters left the rotation about a nearly symmetric
//   part's axis crawling for hundreds of iterations at the step the others had shrunk to.
// - Metric samples on a regular grid; at full resolution half of them on edges (level_samples).
#include <itkCenteredTransformInitializer.h>
#include <itkGradientDescentOptimizerBasev4.h>
#include <itkImageRegistrationMethodv4.h>
#include <itkMattesMutualInformationImageToImageMetricv4.h>
#include <itkMultiThreaderBase.h>
#include <itkRegistrationParameterScalesFromPhysicalShift.h>
#include <itkRegularStepGradientDescentOptimizerv4.h>
#include <itkSimilarity3DTransform.h>
#include <itkVersorRigid3DTransform.h>

#include <algorithm>
#include <cmath>
#include <random>
#include <string>
#include <vector>

#include "core/error.hpp"
#include "core/itk_bridge.hpp"
#include "core/linear_gradient_itk.hpp"
#include "core/parallel.hpp"
#include "core/pyramid.hpp"
#include "core/registration.hpp"

static_assert(EIGEN_VERSION_AT_LEAST(3, 4, 0),
              "ITK's headers must take the system's Eigen, as the rest of porebench (ITK_USE_SYSTEM_EIGEN, CMakeLists.txt)");

namespace pb {

namespace {

using ImageF = itk::Image<float, 3>;
using Metric = itk::MattesMutualInformationImageToImageMetricv4<ImageF, ImageF>;

// Resilient propagation, iRprop- (Riedmiller & Braun (1993) "A direct adaptive method for faster
// backpropagation learning: the RPROP algorithm", Proc. IEEE ICNN, 586-591; the variant of Igel &
// Huesken (2000) "Improving the Rprop learning algorithm", Proc. NC 2000, 115-121; both from
// memory). Each parameter has its own step, moved by the sign of its derivative alone: the step
// grows by 1.2 while the sign holds and halves when it flips (that parameter then rests one
// iteration). A weakly determined parameter (the rotation about a nearly symmetric part's axis)
// is not held at the step that the well-determined ones have shrunk to. Steps are kept in mm of
// the largest shift they cause (ITK's physical-shift scales: shift per unit = sqrt(scale)): each
// starts at first_step_mm and never exceeds max_step_mm (a voxel of the level); the level ends
// when every step is below rel_min_step of that.
class RpropOptimizer : public itk::GradientDescentOptimizerBasev4Template<double> {
 public:
  using Self = RpropOptimizer;
  using Superclass = itk::GradientDescentOptimizerBasev4Template<double>;
  using Pointer = itk::SmartPointer<Self>;
  itkNewMacro(Self);
  itkTypeMacro(RpropOptimizer, GradientDescentOptimizerBasev4Template);

  double first_step_mm = 1;  // every parameter's first step, mm of shift
  double max_step_mm = 1;    // no step grows beyond this
  double rel_min_step = 1e-4;  // stop: every step below this fraction of max_step_mm

  void StartOptimization(bool only_initialise = false) override {
    Superclass::StartOptimization(only_initialise);  // estimates the scales
    this->m_CurrentIteration = 0;
    if (!only_initialise) ResumeOptimization();
  }

  void ResumeOptimization() override {
    this->m_StopConditionDescription.str("");
    this->m_StopConditionDescription << "Rprop: ";
    this->InvokeEvent(itk::StartEvent());
    const unsigned n = this->m_Metric->GetNumberOfParameters();
    std::vector<double> mm_per_unit(n), step_mm(n, first_step_mm);
    std::vector<int> last_sign(n, 0);
    for (unsigned i = 0; i < n; ++i) mm_per_unit[i] = std::sqrt(std::max(this->m_Scales[i], 1e-300));
    DerivativeType update(n);
    this->m_Stop = false;
    while (!this->m_Stop) {
      if (this->m_CurrentIteration >= this->m_NumberOfIterations) {
        this->m_StopConditionDescription << "maximum number of iterations (" << this->m_NumberOfIterations
                                         << ") reached";
        this->m_StopCondition = itk::StopConditionObjectToObjectOptimizerEnum::MAXIMUM_NUMBER_OF_ITERATIONS;
        this->StopOptimization();
        break;
      }
      // ITK's v4 metrics return the direction that improves the metric as the "derivative".
      this->m_Metric->GetValueAndDerivative(this->m_CurrentMetricValue, this->m_Gradient);
      double largest_mm = 0;
      for (unsigned i = 0; i < n; ++i) {
        int sign = this->m_Gradient[i] > 0 ? 1 : this->m_Gradient[i] < 0 ? -1 : 0;
        if (sign * last_sign[i] > 0) {
          step_mm[i] = std::min(step_mm[i] * 1.2, max_step_mm);
        } else if (sign * last_sign[i] < 0) {
          step_mm[i] *= 0.5;
          sign = 0;  // iRprop-: no move after a flip
        }
        last_sign[i] = sign;
        update[i] = double(sign) * step_mm[i] / mm_per_unit[i];
        largest_mm = std::max(largest_mm, step_mm[i]);
      }
      if (largest_mm < rel_min_step * max_step_mm) {
        this->m_StopConditionDescription << "every step below " << rel_min_step << " of the first after "
                                         << this->m_CurrentIteration << " iterations";
        this->m_StopCondition = itk::StopConditionObjectToObjectOptimizerEnum::STEP_TOO_SMALL;
        this->StopOptimization();
        break;
      }
      this->m_Metric->UpdateTransformParameters(update);
      ++this->m_CurrentIteration;
      this->InvokeEvent(itk::IterationEvent());
    }
  }

 protected:
  RpropOptimizer() = default;
  void ModifyGradientByScalesOverSubRange(const IndexRangeType&) override {}
  void ModifyGradientByLearningRateOverSubRange(const IndexRangeType&) override {}
};

// Pyramid step (halvings) of level l of `levels` (coarsest first): levels-1-l, fewer while a scan
// would have fewer than 8 voxels along an axis at that level.
int level_halvings(const Geometry& a, const Geometry& b, int levels, int l) {
  int k = levels - 1 - l;
  const int64_t smallest = std::min({a.dims[0], a.dims[1], a.dims[2], b.dims[0], b.dims[1], b.dims[2]});
  while (k > 0 && (smallest >> k) < 8) --k;
  return k;
}

// The scan and its REDUCE steps (core/pyramid.hpp) down to `halvings`; [0] is the scan itself.
std::vector<const VolumeF*> pyramid(const VolumeF& full, int halvings, std::vector<VolumeF>& keep) {
  keep.reserve(size_t(halvings));
  std::vector<const VolumeF*> out{&full};
  for (int k = 1; k <= halvings; ++k) {
    keep.push_back(reduce2(*out.back()));
    out.push_back(&keep.back());
  }
  return out;
}

// The starting transform: from `init` (markers, fixed -> moving) about the fixed scan's centre, or
// by image moments of the two given scans (ITK's CenteredTransformInitializer).
template <class Transform>
typename Transform::Pointer start_transform(const VolumeF& fixed, const VolumeF& fixed_moments,
                                            const VolumeF& moving_moments, const SimilarityTransform* init,
                                            RegistrationResult& res) {
  auto transform = Transform::New();
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
    ini->SetFixedImage(itk_view(fixed_moments));
    ini->SetMovingImage(itk_view(moving_moments));
    ini->MomentsOn();
    ini->InitializeTransform();
    res.initialisation = "moments";
  }
  res.method = "intensity";
  res.metric_name = "Mattes mutual information (negated; lower is better)";
  return transform;
}

// Mattes MI with `bins` histogram bins.
Metric::Pointer mattes(int bins) {
  auto metric = Metric::New();
  metric->SetNumberOfHistogramBins(unsigned(bins));
  metric->SetUseMovingImageGradientFilter(false);
  metric->SetUseFixedImageGradientFilter(false);
  return metric;
}

// An ITK exception ends the registration, not converged, with ITK's reason; false.
bool itk_stopped(const itk::ExceptionObject& e, RegistrationResult& res) {
  res.converged = false;
  res.stop_reason = std::string("ITK stopped: ") + e.GetDescription();
  return false;
}

// One ITK registration at the scans' own resolution, refining `transform` in place; metric samples
// on a regular grid with a deterministic jitter. False (and the reason in res) when ITK throws.
template <class Transform>
bool register_level(const ImageF* F, const ImageF* M, Metric* metric, itk::ObjectToObjectOptimizerBaseTemplate<double>* opt,
                    Transform* transform, int64_t samples, int seed, RegistrationResult& res) {
  using Registration = itk::ImageRegistrationMethodv4<ImageF, ImageF, Transform>;
  auto reg = Registration::New();
  reg->SetFixedImage(F);
  reg->SetMovingImage(M);
  reg->SetMetric(metric);
  reg->SetOptimizer(opt);
  reg->SetInitialTransform(transform);
  reg->InPlaceOn();
  reg->SetNumberOfLevels(1);
  typename Registration::ShrinkFactorsArrayType one(1);
  one[0] = 1;
  typename Registration::SmoothingSigmasArrayType none(1);
  none[0] = 0.0;
  reg->SetShrinkFactorsPerLevel(one);
  reg->SetSmoothingSigmasPerLevel(none);
  typename Registration::MetricSamplingPercentageArrayType pct(1);
  pct[0] = std::min(1.0, double(samples) / double(F->GetLargestPossibleRegion().GetNumberOfPixels()));
  reg->SetMetricSamplingStrategy(Registration::MetricSamplingStrategyEnum::REGULAR);
  reg->SetMetricSamplingPercentagePerLevel(pct);
  reg->MetricSamplingReinitializeSeed(seed);
  try {
    reg->Update();
  } catch (const itk::ExceptionObject& e) {
    return itk_stopped(e, res);
  }
  return true;
}

// Metric samples of one level. ITK's REGULAR samples: every ceil(voxels / n)-th voxel in storage
// order, moved by a normal jitter of a third of a voxel (fixed seed). At the full-resolution level
// (`edges`) half of them are taken on edges instead: voxels whose central-difference gradient
// magnitude exceeds three times the median of the regular samples', every k-th of them in storage
// order. Regular samples alone are one per 336 voxels at 512^3: a pore or marker of radius 4
// voxels gets less than one, and the rotation about a nearly symmetric part's axis, set by those
// features alone, rested on a few dozen samples. bench BM_AlignIntensity3Levels/512, four jitter
// seeds: TRE 0.59-1.32 voxel with regular samples alone, 0.016 / 0.18 / 0.18 / 0.68 with half on
// edges (at 256^3 0.46-0.94 and 0.32-0.77) — on a bench phantom drawn by point sampling above
// 128^3, whose aliasing differs between the two poses. Drawn with partial volume (2x2x2
// subsamples, as a scanner integrates), three seeds give TRE 0.022-0.028 voxel at 512^3 and
// 0.024-0.051 at 256^3 (rotation 0.005-0.024 deg). Edge-weighted sampling for intensity registration: Bhagalia, Fessler & Kim (2009)
// "Accelerated nonrigid intensity-based image registration using importance sampling", IEEE TMI
// 28(8):1208-1216 (from memory).
Metric::FixedSampledPointSetType::Pointer level_samples(const ImageF* F, int64_t n, unsigned seed, bool edges) {
  const auto region = F->GetLargestPossibleRegion();
  const int64_t nx = int64_t(region.GetSize(0)), ny = int64_t(region.GetSize(1)), nz = int64_t(region.GetSize(2));
  const int64_t voxels = nx * ny * nz;
  const float* buf = F->GetBufferPointer();
  auto grad2 = [&](int64_t x, int64_t y, int64_t z) {
    const int64_t i = x + nx * (y + ny * z);
    const float gx = x > 0 && x < nx - 1 ? buf[i + 1] - buf[i - 1] : 0.0f;
    const float gy = y > 0 && y < ny - 1 ? buf[i + nx] - buf[i - nx] : 0.0f;
    const float gz = z > 0 && z < nz - 1 ? buf[i + nx * ny] - buf[i - nx * ny] : 0.0f;
    return gx * gx + gy * gy + gz * gz;
  };
  const int64_t uniform = edges ? std::max<int64_t>(1, n / 2) : std::max<int64_t>(1, n);
  const int64_t step = std::max<int64_t>(1, (voxels + uniform - 1) / uniform);
  std::vector<int64_t> chosen;
  for (int64_t i = 0; i < voxels; i += step) chosen.push_back(i);
  if (edges) {
    std::vector<float> g;
    for (const int64_t i : chosen) g.push_back(grad2(i % nx, (i / nx) % ny, i / (nx * ny)));
    std::nth_element(g.begin(), g.begin() + std::ptrdiff_t(g.size() / 2), g.end());
    const float t = 9.0f * g[g.size() / 2];  // (3 x median)^2
    std::vector<std::vector<int64_t>> per_slice(static_cast<size_t>(nz));
#pragma omp parallel for schedule(static)
    for (int64_t z = 0; z < nz; ++z)
      for (int64_t y = 0; y < ny; ++y)
        for (int64_t x = 0; x < nx; ++x)
          if (grad2(x, y, z) > t) per_slice[size_t(z)].push_back(x + nx * (y + ny * z));
    int64_t count = 0;
    for (const auto& v : per_slice) count += int64_t(v.size());
    const int64_t wanted = n - int64_t(chosen.size());
    if (count > 0 && wanted > 0) {
      const int64_t estep = std::max<int64_t>(1, (count + wanted - 1) / wanted);
      int64_t k = 0;
      for (const auto& v : per_slice)
        for (const int64_t i : v)
          if (k++ % estep == 0) chosen.push_back(i);
    }
  }
  auto points = Metric::FixedSampledPointSetType::New();
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> jitter(0.0, 1.0 / 3.0);
  const auto& sp = F->GetSpacing();
  typename Metric::FixedSampledPointSetType::PointIdentifier id = 0;
  for (const int64_t i : chosen) {
    ImageF::IndexType index;
    index[0] = region.GetIndex(0) + i % nx;
    index[1] = region.GetIndex(1) + (i / nx) % ny;
    index[2] = region.GetIndex(2) + i / (nx * ny);
    Metric::FixedSampledPointSetType::PointType p;
    F->TransformIndexToPhysicalPoint(index, p);
    for (unsigned d = 0; d < 3; ++d) p[d] += jitter(rng) * sp[d];
    points->SetPoint(id++, p);
  }
  return points;
}

// One level driven directly, metric and optimiser, on the given samples: ImageRegistrationMethodv4
// allocates and copies (a ShrinkImageFilter of factor 1) a virtual-domain image the size of the
// level to place its own, 12 % of the CPU at 512^3. False (and the reason in res) when ITK throws.
template <class Transform>
bool optimise_level(const ImageF* F, const ImageF* M, Metric* metric, RpropOptimizer* opt, Transform* transform,
                    Metric::FixedSampledPointSetType* samples, RegistrationResult& res) {
  try {
    metric->SetFixedImage(F);
    metric->SetMovingImage(M);
    metric->SetMovingTransform(transform);
    metric->SetFixedSampledPointSet(samples);
    metric->SetUseSampledPointSet(true);
    metric->Initialize();
    opt->SetMetric(metric);
    opt->StartOptimization();
  } catch (const itk::ExceptionObject& e) {
    return itk_stopped(e, res);
  }
  return true;
}

// The registered transform into ours, with the optimiser's last value and stop condition.
template <class Transform>
void finish(const Transform* t, const itk::GradientDescentOptimizerBasev4Template<double>* opt, RegistrationResult& res) {
  const auto M = t->GetMatrix();
  const auto off = t->GetOffset();
  double scale = 1.0;
  if constexpr (std::is_same_v<Transform, itk::Similarity3DTransform<double>>) scale = t->GetScale();
  for (int r = 0; r < 3; ++r) {
    for (int k = 0; k < 3; ++k) res.T.R(r, k) = M(unsigned(r), unsigned(k)) / scale;
    res.T.t[r] = off[unsigned(r)];
  }
  res.T.scale = scale;
  res.metric = opt->GetValue();
  // The last (full-resolution) level decides: its steps fell below their minimum.
  res.converged = opt->GetStopCondition() == itk::StopConditionObjectToObjectOptimizerEnum::STEP_TOO_SMALL;
  res.stop_reason = opt->GetStopConditionDescription();
}

template <class Transform>
RegistrationResult run(const VolumeF& moving, const VolumeF& fixed, const RegistrationOptions& opt,
                       const SimilarityTransform* init) {
  itk::MultiThreaderBase::SetGlobalDefaultNumberOfThreads(unsigned(std::max(1, thread_count())));
  const int levels = std::clamp(opt.levels, 1, 6);
  const int top = level_halvings(fixed.geometry(), moving.geometry(), levels, 0);
  std::vector<VolumeF> fkeep, mkeep;
  const std::vector<const VolumeF*> fpyr = pyramid(fixed, top, fkeep), mpyr = pyramid(moving, top, mkeep);
  RegistrationResult res;
  // Image moments of the coarsest level: the same centroid and axes, 1/8^top of the reads.
  const auto transform = start_transform<Transform>(fixed, *fpyr.back(), *mpyr.back(), init, res);

  const auto& sp = fixed.geometry().spacing_mm;
  const double voxel_mm = std::min({sp[0], sp[1], sp[2]});
  RpropOptimizer::Pointer optimizer;
  for (int l = 0; l < levels; ++l) {
    const int k = level_halvings(fixed.geometry(), moving.geometry(), levels, l);
    const double level_voxel_mm = double(1 << k) * voxel_mm;
    const ImageF::ConstPointer F = itk_view(*fpyr[size_t(k)]), M = itk_view(*mpyr[size_t(k)]);

    const auto metric = mattes(opt.histogram_bins);
    metric->SetMovingImageGradientCalculator(LinearGradientImageFunction<ImageF>::New());

    optimizer = RpropOptimizer::New();
    optimizer->SetNumberOfIterations(itk::SizeValueType(opt.max_iterations));
    // The first level starts from moments or markers: steps of a voxel of that level. A later level
    // starts within a fraction of its voxel (the level before is twice as coarse): a quarter of a
    // voxel, so that the first moves do not throw the pose out of the basin it is in (at 512^3 a
    // full voxel left the rotation 0.1 deg off; common practice for coarse-to-fine, no source).
    optimizer->first_step_mm = (l == 0 ? 1.0 : 0.25) * level_voxel_mm;
    optimizer->max_step_mm = level_voxel_mm;
    optimizer->rel_min_step = opt.min_step;
    auto scales = itk::RegistrationParameterScalesFromPhysicalShift<Metric>::New();
    scales->SetMetric(metric);
    optimizer->SetScalesEstimator(scales);

    const auto samples = level_samples(F, opt.samples_per_level, opt.sample_seed + unsigned(l), k == 0);
    const bool ok = optimise_level<Transform>(F, M, metric, optimizer, transform, samples, res);
    res.iterations += int(optimizer->GetCurrentIteration());
    if (!ok) return res;
  }
  finish<Transform>(transform, optimizer, res);
  return res;
}

template <class Transform>
RegistrationResult run_plain(const VolumeF& moving, const VolumeF& fixed, const RegistrationOptions& opt) {
  itk::MultiThreaderBase::SetGlobalDefaultNumberOfThreads(unsigned(std::max(1, thread_count())));
  RegistrationResult res;
  const auto transform = start_transform<Transform>(fixed, fixed, moving, nullptr, res);
  const auto metric = mattes(opt.histogram_bins);  // ITK's central-difference gradient
  auto optimizer = itk::RegularStepGradientDescentOptimizerv4<double>::New();
  optimizer->SetNumberOfIterations(itk::SizeValueType(opt.max_iterations));
  auto scales = itk::RegistrationParameterScalesFromPhysicalShift<Metric>::New();
  scales->SetMetric(metric);
  optimizer->SetScalesEstimator(scales);  // learning rate: a first step of at most one voxel
  const bool ok = register_level<Transform>(itk_view(fixed), itk_view(moving), metric, optimizer, transform,
                                            opt.samples_per_level, int(opt.sample_seed), res);
  res.iterations = int(optimizer->GetCurrentIteration());
  if (ok) finish<Transform>(transform.GetPointer(), optimizer.GetPointer(), res);
  return res;
}

}  // namespace

RegistrationResult register_intensity_itk_plain(const VolumeF& moving, const VolumeF& fixed,
                                                const RegistrationOptions& opt) {
  if (opt.dof == RegDof::rigid) return run_plain<itk::VersorRigid3DTransform<double>>(moving, fixed, opt);
  return run_plain<itk::Similarity3DTransform<double>>(moving, fixed, opt);
}

RegistrationResult register_intensity_itk(const VolumeF& moving, const VolumeF& fixed, const RegistrationOptions& opt,
                                          const SimilarityTransform* init) {
  if (opt.dof == RegDof::rigid) return run<itk::VersorRigid3DTransform<double>>(moving, fixed, opt, init);
  return run<itk::Similarity3DTransform<double>>(moving, fixed, opt, init);
}

}  // namespace pb
