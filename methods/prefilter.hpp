#pragma once
// Pre-filter kernels (methods/prefilter.cpp, methods/prefilter_itk.cpp); they are registered as
// composable filters and are callable directly for tests and benchmarks.
#include <array>
#include <cstdint>
#include <vector>

#include "core/volume.hpp"

namespace pb {

VolumeF median_filter(const VolumeF& in, int radius);
// Slices [z0, z1) of median_filter(in, radius) into out ((z1 - z0) slices of in's size): for a slab
// read with a halo of `radius` slices (methods/streaming.cpp), whose z ends are mirrored as
// median_filter mirrors them, so that the slices equal those of the whole volume's median.
void median_filter_slices(const VolumeF& in, int radius, int64_t z0, int64_t z1, float* out);
VolumeF gaussian_filter(const VolumeF& in, const std::array<double, 3>& sigma_vox);
std::vector<float> gaussian_kernel(double sigma_vox);
VolumeF nlm_filter(const VolumeF& in, double h_rel, int patch, int search);
VolumeF bilateral_filter(const VolumeF& in, double domain_sigma_mm, double range_sigma);
VolumeF anisotropic_diffusion(const VolumeF& in, int iterations, double time_step, double conductance);

}  // namespace pb
