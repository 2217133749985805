#pragma once
// The synthetic-scan recipe: everything that decides a phantom and its simulated scans, seed
// included. Read from TOML (a file or a built-in preset), changed by "key=value" overrides, written
// back as recipe.toml with every value filled in, so that the recipe alone reproduces the output.
// Conventions: the part's axis and the rotation axis are z (the build direction); lengths in mm
// unless the name says um; the phantom frame has its origin at the volume centre.
#include <array>
#include <cstdint>
#include <string>
#include <vector>

namespace pb::synth {

// A part primitive, extruded along z. kind: "box" (size_mm = full edges, angle_deg about z),
// "cylinder" (radius_mm, height_mm), "gear-blank" (cylinder with a coaxial bore of bore_radius_mm).
// The part is the union of its shapes.
struct Shape {
  std::string kind = "cylinder";
  std::array<double, 3> centre_mm{0, 0, 0};
  std::array<double, 3> size_mm{0, 0, 0};
  double radius_mm = 0, bore_radius_mm = 0, height_mm = 0, angle_deg = 0;
  bool operator==(const Shape& o) const;
};

// A dense calibration sphere outside the part: it attenuates but is not part (truth label 0).
struct Marker {
  std::array<double, 3> centre_mm{0, 0, 0};
  double radius_mm = 0.05;
  double mu_per_mm = 0.47;
  bool operator==(const Marker& o) const;
};

// One pore population. type: "gas" (spheres, log-normal diameter), "lack-of-fusion" (flat
// ellipsoids lying in build layers: diameter = in-plane length, width = aspect x length,
// thickness_um along z, centres on layer boundaries), "cluster" (gas pores gathered around
// cluster centres). porosity_pct counts closed pores over the part volume; open_count more pores
// are placed cut by the part surface (open pores, not counted in porosity).
// Lack-of-fusion shape: "ellipsoid" (one flat ellipsoid) or "irregular": the union of `lobes` flat
// ellipsoids in the same layer plane with the same thickness; the first is the ellipsoid above,
// each further lobe has semi-axes lobe_scale x U(0.5, 1) times the first's, its own yaw U(0, 180)
// deg, and its centre at rho = U(0.5, 0.9) of the first's semi-axes in a direction U(0, 360) deg
// (inside the first ellipse, so the union is one void). Volume by numerical integration (phantom.hpp).
// The three shape keys are written to recipe.toml only when they differ from the defaults.
struct PorePopulation {
  std::string type = "gas";
  double porosity_pct = 0.5;
  double median_diameter_um = 40;
  double spread = 0.3;  // standard deviation of ln(diameter); diameters kept within +-3 spread
  double min_diameter_um = 0;
  double thickness_um = 20;
  double aspect = 0.6;
  double layer_um = 100;
  int pores_per_cluster = 8;
  double cluster_radius_um = 150;
  int open_count = 0;
  std::string shape = "ellipsoid";  // lack-of-fusion: ellipsoid or irregular
  int lobes = 3;                    // irregular: flat ellipsoids in the union, 2..8
  double lobe_scale = 0.7;          // irregular: largest further lobe relative to the first, (0, 1]
  bool operator==(const PorePopulation& o) const;
};

// The pose of the fast scans with one projection count (issue 12: re-mounted parts, another
// magnification): the part as it sits in that scan, x_scan_mm = Rz(rotation_deg[2]) x_phantom_mm +
// translation_mm (rotation about z, the scan's rotation axis, counter-clockwise seen from +z; both
// frames in mm with the origin at the volume centre), scanned on a grid of the phantom's dims with
// voxels of voxel_size_um. rotation_deg[0] and [1] (tilts about x and y) must be 0: a tilted part is
// not simulated. The truth in the scan's frame and the transform go to the output (synth.hpp).
struct ScanPose {
  int projections = 0;                          // the fast scans with this count; 0 = every fast scan
  std::array<double, 3> translation_mm{0, 0, 0};
  std::array<double, 3> rotation_deg{0, 0, 0};  // about x, y, z; only z may be non-zero
  double voxel_size_um = 0;                     // 0 = the phantom's voxel size
  bool operator==(const ScanPose& o) const;
};

struct Recipe {
  std::string name = "custom";
  uint64_t seed = 1;
  // phantom
  std::array<int64_t, 3> dims{96, 96, 96};
  double voxel_size_um = 10;
  std::string material = "pa-gf30";  // pa-gf30, al-alloy, or custom (then mu_per_mm is required)
  double mu_per_mm = 0;              // 0 = the material's default
  int supersampling = 4;             // truth samples per voxel edge (>= 4)
  int64_t placement_budget = 200000; // rejected placements allowed per population
  std::vector<Shape> shapes;
  std::vector<Marker> markers;
  std::vector<PorePopulation> pores;
  // scan
  std::vector<int> projections{1500, 800, 400, 200, 100};
  std::vector<double> i0{20000};     // photons per detector bin and projection (dose series)
  int reference_projections = 3000;  // common practice: high-quality scans use 2,000-3,000 projections
  double reference_i0 = 0;           // 0 = the largest i0
  double arc_deg = 180;              // 180 or 360
  int detector_bins = 0;             // 0 = just enough to cover the slice diagonal
  int detector_subsamples = 2;       // rays per bin edge and per voxel height (area integration)
  double detector_blur_um = 0;       // Gaussian PSF sigma
  double angular_blur = 0;           // fraction of the angular step integrated (continuous rotation)
  double electronic_noise = 0;       // Gaussian read noise sigma, in photons
  bool noise = true;                 // false: noiseless line integrals
  std::string filter = "ram-lak";    // ram-lak, shepp-logan, cosine, hamming, hann
  std::string output_type = "float32";  // float32 (mu in 1/mm) or uint16
  double uint16_full_scale_mu = 0;   // mu mapped to 65535 (0 = 2 x the material mu); 0 maps to 0
  std::vector<ScanPose> poses;       // [[scan.pose]]: none = every scan in the phantom's frame

  // The pose of the fast scans with `projections` angles, or nullptr (the reference scan is never posed).
  const ScanPose* pose_for(int projections) const;

  double voxel_mm() const { return voxel_size_um * 1e-3; }
  double material_mu() const;  // mu_per_mm or the material default
  double reference_dose() const;
  bool operator==(const Recipe& o) const;
};

// Built-in presets by name: the files synthetic/presets/NAME.toml (demo-small, gear-blank, ...),
// embedded at build time (presets.hpp); throws InputError listing the names. Names sorted.
Recipe preset(const std::string& name);
std::vector<std::string> preset_names();

// Parses a recipe from TOML text; `source` names it in messages. Unknown keys, wrong types and
// out-of-range values throw InputError naming the key and the value.
Recipe parse_recipe(const std::string& toml_text, const std::string& source);
Recipe load_recipe(const std::string& path);

// Applies "key=value" overrides, e.g. "seed=3", "scan.projections=400,200",
// "pores.0.porosity_pct=2", "phantom.shape.0.radius_mm=0.3". Values are TOML (strings may be bare).
Recipe apply_overrides(const Recipe& r, const std::vector<std::string>& key_values);

// The recipe as TOML with every value filled in (parse_recipe(to_toml(r)) == r).
std::string to_toml(const Recipe& r);

// Throws InputError naming the first field out of range (projections, i0, detector width ...).
void validate(const Recipe& r);

// Default mu (1/mm) of a named material at its effective energy; throws InputError if unknown.
double material_default_mu(const std::string& material);

}  // namespace pb::synth
