#pragma once
// Test helpers: temporary folders, running the porebench command and reference scripts, and
// deterministic test volumes.
#include <array>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <random>
#include <sstream>
#include <string>
#include <sys/wait.h>

#include "core/io.hpp"
#include "core/volume.hpp"
#include "tests/json_files.hpp"

namespace pbtest {

namespace fs = std::filesystem;

// A fresh temporary folder, removed when the object goes out of scope.
struct TempDir {
  fs::path path;
  TempDir() {
    std::string tmpl = (fs::temp_directory_path() / "porebench-test-XXXXXX").string();
    path = ::mkdtemp(tmpl.data());
  }
  ~TempDir() {
    std::error_code ec;
    fs::remove_all(path, ec);
  }
  std::string operator/(const std::string& name) const { return (path / name).string(); }
};

struct RunResult {
  int exit_code = -1;
  std::string out, err;
};

// Runs a shell command, capturing stdout and stderr.
inline RunResult run_shell(const std::string& cmd) {
  TempDir d;
  const std::string o = d / "stdout", e = d / "stderr";
  const int status = std::system((cmd + " >" + o + " 2>" + e).c_str());
  RunResult r;
  r.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
  r.out = read_text(o);
  r.err = read_text(e);
  return r;
}

inline RunResult run_cli(const std::string& args) { return run_shell(std::string(PB_CLI_PATH) + " " + args); }

// Runs tests/ref/SCRIPT with Debian's /usr/bin/python3 (the reference libraries live there).
inline RunResult run_ref_script(const std::string& script, const std::string& args) {
  return run_shell(std::string(PB_PYTHON) + " " + PB_TEST_SCRIPTS + "/" + script + " " + args);
}

inline pb::Geometry cube(int64_t n, double spacing_mm = 1.0) {
  pb::Geometry g;
  g.dims = {n, n, n};
  g.spacing_mm = {spacing_mm, spacing_mm, spacing_mm};
  return g;
}

// Mixture of Gaussian grey-value phases with given weights, means, sigmas (deterministic).
inline pb::VolumeF mixture_volume(const pb::Geometry& g, const std::vector<std::array<double, 3>>& phases,
                                  unsigned seed) {
  pb::VolumeF v(g);
  std::mt19937_64 rng(seed);
  std::uniform_real_distribution<double> u(0, 1);
  std::vector<std::normal_distribution<double>> d;
  for (auto& p : phases) d.emplace_back(p[1], p[2]);
  for (int64_t i = 0; i < v.size(); ++i) {
    double r = u(rng), acc = 0;
    size_t k = 0;
    for (; k + 1 < phases.size(); ++k) {
      acc += phases[k][0];
      if (r < acc) break;
    }
    v[i] = float(d[k](rng));
  }
  return v;
}

}  // namespace pbtest
