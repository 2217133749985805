// Reading a volume as a pore mask (metrics/mask_input.hpp): value counts decide what the volume is.
#include "metrics/mask_input.hpp"

#include <cmath>
#include <limits>
#include <sstream>
#include <stdexcept>
#include <type_traits>
#include <vector>

#include "core/error.hpp"
#include "core/format.hpp"

namespace pb {

MaskSpec parse_mask_label(const std::string& text, const std::string& option) {
  MaskSpec s;
  if (text.empty()) return s;
  if (text == "nonzero") return s.kind = MaskSpec::nonzero, s;
  try {
    size_t used = 0;
    const long long v = std::stoll(text, &used);
    if (used != text.size() || v < 0) throw std::invalid_argument("bad");
    s.kind = MaskSpec::label;
    s.value = v;
  } catch (const std::logic_error&) {
    throw InputError(option + ": '" + text + "' is not a pore label; give an integer >= 0 or 'nonzero'");
  }
  return s;
}

namespace {

std::string label_how(int64_t value, const std::string& label_option, int64_t count) {
  return "label volume: pores = voxels equal to " + std::to_string(value) + " (" + label_option + "), " +
         std::to_string(count) + " voxels";
}

void check_label_range(const MaskSpec& spec, VoxelType t, int64_t lo, int64_t hi, const std::string& file,
                       const std::string& label_option) {
  if (spec.value < lo || spec.value > hi)
    throw InputError(label_option + " " + std::to_string(spec.value) + " is outside the range of " + voxel_type_name(t) +
                     " voxels of " + file + " (" + std::to_string(lo) + ".." + std::to_string(hi) + "): no voxel can hold it");
}

void check_no_threshold(const MaskSpec& spec, VoxelType t, const std::string& file, const std::string& label_option,
                        const std::string& threshold_option) {
  if (spec.threshold_given)
    throw InputError(threshold_option + " applies to float probability maps; " + file + " holds " + voxel_type_name(t) +
                     " voxels (give " + label_option + " for a label volume)");
}

template <class T>
MaskReading read_integer(const T* s, const Geometry& g, const MaskSpec& spec, const std::string& file, const std::string& label_option,
                         const std::string& threshold_option) {
  const VoxelType t = VoxelTraits<T>::type;
  check_no_threshold(spec, t, file, label_option, threshold_option);
  MaskReading r;
  r.mask = Mask(g);
  uint8_t* d = r.mask.data();
  const int64_t n = g.voxels();
  if (spec.kind == MaskSpec::label) {
    check_label_range(spec, t, std::numeric_limits<T>::min(), std::numeric_limits<T>::max(), file, label_option);
    const T want = T(spec.value);
    int64_t count = 0;
#pragma omp parallel for schedule(static) reduction(+ : count)
    for (int64_t i = 0; i < n; ++i) count += (d[i] = s[i] == want);
    r.how = label_how(spec.value, label_option, count);
    return r;
  }
  // Value counts (values are at most 16 bits wide).
  std::vector<int64_t> hist(size_t(1) << (8 * sizeof(T)), 0);
  const int64_t shift = std::is_signed<T>::value ? int64_t(1) << (8 * sizeof(T) - 1) : 0;
  for (int64_t i = 0; i < n; ++i) ++hist[size_t(int64_t(s[i]) + shift)];
  const IntegerMaskRule rule = integer_mask_rule(t, hist, spec, file, label_option, threshold_option);
  r.how = rule.how;
  if (rule.nonzero) {
#pragma omp parallel for schedule(static)
    for (int64_t i = 0; i < n; ++i) d[i] = s[i] != 0;
  } else {
    const T want = T(rule.label);
#pragma omp parallel for schedule(static)
    for (int64_t i = 0; i < n; ++i) d[i] = s[i] == want;
  }
  return r;
}

MaskReading read_float(const float* s, const Geometry& g, const MaskSpec& spec, const std::string& file, const std::string& label_option,
                       const std::string& threshold_option) {
  if (spec.kind != MaskSpec::automatic)
    throw InputError(label_option + " applies to integer label volumes; " + file +
                     " holds float32 voxels (a probability map: use " + threshold_option + ")");
  if (!(spec.threshold > 0 && spec.threshold <= 1))
    throw InputError(threshold_option + " must be in (0, 1], got " + format_number(spec.threshold, 6, nullptr));
  const int64_t n = g.voxels();
  int64_t nan = 0, outside = 0;
  float lo = INFINITY, hi = -INFINITY;
#pragma omp parallel for schedule(static) reduction(+ : nan, outside) reduction(min : lo) reduction(max : hi)
  for (int64_t i = 0; i < n; ++i) {
    const float v = s[i];
    if (!std::isfinite(v)) {
      ++nan;
      continue;
    }
    lo = std::min(lo, v), hi = std::max(hi, v);
    outside += v < 0 || v > 1;
  }
  if (nan) throw InputError(file + " has " + std::to_string(nan) + " non-finite voxels; a probability map has values in [0, 1]");
  if (outside)
    throw InputError(file + " looks like a grey scan, not a mask or probability map: float values from " + format_number(lo, 6, nullptr) + " to " +
                     format_number(hi, 6, nullptr) + " (" + std::to_string(outside) + " voxels outside [0, 1]); give the segmented mask");
  MaskReading r;
  r.mask = Mask(g);
  uint8_t* d = r.mask.data();
  const float t = float(spec.threshold);
#pragma omp parallel for schedule(static)
  for (int64_t i = 0; i < n; ++i) d[i] = s[i] >= t;
  r.how = "probability map: pore = value >= " + format_number(spec.threshold, 6, nullptr) + " (" + threshold_option +
          (spec.threshold_given ? ")" : ", default: common practice for probabilities)");
  return r;
}

}  // namespace

IntegerMaskRule integer_mask_rule(VoxelType t, const std::vector<int64_t>& hist, const MaskSpec& spec, const std::string& file,
                                  const std::string& label_option, const std::string& threshold_option) {
  check_no_threshold(spec, t, file, label_option, threshold_option);
  const int64_t shift = t == VoxelType::i16 ? 32768 : 0;
  IntegerMaskRule r;
  if (spec.kind == MaskSpec::label) {
    check_label_range(spec, t, -shift, int64_t(hist.size()) - 1 - shift, file, label_option);
    r.nonzero = false;
    r.label = spec.value;
    r.how = label_how(spec.value, label_option, hist[size_t(spec.value + shift)]);
    return r;
  }
  std::vector<int64_t> values;
  int64_t n = 0;
  for (size_t k = 0; k < hist.size(); ++k) {
    n += hist[k];
    if (hist[k]) values.push_back(int64_t(k) - shift);
  }
  const int64_t zeros = hist[size_t(shift)];
  std::vector<int64_t> nonzero;
  for (int64_t v : values)
    if (v != 0) nonzero.push_back(v);
  if (spec.kind == MaskSpec::nonzero || nonzero.size() <= 1) {
    r.how = spec.kind == MaskSpec::nonzero ? "every non-zero voxel is pore (" + label_option + " nonzero)"
            : nonzero.empty()              ? "empty mask (every voxel 0)"
                                           : "binary mask 0/" + std::to_string(nonzero[0]) + ": non-zero = pore";
    return r;
  }
  if (nonzero == std::vector<int64_t>{1, 2}) {
    r.nonzero = false;
    r.label = 2;
    r.how = "synthetic truth labels 0/1/2 detected (0 background, 1 material, 2 closed pore): pores = label 2; give " +
            label_option + " to choose otherwise";
    return r;
  }
  const double zero_share = n ? double(zeros) / double(n) : 1.0;
  std::ostringstream msg;
  if (values.size() > 256 || zero_share < 0.5) {
    msg << file << " looks like a grey scan, not a mask: " << values.size() << " distinct values from " << values.front()
        << " to " << values.back() << ", " << format_number(std::round(1000 * zero_share) / 10, 6, nullptr)
        << " % of voxels 0 (a pore mask is mostly 0 and has few values); give the segmented mask";
  } else {
    msg << file << " is a label volume with " << nonzero.size() << " non-zero values (" << nonzero[0] << ", " << nonzero[1]
        << (nonzero.size() > 2 ? ", ..." : "") << "): give " << label_option << " N (pores = voxels equal to N) or "
        << label_option << " nonzero (every non-zero voxel is pore)";
  }
  throw InputError(msg.str());
}

MaskReading read_mask_volume(const VolumeView& v, const MaskSpec& spec, const std::string& file,
                             const std::string& label_option, const std::string& threshold_option) {
  return v.visit([&](const auto* s, int64_t) -> MaskReading {
    using T = std::remove_cv_t<std::remove_pointer_t<decltype(s)>>;
    if constexpr (std::is_same_v<T, float>)
      return read_float(s, v.geometry, spec, file, label_option, threshold_option);
    else
      return read_integer(s, v.geometry, spec, file, label_option, threshold_option);
  });
}

IntegerMaskRule integer_mask_rule(const VolumeView& v, const MaskSpec& spec, const std::string& file,
                                  const std::string& label_option, const std::string& threshold_option) {
  return v.visit([&](const auto* s, int64_t n) -> IntegerMaskRule {
    using T = std::remove_cv_t<std::remove_pointer_t<decltype(s)>>;
    if constexpr (std::is_same_v<T, float>) {
      throw std::logic_error("integer_mask_rule: " + file + " holds float voxels");
    } else {
      // Value counts per thread, added up (integer sums: any order).
      const size_t bins = size_t(1) << (8 * sizeof(T));
      const int64_t shift = std::is_signed<T>::value ? int64_t(1) << (8 * sizeof(T) - 1) : 0;
      std::vector<int64_t> hist(bins, 0);
#pragma omp parallel
      {
        std::vector<int64_t> h(bins, 0);
#pragma omp for schedule(static) nowait
        for (int64_t i = 0; i < n; ++i) ++h[size_t(int64_t(s[i]) + shift)];
#pragma omp critical
        for (size_t k = 0; k < bins; ++k) hist[k] += h[k];
      }
      return integer_mask_rule(VoxelTraits<T>::type, hist, spec, file, label_option, threshold_option);
    }
  });
}

void apply_mask_rule(const VolumeView& v, const IntegerMaskRule& rule, int64_t i0, int64_t n, const uint8_t* roi, uint8_t* out) {
  v.visit([&](const auto* s, int64_t) {
    using T = std::remove_cv_t<std::remove_pointer_t<decltype(s)>>;
    if constexpr (std::is_same_v<T, float>) {
      throw std::logic_error("apply_mask_rule: float voxels");
    } else {
      const T* a = s + i0;
      const T want = T(rule.label);
      if (rule.nonzero && roi) {
        for (int64_t k = 0; k < n; ++k) out[k] = (a[k] != 0) & (roi[k] != 0);
      } else if (rule.nonzero) {
        for (int64_t k = 0; k < n; ++k) out[k] = a[k] != 0;
      } else if (roi) {
        for (int64_t k = 0; k < n; ++k) out[k] = (a[k] == want) & (roi[k] != 0);
      } else {
        for (int64_t k = 0; k < n; ++k) out[k] = a[k] == want;
      }
    }
  });
}

MaskReading read_mask_volume(const AnyVolume& v, const MaskSpec& spec, const std::string& file, const std::string& label_option,
                             const std::string& threshold_option) {
  return read_mask_volume(view_of(v), spec, file, label_option, threshold_option);
}

}  // namespace pb
