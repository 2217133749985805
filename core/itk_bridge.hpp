#pragma once
// Zero-copy views of our volumes as itk::Image, for the translation units that run ITK filters
// (files named *_itk.cpp only: ITK headers are heavy). The ITK image borrows our buffer; it must
// not outlive the Image it views.
#include <itkImage.h>
#include <itkImportImageContainer.h>

#include "core/volume.hpp"

namespace pb {

template <class T>
typename itk::Image<T, 3>::Pointer itk_view(const Image<T>& img) {
  using ItkImage = itk::Image<T, 3>;
  auto out = ItkImage::New();
  typename ItkImage::RegionType region;
  typename ItkImage::SpacingType spacing;
  typename ItkImage::PointType origin;
  for (unsigned i = 0; i < 3; ++i) {
    region.SetSize(i, itk::SizeValueType(img.geometry().dims[i]));
    region.SetIndex(i, 0);
    spacing[i] = img.geometry().spacing_mm[i];
    origin[i] = img.geometry().origin_mm[i];
  }
  out->SetRegions(region);
  out->SetSpacing(spacing);
  out->SetOrigin(origin);
  auto container = itk::ImportImageContainer<itk::SizeValueType, T>::New();
  // The container does not own the memory (last argument false): our Image keeps it.
  container->SetImportPointer(const_cast<T*>(img.data()), itk::SizeValueType(img.size()), false);
  out->SetPixelContainer(container);
  return out;
}

// Copies an ITK image of the same geometry back into one of ours.
template <class T>
Image<T> from_itk(const itk::Image<T, 3>* src, const Geometry& g) {
  Image<T> out(g);
  const T* p = src->GetBufferPointer();
  std::copy(p, p + out.size(), out.data());
  return out;
}

}  // namespace pb
