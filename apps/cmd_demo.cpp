// porebench demo -o DIR: the built-in synthetic default. Builds a small invented porous part in
// memory (a glass-filled polyamide gear-blank slug with spherical gas pores, grey values with
// noise), segments it with otsu, and compares the found porosity with the known one.
#include <cmath>
#include <filesystem>
#include <iostream>
#include <memory>
#include <random>

#include "apps/cli.hpp"
#include "core/error.hpp"
#include "methods/pores.hpp"
#include "methods/registry.hpp"

namespace pb::cli {
namespace {

struct Sphere {
  double x, y, z, r;
};

Action setup_demo(CLI::App& app) {
  app.description("run the built-in synthetic default: make a porous volume, segment it, print porosity");
  struct Args {
    std::string out = "results/demo";
    int size = 96;
    unsigned seed = 7;
  };
  auto a = std::make_shared<Args>();
  app.add_option("-o,--output", a->out, "output folder")->capture_default_str();
  app.add_option("--size", a->size, "edge length in voxels")->check(CLI::Range(32, 512))->capture_default_str();
  app.add_option("--seed", a->seed, "random seed")->capture_default_str();
  return [a] {
    std::filesystem::create_directories(a->out);
    Geometry g;
    g.dims = {a->size, a->size, a->size};
    g.spacing_mm = {0.01, 0.01, 0.01};  // 10 um voxels
    const double c = (a->size - 1) / 2.0, radius = 0.42 * a->size;
    std::mt19937_64 rng(a->seed);
    std::uniform_real_distribution<double> u(0, 1);
    std::vector<Sphere> pores;
    for (int i = 0; i < 60; ++i) {
      const double r = 1.0 + 3.0 * u(rng);
      const double ang = 2 * M_PI * u(rng), rad = (radius - r - 2) * std::sqrt(u(rng));
      pores.push_back({c + rad * std::cos(ang), c + rad * std::sin(ang), 4 + r + (a->size - 8 - 2 * r) * u(rng), r});
    }
    Mask truth(g);
    VolumeF scan(g);
    std::normal_distribution<float> noise(0.f, 0.08f);
    int64_t part = 0;
    for (int64_t z = 0; z < g.dims[2]; ++z)
      for (int64_t y = 0; y < g.dims[1]; ++y)
        for (int64_t x = 0; x < g.dims[0]; ++x) {
          const bool inside = std::hypot(x - c, y - c) <= radius && z >= 2 && z < g.dims[2] - 2;
          bool pore = false;
          for (const auto& s : pores)
            if ((x - s.x) * (x - s.x) + (y - s.y) * (y - s.y) + (z - s.z) * (z - s.z) <= s.r * s.r) pore = true;
          pore = pore && inside;
          part += inside;
          truth(x, y, z) = pore;
          scan(x, y, z) = (inside && !pore ? 1.0f : 0.0f) + noise(rng);
        }
    const int64_t true_pores = count_nonzero(truth);
    const MethodInfo& m = Registry::instance().get("otsu");
    MethodOutput out = run_method(m, parse_params(m, {}), MethodInput{scan});
    const int64_t found = count_nonzero(out.pores);
    const std::string scan_path = a->out + "/demo-scan.mha", truth_path = a->out + "/demo-truth.mha",
                      mask_path = a->out + "/demo-otsu-pores.mha";
    write_volume(scan, scan_path, {true});
    write_volume(truth, truth_path, {true});
    write_volume(out.pores, mask_path, {true});
    std::cout << "demo: " << a->size << "^3 voxels of 10 um, " << pores.size() << " spherical gas pores\n"
              << "  true porosity   " << 100.0 * true_pores / part << " %\n"
              << "  otsu threshold  " << out.chosen[0].second << " (grey), " << out.runtime_s << " s\n"
              << "  otsu porosity   " << 100.0 * found / out.part_voxels << " %\n"
              << "wrote " << scan_path << ", " << truth_path << ", " << mask_path << '\n';
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("demo", 10, setup_demo);

}  // namespace pb::cli
