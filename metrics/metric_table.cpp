// The table of judged metrics (metrics/metric_table.hpp). Sources marked "from memory" were written
// down without the text at hand.
#include "metrics/metric_table.hpp"

#include <sstream>

#include "core/error.hpp"
#include "core/names.hpp"

namespace pb {

const char* better_name(Better b) {
  switch (b) {
    case Better::higher: return "higher";
    case Better::lower: return "lower";
    case Better::toward_zero: return "closer to 0";
  }
  return "";
}

const std::vector<MetricInfo>& metric_table() {
  using B = Better;
  static const std::vector<MetricInfo> t = {
      {"jaccard", "", B::higher, "overlap", "jaccard_ci95", "metrics/score.cpp (overlap pass)",
       "TP / (TP + FP + FN) over ROI voxels of the scored slices; CI: bootstrap over slices", "Jaccard (1901) Bull. Soc. Vaudoise Sci. Nat. 37:547",
       true, 0.01},
      {"dice", "", B::higher, "overlap", "dice_ci95", "metrics/score.cpp (overlap pass)", "2TP / (2TP + FP + FN)",
       "Dice (1945) Ecology 26:297", false, 0.01},
      {"precision", "", B::higher, "overlap", "precision_ci95", "metrics/score.cpp (overlap pass)", "TP / (TP + FP)",
       "van Rijsbergen (1979) Information Retrieval, ch. 7 (from memory)"},
      {"recall", "", B::higher, "overlap", "recall_ci95", "metrics/score.cpp (overlap pass)", "TP / (TP + FN)",
       "van Rijsbergen (1979) Information Retrieval, ch. 7 (from memory)"},
      {"volume_similarity", "", B::higher, "overlap", "", "metrics/score.cpp (overlap pass)",
       "1 - |FN - FP| / (2TP + FP + FN)", "Taha & Hanbury (2015) BMC Med. Imaging 15:29"},
      {"slice_jaccard_mean", "", B::higher, "slices", "jaccard_ci95", "metrics/score.cpp (per-slice Jaccard)",
       "mean Jaccard over slices with a pore on either side; CI: percentile bootstrap over slices",
       "Efron & Tibshirani (1993) An Introduction to the Bootstrap, ch. 13", true, 0.01},
      {"porosity_bias_pp", "pp", B::toward_zero, "porosity", "porosity_bias_pp_ci95", "metrics/score.cpp (porosity)",
       "predicted - reference porosity, percentage points of the ROI voxels", "common practice, no source", true, 0.05},
      {"porosity_rel_bias", "", B::toward_zero, "porosity", "", "metrics/score.cpp (porosity)",
       "porosity bias / reference porosity", "common practice, no source"},
      {"hits", "", B::higher, "pores", "", "metrics/score.cpp (matching)",
       "reference pores detected under the matching rule",
       "MIL-HDBK-1823A (2009) ch. 4, hit/miss data (from memory)"},
      {"misses", "", B::lower, "pores", "", "metrics/score.cpp (matching)", "reference pores not detected",
       "MIL-HDBK-1823A (2009) ch. 4, hit/miss data (from memory)"},
      {"false_calls", "", B::lower, "pores", "", "metrics/score.cpp (matching)",
       "predicted pores overlapping no reference pore or more than max_volume_ratio times the reference pores they overlap",
       "common practice, no source"},
      {"false_calls_per_cm3", "1/cm3", B::lower, "pores", "false_calls_per_cm3_ci95", "metrics/score.cpp (matching)",
       "false calls per cm3 of ROI; CI: exact Poisson", "common practice, no source; CI: Garwood (1936) Biometrika 28:437"},
      {"false_calls_per_target", "", B::lower, "pores", "", "metrics/score.cpp (matching)",
       "false calls per reference pore (POD target)", "common practice, no source"},
      {"split", "", B::lower, "pores", "", "metrics/score.cpp (matching)",
       "reference pores overlapped by 2 or more predicted pores", "common practice, no source"},
      {"merged", "", B::lower, "pores", "", "metrics/score.cpp (matching)",
       "predicted pores overlapping 2 or more reference pores", "common practice, no source"},
      {"a50_um", "um", B::lower, "pod", "", "metrics/pod.cpp (fit_pod)",
       "ESD detected with probability 0.5 under the hit/miss POD fit",
       "MIL-HDBK-1823A (2009) ch. 4 (from memory); ASTM E2862-18"},
      {"a90_um", "um", B::lower, "pod", "", "metrics/pod.cpp (fit_pod)",
       "ESD detected with probability 0.9 under the hit/miss POD fit",
       "MIL-HDBK-1823A (2009) ch. 4 (from memory); ASTM E2862-18"},
      {"a90_95_um", "um", B::lower, "pod", "", "metrics/pod.cpp (fit_pod)",
       "upper one-sided 95 % profile-likelihood bound of a90",
       "MIL-HDBK-1823A (2009) ch. 4 (from memory); Venzon & Moolgavkar (1988) Appl. Stat. 37:87", true, 5.0},
      {"ks", "", B::lower, "sizes", "", "metrics/distribution.cpp",
       "two-sample Kolmogorov-Smirnov statistic sup |F_pred - F_ref| of pore ESD",
       "Kolmogorov (1933); Smirnov (1948) Ann. Math. Stat. 19:279"},
      {"wasserstein1_um", "um", B::lower, "sizes", "", "metrics/distribution.cpp",
       "Wasserstein-1 distance integral |F_pred - F_ref| da of pore ESD", "Vallender (1974) Theory Probab. Appl. 18:784"},
      {"hd95_mm", "mm", B::lower, "surface", "", "metrics/surface.cpp",
       "max of the two directed 95th percentiles of surface-voxel distances",
       "Huttenlocher et al. (1993) IEEE TPAMI 15:850 (Hausdorff); 95th percentile: common practice, no source"},
      {"assd_mm", "mm", B::lower, "surface", "", "metrics/surface.cpp",
       "mean of all surface-voxel distances of both directions",
       "Heimann et al. (2009) IEEE TMI 28:1251 (from memory)"},
      {"average_precision", "", B::higher, "probability", "", "metrics/probability.cpp (probability maps only)",
       "sum over distinct probabilities, highest first, of (R_n - R_{n-1}) P_n; ROI voxels of the scored slices",
       "Zhu (2004) Recall, precision and average precision, Univ. Waterloo tech. rep. 2004-09 (from memory); "
       "computed as sklearn.metrics.average_precision_score"},
      {"brier_score", "", B::lower, "probability", "", "metrics/probability.cpp (probability maps only)",
       "mean (p - y)^2 over ROI voxels of the scored slices", "Brier (1950) Mon. Weather Rev. 78:1 (from memory)"},
      {"ece", "", B::lower, "probability", "", "metrics/probability.cpp (probability maps only)",
       "expected calibration error: sum over 10 uniform bins of n_b / N |fraction positive - mean p| (bins as "
       "sklearn.calibration.calibration_curve)",
       "Guo et al. (2017) On calibration of modern neural networks, ICML, PMLR 70:1321 (from memory)"},
      {"runtime_s", "s", B::lower, "cell", "", "suites/runner.cpp (method run)",
       "wall time of the method on the whole scan", "common practice, no source"},
  };
  return t;
}

const MetricInfo* find_metric(std::string_view name) {
  for (const auto& m : metric_table())
    if (name == m.name) return &m;
  return nullptr;
}

std::vector<std::string> compare_default_metrics() {
  std::vector<std::string> out;
  for (const auto& m : metric_table())
    if (m.compare_default) out.push_back(m.name);
  return out;
}

std::map<std::string, double> compare_default_tolerances() {
  std::map<std::string, double> out;
  for (const auto& m : metric_table())
    if (m.compare_tolerance > 0) out[m.name] = m.compare_tolerance;
  return out;
}

std::string metric_names_text() {
  std::string s;
  for (const auto& m : metric_table()) s += (s.empty() ? "" : ", ") + std::string(m.name);
  return s;
}

const MetricInfo& metric_info(std::string_view name, const std::string& what) {
  if (const MetricInfo* m = find_metric(name)) return *m;
  std::vector<std::string> names;
  for (const auto& m : metric_table()) names.push_back(m.name);
  const std::string near = closest_name(std::string(name), names);
  throw InputError(what + ": unknown metric '" + std::string(name) + "'" + (near.empty() ? "" : " (did you mean '" + near + "'?)") +
                   "; valid metrics: " + metric_names_text());
}

namespace {
// A Markdown table cell: '|' escaped so that the column count holds (CommonMark/GFM tables).
std::string cell(const std::string& t) {
  std::string o;
  for (char c : t) o += c == '|' ? std::string("\\|") : std::string(1, c);
  return o;
}
}  // namespace

std::string metric_table_markdown() {
  std::ostringstream s;
  s << "# Metrics that criteria, `compare` and the reports name\n\n"
       "Generated from metrics/metric_table.cpp (`metric_table_markdown()`); tests/test_metrics_table.cpp keeps this\n"
       "file equal to it. Criteria in a suite's `[criteria]` table are `min_<name>`, `max_<name>` or\n"
       "`max_abs_<name>`; `porebench compare --metric <name>` tracks one. Each value is read from the\n"
       "block of the score record named below (`\"cell\"`: from the suite cell itself). Full definitions and\n"
       "the empty cases: metrics/README.md.\n\n"
       "| name | unit | better | 95 % CI in record | block | computed in | definition | source |\n"
       "|---|---|---|---|---|---|---|---|\n";
  for (const auto& m : metric_table())
    s << "| `" << m.name << "` | " << (m.unit[0] ? m.unit : "-") << " | " << better_name(m.better) << " | "
      << (m.has_ci() ? "`" + std::string(m.ci_key) + "`" : "no") << " | " << m.block << " | " << m.computed_in << " | "
      << cell(m.definition) << " | " << cell(m.source) << " |\n";
  return s.str();
}

}  // namespace pb
