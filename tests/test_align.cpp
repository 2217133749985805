// Registration and resampling (core/registration.hpp, core/markers.hpp, core/resample.hpp).
// Sources: scipy.spatial.transform.Rotation.align_vectors (absolute orientation), analytic cases
// (exact similarity transforms, spheres, rendered poses with known truth),
// scipy.ndimage.affine_transform (resampling), skimage.registration.phase_cross_correlation (shift).
#include <catch2/catch.hpp>

#include <cmath>
#include <cstring>
#include <fstream>
#include <random>
#include <sstream>

#include "core/error.hpp"
#include "core/io.hpp"
#include "core/json.hpp"
#include "core/markers.hpp"
#include "core/pyramid.hpp"
#include "core/registration.hpp"
#include "core/resample.hpp"
#include "suites/pairs.hpp"
#include "tests/align_helpers.hpp"
#include "tests/helpers.hpp"

using namespace pb;
using namespace pbtest;

namespace {
std::vector<Eigen::Vector3d> random_points(int n, unsigned seed) {
  std::mt19937_64 rng(seed);
  std::uniform_real_distribution<double> u(-10, 10);
  std::vector<Eigen::Vector3d> p;
  for (int i = 0; i < n; ++i) p.emplace_back(u(rng), u(rng), u(rng));
  return p;
}

// A float32 raw volume written by a reference script.
VolumeF read_f32_raw(const std::string& path, const std::array<int64_t, 3>& dims) {
  ReadOptions ro;
  RawSpec rs;
  rs.dims = dims;
  rs.type = VoxelType::f32;
  ro.raw = rs;
  return read_volume(path, ro).to_float();
}

pb::Geometry grid(int64_t n, double spacing) {
  pb::Geometry g;
  g.dims = {n, n, n};
  g.spacing_mm = {spacing, spacing, spacing};
  return g;
}
}  // namespace

TEST_CASE("absolute orientation matches scipy align_vectors on noisy random point sets", "[align][umeyama]") {
  // Source: scipy.spatial.transform.Rotation.align_vectors (Kabsch/Wahba least squares).
  TempDir d;
  for (unsigned seed : {1u, 2u, 3u}) {
    const auto src = random_points(12, seed);
    const SimilarityTransform truth =
        SimilarityTransform::from_euler_deg(Eigen::Vector3d(40.0 * seed, -25, 70), Eigen::Vector3d(3, -1, 2));
    std::mt19937_64 rng(seed + 100);
    std::normal_distribution<double> nd(0, 0.3);
    std::vector<Eigen::Vector3d> dst;
    std::ofstream f(d / "pairs.csv");
    f.precision(17);
    for (const auto& p : src) {
      const Eigen::Vector3d q = truth.apply(p) + Eigen::Vector3d(nd(rng), nd(rng), nd(rng));
      dst.push_back(q);
      f << p.x() << ',' << p.y() << ',' << p.z() << ',' << q.x() << ',' << q.y() << ',' << q.z() << '\n';
    }
    f.close();
    const PointFit fit = absolute_orientation(src, dst, false);
    const RunResult r = run_ref_script("align_scipy.py", "rotation " + d / "pairs.csv");
    REQUIRE(r.exit_code == 0);
    std::istringstream in(r.out);
    Eigen::Matrix3d ref;
    for (int i = 0; i < 9; ++i) in >> ref(i / 3, i % 3);
    REQUIRE(bool(in));
    CHECK((fit.T.R - ref).cwiseAbs().maxCoeff() < 1e-9);
    CHECK(fit.T.scale == 1.0);
    CHECK(fit.residual_mm.size() == src.size());
    CHECK(fit.rms_mm > 0.1);  // noise 0.3 per axis: the residuals are real, not zero
  }
}

TEST_CASE("rotation_difference_deg is the angle of the relative rotation, tiny angles included", "[align]") {
  // Analytic case: a rotation by theta about any axis, composed with any base rotation, differs from
  // it by theta (Rodrigues). acos of the trace alone would give ~1e-6 degrees for the tiny ones.
  const Eigen::Matrix3d base = SimilarityTransform::from_euler_deg(Eigen::Vector3d(10, 20, -30), Eigen::Vector3d::Zero(), 1).R;
  for (double deg : {0.0, 1e-7, 1e-3, 0.5, 30.0, 120.0, 179.9}) {
    const Eigen::Matrix3d turn = Eigen::AngleAxisd(deg * M_PI / 180.0, Eigen::Vector3d(1, -2, 0.5).normalized()).toRotationMatrix();
    INFO(deg << " degrees");
    CHECK_THAT(rotation_difference_deg(base, turn * base), Catch::WithinAbs(deg, 1e-10));
    CHECK_THAT(rotation_difference_deg(turn * base, base), Catch::WithinAbs(deg, 1e-10));
  }
}

