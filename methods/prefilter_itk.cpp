// Edge-preserving pre-filters run by ITK (less hot paths; ITK does them well).
//   bilateral: Tomasi C. & Manduchi R. (1998) Bilateral filtering for gray and color images. ICCV.
//              Domain sigma in mm (physical), range sigma in grey units.
//   diffusion: curvature anisotropic diffusion, Whitaker R.T. & Xue X. (2001) Variable-conductance,
//              level-set curvature for image denoising. ICIP; after Perona & Malik (1990).
#include <itkBilateralImageFilter.h>
#include <itkCurvatureAnisotropicDiffusionImageFilter.h>

#include "core/error.hpp"
#include "core/itk_bridge.hpp"
#include "core/parallel.hpp"
#include "methods/prefilter.hpp"
#include "methods/registry.hpp"

namespace pb {

using ItkF = itk::Image<float, 3>;

VolumeF bilateral_filter(const VolumeF& in, double domain_sigma_mm, double range_sigma) {
  auto f = itk::BilateralImageFilter<ItkF, ItkF>::New();
  f->SetInput(itk_view(in));
  f->SetDomainSigma(domain_sigma_mm);
  f->SetRangeSigma(range_sigma);
  f->SetNumberOfWorkUnits(unsigned(thread_count()));
  f->Update();
  return from_itk<float>(f->GetOutput(), in.geometry());
}

VolumeF anisotropic_diffusion(const VolumeF& in, int iterations, double time_step, double conductance) {
  auto f = itk::CurvatureAnisotropicDiffusionImageFilter<ItkF, ItkF>::New();
  f->SetInput(itk_view(in));
  f->SetNumberOfIterations(unsigned(iterations));
  f->SetTimeStep(time_step);
  f->SetConductanceParameter(conductance);
  f->UseImageSpacingOff();  // steps in voxel units: the time-step stability limit 0.0625 holds
  f->SetNumberOfWorkUnits(unsigned(thread_count()));
  f->Update();
  return from_itk<float>(f->GetOutput(), in.geometry());
}

namespace {

FilterInfo bilateral_info() {
  return {"bilateral",
          "bilateral filter: Gaussian in space (mm) and in grey value",
          "Tomasi C., Manduchi R. (1998) Bilateral filtering for gray and color images. Proc. ICCV 839-846",
          {{"domain_sigma_mm", ParamType::Float, "0.02", 1e-6, 1e3, {}, "mm", "spatial standard deviation"},
           {"range_sigma", ParamType::Float, "", 1e-12, 1e30, {}, "grey", "grey-value standard deviation (required: depends on the data's units)"}},
          [](const VolumeF& v, const ParamValues& p) {
            return bilateral_filter(v, p.num("domain_sigma_mm"), p.num("range_sigma"));
          }};
}

FilterInfo diffusion_info() {
  return {"diffusion",
          "curvature anisotropic diffusion (edge-preserving smoothing)",
          "Whitaker R.T., Xue X. (2001) Variable-conductance, level-set curvature for image denoising. Proc. ICIP 3:142-145",
          {{"iterations", ParamType::Int, "5", 1, 100, {}, "", "number of diffusion steps"},
           {"time_step", ParamType::Float, "0.0625", 1e-4, 0.0625, {}, "", "time step per iteration (stable up to 1/2^(d+1) = 0.0625 in 3D)"},
           {"conductance", ParamType::Float, "1", 0.01, 100, {}, "", "conductance: lower preserves edges more"}},
          [](const VolumeF& v, const ParamValues& p) {
            return anisotropic_diffusion(v, int(p.integer("iterations")), p.num("time_step"), p.num("conductance"));
          }};
}

}  // namespace

PB_REGISTER_FILTER(bilateral_info());
PB_REGISTER_FILTER(diffusion_info());

}  // namespace pb
