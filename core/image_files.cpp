// Loader of the imgcodecs module (see image_files.hpp): dlopen once, on the first image call.
#include "core/image_files.hpp"

#include "core/modules.hpp"

namespace pb {
namespace {

using WriteFn = bool (*)(const char*, const cv::Mat*, const int*, size_t);
using ReadFn = void (*)(const char*, int, cv::Mat*);

struct Codecs {
  WriteFn write = nullptr;
  ReadFn read = nullptr;
};

const Codecs& codecs() {
  static const Codecs c = [] {
    const std::string file = "libporebench_imgcodecs.so";
    void* h = open_module(file, PB_IMGCODECS_MODULE_DIR, "image-file");
    Codecs k;
    k.write = reinterpret_cast<WriteFn>(module_symbol(h, "pb_imgcodecs_write", file));
    k.read = reinterpret_cast<ReadFn>(module_symbol(h, "pb_imgcodecs_read", file));
    return k;
  }();
  return c;
}

}  // namespace

bool image_write(const std::string& path, const cv::Mat& m, const std::vector<int>& params) {
  return codecs().write(path.c_str(), &m, params.data(), params.size());
}

cv::Mat image_read(const std::string& path, int flags) {
  cv::Mat m;
  codecs().read(path.c_str(), flags, &m);
  return m;
}

}  // namespace pb