TEST_CASE("absolute orientation recovers an exact similarity transform", "[align][umeyama]") {
  // Analytic case: noise-free points under a known similarity are mapped back exactly (Umeyama 1991).
  const auto src = random_points(5, 9);
  const SimilarityTransform truth =
      SimilarityTransform::from_euler_deg(Eigen::Vector3d(10, 20, -30), Eigen::Vector3d(1, 2, 3), 1.04);
  std::vector<Eigen::Vector3d> dst;
  for (const auto& p : src) dst.push_back(truth.apply(p));
  const PointFit fit = absolute_orientation(src, dst, true);
  CHECK_THAT(fit.T.scale, Catch::WithinAbs(1.04, 1e-12));
  CHECK(rotation_difference_deg(fit.T.R, truth.R) < 1e-9);
  CHECK((fit.T.t - truth.t).norm() < 1e-9);
  CHECK(fit.rms_mm < 1e-9);
  // Collinear points do not fix the rotation: refused.
  std::vector<Eigen::Vector3d> line{{0, 0, 0}, {1, 1, 1}, {2, 2, 2}};
  CHECK_THROWS_AS(absolute_orientation(line, line, false), InputError);
}

TEST_CASE("sphere fit recovers an analytic sphere", "[align][markers]") {
  // Analytic case: points on a sphere of centre (1, -2, 3), radius 4.
  std::vector<Eigen::Vector3d> pts;
  for (int i = 0; i < 200; ++i) {
    const double t = std::acos(1 - 2 * (i + 0.5) / 200.0), ph = i * 2.399963;
    pts.emplace_back(1 + 4 * std::sin(t) * std::cos(ph), -2 + 4 * std::sin(t) * std::sin(ph), 3 + 4 * std::cos(t));
  }
  const SphereFit s = fit_sphere(pts);
  CHECK((s.centre - Eigen::Vector3d(1, -2, 3)).norm() < 1e-9);
  CHECK_THAT(s.radius, Catch::WithinAbs(4.0, 1e-9));
  CHECK(s.rms < 1e-9);
}

TEST_CASE("markers are found at their rendered centres", "[align][markers]") {
  // Analytic case: spheres rendered with partial volume and noise; centres known exactly.
  const Geometry g = grid(96, 0.02);
  const AlignPhantom ph = align_phantom(96, 0.02);
  const VolumeF v = render_scan(ph, g, SimilarityTransform{}, 0.05, 1);
  const std::vector<Marker> m = find_markers(v, MarkerOptions{});
  REQUIRE(m.size() == ph.markers.size());
  for (const auto& truth : ph.markers) {
    double best = 1e9;
    for (const auto& f : m) best = std::min(best, (f.centre_mm - truth.c).norm());
    CHECK(best < 0.1 * 0.02);  // below 0.1 voxel
  }
}

TEST_CASE("marker registration recovers known poses", "[align][markers]") {
  // Analytic case: exact truth from rendering the same phantom in two poses. Goal (issue 12): TRE
  // below 0.2 voxel and rotation below 0.1 degree, with and without a 4 % scale change.
  const double sp = 0.02;
  const Geometry g = grid(96, sp);
  const AlignPhantom ph = align_phantom(96, sp);
  const VolumeF fixed = render_scan(ph, g, SimilarityTransform{}, 0.05, 1);
  for (double scale : {1.0, 1.04}) {
    const SimilarityTransform truth =
        pose_about(ph.centre, Eigen::Vector3d(0.8, -1.0, 0.7), Eigen::Vector3d(1, -3, 2.5) * sp, scale);
    const VolumeF moving = render_scan(ph, g, truth, 0.05, 2);
    RegistrationOptions o;
    o.method = RegMethod::markers;
    o.dof = scale == 1.0 ? RegDof::rigid : RegDof::similarity;
    const RegistrationResult r = register_volumes(moving, fixed, o);
    INFO("scale " << scale << " TRE " << max_tre_mm(ph, r.T, truth) / sp << " voxel, rotation error "
                  << rotation_difference_deg(r.T.R, truth.R) << " deg");
    CHECK(r.converged);
    CHECK(r.marker_residuals.size() == 6);
    CHECK(max_tre_mm(ph, r.T, truth) < 0.2 * sp);
    CHECK(rotation_difference_deg(r.T.R, truth.R) < 0.1);
    CHECK(std::abs(r.T.scale - scale) < 2e-3);
    CHECK(r.marker_rms_mm < 0.5 * sp);
    CHECK(r.warnings.empty());
  }
}

