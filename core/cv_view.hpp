#pragma once
// Zero-copy OpenCV views of axial slices: a cv::Mat header over slice z of our buffer (rows = y,
// cols = x). The Mat borrows the memory; it must not outlive the Image.
#include <opencv2/core.hpp>

#include "core/volume.hpp"

namespace pb {

template <class T> struct CvType;
template <> struct CvType<uint8_t> { static constexpr int value = CV_8U; };
template <> struct CvType<uint16_t> { static constexpr int value = CV_16U; };
template <> struct CvType<int16_t> { static constexpr int value = CV_16S; };
template <> struct CvType<float> { static constexpr int value = CV_32F; };

template <class T>
cv::Mat slice_mat(Image<T>& img, int64_t z) {
  return cv::Mat(int(img.ny()), int(img.nx()), CvType<T>::value, img.slice(z));
}
template <class T>
const cv::Mat slice_mat(const Image<T>& img, int64_t z) {
  return cv::Mat(int(img.ny()), int(img.nx()), CvType<T>::value, const_cast<T*>(img.slice(z)));
}

}  // namespace pb
