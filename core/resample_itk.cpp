// Resampling with ITK's ResampleImageFilter (see core/resample.hpp).
#include <itkAffineTransform.h>
#include <itkLinearInterpolateImageFunction.h>
#include <itkMultiThreaderBase.h>
#include <itkNearestNeighborInterpolateImageFunction.h>
#include <itkResampleImageFilter.h>

#include <algorithm>
#include <cmath>

#include "core/itk_bridge.hpp"
#include "core/parallel.hpp"
#include "core/resample.hpp"

namespace pb {

namespace {

template <class T, class Interp>
Image<T> resample(const Image<T>& moving, const Geometry& grid, const SimilarityTransform& tf, T outside) {
  using ItkImage = itk::Image<T, 3>;
  auto src = itk_view(moving);
  auto affine = itk::AffineTransform<double, 3>::New();
  typename itk::AffineTransform<double, 3>::MatrixType M;
  typename itk::AffineTransform<double, 3>::OutputVectorType off;
  for (unsigned r = 0; r < 3; ++r) {
    for (unsigned k = 0; k < 3; ++k) M(r, k) = tf.scale * tf.R(int(r), int(k));
    off[r] = tf.t[int(r)];
  }
  affine->SetMatrix(M);
  affine->SetOffset(off);
  auto f = itk::ResampleImageFilter<ItkImage, ItkImage, double>::New();
  f->SetInput(src);
  f->SetTransform(affine);
  f->SetInterpolator(Interp::New());
  typename ItkImage::SizeType size;
  typename ItkImage::SpacingType spacing;
  typename ItkImage::PointType origin;
  for (unsigned k = 0; k < 3; ++k) {
    size[k] = itk::SizeValueType(grid.dims[k]);
    spacing[k] = grid.spacing_mm[k];
    origin[k] = grid.origin_mm[k];
  }
  f->SetSize(size);
  f->SetOutputSpacing(spacing);
  f->SetOutputOrigin(origin);
  f->SetDefaultPixelValue(outside);
  f->SetNumberOfWorkUnits(unsigned(std::max(1, thread_count())));
  f->Update();
  return from_itk<T>(f->GetOutput(), grid);
}

}  // namespace

Mask resample_nearest(const Mask& moving, const Geometry& grid, const SimilarityTransform& T, uint8_t outside) {
  return resample<uint8_t, itk::NearestNeighborInterpolateImageFunction<itk::Image<uint8_t, 3>, double>>(
      moving, grid, T, outside);
}

VolumeF resample_linear(const VolumeF& moving, const Geometry& grid, const SimilarityTransform& T, float outside) {
  return resample<float, itk::LinearInterpolateImageFunction<itk::Image<float, 3>, double>>(moving, grid, T,
                                                                                             outside);
}

bool same_grid(const Geometry& a, const Geometry& b, double rel_tol) {
  if (a.dims != b.dims) return false;
  for (int k = 0; k < 3; ++k) {
    const double s = a.spacing_mm[size_t(k)];
    if (std::abs(s - b.spacing_mm[size_t(k)]) > rel_tol * s) return false;
    if (std::abs(a.origin_mm[size_t(k)] - b.origin_mm[size_t(k)]) > rel_tol * s) return false;
  }
  return true;
}

}  // namespace pb