TEST_CASE("marker registration refuses too few markers", "[align][markers]") {
  const Geometry g = grid(48, 0.02);
  AlignPhantom ph = align_phantom(48, 0.02);
  ph.markers.resize(2);
  const VolumeF v = render_scan(ph, g, SimilarityTransform{}, 0.02, 1);
  RegistrationOptions o;
  o.method = RegMethod::markers;
  CHECK_THROWS_AS(register_volumes(v, v, o), InputError);
}

TEST_CASE("intensity registration recovers known poses", "[align][intensity]") {
  // Analytic case as above; Mattes MI with moments start (rigid) and marker start (similarity).
  const double sp = 0.02;
  const Geometry g = grid(96, sp);
  const AlignPhantom ph = align_phantom(96, sp);
  const VolumeF fixed = render_scan(ph, g, SimilarityTransform{}, 0.05, 1);
  struct Case {
    double scale;
    RegMethod method;
    RegDof dof;
  };
  for (const Case c : {Case{1.0, RegMethod::intensity, RegDof::rigid}, Case{1.0, RegMethod::auto_select, RegDof::rigid},
                       Case{1.04, RegMethod::auto_select, RegDof::similarity},
                       Case{1.04, RegMethod::intensity, RegDof::similarity}}) {
    const SimilarityTransform truth =
        pose_about(ph.centre, Eigen::Vector3d(0.8, -1.0, 0.7), Eigen::Vector3d(1, -3, 2.5) * sp, c.scale);
    const VolumeF moving = render_scan(ph, g, truth, 0.05, 2);
    RegistrationOptions o;
    o.method = c.method;
    o.dof = c.dof;
    const RegistrationResult r = register_volumes(moving, fixed, o);
    INFO("scale " << c.scale << " method " << reg_method_name(c.method) << " init " << r.initialisation << " TRE "
                  << max_tre_mm(ph, r.T, truth) / sp << " voxel, rotation error "
                  << rotation_difference_deg(r.T.R, truth.R) << " deg, iterations " << r.iterations << ", "
                  << r.stop_reason);
    CHECK(r.method == "intensity");
    CHECK(r.converged);
    CHECK(max_tre_mm(ph, r.T, truth) < 0.2 * sp);
    CHECK(rotation_difference_deg(r.T.R, truth.R) < 0.1);
    // 0.5 % of scale moves the cylinder's rim (about 29 voxels from the centre) by 0.15 voxel.
    CHECK(std::abs(r.T.scale - c.scale) < 5e-3);
  }
}

TEST_CASE("a rigid registration of a re-scaled scan warns through the marker residuals", "[align][intensity]") {
  const double sp = 0.02;
  const Geometry g = grid(96, sp);
  const AlignPhantom ph = align_phantom(96, sp);
  const VolumeF fixed = render_scan(ph, g, SimilarityTransform{}, 0.05, 1);
  const VolumeF moving = render_scan(ph, g, pose_about(ph.centre, {0, 0, 0}, {0, 0, 0}, 1.04), 0.05, 2);
  RegistrationOptions o;
  o.method = RegMethod::markers;
  o.dof = RegDof::rigid;
  // Rigid markers on a pattern 4 % larger: matched, but the residuals stay above 0.5 voxel.
  const RegistrationResult r = register_volumes(moving, fixed, o);
  INFO("marker RMS " << r.marker_rms_mm / sp << " voxel");
  CHECK(r.marker_rms_mm > 0.5 * sp);
  REQUIRE(r.warnings.size() == 1);
  CHECK(r.warnings[0].find("--dof similarity") != std::string::npos);
}

