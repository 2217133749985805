// Loader of the imgcodecs module (see image_files.hpp): dlopen once, on the first image call.
#include "core/image_files.hpp"

#include <dlfcn.h>
#include <unistd.h>

#include <stdexcept>

namespace pb {
namespace {

using WriteFn = bool (*)(const char*, const cv::Mat*, const int*, size_t);
using ReadFn = void (*)(const char*, int, cv::Mat*);

struct Codecs {
  WriteFn write = nullptr;
  ReadFn read = nullptr;
};

std::string exe_dir() {
  char buf[4096];
  const ssize_t n = ::readlink("/proc/self/exe", buf, sizeof(buf) - 1);
  if (n <= 0) return ".";
  std::string p(buf, size_t(n));
  const size_t s = p.find_last_of('/');
  return s == std::string::npos ? "." : p.substr(0, s);
}

const Codecs& codecs() {
  static const Codecs c = [] {
    const std::string name = "/libporebench_imgcodecs.so", dir = exe_dir();
    std::string tried, err;
    void* h = nullptr;
    for (const std::string& d : {dir, dir + "/../lib/porebench", std::string(PB_IMGCODECS_MODULE_DIR)}) {
      if ((h = ::dlopen((d + name).c_str(), RTLD_NOW | RTLD_LOCAL))) break;
      tried += (tried.empty() ? "" : ", ") + d + name;
      if (const char* e = ::dlerror()) err = e;
    }
    if (!h) throw std::runtime_error("cannot load the image-file module (tried " + tried + "): " + err);
    Codecs k;
    k.write = reinterpret_cast<WriteFn>(::dlsym(h, "pb_imgcodecs_write"));
    k.read = reinterpret_cast<ReadFn>(::dlsym(h, "pb_imgcodecs_read"));
    if (!k.write || !k.read) throw std::runtime_error("image-file module " + name + " lacks its entry points");
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
