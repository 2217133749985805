#pragma once
// Modules opened on first use with dlopen: parts of the library whose dependencies are costly to
// load (OpenCV's imgcodecs: ~115 shared libraries; LibTorch: ~285; GDCM: ~45 ms of CPU building its
// dictionaries; OpenCV dnn with protobuf: ~17 ms), kept out of the executables and of
// libporebench.so so that commands which do not use them start fast (issue 16):
// libporebench_imgcodecs.so, libporebench_torch.so, libporebench_dicom.so, libporebench_onnx.so.
// A module is looked for, in order:
//   1. beside the binary that holds this library's code: the executable (porebench, the tests,
//      the benchmarks) or libporebench.so (a consumer, the Python module), found with dladdr;
//   2. in porebench/ below that folder: the installed layout, PREFIX/lib/porebench beside
//      PREFIX/lib/libporebench.so (cmake/install.cmake);
//   3. in ../lib/porebench from that folder: an executable in PREFIX/bin;
//   4. in the build tree the library was built in, only for binaries the build writes there (in
//      build/ or a folder directly in it: build/tests): an installed copy never reaches into a build
//      folder, not even one made inside the build tree.
#include <string>
#include <vector>

namespace pb {

// The folders above, in order, for a module built into `build_dir`.
std::vector<std::string> module_folders(const std::string& build_dir);

// dlopen of `file` (e.g. "libporebench_torch.so") from the first folder that has it; throws
// std::runtime_error naming `what`, every path tried and the loader's last message when none does.
void* open_module(const std::string& file, const std::string& build_dir, const std::string& what);

// dlsym that throws (naming the module and the symbol) when the entry point is missing.
void* module_symbol(void* handle, const char* symbol, const std::string& file);

}  // namespace pb
