// The run context block (core/context.hpp): tool version and git hash (generated build_info.hpp),
// each dependency's version as its library reports it, host, threads, time.
#include "core/context.hpp"

#include <fftw3.h>
#include <unistd.h>

#include <Eigen/Core>
#include <chrono>
#include <ctime>
#include <opencv2/core/version.hpp>
#include <toml++/impl/version.h>

#include "build_info.hpp"
#include "core/cpu.hpp"
#include "core/parallel.hpp"

namespace pb {

nlohmann::ordered_json run_context() {
  char host[256] = {0};
  ::gethostname(host, sizeof(host) - 1);
  const std::time_t now = std::chrono::system_clock::to_time_t(std::chrono::system_clock::now());
  char when[32];
  std::strftime(when, sizeof(when), "%Y-%m-%dT%H:%M:%SZ", std::gmtime(&now));
  nlohmann::ordered_json deps = {
      {"itk", itk_version()},
      {"opencv", std::string(CV_VERSION)},
      {"eigen", std::to_string(EIGEN_WORLD_VERSION) + "." + std::to_string(EIGEN_MAJOR_VERSION) + "." +
                    std::to_string(EIGEN_MINOR_VERSION)},
      {"fftw", std::string(fftwf_version)},
      {"tomlplusplus", std::to_string(TOML_LIB_MAJOR) + "." + std::to_string(TOML_LIB_MINOR) + "." +
                           std::to_string(TOML_LIB_PATCH)},
      {"nlohmann_json", std::to_string(NLOHMANN_JSON_VERSION_MAJOR) + "." + std::to_string(NLOHMANN_JSON_VERSION_MINOR) +
                            "." + std::to_string(NLOHMANN_JSON_VERSION_PATCH)},
      {"compiler", std::string(__VERSION__)},
  };
  return {{"tool", "porebench"}, {"version", build::version}, {"git_hash", build::git_hash},
          {"dependencies", deps}, {"host", host}, {"threads", thread_count()},
          {"simd", simd_name(simd_level())}, {"time_utc", when}};
}

}  // namespace pb
