#pragma once
// Gradient of the trilinear interpolant of a 3-D image, for ITK's v4 image metrics (an
// ImageToImageMetricv4 moving-image gradient calculator). The metric interpolates the moving
// image linearly at each sample and needs its gradient there; ITK's default calculator
// (CentralDifferenceImageFunction) interpolates six more times at +-half a voxel along each axis.
// This one differentiates the same trilinear interpolant analytically from the eight voxels of the
// cell the point falls in (the ones the value interpolation has just read), so it is the exact
// gradient of the function the metric evaluates, at one cell read instead of six.
//   f(u,v,w) = sum over corners c of I_c * (u or 1-u)(v or 1-v)(w or 1-w), u,v,w in [0,1];
//   df/du = sum over (v,w) corners of (I(1,.,.) - I(0,.,.)) * (v or 1-v)(w or 1-w), likewise v, w.
// Index gradient -> physical: grad_mm = Direction * (grad_index / spacing) (x = origin + D S i).
// At the image border the edge cell is used (ITK's linear interpolator clamps there too); the
// gradient is the cell's slope, not zero as CentralDifferenceImageFunction gives there.
// ITK-only header: include from *_itk.cpp translation units (and tests) alone.
#include <itkCovariantVector.h>
#include <itkImage.h>
#include <itkImageFunction.h>

#include <algorithm>
#include <cmath>

namespace pb {

template <class TImage>
class LinearGradientImageFunction
    : public itk::ImageFunction<TImage, itk::CovariantVector<double, TImage::ImageDimension>, double> {
 public:
  static_assert(TImage::ImageDimension == 3, "trilinear gradient: 3-D images only");
  using Self = LinearGradientImageFunction;
  using Superclass = itk::ImageFunction<TImage, itk::CovariantVector<double, 3>, double>;
  using Pointer = itk::SmartPointer<Self>;
  using ConstPointer = itk::SmartPointer<const Self>;
  using typename Superclass::ContinuousIndexType;
  using typename Superclass::IndexType;
  using typename Superclass::OutputType;
  using typename Superclass::PointType;
  itkNewMacro(Self);
  itkTypeMacro(LinearGradientImageFunction, ImageFunction);

  OutputType Evaluate(const PointType& point) const override {
    ContinuousIndexType ci;
    this->GetInputImage()->TransformPhysicalPointToContinuousIndex(point, ci);
    return EvaluateAtContinuousIndex(ci);
  }
  OutputType EvaluateAtIndex(const IndexType& index) const override {
    ContinuousIndexType ci;
    for (unsigned d = 0; d < 3; ++d) ci[d] = double(index[d]);
    return EvaluateAtContinuousIndex(ci);
  }
  OutputType EvaluateAtContinuousIndex(const ContinuousIndexType& ci) const override {
    const TImage* img = this->GetInputImage();
    const auto& region = img->GetBufferedRegion();
    // Cell corner (clamped to the buffer), fractions inside the cell, and the offset of the next
    // voxel along each axis (0 along an axis one voxel thick: no slope along it).
    long offset = 0, step[3], stride = 1;
    double f[3];
    for (unsigned d = 0; d < 3; ++d) {
      const long lo = long(region.GetIndex(d)), n = long(region.GetSize(d));
      const long b = n < 2 ? lo : std::clamp(long(std::floor(ci[d])), lo, lo + n - 2);
      f[d] = n < 2 ? 0.0 : ci[d] - double(b);
      step[d] = n < 2 ? 0 : stride;
      offset += (b - lo) * stride;
      stride *= n;
    }
    const auto* p = img->GetBufferPointer() + offset;
    const long s1 = step[0], s2 = step[1], s3 = step[2];
    const double c000 = p[0], c100 = p[s1], c010 = p[s2], c110 = p[s1 + s2];
    const double c001 = p[s3], c101 = p[s1 + s3], c011 = p[s2 + s3], c111 = p[s1 + s2 + s3];
    const double u = f[0], v = f[1], w = f[2];
    double g[3];
    g[0] = (1 - v) * (1 - w) * (c100 - c000) + v * (1 - w) * (c110 - c010) + (1 - v) * w * (c101 - c001) +
           v * w * (c111 - c011);
    g[1] = (1 - u) * (1 - w) * (c010 - c000) + u * (1 - w) * (c110 - c100) + (1 - u) * w * (c011 - c001) +
           u * w * (c111 - c101);
    g[2] = (1 - u) * (1 - v) * (c001 - c000) + u * (1 - v) * (c101 - c100) + (1 - u) * v * (c011 - c010) +
           u * v * (c111 - c110);
    const auto& sp = img->GetSpacing();
    const auto& D = img->GetDirection();
    OutputType out;
    for (unsigned r = 0; r < 3; ++r) {
      double s = 0;
      for (unsigned k = 0; k < 3; ++k) s += D(r, k) * g[k] / sp[k];
      out[r] = s;
    }
    return out;
  }

 protected:
  LinearGradientImageFunction() = default;
};

}  // namespace pb
