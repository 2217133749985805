// porebench align MOVING FIXED -o ALIGNED --transform T.json: registers MOVING (e.g. the reference
// scan) onto FIXED (the fast scan, whose grid the decision is about) and resamples it there;
// optionally a mask of MOVING too (nearest neighbour). --check-shift only estimates the residual
// shift by phase correlation (the misalignment alarm). See core/registration.hpp.
#include <iomanip>
#include <iostream>
#include <memory>
#include <sstream>

#include "apps/cli.hpp"
#include "core/context.hpp"
#include "core/error.hpp"
#include "core/registration.hpp"
#include "core/resample.hpp"

namespace pb::cli {
namespace {

std::optional<std::array<double, 3>> spacing_option(const std::vector<double>& s, const std::string& field) {
  if (s.empty()) return std::nullopt;
  for (double v : s)
    if (!(v > 0) || !std::isfinite(v))
      throw InputError(field + ": spacing values must be positive mm, got " + std::to_string(v));
  return std::array<double, 3>{s[0], s[1], s[2]};
}

void check_volume_output(const std::string& path, const std::string& field) {
  const std::string ext = lower_extension(path);
  if (ext != ".mha" && ext != ".mhd" && ext != ".nrrd" && ext != ".nhdr" && ext != ".nii" && ext != ".nii.gz")
    throw InputError(field + " " + path + ": write .mha, .nrrd or .nii(.gz) (formats that keep the spacing), not '" +
                     ext + "'");
  check_writable(path);
}

struct Args {
  std::string moving, fixed, output, transform, moving_mask, mask_output;
  std::string method = "auto", dof = "rigid";
  int levels = 3, iterations = 300;
  double marker_threshold = 0;
  std::vector<double> moving_spacing, fixed_spacing;
  bool check_shift = false;
};

void add_align_options(CLI::App& app, Args& a) {
  app.add_option("MOVING", a.moving, "scan to bring onto FIXED (e.g. the reference)")->required();
  app.add_option("FIXED", a.fixed, "scan whose grid is kept (e.g. the fast scan)")->required();
  app.add_option("-o,--output", a.output, "MOVING resampled onto FIXED (linear; .mha, .nrrd or .nii)");
  app.add_option("--transform", a.transform, "write the transform and its quality as JSON");
  app.add_option("--method", a.method, "auto (markers start the intensity method when found), markers, intensity")
      ->check(CLI::IsMember({"auto", "markers", "intensity"}));
  app.add_option("--dof", a.dof, "rigid (6) or similarity (7: adds a scale, for a magnification mismatch)")
      ->check(CLI::IsMember({"rigid", "similarity"}));
  app.add_option("--levels", a.levels, "intensity method: resolution levels (1-6)")->check(CLI::Range(1, 6));
  app.add_option("--iterations", a.iterations, "intensity method: most optimiser iterations per level")
      ->check(CLI::Range(1, 100000));
  app.add_option("--marker-threshold", a.marker_threshold, "grey value above which markers are (default: automatic)");
  app.add_option("--moving-mask", a.moving_mask, "a mask on MOVING's grid to resample too (nearest neighbour)");
  app.add_option("--mask-output", a.mask_output, "where the resampled --moving-mask goes");
  app.add_option("--moving-spacing", a.moving_spacing, "voxel size x,y,z of MOVING in mm (overrides the file)")
      ->delimiter(',')
      ->expected(3);
  app.add_option("--fixed-spacing", a.fixed_spacing, "voxel size x,y,z of FIXED in mm (overrides the file)")
      ->delimiter(',')
      ->expected(3);
  app.add_flag("--check-shift", a.check_shift,
               "only estimate the residual shift of MOVING against FIXED (same grid) by phase correlation");
}

// The outputs of a registration (not of --check-shift), checked before any work.
void check_align_outputs(const Args& a) {
  if (a.output.empty()) throw InputError("align: -o ALIGNED is required (or --check-shift)");
  if (a.transform.empty()) throw InputError("align: --transform T.json is required (or --check-shift)");
  check_volume_output(a.output, "-o");
  check_writable(a.transform);
  if (a.moving_mask.empty() != a.mask_output.empty())
    throw InputError("align: --moving-mask and --mask-output go together");
  if (!a.mask_output.empty()) check_volume_output(a.mask_output, "--mask-output");
}

RegistrationOptions registration_options(const Args& a) {
  RegistrationOptions opt;
  opt.method = parse_reg_method(a.method);
  opt.dof = parse_reg_dof(a.dof);
  opt.levels = a.levels;
  opt.max_iterations = a.iterations;
  if (a.marker_threshold != 0) {
    opt.markers.auto_threshold = false;
    opt.markers.threshold = a.marker_threshold;
  }
  return opt;
}

// --check-shift: the residual shift of MOVING against FIXED on one grid, by phase correlation.
void print_residual_shift(const Args& a, const VolumeF& moving, const VolumeF& fixed) {
  if (!same_grid(moving.geometry(), fixed.geometry()))
    throw InputError("align --check-shift: " + a.moving + " (" + describe(moving.geometry()) + ") and " +
                     a.fixed + " (" + describe(fixed.geometry()) + ") are not on one grid; register them");
  const ShiftEstimate e = estimate_shift(fixed, moving);
  std::cout << std::setprecision(3) << "residual shift " << e.shift_vox.x() << ", " << e.shift_vox.y() << ", "
            << e.shift_vox.z() << " voxels (|s| = " << e.magnitude_vox << ", peak " << e.peak
            << ", downsampled " << e.downsample << "x)\n";
  if (e.magnitude_vox > 0.5)
    log("porebench: warning: " + a.moving + " is shifted " + std::to_string(e.magnitude_vox) +
        " voxels against " + a.fixed + " (above 0.5 voxel): register them (porebench align, or align = \"auto\")");
}

// Registers MOVING onto FIXED and writes MOVING (and its mask) resampled onto FIXED's grid and the
// transform record; nothing is written when the registration does not converge.
void register_and_write(const Args& a, const VolumeF& moving, const Mask& moving_mask, const VolumeF& fixed,
                        const RegistrationOptions& opt) {
  const RegistrationResult r = register_volumes(moving, fixed, opt);
  if (!r.converged) {
    std::ostringstream s;
    s << "registration of " << a.moving << " onto " << a.fixed << " (" << r.method << ", " << r.dof
      << ") did not converge after " << r.iterations << " iterations: " << r.stop_reason
      << "; no output written (try --method markers, more --iterations or another --dof)";
    throw InputError(s.str());
  }
  for (const auto& w : r.warnings) log("porebench: warning: " + w);
  nlohmann::ordered_json j;
  j["context"] = run_context();
  j["moving"] = a.moving;
  j["fixed"] = a.fixed;
  j["registration"] = to_json(r);
  j["resampled"] = {{"output", a.output},
                    {"grid", describe(fixed.geometry())},
                    {"grey", "linear interpolation"},
                    {"mask", a.mask_output.empty() ? nlohmann::ordered_json() : nlohmann::ordered_json("nearest neighbour")}};
  const std::string text = j.dump(2) + "\n";
  write_volume(resample_linear(moving, fixed.geometry(), r.T), a.output);
  if (!a.mask_output.empty()) write_volume(resample_nearest(moving_mask, fixed.geometry(), r.T), a.mask_output);
  write_text_atomic(a.transform, text);
  std::cout << std::setprecision(4) << r.method << " (" << r.dof << ", start " << r.initialisation
            << "): rotation " << r.T.rotation_deg() << " deg, translation " << r.T.t.x() << ", " << r.T.t.y()
            << ", " << r.T.t.z() << " mm, scale " << r.T.scale << ", " << r.iterations << " iterations";
  if (r.marker_rms_mm >= 0)
    std::cout << ", marker RMS " << r.marker_rms_mm << " mm (" << r.marker_rms_mm / r.voxel_mm << " voxel, "
              << r.marker_residuals.size() << " markers)";
  std::cout << "\nwrote " << a.output << (a.mask_output.empty() ? "" : ", " + a.mask_output) << " and "
            << a.transform << '\n';
}

Action setup_align(CLI::App& app) {
  app.description("register MOVING onto FIXED (rigid or similarity) and resample it onto FIXED's grid");
  auto a = std::make_shared<Args>();
  add_align_options(app, *a);
  return [a] {
    // Everything that can be checked is checked before any work.
    ReadOptions mo, fo;
    mo.spacing_mm = spacing_option(a->moving_spacing, "--moving-spacing");
    fo.spacing_mm = spacing_option(a->fixed_spacing, "--fixed-spacing");
    if (!a->check_shift) check_align_outputs(*a);
    const RegistrationOptions opt = registration_options(*a);
    const VolumeF fixed = read_volume(a->fixed, fo).to_float();
    const VolumeF moving = read_volume(a->moving, mo).to_float();
    Mask moving_mask;
    if (!a->moving_mask.empty()) {
      const AnyVolume m = read_volume(a->moving_mask, mo);
      check_same_geometry(moving.geometry(), a->moving, m.geometry(), a->moving_mask);
      moving_mask = m.to_mask();
    }
    if (a->check_shift)
      print_residual_shift(*a, moving, fixed);
    else
      register_and_write(*a, moving, moving_mask, fixed, opt);
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("align", 45, setup_align);

}  // namespace pb::cli
