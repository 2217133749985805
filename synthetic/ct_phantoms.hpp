#pragma once
// 2D ellipses of constant density and their exact parallel-beam projections (Kak & Slaney 1988,
// Principles of Computerized Tomographic Imaging, ch. 3), the Shepp-Logan head phantom and an
// area-mean rasteriser: the analytic cases the projector and FBP are tested and benchmarked on.
// Ellipse2D is also the pore cross-section of the scan simulation (scan.cpp). Conventions:
// ct_geometry.hpp.
#include <vector>

#include "synthetic/ct_geometry.hpp"

namespace pb::synth {

// A 2D ellipse of constant density: centre, semi-axes a (along its own x) and b, rotation phi.
struct Ellipse2D {
  double cx = 0, cy = 0, a = 1, b = 1, phi_rad = 0, value = 1;
};

// The ray {t n + s d}, n = (cos theta, sin theta), d = (-sin theta, cos theta), meets the ellipse
// for s in [s0, s1]; returns false when it misses.
bool ellipse_interval(const Ellipse2D& e, double theta, double t, double& s0, double& s1);
// Chord length of that ray through the ellipse (0 if it misses).
double ellipse_chord(const Ellipse2D& e, double theta, double t);
// Sinogram of a sum of ellipses, line integrals at bin centres (value x chord length).
Sinogram project_ellipses(const std::vector<Ellipse2D>& ellipses, const ParallelGeometry& g);

// The Shepp-Logan head phantom (Shepp & Logan 1974, IEEE TNS 21:21; table as printed in Kak &
// Slaney table 3.1, densities of the original), scaled by `radius` (the outer ellipse spans
// 0.92 radius along y).
std::vector<Ellipse2D> shepp_logan(double radius, bool modified_contrast = false);
// Rasterises ellipses on an nx x ny image of pixel_mm with m x m samples per pixel (area mean).
std::vector<float> rasterize_ellipses(const std::vector<Ellipse2D>& e, int nx, int ny, double pixel_mm, int m);

}  // namespace pb::synth
