// Transforms, closed-form absolute orientation (Umeyama 1991 via Eigen), the choice between the
// marker and intensity methods, and the JSON block written to T.json and results.json.
#include "core/registration.hpp"

#include <Eigen/Geometry>
#include <algorithm>
#include <cmath>
#include <sstream>

#include "core/error.hpp"
#include "core/markers.hpp"

namespace pb {

namespace {
constexpr double kPi = 3.14159265358979323846;
}

SimilarityTransform SimilarityTransform::inverse() const {
  SimilarityTransform inv;
  inv.R = R.transpose();
  inv.scale = 1.0 / scale;
  inv.t = -inv.scale * (inv.R * t);
  return inv;
}

SimilarityTransform SimilarityTransform::compose(const SimilarityTransform& in) const {
  SimilarityTransform c;
  c.R = R * in.R;
  c.scale = scale * in.scale;
  c.t = scale * (R * in.t) + t;
  return c;
}

double rotation_difference_deg(const Eigen::Matrix3d& a, const Eigen::Matrix3d& b) {
  // The angle of R = b a^T from its cosine (trace - 1) / 2 and its sine (half the length of the
  // skew part's axis vector) with atan2: acos of the cosine alone loses half the digits near 0
  // (a 1e-16 rounding in the trace is a 1e-6 degree angle).
  const Eigen::Matrix3d r = b * a.transpose();
  const double c = (r.trace() - 1.0) / 2.0;
  const double s = Eigen::Vector3d(r(2, 1) - r(1, 2), r(0, 2) - r(2, 0), r(1, 0) - r(0, 1)).norm() / 2.0;
  return std::atan2(s, c) * 180.0 / kPi;
}

double SimilarityTransform::rotation_deg() const { return rotation_difference_deg(Eigen::Matrix3d::Identity(), R); }

SimilarityTransform SimilarityTransform::from_euler_deg(const Eigen::Vector3d& angles_deg, const Eigen::Vector3d& t_mm,
                                                        double scale) {
  SimilarityTransform T;
  const Eigen::Vector3d rv = angles_deg * kPi / 180.0;
  if (rv.norm() > 0) T.R = Eigen::AngleAxisd(rv.norm(), rv.normalized()).toRotationMatrix();
  T.t = t_mm;
  T.scale = scale;
  return T;
}

PointFit absolute_orientation(const std::vector<Eigen::Vector3d>& src, const std::vector<Eigen::Vector3d>& dst,
                              bool with_scale) {
  if (src.size() != dst.size())
    throw InputError("absolute orientation: " + std::to_string(src.size()) + " source points but " +
                     std::to_string(dst.size()) + " target points");
  const auto n = Eigen::Index(src.size());
  if (n < 3) throw InputError("absolute orientation: needs 3 point pairs, got " + std::to_string(n));
  Eigen::Matrix3Xd a(3, n), b(3, n);
  for (Eigen::Index i = 0; i < n; ++i) {
    a.col(i) = src[size_t(i)];
    b.col(i) = dst[size_t(i)];
  }
  // Collinear (or coincident) points leave the rotation about their line undetermined.
  const Eigen::Matrix3Xd ac = a.colwise() - a.rowwise().mean();
  const Eigen::JacobiSVD<Eigen::Matrix3d> svd(ac * ac.transpose());
  const auto sv = svd.singularValues();
  if (sv(1) <= 1e-12 * std::max(sv(0), 1e-300))
    throw InputError("absolute orientation: the " + std::to_string(n) + " points are collinear");
  const Eigen::Matrix4d m = Eigen::umeyama(a, b, with_scale);
  PointFit f;
  f.T.scale = with_scale ? std::cbrt(m.topLeftCorner<3, 3>().determinant()) : 1.0;
  f.T.R = m.topLeftCorner<3, 3>() / f.T.scale;
  f.T.t = m.topRightCorner<3, 1>();
  double ss = 0;
  for (Eigen::Index i = 0; i < n; ++i) {
    const double r = (f.T.apply(a.col(i)) - b.col(i)).norm();
    f.residual_mm.push_back(r);
    ss += r * r;
  }
  f.rms_mm = std::sqrt(ss / double(n));
  return f;
}

RegMethod parse_reg_method(const std::string& s) {
  if (s == "auto") return RegMethod::auto_select;
  if (s == "markers") return RegMethod::markers;
  if (s == "intensity") return RegMethod::intensity;
  throw InputError("registration method '" + s + "' unknown (auto, markers, intensity)");
}
RegDof parse_reg_dof(const std::string& s) {
  if (s == "rigid") return RegDof::rigid;
  if (s == "similarity") return RegDof::similarity;
  throw InputError("registration dof '" + s + "' unknown (rigid, similarity)");
}
const char* reg_method_name(RegMethod m) {
  return m == RegMethod::markers ? "markers" : m == RegMethod::intensity ? "intensity" : "auto";
}
const char* reg_dof_name(RegDof d) { return d == RegDof::rigid ? "rigid" : "similarity"; }

RegistrationResult register_volumes(const VolumeF& moving, const VolumeF& fixed, const RegistrationOptions& opt) {
  const auto& sp = fixed.geometry().spacing_mm;
  const double voxel = std::min({sp[0], sp[1], sp[2]});
  const bool with_scale = opt.dof == RegDof::similarity;

  const std::vector<Marker> fm = find_markers(fixed, opt.markers);
  const std::vector<Marker> mm = find_markers(moving, opt.markers);
  MarkerMatch match;
  if (fm.size() >= 3 && mm.size() >= 3) {
    double r = 0;
    for (const auto& m : fm) r += m.radius_mm;
    r /= double(fm.size());
    match = match_markers(fm, mm, with_scale, std::max(2.0 * voxel, 0.3 * r));
  }
  const bool have_markers = match.pairs.size() >= 3;

  RegistrationResult res;
  if (opt.method == RegMethod::markers) {
    if (!have_markers) {
      std::ostringstream s;
      s << "markers: found " << fm.size() << " in the fixed scan and " << mm.size() << " in the moving scan, "
        << match.pairs.size() << " matched by their distance pattern; 3 are needed (use --method intensity)";
      throw InputError(s.str());
    }
    res.T = match.fit.T;
    res.method = "markers";
    res.initialisation = "none";
    res.metric = match.fit.rms_mm;
    res.metric_name = "marker RMS residual (mm)";
    res.converged = true;
    res.stop_reason = "closed form";
  } else {
    const bool use_markers = opt.method == RegMethod::auto_select && have_markers;
    res = register_intensity_itk(moving, fixed, opt, use_markers ? &match.fit.T : nullptr);
  }
  res.dof = reg_dof_name(opt.dof);
  res.voxel_mm = voxel;
  res.markers_fixed = int(fm.size());
  res.markers_moving = int(mm.size());
  if (have_markers) {
    double ss = 0;
    for (const auto& [i, j] : match.pairs) {
      MarkerResidual r;
      r.fixed = i;
      r.moving = j;
      r.fixed_mm = fm[size_t(i)].centre_mm;
      r.moving_mm = mm[size_t(j)].centre_mm;
      r.residual_mm = (res.T.apply(r.fixed_mm) - r.moving_mm).norm();
      ss += r.residual_mm * r.residual_mm;
      res.marker_residuals.push_back(r);
    }
    res.marker_rms_mm = std::sqrt(ss / double(match.pairs.size()));
    if (res.marker_rms_mm > 0.5 * voxel) {
      std::ostringstream s;
      s << "marker RMS residual " << res.marker_rms_mm << " mm is above 0.5 voxel (" << 0.5 * voxel << " mm)";
      if (opt.dof == RegDof::rigid) s << "; a magnification mismatch needs --dof similarity";
      res.warnings.push_back(s.str());
    }
    if (match.ambiguous)
      res.warnings.push_back("the marker pattern is nearly symmetric: another correspondence fits almost as well");
  }
  return res;
}

nlohmann::ordered_json to_json(const SimilarityTransform& T) {
  nlohmann::ordered_json j;
  j["maps"] = "fixed mm -> moving mm: p_moving = scale * rotation * p_fixed + translation_mm";
  j["rotation"] = nlohmann::ordered_json::array();
  for (int r = 0; r < 3; ++r) j["rotation"].push_back({T.R(r, 0), T.R(r, 1), T.R(r, 2)});
  j["translation_mm"] = {T.t.x(), T.t.y(), T.t.z()};
  j["scale"] = T.scale;
  j["rotation_deg"] = T.rotation_deg();
  return j;
}

nlohmann::ordered_json to_json(const RegistrationResult& r) {
  nlohmann::ordered_json j;
  j["method"] = r.method;
  j["initialisation"] = r.initialisation;
  j["dof"] = r.dof;
  j["transform"] = to_json(r.T);
  j["metric_name"] = r.metric_name;
  j["final_metric"] = r.metric;
  j["iterations"] = r.iterations;
  j["converged"] = r.converged;
  j["stop_reason"] = r.stop_reason;
  j["voxel_mm"] = r.voxel_mm;
  nlohmann::ordered_json m;
  m["found_fixed"] = r.markers_fixed;
  m["found_moving"] = r.markers_moving;
  m["matched"] = r.marker_residuals.size();
  m["residuals"] = nlohmann::ordered_json::array();
  for (const auto& e : r.marker_residuals)
    m["residuals"].push_back({{"fixed", e.fixed},
                              {"moving", e.moving},
                              {"fixed_mm", {e.fixed_mm.x(), e.fixed_mm.y(), e.fixed_mm.z()}},
                              {"moving_mm", {e.moving_mm.x(), e.moving_mm.y(), e.moving_mm.z()}},
                              {"residual_mm", e.residual_mm}});
  if (r.marker_rms_mm >= 0) m["rms_mm"] = r.marker_rms_mm;
  else m["rms_mm"] = nullptr;
  j["markers"] = m;
  j["warnings"] = r.warnings;
  return j;
}

}  // namespace pb
