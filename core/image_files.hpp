#pragma once
// Image files (PNG slices, masks and montages) through OpenCV's imgcodecs, loaded on first use.
// imgcodecs pulls in ~115 shared libraries (GDAL, GDCM, HEIF, OpenEXR, ...): linked into the
// executables, they were loaded at every start, also by commands that write no image (start-up
// 0.17 s quiet, issue 16). They now live in a small module, libporebench_imgcodecs.so
// (core/imgcodecs_module/module.cpp), opened by the first call here. Searched: next to the
// executable or libporebench.so, in porebench/ and ../lib/porebench from there, then the build
// tree (core/modules.hpp).
// Same behaviour as cv::imwrite / cv::imread (format from the file name's extension).
#include <opencv2/core/mat.hpp>
#include <string>
#include <vector>

namespace pb {

// cv::imwrite: false when OpenCV cannot write the file; params as cv::ImwriteFlags pairs.
bool image_write(const std::string& path, const cv::Mat& m, const std::vector<int>& params = {});
// cv::imread with cv::ImreadModes `flags`: an empty Mat when the file cannot be read.
cv::Mat image_read(const std::string& path, int flags);

}  // namespace pb
