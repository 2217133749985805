// The modules opened on first use (core/modules.hpp): where they are looked for, the error when one
// is missing, and that the command line does not load them at start-up (issue 16: LibTorch linked
// into the executable cost 0.76 s and 285 shared libraries at every start, GDCM ~45 ms of CPU).
#include <catch2/catch.hpp>

#include <unistd.h>

#include <filesystem>
#include <stdexcept>
#include <string>

#include "core/modules.hpp"
#include "helpers.hpp"

using namespace pb;
namespace fs = std::filesystem;

TEST_CASE("modules are looked for beside this binary, in the installed layout and in its build tree", "[modules]") {
  // This test program is build/tests/porebench_tests: its own folder first (read from
  // /proc/self/exe, not from argv[0]), then porebench/ and ../lib/porebench from it, then the build
  // tree, since the program lies inside it.
  const std::string exe = fs::read_symlink("/proc/self/exe").string();
  const std::string dir = fs::path(exe).parent_path().string();
  const std::string build = fs::canonical(fs::path(PB_CLI_PATH).parent_path()).string();
  const auto folders = module_folders(build);
  REQUIRE(folders.size() == 4);
  CHECK(folders[0] == dir);
  CHECK(folders[1] == dir + "/porebench");
  CHECK(folders[2] == dir + "/../lib/porebench");
  CHECK(folders[3] == build);
  // A build tree the binary is not in is not searched (an installed copy never reaches into one),
  // nor one it lies deeper in than one folder (tests/install makes its install tree in the build tree).
  CHECK(module_folders("/nonexistent/build").size() == 3);
  CHECK(module_folders(fs::path(dir).parent_path().parent_path().string()).size() == 3);
}

TEST_CASE("a missing module is an error naming it and every path tried", "[modules]") {
  const std::string build = fs::canonical(fs::path(PB_CLI_PATH).parent_path()).string();
  try {
    open_module("libporebench_nosuch.so", build, "test");
    FAIL("a module that does not exist was opened");
  } catch (const std::runtime_error& e) {
    const std::string m = e.what();
    CHECK(m.find("cannot load the test module libporebench_nosuch.so") != std::string::npos);
    for (const auto& d : module_folders(build)) CHECK(m.find(d + "/libporebench_nosuch.so") != std::string::npos);
  }
  // Both real modules are found from the test program (the build tree).
  CHECK(open_module("libporebench_torch.so", build, "LibTorch") != nullptr);
  CHECK(open_module("libporebench_onnx.so", build, "OpenCV dnn") != nullptr);
  CHECK(open_module("libporebench_imgcodecs.so", build, "image-file") != nullptr);
  CHECK(open_module("libporebench_dicom.so", build, "DICOM reader") != nullptr);
}

TEST_CASE("the command line links neither LibTorch, OpenCV dnn, imgcodecs nor GDCM", "[modules]") {
  // ldd lists what the loader maps at start-up (the executable's needs, recursively).
  const auto r = pbtest::run_shell("ldd " + std::string(PB_CLI_PATH));
  REQUIRE(r.exit_code == 0);
  CHECK(r.out.find("libc.so") != std::string::npos);
  CHECK(r.out.find("libtorch") == std::string::npos);
  CHECK(r.out.find("libc10") == std::string::npos);
  CHECK(r.out.find("libopencv_dnn") == std::string::npos);
  CHECK(r.out.find("libprotobuf") == std::string::npos);
  CHECK(r.out.find("libopencv_imgcodecs") == std::string::npos);
  CHECK(r.out.find("libgdcm") == std::string::npos);
  CHECK(r.out.find("ITKIOGDCM") == std::string::npos);
}
