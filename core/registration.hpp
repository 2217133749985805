#pragma once
// Rigid and similarity registration of two scans of the same part (a reference re-mounted and
// scanned again with a faster recipe). Conventions:
// - FIXED is the scan whose grid the decision is about (the fast scan); MOVING is brought onto it
//   (the reference). The transform maps a FIXED physical point (mm) to the MOVING point that
//   shows the same material:  p_moving = scale * R * p_fixed + t. Resampling the moving scan at
//   T(p) for every fixed voxel centre p puts it on the fixed grid (core/resample.hpp).
// - Closed-form absolute orientation from point pairs: Umeyama (1991) "Least-squares estimation of
//   transformation parameters between two point patterns", IEEE PAMI 13(4):376-380 (Eigen's
//   umeyama), the same optimum as Horn (1987) J. Opt. Soc. Am. A 4(4):629-642.
// - Marker-based registration (core/markers.hpp) and intensity-based registration with ITK
//   (Mattes mutual information, multi-resolution, versor rigid 6 DOF or similarity 7 DOF;
//   registration_itk.cpp).
#include <Eigen/Dense>
#include <string>
#include <vector>

#include "core/json.hpp"
#include "core/volume.hpp"

namespace pb {

struct SimilarityTransform {
  Eigen::Matrix3d R = Eigen::Matrix3d::Identity();  // proper rotation
  Eigen::Vector3d t = Eigen::Vector3d::Zero();      // mm
  double scale = 1.0;

  Eigen::Vector3d apply(const Eigen::Vector3d& p) const { return scale * (R * p) + t; }
  SimilarityTransform inverse() const;
  SimilarityTransform compose(const SimilarityTransform& inner) const;  // this(inner(p))
  double rotation_deg() const;                                           // angle of R
  // From a rotation vector (axis * angle, degrees), translation and scale.
  static SimilarityTransform from_euler_deg(const Eigen::Vector3d& angles_deg, const Eigen::Vector3d& t_mm,
                                            double scale = 1.0);
};

// Angle (degrees) of the rotation that takes a onto b.
double rotation_difference_deg(const Eigen::Matrix3d& a, const Eigen::Matrix3d& b);

struct PointFit {
  SimilarityTransform T;             // minimises sum |T(src_i) - dst_i|^2
  std::vector<double> residual_mm;   // |T(src_i) - dst_i|
  double rms_mm = 0;
};

// Least-squares rigid (with_scale = false) or similarity transform taking src onto dst; at least 3
// non-collinear pairs (InputError otherwise).
PointFit absolute_orientation(const std::vector<Eigen::Vector3d>& src, const std::vector<Eigen::Vector3d>& dst,
                              bool with_scale);

enum class RegMethod { auto_select, markers, intensity };
enum class RegDof { rigid, similarity };
RegMethod parse_reg_method(const std::string& s);  // "auto", "markers", "intensity"; InputError otherwise
RegDof parse_reg_dof(const std::string& s);        // "rigid", "similarity"
const char* reg_method_name(RegMethod m);
const char* reg_dof_name(RegDof d);

struct MarkerOptions {
  double threshold = 0;           // grey value; markers are brighter. 0 = automatic
  bool auto_threshold = true;
  double min_radius_mm = 0;       // 0 = 1.5 voxels
  double max_radius_mm = 0;       // 0 = a quarter of the smallest extent
  int max_markers = 16;           // the brightest/largest kept when more are found
};

struct RegistrationOptions {
  RegMethod method = RegMethod::auto_select;
  RegDof dof = RegDof::rigid;
  int levels = 3;                   // multi-resolution levels (shrink 2^(levels-1) .. 1)
  int max_iterations = 300;         // per level
  int histogram_bins = 50;          // Mattes MI (common practice, no source)
  int64_t samples_per_level = 400000;  // metric samples (regular grid with jitter) per level
  unsigned sample_seed = 20260;     // jitter of the metric samples (level l: sample_seed + l)
  double min_step = 1e-4;           // optimiser stop: step length below this (scaled units)
  MarkerOptions markers;
};

struct MarkerResidual {
  int fixed = -1, moving = -1;      // indices into the found markers
  Eigen::Vector3d fixed_mm, moving_mm;
  double residual_mm = 0;
};

struct RegistrationResult {
  SimilarityTransform T;            // fixed mm -> moving mm
  std::string method;               // "markers", "intensity"
  std::string initialisation;       // "moments", "markers", "identity"
  std::string dof;
  double metric = 0;                // Mattes MI (negative; lower is better) or marker RMS (mm)
  std::string metric_name;
  int iterations = 0;               // optimiser iterations summed over levels
  bool converged = false;
  std::string stop_reason;
  int markers_fixed = 0, markers_moving = 0;
  std::vector<MarkerResidual> marker_residuals;  // under the final T (an independent check for intensity)
  double marker_rms_mm = -1;        // -1: no markers matched
  double voxel_mm = 0;              // smallest fixed spacing
  std::vector<std::string> warnings;
};

// Registers moving onto fixed. Throws InputError when the method cannot run (e.g. "markers" with
// fewer than 3 matched markers). A result with converged = false is returned as such; callers treat
// it as an error (it is not a score).
RegistrationResult register_volumes(const VolumeF& moving, const VolumeF& fixed, const RegistrationOptions& opt);

// Intensity registration (registration_itk.cpp); init is fixed -> moving, used as the start.
RegistrationResult register_intensity_itk(const VolumeF& moving, const VolumeF& fixed,
                                          const RegistrationOptions& opt, const SimilarityTransform* init);

// The reference the issue 12 benchmark compares with, not used by the tool: ITK's own
// single-resolution registration (ImageRegistrationMethodv4, one level) with the same metric,
// samples and start (moments), ITK's regular-step gradient descent at its defaults (learning rate
// from the physical-shift scales, relaxation 0.5, minimum step 1e-4) and ITK's central-difference
// image gradient; opt.levels and opt.min_step are not used.
RegistrationResult register_intensity_itk_plain(const VolumeF& moving, const VolumeF& fixed,
                                                const RegistrationOptions& opt);

nlohmann::ordered_json to_json(const SimilarityTransform& T);
nlohmann::ordered_json to_json(const RegistrationResult& r);

// Residual shift between two volumes on the same grid by phase correlation of downsampled copies
// (FFTW): Kuglin & Hines (1975) "The phase correlation image alignment method", Proc. IEEE Conf.
// Cybernetics and Society. shift_vox is how far b's content lies from a's, in voxels of a.
struct ShiftEstimate {
  Eigen::Vector3d shift_vox = Eigen::Vector3d::Zero();
  double magnitude_vox = 0;
  double peak = 0;       // height of the correlation peak (1 = identical up to the shift)
  int downsample = 1;    // block factor used
};
ShiftEstimate estimate_shift(const VolumeF& a, const VolumeF& b, int64_t max_dim = 128);

}  // namespace pb
