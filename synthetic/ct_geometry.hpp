#pragma once
// Parallel-beam geometry of one axial slice and its sinogram. Conventions (shared by the projector,
// FBP and the scan simulation): angle theta_i = start + i * arc / N from the +x axis; detector
// coordinate t = x cos(theta) + y sin(theta), bin k at t = (k - (bins-1)/2) * bin_mm; rotation
// centre at the slice centre; images x fastest, pixel (i, j) at ((i - (nx-1)/2) s, (j - (ny-1)/2) s).
#include <cmath>
#include <cstdint>
#include <vector>

namespace pb::synth {

struct ParallelGeometry {
  int angles = 180;
  double arc_deg = 180;  // 180 or 360
  int bins = 0;
  double bin_mm = 1;
  double start_deg = 0;  // angle of the first projection
  double angle_rad(int i) const { return (start_deg + arc_deg * i / angles) * M_PI / 180.0; }
  double bin_t_mm(double k) const { return (k - (bins - 1) / 2.0) * bin_mm; }
};

// Enough bins of width bin_mm to cover the diagonal of an nx x ny slice of pixel_mm, with the
// parity of nx (so that the centre bin lines up with the centre pixel for odd sizes).
inline int detector_bins_for(int64_t nx, int64_t ny, double pixel_mm, double bin_mm) {
  const double diag = std::sqrt(double(nx * nx + ny * ny)) * pixel_mm / bin_mm;
  int n = int(std::ceil(diag)) + 2;
  if ((n - nx) % 2 != 0) ++n;
  return n;
}

// angles x bins, row-major (one row per angle).
struct Sinogram {
  ParallelGeometry geo;
  std::vector<float> data;
  explicit Sinogram(const ParallelGeometry& g) : geo(g), data(size_t(g.angles) * size_t(g.bins), 0.f) {}
  float* row(int i) { return data.data() + size_t(i) * size_t(geo.bins); }
  const float* row(int i) const { return data.data() + size_t(i) * size_t(geo.bins); }
};

}  // namespace pb::synth
