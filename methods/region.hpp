#pragma once
// Region-growing building blocks shared by methods/region.cpp and methods/region_itk.cpp.
#include <functional>
#include <string>
#include <vector>

#include "core/histogram.hpp"
#include "methods/registry.hpp"

namespace pb {

// Air grown from seeds: voxels with v < weak (inside roi) that are connected, with the given
// connectivity, to at least one seed voxel v < strong. Same as hysteresis thresholding on -v.
Mask grow_air(const VolumeF& v, double strong, double weak, const Mask* roi, int connectivity);

// Automatic seeds from the Otsu split of the method histogram: t = Otsu threshold, mu_air and
// mu_material the class means; seed = t - seed_margin (t - mu_air) (confident air),
// limit = t + grow_margin (mu_material - t) (how far air may grow), material marker =
// t + marker_margin (mu_material - t).
struct AutoSeeds {
  double otsu = 0, mu_air = 0, mu_material = 0, seed = 0, limit = 0;
};
AutoSeeds auto_seeds(const Histogram& h, double seed_margin, double grow_margin);

// The defined result for a constant volume: no pores, the part counted, and a warning.
MethodOutput constant_volume_output(const MethodInput& in);

// Schema entries for automatic seeding (seed_margin, grow_margin).
std::vector<ParamSpec> seed_params();

// A region method seeded from the Otsu split: family "region", parameters histogram_params(),
// seed_margin, grow_margin (with_grow) and `extra`; its run reads the method histogram, answers a
// constant volume with constant_volume_output, and otherwise calls run with the histogram and the
// automatic seeds (auto_seeds with grow_margin, or 0 without it).
using SeededRun = std::function<MethodOutput(const MethodInput&, const ParamValues&, const Histogram&, const AutoSeeds&)>;
MethodInfo seeded_method(std::string name, std::string doc, std::string citation, bool with_grow,
                         std::vector<ParamSpec> extra, SeededRun run);

}  // namespace pb
