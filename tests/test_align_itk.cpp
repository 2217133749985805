// The moving-image gradient of the intensity registration (core/linear_gradient_itk.hpp).
// Sources: an analytic case (a linear ramp, whose trilinear interpolant is the ramp itself), and
// ITK's own LinearInterpolateImageFunction, the function the metric evaluates, differentiated by
// central differences inside a cell.
#include <catch2/catch.hpp>

#include <itkImage.h>
#include <itkImageRegionIterator.h>
#include <itkImageRegionIteratorWithIndex.h>
#include <itkLinearInterpolateImageFunction.h>

#include <cmath>
#include <random>

#include "core/linear_gradient_itk.hpp"

namespace {
using ImageF = itk::Image<float, 3>;

ImageF::Pointer make_image(const ImageF::SizeType& size, const ImageF::SpacingType& spacing) {
  auto img = ImageF::New();
  ImageF::RegionType region;
  region.SetSize(size);
  img->SetRegions(region);
  img->SetSpacing(spacing);
  ImageF::PointType origin;
  origin[0] = -1.5;
  origin[1] = 0.25;
  origin[2] = 3.0;
  img->SetOrigin(origin);
  img->Allocate();
  return img;
}
}  // namespace

TEST_CASE("trilinear gradient: exact on a ramp, equal to ITK's linear interpolant's slope", "[align][intensity]") {
  ImageF::SizeType size;
  size[0] = 9;
  size[1] = 7;
  size[2] = 6;
  ImageF::SpacingType spacing;
  spacing[0] = 0.5;
  spacing[1] = 0.25;
  spacing[2] = 2.0;
  auto fn = pb::LinearGradientImageFunction<ImageF>::New();

  SECTION("ramp: I = 2 i - 3 j + 0.5 k (index units) has gradient (2/0.5, -3/0.25, 0.5/2) per mm everywhere") {
    auto img = make_image(size, spacing);
    for (itk::ImageRegionIteratorWithIndex<ImageF> it(img, img->GetBufferedRegion()); !it.IsAtEnd(); ++it) {
      const auto i = it.GetIndex();
      it.Set(float(2.0 * double(i[0]) - 3.0 * double(i[1]) + 0.5 * double(i[2])));
    }
    fn->SetInputImage(img);
    std::mt19937_64 rng(3);
    std::uniform_real_distribution<double> u(0.0, 1.0);
    for (int n = 0; n < 50; ++n) {
      ImageF::PointType p;
      for (unsigned d = 0; d < 3; ++d)
        p[d] = img->GetOrigin()[d] + u(rng) * double(size[d] - 1) * spacing[d];  // inside, edges included
      const auto g = fn->Evaluate(p);
      CHECK(g[0] == Approx(4.0).margin(1e-5));
      CHECK(g[1] == Approx(-12.0).margin(1e-5));
      CHECK(g[2] == Approx(0.25).margin(1e-5));
    }
  }

  SECTION("random grey values: the slope of ITK's trilinear interpolation at random points") {
    auto img = make_image(size, spacing);
    std::mt19937_64 rng(11);
    std::normal_distribution<float> nd(0.0f, 1.0f);
    for (itk::ImageRegionIterator<ImageF> it(img, img->GetBufferedRegion()); !it.IsAtEnd(); ++it) it.Set(nd(rng));
    fn->SetInputImage(img);
    auto interp = itk::LinearInterpolateImageFunction<ImageF, double>::New();
    interp->SetInputImage(img);
    std::uniform_real_distribution<double> u(0.0, 1.0);
    const double h = 1e-5;  // voxel fraction: stays inside the cell (points keep 1e-3 from its faces)
    for (int n = 0; n < 200; ++n) {
      ImageF::PointType p;
      for (unsigned d = 0; d < 3; ++d) {
        const double cell = std::floor(u(rng) * double(size[d] - 1));
        p[d] = img->GetOrigin()[d] + (cell + 1e-3 + u(rng) * (1 - 2e-3)) * spacing[d];
      }
      const auto g = fn->Evaluate(p);
      for (unsigned d = 0; d < 3; ++d) {
        ImageF::PointType a = p, b = p;
        a[d] -= h * spacing[d];
        b[d] += h * spacing[d];
        const double fd = (interp->Evaluate(b) - interp->Evaluate(a)) / (2 * h * spacing[d]);
        INFO("point " << p << " axis " << d);
        CHECK(g[d] == Approx(fd).epsilon(1e-4).margin(1e-3));
      }
    }
  }
}
