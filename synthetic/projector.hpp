#pragma once
// Joseph's projector of a pixel image (Joseph 1982, IEEE TMI 1:192): for each ray, linear
// interpolation along the image rows (or columns, whichever the ray crosses more steeply) at every
// line crossing, times the path length per line. Conventions: ct_geometry.hpp.
#include "synthetic/ct_geometry.hpp"

namespace pb::synth {

// Line integrals in image-value x mm of a pixel image (x fastest). Parallel over angles when
// `parallel`. An AVX-512 kernel (projector_kernels.hpp) runs where simd_level() allows it;
// simd = false forces the portable one (tests compare them).
Sinogram project_image(const float* image, int nx, int ny, double pixel_mm, const ParallelGeometry& g,
                       bool parallel = true, bool simd = true);

}  // namespace pb::synth
