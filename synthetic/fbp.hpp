#pragma once
// Filtered back-projection on a parallel-beam sinogram: a windowed ramp filter (Kak & Slaney 1988
// eq. 3.61 spatial ramp, FFT through FFTW, zero padding), then back-projection with linear
// interpolation (Kak & Slaney eq. 3.60, pi/N sum). The back-projection kernels are in
// bp_kernels.hpp. Conventions: ct_geometry.hpp.
#include <string>
#include <vector>

#include "synthetic/ct_geometry.hpp"

namespace pb::synth {

enum class RampWindow { RamLak, SheppLogan, Cosine, Hamming, Hann };
RampWindow parse_window(const std::string& name);  // ram-lak, shepp-logan, cosine, hamming, hann

// Back-projection kernels: Auto picks the best of pb::simd_level() (core/cpu.hpp: what the CPU
// runs, under the cap tests may set); the others force one (tests compare them). Generic is plain
// C++ with u in double precision.
enum class BpKernel { Auto, Generic, Avx2, Avx512 };
bool bp_kernel_supported(BpKernel k);
BpKernel best_bp_kernel();
const char* bp_kernel_name(BpKernel k);

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
  // Per-angle pixel steps in bins: pixel (i, j) of angle a reads u = u00[a] + i du[a] + j su[a].
  struct Steps {
    std::vector<double> du, su, u00;
  };
  // One row through the filter (in may equal out); work: pad_ reals + (pad_/2+1) complex, from
  // fftwf_malloc (same alignment as the plans' buffer).
  void filter_row(const float* in, float* out, float* work) const;
  // backproject, with the filter applied on the fly when filter_rows (reconstruct): one parallel
  // region for both. Its phases: check the geometry and pick the kernel, the per-angle steps, then
  // the generic or the SIMD path.
  void back_project(const Sinogram& f, bool filter_rows, int nx, int ny, double pixel_mm, float* out, bool parallel,
                    BpKernel kernel) const;
  BpKernel checked_kernel(const Sinogram& f, int nx, int ny, double pixel_mm, BpKernel kernel) const;
  Steps steps(int nx, int ny, double pixel_mm) const;
  void back_project_generic(const Sinogram& f, bool filter_rows, const Steps& st, int nx, int ny, float* out,
                            bool parallel) const;
  void back_project_simd(const Sinogram& f, bool filter_rows, const Steps& st, int nx, int ny, float* out,
                         bool parallel, bool avx512) const;
  ParallelGeometry g_;
  int pad_ = 0;
  std::vector<float> response_;
  float* buf_ = nullptr;  // fftwf_malloc'd, pad_ reals + (pad_/2+1) complex
  void* fwd_ = nullptr;
  void* inv_ = nullptr;
};

}  // namespace pb::synth
