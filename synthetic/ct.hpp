#pragma once
// Parallel-beam CT of one axial slice at a time: analytic line integrals of ellipses, rectangles
// and discs (Kak & Slaney 1988, Principles of Computerized Tomographic Imaging, ch. 3), a discrete
// projector for pixel images (Joseph 1982, IEEE TMI 1:192), and filtered back-projection with a
// windowed ramp filter (Kak & Slaney eq. 3.61 spatial ramp, FFT through FFTW, zero padding, linear
// interpolation). Conventions: angle theta_i = i * arc / N from the +x axis; detector coordinate
// t = x cos(theta) + y sin(theta), bin k at t = (k - (bins-1)/2) * bin_mm; rotation centre at the
// slice centre; images x fastest, pixel (i, j) at ((i - (nx-1)/2) s, (j - (ny-1)/2) s).
#include <cmath>
#include <functional>
#include <string>
#include <vector>

#include "core/volume.hpp"

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
int detector_bins_for(int64_t nx, int64_t ny, double pixel_mm, double bin_mm);

// angles x bins, row-major (one row per angle).
struct Sinogram {
  ParallelGeometry geo;
  std::vector<float> data;
  explicit Sinogram(const ParallelGeometry& g) : geo(g), data(size_t(g.angles) * size_t(g.bins), 0.f) {}
  float* row(int i) { return data.data() + size_t(i) * size_t(geo.bins); }
  const float* row(int i) const { return data.data() + size_t(i) * size_t(geo.bins); }
};

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

// Joseph's projector of a pixel image (x fastest): line integrals in image-value x mm.
// Parallel over angles when `parallel`. An AVX-512 kernel runs where simd_level() allows it;
// simd = false forces the portable one (tests compare them).
Sinogram project_image(const float* image, int nx, int ny, double pixel_mm, const ParallelGeometry& g,
                       bool parallel = true, bool simd = true);

enum class RampWindow { RamLak, SheppLogan, Cosine, Hamming, Hann };

// Back-projection kernels: Auto picks the best of pb::simd_level() (core/cpu.hpp: what the CPU
// runs, under the cap tests may set); the others force one (tests compare them). Generic is plain
// C++ with u in double precision.
enum class BpKernel { Auto, Generic, Avx2, Avx512 };
bool bp_kernel_supported(BpKernel k);
BpKernel best_bp_kernel();
const char* bp_kernel_name(BpKernel k);
RampWindow parse_window(const std::string& name);  // ram-lak, shepp-logan, cosine, hamming, hann

// Filtered back-projection on an nx x ny grid of pixel_mm; output in the sinogram's units per mm
// (line integrals of mu give mu in 1/mm). The filter keeps FFTW plans of its own (FFTW_ESTIMATE,
// so results never depend on timing). Reusable; one per thread.
class Fbp {
 public:
  Fbp(const ParallelGeometry& g, RampWindow w);
  ~Fbp();
  Fbp(const Fbp&) = delete;
  Fbp& operator=(const Fbp&) = delete;
  // Filters every row of `sino` in place (ramp x window, zero-padded to avoid wrap-around).
  void filter(Sinogram& sino);
  // Back-projects a filtered sinogram, adding into `out` (nx x ny); parallel over rows when asked.
  // The detector must cover the slice diagonal (detector_bins_for), else InputError. Every pixel
  // sums its angles in order, so results do not depend on the thread count.
  void backproject(const Sinogram& filtered, int nx, int ny, double pixel_mm, float* out, bool parallel,
                   BpKernel kernel = BpKernel::Auto) const;
  // filter + backproject into a zeroed image.
  std::vector<float> reconstruct(const Sinogram& sino, int nx, int ny, double pixel_mm, bool parallel = true);
  int padded_length() const { return pad_; }
  const std::vector<float>& response() const { return response_; }  // real filter, pad/2+1 values

 private:
  // One row through the filter (in may equal out); work: pad_ reals + (pad_/2+1) complex, from
  // fftwf_malloc (same alignment as the plans' buffer).
  void filter_row(const float* in, float* out, float* work) const;
  // backproject, with the filter applied on the fly when filter_rows (reconstruct): one parallel
  // region for both.
  void back_project(const Sinogram& f, bool filter_rows, int nx, int ny, double pixel_mm, float* out, bool parallel,
                    BpKernel kernel) const;
  ParallelGeometry g_;
  int pad_ = 0;
  std::vector<float> response_;
  float* buf_ = nullptr;  // fftwf_malloc'd, pad_ reals + (pad_/2+1) complex
  void* fwd_ = nullptr;
  void* inv_ = nullptr;
};

}  // namespace pb::synth
