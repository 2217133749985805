// Finding and opening the dlopen modules (see modules.hpp).
#include "core/modules.hpp"

#include <dlfcn.h>
#include <sys/auxv.h>
#include <unistd.h>

#include <cstdlib>
#include <stdexcept>

namespace pb {
namespace {

std::string folder_of(const std::string& path) {
  const size_t s = path.find_last_of('/');
  return s == std::string::npos ? "." : s == 0 ? "/" : path.substr(0, s);
}

std::string real(const std::string& path) {
  char* r = ::realpath(path.c_str(), nullptr);
  if (!r) return path;
  std::string s(r);
  std::free(r);
  return s;
}

// The file that holds this function: libporebench.so, or the executable the library's objects are
// linked into. dladdr names the executable by argv[0] (maybe relative, maybe a bare name found on
// PATH), so the executable's own file is read from /proc/self/exe.
std::string own_binary() {
  Dl_info self{}, exe{};
  const bool found = ::dladdr(reinterpret_cast<void*>(&own_binary), &self) != 0 && self.dli_fname;
  const auto phdr = ::getauxval(AT_PHDR);  // the executable's program headers
  const bool in_exe = !found || (phdr && ::dladdr(reinterpret_cast<void*>(phdr), &exe) != 0 &&
                                 exe.dli_fbase == self.dli_fbase);
  if (!in_exe && self.dli_fname[0] != '\0') return real(self.dli_fname);
  char buf[4096];
  const ssize_t n = ::readlink("/proc/self/exe", buf, sizeof(buf) - 1);
  return n > 0 ? std::string(buf, size_t(n)) : std::string("./unknown");
}

// `dir` is the build tree or a folder directly in it (build/tests): where the build writes the
// binaries that link the library. Deeper folders are not (an install tree made inside the build
// tree, as tests/install does, must find its own modules or say so).
bool build_output(const std::string& dir, const std::string& build) {
  if (build.empty() || dir.compare(0, build.size(), build) != 0) return false;
  if (dir.size() == build.size()) return true;
  return dir[build.size()] == '/' && dir.find('/', build.size() + 1) == std::string::npos;
}

}  // namespace

std::vector<std::string> module_folders(const std::string& build_dir) {
  const std::string dir = folder_of(own_binary());
  std::vector<std::string> out = {dir, dir + "/porebench", dir + "/../lib/porebench"};
  const std::string build = real(build_dir);
  if (build_output(real(dir), build)) out.push_back(build);
  return out;
}

void* open_module(const std::string& file, const std::string& build_dir, const std::string& what) {
  std::string tried, err;
  for (const std::string& d : module_folders(build_dir)) {
    const std::string path = d + "/" + file;
    if (void* h = ::dlopen(path.c_str(), RTLD_NOW | RTLD_LOCAL)) return h;
    tried += (tried.empty() ? "" : ", ") + path;
    // The loader's word on a file that is there (a missing dependency, say) is the one to give.
    const char* e = ::dlerror();
    if (e && err.empty() && ::access(path.c_str(), F_OK) == 0) err = e;
  }
  throw std::runtime_error("cannot load the " + what + " module " + file + " (tried " + tried +
                           "): " + (err.empty() ? "no such file in any of them" : err));
}

void* module_symbol(void* handle, const char* symbol, const std::string& file) {
  void* s = ::dlsym(handle, symbol);
  if (!s) throw std::runtime_error("module " + file + " lacks its entry point " + symbol + " (a module of another version?)");
  return s;
}

}  // namespace pb
