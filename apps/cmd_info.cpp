// porebench info FILE: geometry, voxel type, grey-value statistics, a compact histogram, SHA-256.
#include <filesystem>
#include <iomanip>
#include <iostream>
#include <memory>

#include "apps/cli.hpp"
#include "core/histogram.hpp"
#include "core/sha256.hpp"

namespace pb::cli {
namespace {

Action setup_info(CLI::App& app) {
  app.description("describe a volume: dims, voxel type, spacing, physical size, grey values, SHA-256");
  struct Args {
    std::string input;
    ReadArgs read;
  };
  auto a = std::make_shared<Args>();
  app.add_option("FILE", a->input, "volume file or folder of TIFF slices")->required();
  a->read.add_to(&app);
  return [a] {
    ReadOptions ro = a->read.options(a->input);
    NonFinite nf;
    ro.nonfinite_out = &nf;
    const AnyVolume v = read_volume(a->input, ro);
    const Geometry& g = v.geometry();
    const VolumeF f = v.to_float();
    const Stats s = compute_stats(f);
    std::cout << "file      " << a->input << '\n'
              << "dims      " << g.dims[0] << " x " << g.dims[1] << " x " << g.dims[2] << " voxels (" << g.voxels()
              << ")\n"
              << "type      " << voxel_type_name(v.type()) << '\n'
              << "spacing   " << g.spacing_mm[0] << " x " << g.spacing_mm[1] << " x " << g.spacing_mm[2] << " mm\n"
              << "origin    " << g.origin_mm[0] << ", " << g.origin_mm[1] << ", " << g.origin_mm[2] << " mm\n"
              << "size      " << g.dims[0] * g.spacing_mm[0] << " x " << g.dims[1] * g.spacing_mm[1] << " x "
              << g.dims[2] * g.spacing_mm[2] << " mm\n"
              << "values    min " << s.min << "  max " << s.max << "  mean " << s.mean << '\n';
    if (nf.total()) std::cout << "nonfinite " << nf.text() << ", all read as NaN (--allow-nonfinite)\n";
    // A compact histogram: 32 bins as a bar of eighth-blocks, log-scaled counts.
    const Histogram h = compute_histogram(f.data(), f.size(), s.min, s.max, 32);
    static const char* blocks[] = {" ", "\u2581", "\u2582", "\u2583", "\u2584", "\u2585", "\u2586", "\u2587", "\u2588"};
    double top = 0;
    for (auto c : h.counts) top = std::max(top, std::log1p(double(c)));
    std::cout << "histogram " << s.min << " |";
    for (auto c : h.counts) std::cout << blocks[top > 0 ? int(std::lround(8 * std::log1p(double(c)) / top)) : 0];
    std::cout << "| " << s.max << "  (32 bins, log counts)\n";
    if (std::filesystem::is_regular_file(a->input)) std::cout << "sha256    " << sha256_file(a->input) << "  (file)\n";
    std::cout << "sha256    " << sha256_hex(v.raw(), v.bytes()) << "  (voxel data)\n";
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("info", 30, setup_info);

}  // namespace pb::cli