namespace {
// Index-space form of T between two grids: moving index = A * fixed index + b.
void index_affine(const Geometry& fixed, const Geometry& moving, const SimilarityTransform& T, Eigen::Matrix3d& A,
                  Eigen::Vector3d& b) {
  const Eigen::Vector3d sf(fixed.spacing_mm[0], fixed.spacing_mm[1], fixed.spacing_mm[2]);
  const Eigen::Vector3d sm(moving.spacing_mm[0], moving.spacing_mm[1], moving.spacing_mm[2]);
  const Eigen::Vector3d of(fixed.origin_mm[0], fixed.origin_mm[1], fixed.origin_mm[2]);
  const Eigen::Vector3d om(moving.origin_mm[0], moving.origin_mm[1], moving.origin_mm[2]);
  A = sm.cwiseInverse().asDiagonal() * (T.scale * T.R) * sf.asDiagonal();
  b = sm.cwiseInverse().asDiagonal() * (T.scale * (T.R * of) + T.t - om);
}
}  // namespace

TEST_CASE("resampling matches scipy.ndimage.affine_transform", "[align][resample]") {
  // Source: scipy.ndimage.affine_transform, order 1 (linear) and 0 (nearest), constant 0 outside;
  // compared where the mapped point lies at least one voxel inside the moving volume.
  TempDir d;
  Geometry gm = grid(40, 0.0104);
  gm.origin_mm = {0.01, -0.02, 0.005};
  Geometry gf;  // the fast scan's grid: other voxel size, dims and origin
  gf.dims = {36, 38, 34};
  gf.spacing_mm = {0.011, 0.011, 0.011};
  gf.origin_mm = {0.02, 0.0, 0.01};
  const AlignPhantom ph = align_phantom(40, 0.0104);
  const VolumeF moving = render_scan(ph, gm, SimilarityTransform{}, 0.1, 3);
  const SimilarityTransform T = pose_about(ph.centre, {2.0, -1.5, 3.0}, {0.011, -0.007, 0.004}, 1.02);
  write_raw(AnyVolume(moving), d / "m.raw");
  Eigen::Matrix3d A;
  Eigen::Vector3d b;
  index_affine(gf, gm, T, A, b);
  auto args = [&](int order) {
    std::ostringstream s;
    s.precision(17);
    s << "resample " << d / "m.raw" << " 40 40 40 " << gf.dims[0] << ' ' << gf.dims[1] << ' ' << gf.dims[2] << ' '
      << order;
    for (int i = 0; i < 9; ++i) s << ' ' << A(i / 3, i % 3);
    s << ' ' << b.x() << ' ' << b.y() << ' ' << b.z() << ' ' << d / "ref.raw";
    return s.str();
  };
  auto interior = [&](int64_t x, int64_t y, int64_t z) {
    const Eigen::Vector3d i = A * Eigen::Vector3d(double(x), double(y), double(z)) + b;
    return i.minCoeff() >= 1 && i.x() <= 38 && i.y() <= 38 && i.z() <= 38;
  };
  for (int order : {1, 0}) {
    const RunResult r = run_ref_script("align_scipy.py", args(order));
    REQUIRE(r.exit_code == 0);
    const VolumeF ref = read_f32_raw(d / "ref.raw", gf.dims);
    VolumeF ours;
    if (order == 1) {
      ours = resample_linear(moving, gf, T);
    } else {
      Mask mm(gm);
      for (int64_t i = 0; i < mm.size(); ++i) mm[i] = uint8_t(std::clamp(moving[i] * 60.0f + 20.0f, 0.0f, 255.0f));
      VolumeF mf(gm);
      for (int64_t i = 0; i < mm.size(); ++i) mf[i] = mm[i];
      write_raw(AnyVolume(mf), d / "m.raw");
      REQUIRE(run_ref_script("align_scipy.py", args(0)).exit_code == 0);
      const VolumeF ref0 = read_f32_raw(d / "ref.raw", gf.dims);
      const Mask o = resample_nearest(mm, gf, T);
      int64_t n = 0, bad = 0;
      for (int64_t z = 0; z < gf.dims[2]; ++z)
        for (int64_t y = 0; y < gf.dims[1]; ++y)
          for (int64_t x = 0; x < gf.dims[0]; ++x)
            if (interior(x, y, z)) {
              ++n;
              bad += float(o(x, y, z)) != ref0(x, y, z);
            }
      INFO(bad << " of " << n << " voxels differ");
      CHECK(n > 20000);
      CHECK(bad == 0);
      continue;
    }
    int64_t n = 0;
    double worst = 0;
    for (int64_t z = 0; z < gf.dims[2]; ++z)
      for (int64_t y = 0; y < gf.dims[1]; ++y)
        for (int64_t x = 0; x < gf.dims[0]; ++x)
          if (interior(x, y, z)) {
            ++n;
            worst = std::max(worst, double(std::abs(ours(x, y, z) - ref(x, y, z))));
          }
    INFO("largest difference " << worst << " over " << n << " voxels");
    CHECK(n > 20000);
    CHECK(worst < 1e-4);
  }
}

