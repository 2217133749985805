#pragma once
// What a volume given as a pore mask means. Integer volumes: a 0/1 (or 0/k) mask is read as
// non-zero = pore; the 0/1/2 truth-label convention of synthetic data (0 background, 1 material,
// 2 closed pore; synthetic/phantom.hpp) is detected and read as pores = 2; any other label volume
// needs the pore label (or "nonzero"), and a volume that is mostly non-zero with many values is a
// grey scan and refused. Float volumes are probability maps in [0, 1], read as pore = value >=
// threshold (0.5 by default: common practice for probabilities, no source); values outside [0, 1]
// (a grey scan) or NaN are refused. Every refusal is an InputError naming the file and the option.
#include <cstdint>
#include <string>
#include <vector>

#include "core/volume.hpp"
#include "core/volume_view.hpp"

namespace pb {

struct MaskSpec {
  enum Kind { automatic, label, nonzero } kind = automatic;
  int64_t value = 0;        // the pore label when kind == label
  double threshold = 0.5;   // float volumes: pore = value >= threshold
  bool threshold_given = false;
};

// "3" -> label 3, "nonzero" -> every non-zero voxel, "" -> automatic; InputError naming `option`.
MaskSpec parse_mask_label(const std::string& text, const std::string& option);

struct MaskReading {
  Mask mask;
  std::string how;  // one line: how the volume was read, e.g. "synthetic truth labels 0/1/2: pores = label 2"
};

// The rule read_mask_volume applies to an integer volume, from its value counts alone (hist[v - lowest]
// for every value of type t: 256 for uint8, 65536 for uint16/int16), for masks read by slabs
// (metrics/score_slabs.hpp): pores = voxels != 0 (nonzero) or == label, and the `how` line.
struct IntegerMaskRule {
  bool nonzero = true;
  int64_t label = 0;
  std::string how;
};
IntegerMaskRule integer_mask_rule(VoxelType t, const std::vector<int64_t>& hist, const MaskSpec& spec,
                                  const std::string& file, const std::string& label_option,
                                  const std::string& threshold_option);

// The same rule from an integer volume's voxels (its value counts), and the rule applied to voxels
// [i0, i0 + n) of it: out[k] = pore, and inside roi when roi is given (roi[k], non-zero = inside).
IntegerMaskRule integer_mask_rule(const VolumeView& v, const MaskSpec& spec, const std::string& file,
                                  const std::string& label_option, const std::string& threshold_option);
void apply_mask_rule(const VolumeView& v, const IntegerMaskRule& rule, int64_t i0, int64_t n, const uint8_t* roi, uint8_t* out);

// file: the path, for messages; label_option / threshold_option: the options that set spec
// (e.g. "--pred-label", "--pred-threshold").
MaskReading read_mask_volume(const AnyVolume& v, const MaskSpec& spec, const std::string& file,
                             const std::string& label_option, const std::string& threshold_option);
// The same on voxels held elsewhere (read in place).
MaskReading read_mask_volume(const VolumeView& v, const MaskSpec& spec, const std::string& file,
                             const std::string& label_option, const std::string& threshold_option);

}  // namespace pb
