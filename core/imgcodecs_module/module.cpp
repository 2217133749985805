// libporebench_imgcodecs.so: OpenCV's imgcodecs behind two C entry points, opened on first use by
// core/image_files.cpp so that the executables do not load imgcodecs' ~115 libraries at start-up.
// Exceptions (cv::Exception) pass through to the caller as they did from cv::imwrite / cv::imread.
#include <opencv2/imgcodecs.hpp>
#include <vector>

extern "C" __attribute__((visibility("default"))) bool pb_imgcodecs_write(const char* path, const cv::Mat* m,
                                                                           const int* params, size_t n) {
  return cv::imwrite(path, *m, std::vector<int>(params, params + n));
}

extern "C" __attribute__((visibility("default"))) void pb_imgcodecs_read(const char* path, int flags, cv::Mat* out) {
  *out = cv::imread(path, flags);
}