TEST_CASE("a pyramid REDUCE step matches scipy.ndimage.correlate1d with the binomial kernel", "[align][pyramid]") {
  // Source: scipy.ndimage.correlate1d([1 4 6 4 1]/16, mode "nearest") along x, y, z, then every
  // second voxel (tests/ref/align_scipy.py reduce); odd and even sizes, and an axis one voxel thick.
  TempDir d;
  for (const std::array<int64_t, 3> dims : {std::array<int64_t, 3>{17, 12, 9}, std::array<int64_t, 3>{6, 1, 5}}) {
    Geometry g;
    g.dims = dims;
    g.spacing_mm = {0.01, 0.02, 0.03};
    g.origin_mm = {1.0, -2.0, 0.5};
    VolumeF v(g);
    std::mt19937_64 rng(5);
    std::normal_distribution<float> nd(0.0f, 1.0f);
    for (int64_t i = 0; i < v.size(); ++i) v[i] = nd(rng);
    write_raw(AnyVolume(v), d / "in.raw");
    std::ostringstream args;
    args << "reduce " << d / "in.raw" << ' ' << dims[0] << ' ' << dims[1] << ' ' << dims[2] << ' ' << d / "out.raw";
    REQUIRE(run_ref_script("align_scipy.py", args.str()).exit_code == 0);
    const VolumeF r = reduce2(v);
    const Geometry& go = r.geometry();
    // Output voxel i is input voxel 2i: ceil(n/2) voxels, twice the spacing, the same origin.
    CHECK(go.dims == std::array<int64_t, 3>{(dims[0] + 1) / 2, (dims[1] + 1) / 2, (dims[2] + 1) / 2});
    CHECK(go.spacing_mm == std::array<double, 3>{0.02, 0.04, 0.06});
    CHECK(go.origin_mm == g.origin_mm);
    const VolumeF ref = read_f32_raw(d / "out.raw", go.dims);
    double worst = 0;
    for (int64_t i = 0; i < r.size(); ++i) worst = std::max(worst, double(std::abs(r[i] - ref[i])));
    INFO("dims " << dims[0] << " x " << dims[1] << " x " << dims[2] << ": largest difference " << worst);
    CHECK(worst < 1e-5);
  }
}

TEST_CASE("phase correlation finds a sub-voxel shift like skimage", "[align][shift]") {
  // Analytic case (rendered shift) and skimage.registration.phase_cross_correlation (upsample 10).
  TempDir d;
  const double sp = 0.02;
  const Geometry g = grid(96, sp);
  const AlignPhantom ph = align_phantom(96, sp);
  const VolumeF a = render_scan(ph, g, SimilarityTransform{}, 0.05, 1);
  const Eigen::Vector3d shift(1.0, -3.0, 2.5);
  SimilarityTransform t;
  t.t = shift * sp;
  const VolumeF b = render_scan(ph, g, t, 0.05, 2);
  const ShiftEstimate e = estimate_shift(a, b, 48);  // 2x downsampling
  INFO("estimate " << e.shift_vox.transpose() << " peak " << e.peak);
  CHECK(e.downsample == 2);
  CHECK((e.shift_vox - shift).norm() < 0.35);
  write_raw(AnyVolume(a), d / "a.raw");
  write_raw(AnyVolume(b), d / "b.raw");
  const RunResult r = run_ref_script("align_scipy.py", "shift " + d / "a.raw" + " " + d / "b.raw" + " 96 96 96");
  REQUIRE(r.exit_code == 0);
  std::istringstream in(r.out);
  Eigen::Vector3d ref;
  in >> ref.x() >> ref.y() >> ref.z();
  REQUIRE(bool(in));
  INFO("skimage " << ref.transpose());
  CHECK((ref - shift).norm() < 0.2);  // the reference itself is right
  CHECK((e.shift_vox - ref).norm() < 0.35);
  // Aligned scans: no shift.
  const ShiftEstimate z = estimate_shift(a, render_scan(ph, g, SimilarityTransform{}, 0.05, 3));
  CHECK(z.magnitude_vox < 0.2);
  CHECK(z.peak > e.peak * 0.5);
}

