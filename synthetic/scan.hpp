#pragma once
// Simulated parallel-beam CT of a phantom, slice by slice (each axial slice is an independent 2D
// acquisition; cone-beam geometry is out of scope). Exact line integrals of the part, pore and
// marker cross-sections; area integration over detector bin and voxel height, optional angular
// blur, Gaussian detector PSF on intensity, Poisson photon counts with optional electronic noise,
// a noise-free flat field, -log, then FBP. Units: mu in 1/mm, lengths in mm, so mu x path is the
// dimensionless line integral.
#include <cstdint>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "synthetic/ct_geometry.hpp"
#include "synthetic/phantom.hpp"

namespace pb::synth {

struct ScanSpec {
  int projections = 0;
  double i0 = 0;           // photons per bin and projection
  bool reference = false;  // the high-quality scan
  // reference-scan.mha, scan-400p.mha, or scan-400p-i0-20000.mha in a dose series.
  std::string file_name(bool dose_series) const;
};

// One detector reading of expected count `expected` (= I0 x transmission): Poisson(expected) plus,
// when electronic_sigma > 0, independent Gaussian read noise of that sigma (in photons). Draws
// from `rng` in this order; the scan simulation uses exactly this function.
double detector_counts(Rng& rng, double expected, double electronic_sigma);
// The same with the mean's constants taken once (Rng::PoissonMean of `expected`).
double detector_counts(Rng& rng, const Rng::PoissonMean& expected, double electronic_sigma);
// The measured line integral -log(counts / i0), counts clamped at half a photon first.
double log_transmission(double counts, double i0);

// The reference scan first, then every projection count at every i0.
std::vector<ScanSpec> scan_list(const Recipe& r);

// The geometry of a scan of the recipe's slices with `projections` angles.
ParallelGeometry scan_geometry(const Recipe& r, int projections);

// Exact line integrals (mu x mm) of the phantom's cross-section at plane z_mm, at angle theta,
// for rays t = t0 + k dt, k = 0..n-1.
void phantom_line_integrals(const Phantom& ph, double z_mm, double theta, double t0, double dt, int n, double* out);

// The sinogram of line integrals at bin centres of plane z_mm (no detector integration).
Sinogram phantom_sinogram(const Phantom& ph, double z_mm, const ParallelGeometry& g);

// Expected transmission I/I0 of slice z (integrated over bin width, voxel height and the
// angular blur, then blurred by the detector PSF).
Sinogram slice_transmission(const Phantom& ph, const Recipe& r, const ParallelGeometry& g, int64_t z);

// slice_transmission of many slices of one geometry, bit for bit, faster: the part's own shadow
// (no pores, no markers) is computed once per part cross-section met in [z0, z1) (the part is
// extruded along z, so most slices share one) and kept per angle and bin, before the
// normalisation and the PSF; a slice then computes only the bins a pore or a marker reaches, every
// term of their sums in the original order, and takes the others from the table. Parallel over
// angles while the tables are built when asked; operator() is const and thread-safe.
class SliceTransmissions {
 public:
  SliceTransmissions(const Phantom& ph, const Recipe& r, const ParallelGeometry& g, int64_t z0, int64_t z1,
                     bool parallel = true);
  ~SliceTransmissions();
  Sinogram operator()(int64_t z) const;
  struct Setup;

 private:
  std::unique_ptr<Setup> st_;
  std::map<std::string, std::vector<double>> tables_;  // part key -> angles x bins
};

// Scans that share one projection count (at several doses, and the reference), reconstructed
// (mu in 1/mm). Parallel over slices, each slice with its own noise stream keyed by (seed,
// projections, i0, reference, slice): identical for any thread count, and a scan does not depend
// on which other scans are asked for.
std::vector<VolumeF> simulate_scans(const Phantom& ph, const Recipe& r, const std::vector<ScanSpec>& same_count);
// Convenience: one scan.
VolumeF simulate_scan(const Phantom& ph, const Recipe& r, const ScanSpec& spec);

}  // namespace pb::synth
