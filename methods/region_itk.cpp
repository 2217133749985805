// Region-growing methods run by ITK. Pores are dark; seeds come from the Otsu split (region.hpp).
//   confidence-connected: grows from seeds while voxels lie within mean +- multiplier*sigma of the
//       current region, re-estimated each iteration. Ibanez L., Schroeder W., Ng L., Cates J.
//       (2005) The ITK Software Guide, 2nd ed., sec. 9.1.3 (from memory).
//   watershed: marker-based watershed on the gradient magnitude (Gaussian derivative, sigma in
//       mm): air markers below the seed threshold, material markers above a material threshold.
//       Beucher S., Meyer F. (1993) The morphological approach to segmentation: the watershed
//       transformation. In: Mathematical Morphology in Image Processing, Dekker, 433-481.
#include <itkConfidenceConnectedImageFilter.h>
#include <itkGradientMagnitudeRecursiveGaussianImageFilter.h>
#include <itkMorphologicalWatershedFromMarkersImageFilter.h>

#include <algorithm>

#include "core/itk_bridge.hpp"
#include "core/parallel.hpp"
#include "methods/pores.hpp"
#include "methods/region.hpp"
#include "methods/threshold.hpp"

namespace pb {

using ItkF = itk::Image<float, 3>;
using ItkL = itk::Image<uint8_t, 3>;

namespace {
constexpr int64_t kRecursiveMin = 4;  // ITK's recursive Gaussian filters need 4 voxels along each axis

// v with every axis shorter than kRecursiveMin extended to it by repeating its last slice: the
// constant continuation ITK's recursive filters assume beyond a border, so the derivative across
// a thin axis is 0 and the gradient is the in-plane one (a single slice gives the 2D gradient).
VolumeF pad_thin_axes(const VolumeF& v) {
  Geometry g = v.geometry();
  for (auto& d : g.dims) d = std::max(d, kRecursiveMin);
  VolumeF p(g, Uninitialized{});
  const auto& n = v.geometry().dims;
  for (int64_t z = 0; z < g.dims[2]; ++z)
    for (int64_t y = 0; y < g.dims[1]; ++y)
      for (int64_t x = 0; x < g.dims[0]; ++x)
        p(x, y, z) = v(std::min(x, n[0] - 1), std::min(y, n[1] - 1), std::min(z, n[2] - 1));
  return p;
}
}  // namespace

VolumeF gradient_magnitude(const VolumeF& v, double sigma_mm) {
  const auto& n = v.geometry().dims;
  const bool thin = std::min({n[0], n[1], n[2]}) < kRecursiveMin;
  const VolumeF padded = thin ? pad_thin_axes(v) : VolumeF();
  const VolumeF& in = thin ? padded : v;
  auto g = itk::GradientMagnitudeRecursiveGaussianImageFilter<ItkF, ItkF>::New();
  g->SetInput(itk_view(in));
  g->SetSigma(sigma_mm);
  g->SetNumberOfWorkUnits(unsigned(thread_count()));
  g->Update();
  VolumeF full = from_itk<float>(g->GetOutput(), in.geometry());
  if (!thin) return full;
  VolumeF out(v.geometry(), Uninitialized{});
  for (int64_t z = 0; z < n[2]; ++z)
    for (int64_t y = 0; y < n[1]; ++y)
      for (int64_t x = 0; x < n[0]; ++x) out(x, y, z) = full(x, y, z);
  return out;
}

// Marker-based watershed: markers 1 (air) and 2 (material), 0 unknown; returns the label volume.
Mask watershed_from_markers(const VolumeF& relief, const Mask& markers) {
  auto w = itk::MorphologicalWatershedFromMarkersImageFilter<ItkF, ItkL>::New();
  w->SetInput(itk_view(relief));
  w->SetMarkerImage(itk_view(markers));
  w->SetMarkWatershedLine(false);
  w->SetFullyConnected(false);
  w->SetNumberOfWorkUnits(unsigned(thread_count()));
  w->Update();
  return from_itk<uint8_t>(w->GetOutput(), relief.geometry());
}

namespace {


MethodInfo confidence_info() {
  return seeded_method(
      "confidence-connected",
      "confidence-connected region growing from confident air (ITK): mean +- multiplier*sigma of the region",
      "Ibanez L., Schroeder W., Ng L., Cates J. (2005) The ITK Software Guide, 2nd ed., Kitware, sec. 9.1.3", false,
      {{"multiplier", ParamType::Float, "2.5", 0.1, 10, {}, "sigma", "width of the accepted interval"},
       {"iterations", ParamType::Int, "3", 0, 20, {}, "", "re-estimations of mean and sigma"},
       {"max_seeds", ParamType::Int, "20000", 1, 1e7, {}, "voxels", "seeds are subsampled evenly to at most this many"}},
      [](const MethodInput& in, const ParamValues& p, const Histogram& h, const AutoSeeds& a) {
        auto f = itk::ConfidenceConnectedImageFilter<ItkF, ItkL>::New();
        f->SetInput(itk_view(in.volume));
        f->SetMultiplier(p.num("multiplier"));
        f->SetNumberOfIterations(unsigned(p.integer("iterations")));
        f->SetInitialNeighborhoodRadius(0);  // statistics of the seeds themselves: neighbourhoods of
                                             // seeds near pore walls would pull in material
        f->SetReplaceValue(1);
        std::vector<int64_t> seeds;
        const float s = float(a.seed);
        for (int64_t i = 0; i < in.volume.size(); ++i)
          if (in.volume[i] < s && (!in.roi || (*in.roi)[i])) seeds.push_back(i);
        const size_t step = std::max<size_t>(1, seeds.size() / size_t(p.integer("max_seeds")) + 1);
        const int64_t nx = in.volume.nx(), ny = in.volume.ny();
        for (size_t j = 0; j < seeds.size(); j += step) {
          ItkF::IndexType idx;
          idx[0] = seeds[j] % nx;
          idx[1] = (seeds[j] / nx) % ny;
          idx[2] = seeds[j] / (nx * ny);
          f->AddSeed(idx);
        }
        MethodOutput out;
        if (seeds.empty()) {
          out = constant_volume_output(in);
          out.warnings = {"no voxel lies below the seed threshold: no seeds, no pores"};
        } else {
          f->Update();
          Mask air = from_itk<uint8_t>(f->GetOutput(), in.volume.geometry());
          if (in.roi)
            for (int64_t i = 0; i < air.size(); ++i) air[i] &= (*in.roi)[i] != 0;
          out = pores_from_air(std::move(air), in, "confidence-connected", "seed threshold " + std::to_string(a.seed));
        }
        out.chosen = {{"seed_threshold", a.seed},
                      {"otsu", a.otsu},
                      {"seeds", double((seeds.size() + step - 1) / step)},
                      {"bins", h.bins()}};
        return out;
      });
}

MethodInfo watershed_info() {
  MethodInfo m = seeded_method(
      "watershed", "marker-based watershed on the gradient magnitude: air and material markers from the Otsu split",
      "Beucher S., Meyer F. (1993) The morphological approach to segmentation: the watershed transformation. "
      "In: Mathematical Morphology in Image Processing, Dekker, 433-481",
      true, {{"sigma_vox", ParamType::Float, "1", 0.1, 10, {}, "voxels", "Gaussian scale of the gradient"}},
      [](const MethodInput& in, const ParamValues& p, const Histogram& h, const AutoSeeds& a) {
        const VolumeF grad = gradient_magnitude(in.volume, p.num("sigma_vox") * in.volume.geometry().spacing_mm[0]);
        Mask markers(in.volume.geometry(), Uninitialized{});
        const float s = float(a.seed), mat = float(a.limit);
        for (int64_t i = 0; i < markers.size(); ++i) {
          const float v = in.volume[i];
          markers[i] = (in.roi && !(*in.roi)[i]) ? 2 : v < s ? 1 : v > mat ? 2 : 0;
        }
        Mask labels = watershed_from_markers(grad, markers);
        Mask air(in.volume.geometry(), Uninitialized{});
        for (int64_t i = 0; i < labels.size(); ++i) air[i] = labels[i] == 1 && (!in.roi || (*in.roi)[i]);
        MethodOutput out = pores_from_air(std::move(air), in, "watershed",
                                          "air markers below " + std::to_string(a.seed) + ", material markers above " +
                                              std::to_string(a.limit));
        out.chosen = {{"air_marker_below", a.seed}, {"material_marker_above", a.limit}, {"otsu", a.otsu}, {"bins", h.bins()}};
        return out;
      });
  for (auto& s : m.params)
    if (s.name == "grow_margin") s.doc = "material markers are above otsu + grow_margin*(material mean - otsu)";
  return m;
}

}  // namespace

PB_REGISTER_METHOD(confidence_info());
PB_REGISTER_METHOD(watershed_info());

}  // namespace pb