TEST_CASE("porebench align writes the aligned scan and T.json; non-convergence is an error", "[align][cli]") {
  // Analytic case: the known pose of the rendered phantom; exit codes as in core/error.hpp.
  TempDir d;
  const double sp = 0.02;
  const Geometry g = grid(64, sp);
  const AlignPhantom ph = align_phantom(64, sp);
  const SimilarityTransform truth =
      pose_about(ph.centre, Eigen::Vector3d(0.8, -1.0, 0.7), Eigen::Vector3d(1, -3, 2.5) * sp, 1.0);
  write_volume(render_scan(ph, g, SimilarityTransform{}, 0.05, 1), d / "fast.mha");
  write_volume(render_scan(ph, g, truth, 0.05, 2), d / "ref.mha");
  Mask mask(g);
  for (int64_t i = 0; i < mask.size(); ++i) mask[i] = uint8_t(i % 7 == 0);
  write_volume(mask, d / "ref-mask.mha");
  const RunResult r = run_cli("align " + d / "ref.mha" + " " + d / "fast.mha" + " -o " + d / "aligned.mha" +
                              " --transform " + d / "t.json --method markers --moving-mask " + d / "ref-mask.mha" +
                              " --mask-output " + d / "mask-on-fast.mha");
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  std::ifstream f(d / "t.json");
  const auto j = nlohmann::json::parse(f);
  const auto& reg = j["registration"];
  CHECK(reg["method"] == "markers");
  CHECK(reg["converged"] == true);
  CHECK(reg["markers"]["matched"] == 6);
  CHECK(reg["markers"]["rms_mm"].get<double>() < 0.5 * sp);
  Eigen::Matrix3d R;
  for (int i = 0; i < 9; ++i) R(i / 3, i % 3) = reg["transform"]["rotation"][i / 3][i % 3].get<double>();
  CHECK(rotation_difference_deg(R, truth.R) < 0.1);
  const AnyVolume aligned = read_volume(d / "aligned.mha");
  CHECK(aligned.geometry().dims == g.dims);
  CHECK(read_volume(d / "mask-on-fast.mha").type() == VoxelType::u8);

  // One iteration per level cannot converge: exit 2 naming it, nothing written.
  const RunResult bad = run_cli("align " + d / "ref.mha" + " " + d / "fast.mha" + " -o " + d / "a2.mha" +
                                " --transform " + d / "t2.json --method intensity --iterations 1");
  CHECK(bad.exit_code == 2);
  CHECK(bad.err.find("did not converge") != std::string::npos);
  CHECK(!fs::exists(d / "a2.mha"));
  CHECK(!fs::exists(d / "t2.json"));

  // The alarm: the unregistered pair is shifted by more than 0.5 voxel.
  const RunResult chk = run_cli("align " + d / "ref.mha" + " " + d / "fast.mha" + " --check-shift");
  CHECK(chk.exit_code == 0);
  CHECK(chk.err.find("above 0.5 voxel") != std::string::npos);
  // A format that loses the spacing is refused before any work.
  const RunResult tif = run_cli("align " + d / "ref.mha" + " " + d / "fast.mha" + " -o " + d / "a.tif" +
                                " --transform " + d / "t3.json");
  CHECK(tif.exit_code == 2);
  CHECK(tif.err.find("a.tif") != std::string::npos);
}

