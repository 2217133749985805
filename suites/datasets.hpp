#pragma once
// The datasets of a suite run: what each one is (names, files, scans: from the suite alone) and
// making it ready for its cells (synthesis, the reference mask, the calibration/test split of the
// slices, the montage backgrounds and the record the results keep). A run prepares only the
// datasets that have cells to run; the others keep the record of the run that prepared them.
#include <functional>
#include <string>
#include <vector>

#include "core/json.hpp"
#include "core/volume.hpp"
#include "suites/suite.hpp"
#include "synthetic/recipe.hpp"

namespace pb::suite {

using Json = nlohmann::ordered_json;

// The calibration/test split of a scan's slices (z, voxel indices) and its montage slice.
struct Split {
  int64_t cal_begin = 0, cal_end = 0, test_begin = 0, test_end = 0, montage_z = 0;
};

struct Variant {
  std::string scan;  // "reference-scan", "scan-400p", "scan-400p-i0-5000" or "scan"
  std::string path;
  int projections = 0, reference_projections = 0;
  double i0 = 0, reference_i0 = 0;
  bool reference = false;
  ReadOptions read;  // paired scans: the file's own geometry (raw, spacing_mm)
  // What its cells score against, once prepared: the reference (and part) mask on this scan's grid
  // and its split. Synthetic and single-scan datasets share the dataset's; each fast scan of a
  // paired series has its own (the reference registered and resampled onto it, suites/paired.hpp).
  std::string ref_mask_path, part_mask_path;
  Split split;
  std::string error;  // preparation failed for this scan (e.g. registration): its cells fail with it
};

struct Dataset {
  const DatasetSpec* spec = nullptr;
  std::string name, ref_mask_path, part_mask_path, data_dir;
  std::vector<Variant> variants;
  int64_t cal_begin = 0, cal_end = 0, test_begin = 0, test_end = 0, montage_z = 0;
  Json record;           // what the results say about the dataset (complete once prepared)
  bool prepared = false;
  synth::Recipe recipe;  // synthetic datasets: the recipe with the suite's overrides, validated
  std::string recipe_text;
};

using LogFn = std::function<void(const std::string&)>;

// What the dataset is, from the suite alone: its folder, its scans and the files cells will read.
// Reads and validates a synthetic recipe; writes nothing. InputError names the dataset.
Dataset describe_dataset(const DatasetSpec& d, const std::string& out_dir);

// Makes the dataset ready for its cells: synthesises it (unless the folder holds this recipe
// already; `log` hears the synthesis steps), writes the reference mask, splits the slices
// (calibration at the bottom of the part, a gap, test above), picks the montage slice (the test
// slice with the most reference pore voxels), writes the montage backgrounds and fills the record.
void prepare_dataset(Dataset& p, const Calibration& c, const std::string& out_dir, const LogFn& log);

// The z-split: calibration slices at the bottom of the part (or of the volume without a part
// mask), a gap, the test slices above; the montage slice is the test slice with the most reference
// pore voxels. `name` names the dataset in errors.
Split split_slices(const std::string& name, const Mask* part, const Mask& ref, const Calibration& c);

// 8-bit PNGs of slice z (written atomically): grey values mapped from [lo, hi], or a mask as 0/255.
void write_slice_png(const VolumeF& v, int64_t z, double lo, double hi, const std::string& path);
void write_mask_png(const Mask& m, int64_t z, const std::string& path);

}  // namespace pb::suite