TEST_CASE("porebench convert keeps the geometry of raw and TIFF-folder scans or refuses", "[align][convert]") {
  // Round trip: voxels and spacing identical after conversion (analytic case: the written values).
  TempDir d;
  Geometry g = grid(12, 0.0104);
  Image<uint16_t> v(g);
  for (int64_t i = 0; i < v.size(); ++i) v[i] = uint16_t((i * 37) % 60000);
  write_raw(AnyVolume(v), d / "scan.raw", true, 64);
  RunResult r = run_cli("convert " + d / "scan.raw" + " -o " + d / "scan.mha" +
                        " --raw-dims 12,12,12 --raw-type uint16 --raw-endian big --raw-header 64 --spacing 0.0104,0.0104,0.0104");
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  AnyVolume got = read_volume(d / "scan.mha");
  REQUIRE(got.type() == VoxelType::u16);
  CHECK(got.geometry().spacing_mm[2] == Approx(0.0104));
  CHECK(std::memcmp(got.raw(), v.data(), got.bytes()) == 0);

  fs::create_directories(d.path / "slices");
  Geometry g2 = g;
  g2.dims[2] = 1;
  for (int64_t z = 0; z < g.dims[2]; ++z) {
    Image<uint16_t> s(g2);
    std::memcpy(s.data(), v.slice(z), size_t(g2.voxels()) * sizeof(uint16_t));
    write_volume(s, (d.path / "slices" / ("s" + std::to_string(100 + z) + ".tif")).string());
  }
  // A TIFF folder carries no z spacing: refused without --spacing, naming the input.
  r = run_cli("convert " + d / "slices" + " -o " + d / "f.nrrd");
  CHECK(r.exit_code == 2);
  CHECK(r.err.find("slices") != std::string::npos);
  CHECK(r.err.find("--spacing") != std::string::npos);
  r = run_cli("convert " + d / "slices" + " -o " + d / "f.nrrd --spacing 0.0104,0.0104,0.0104");
  REQUIRE(r.exit_code == 0);
  got = read_volume(d / "f.nrrd");
  CHECK(got.geometry().spacing_mm[2] == Approx(0.0104));
  CHECK(std::memcmp(got.raw(), v.data(), got.bytes()) == 0);
  // Writers that lose the spacing are refused.
  for (const char* out : {"x.tif", "x.raw", "x.png"}) {
    r = run_cli("convert " + d / "scan.mha" + " -o " + d / out);
    CHECK(r.exit_code == 2);
    CHECK(r.err.find(out) != std::string::npos);
    CHECK(!fs::exists(d / out));
  }
}

TEST_CASE("suite file entries carry their own geometry; TIFF or raw without spacing_mm is refused", "[align][pairs]") {
  TempDir d;
  Image<uint16_t> v(grid(8, 0.01));
  write_volume(v, d / "fast.tif");
  write_raw(AnyVolume(v), d / "ref.raw");
  write_volume(v, d / "ref.mha");
  auto parse = [&](const std::string& text) {
    const toml::table t = toml::parse(text);
    return pb::suite::parse_file_entry(*t.get("f"), d.path.string(), "datasets[0].scans[1]");
  };
  try {
    parse("f = \"fast.tif\"");
    FAIL("TIFF without spacing_mm accepted");
  } catch (const InputError& e) {
    CHECK(std::string(e.what()).find("fast.tif") != std::string::npos);
    CHECK(std::string(e.what()).find("spacing_mm") != std::string::npos);
  }
  const auto tif = parse("f = { path = \"fast.tif\", spacing_mm = [0.0104, 0.0104, 0.0104] }");
  CHECK(read_volume(tif.path, tif.read).geometry().spacing_mm[2] == Approx(0.0104));
  const auto raw = parse("f = { path = \"ref.raw\", spacing_mm = [0.01, 0.01, 0.01], raw = { dims = [8, 8, 8], type = \"uint16\" } }");
  CHECK(read_volume(raw.path, raw.read).geometry().dims[2] == 8);
  CHECK(parse("f = \"ref.mha\"").path == d / "ref.mha");
  CHECK_THROWS_AS(parse("f = { path = \"ref.raw\", raw = { dims = [8, 8, 8], type = \"uint16\" } }"), InputError);
  CHECK_THROWS_AS(parse("f = { path = \"ref.mha\", spacing = [1, 1, 1] }"), InputError);
  CHECK_THROWS_AS(parse("f = \"missing.mha\""), InputError);
  CHECK_THROWS_AS(pb::suite::parse_align_mode("sometimes", "scan 2"), InputError);
}

namespace {
// Pores by threshold 0.5 inside the cylinder shrunk by 2 voxels (phantom placed by pose).
Mask pores_of(const VolumeF& v, const AlignPhantom& ph, const SimilarityTransform& pose) {
  Mask m(v.geometry());
  const Geometry& g = v.geometry();
  const SimilarityTransform inv = pose.inverse();
  const double margin = 2 * g.spacing_mm[0];
  for (int64_t z = 0; z < g.dims[2]; ++z)
    for (int64_t y = 0; y < g.dims[1]; ++y)
      for (int64_t x = 0; x < g.dims[0]; ++x) {
        const Eigen::Vector3d q = inv.apply(Eigen::Vector3d(g.origin_mm[0] + x * g.spacing_mm[0],
                                                            g.origin_mm[1] + y * g.spacing_mm[1],
                                                            g.origin_mm[2] + z * g.spacing_mm[2])) - ph.centre;
        const bool inside = q.head<2>().norm() < ph.radius - margin && std::abs(q.z()) < ph.half_height - margin;
        m(x, y, z) = inside && v(x, y, z) < 0.5f;
      }
  return m;
}
double jaccard(const Mask& a, const Mask& b) {
  int64_t i = 0, u = 0;
  for (int64_t k = 0; k < a.size(); ++k) {
    i += a[k] && b[k];
    u += a[k] || b[k];
  }
  return u ? double(i) / double(u) : 1.0;
}
}  // namespace

TEST_CASE("a re-mounted reference at another voxel size: aligned Jaccard within 2 % of the aligned control",
          "[align][pairs]") {
  // Analytic case: the same phantom scanned twice at different voxel sizes, the reference re-mounted. Goal from issue 12: Jaccard after registration within 2 % of the control.
  const double sp = 0.02;
  const Geometry fg = grid(96, sp);
  Geometry rg = grid(100, 0.0192);  // a 4 % smaller voxel (higher magnification), same field of view
  const AlignPhantom ph = align_phantom(96, sp);
  const SimilarityTransform pose =
      pose_about(ph.centre, Eigen::Vector3d(0.8, -1.0, 0.7), Eigen::Vector3d(1, -3, 2.5) * sp, 1.0);
  const VolumeF fast = render_scan(ph, fg, SimilarityTransform{}, 0.15, 1);
  const Mask fast_pores = pores_of(fast, ph, SimilarityTransform{});
  // The aligned control: the reference scanned without the re-mount (same pose as the fast scan)
  // at its own voxel size, brought onto the fast grid by resampling alone.
  const VolumeF control = render_scan(ph, rg, SimilarityTransform{}, 0.03, 5);
  const double j_control =
      jaccard(fast_pores, resample_nearest(pores_of(control, ph, SimilarityTransform{}), fg, SimilarityTransform{}));
  const VolumeF ref = render_scan(ph, rg, pose, 0.03, 6);
  const Mask ref_pores = pores_of(ref, ph, pose);

  // Unregistered: the alarm fires and names the fix.
  const auto none = pb::suite::align_reference(pb::suite::AlignMode::none, fast, "fast.mha", &ref, "ref.mha", ref_pores);
  REQUIRE(none.warnings.size() == 1);
  CHECK(none.warnings[0].find("align = \"auto\"") != std::string::npos);
  CHECK(!none.record["resampled"].is_null());
  const double j_none = jaccard(fast_pores, none.pores);

  const auto reg = pb::suite::align_reference(pb::suite::AlignMode::auto_select, fast, "fast.mha", &ref, "ref.mha",
                                              ref_pores);
  const double j_reg = jaccard(fast_pores, reg.pores);
  SimilarityTransform est;
  for (int r = 0; r < 3; ++r) {
    for (int k = 0; k < 3; ++k) est.R(r, k) = reg.record["registration"]["transform"]["rotation"][r][k].get<double>();
    est.t[r] = reg.record["registration"]["transform"]["translation_mm"][r].get<double>();
  }
  INFO("Jaccard control " << j_control << ", unregistered " << j_none << ", registered " << j_reg << "; TRE "
                          << max_tre_mm(ph, est, pose) / sp << " voxel");
  CHECK(reg.record["registration"]["converged"] == true);
  CHECK(reg.pores.geometry().dims == fg.dims);
  CHECK(j_none < 0.5 * j_control);
  CHECK(std::abs(j_reg - j_control) <= 0.02 * j_control);
  // A mask alone cannot be registered.
  CHECK_THROWS_AS(pb::suite::align_reference(pb::suite::AlignMode::intensity, fast, "fast.mha", nullptr, "ref.mha",
                                             ref_pores),
                  InputError);
}
