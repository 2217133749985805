#pragma once
// A suite: a declared trial of methods on datasets, in a TOML format of our own (annotated example:
// suites/example.toml). Parsing validates everything before any work: unknown keys are rejected
// with the closest valid key, errors name the file, line and column; method names and every
// parameter set of every grid are checked against the registry.
#include <array>
#include <map>
#include <optional>
#include <string>
#include <vector>

#include "core/io.hpp"
#include "metrics/score.hpp"

namespace pb::suite {

// Parameters of one method entry; a key with a list of values is a grid axis (cartesian product).
struct ParamGrid {
  std::vector<std::pair<std::string, std::vector<std::string>>> axes;  // in key name order
  size_t size() const;
  std::vector<std::string> point(size_t i) const;  // "key=value" settings of grid point i (last key fastest)
  bool tuned() const { return size() > 1; }        // calibrated on held-out slices
};

struct MethodSpec {
  std::string label;  // unique in the suite; defaults to the method name
  std::string name;   // registry name or composition, e.g. "median+otsu"
  ParamGrid grid;
};

// A file of a paired dataset with its own geometry: a path, or { path, spacing_mm, raw = {...} }
// (suites/pairs.hpp parse_file_entry). `where` names it in messages: "suite F:LINE:COL: field".
struct FileSpec {
  std::string path;
  ReadOptions read;
  std::string where;
};

// One fast scan of a paired dataset's series (suites/paired.hpp).
struct PairedScanSpec {
  std::string label;  // unique in the dataset; default "scan-<N>p" from projections
  FileSpec file;
  int projections = 0;  // for series plots and the scan-recipe advice
  double i0 = 0;        // exposure or dose, in the user's unit (optional)
  std::string i0_unit;  // that unit as the suite file names it ("mAs", "s"), for the series axis (optional)
  std::string align;    // auto, markers, intensity, none
  std::string transform;  // a known transform (T.json of `porebench align`, fast mm -> reference mm) instead of registering
};

// One rater of a consensus reference: a method with one parameter set, run on the reference scan.
struct RaterSpec {
  std::string label;  // unique among the raters; defaults to the method name
  std::string name;   // registry name or composition
  std::vector<std::string> params;  // "key=value"
};

struct DatasetSpec {
  std::string name;
  enum Kind { synthetic, paired } kind = synthetic;
  // synthetic: a preset or a recipe file, plus recipe overrides ("key=value")
  std::string preset, recipe;
  std::vector<std::string> overrides;
  // paired: a scan and either a reference mask or a reference scan segmented by a method
  std::string scan, reference_mask, reference_scan, reference_method, part_mask;
  std::vector<std::string> reference_params;
  int projections = 0, reference_projections = 0;  // optional, for scan-recipe advice
  ReadOptions read;                                 // raw geometry / spacing for the paired files
  int reference_label = -1;                         // label value of pores in the reference mask (-1: non-zero)
  // paired, as parsed by suites/paired.cpp: the reference file, the part mask (on the reference's
  // grid) and the series of fast scans (a single `scan` is a series of one, label "scan").
  FileSpec reference_file, part_file;
  std::vector<PairedScanSpec> scans;
  // paired: a STAPLE consensus of these raters on the reference scan as the reference (instead of
  // reference_method; suites/paired.hpp).
  std::vector<RaterSpec> reference_consensus;
  // paired: how the reference comes onto a fast scan's grid when the grids or poses differ: "grey"
  // (the reference scan resampled linearly, its method re-applied at the threshold it chose; the
  // default where the method reports one) or "mask" (its pores resampled by nearest neighbour).
  std::string reference_resample = "grey";
};

struct Calibration {
  std::string objective = "jaccard";  // a maximised metric: jaccard, dice, recall, precision
  double fraction = 0.4;              // share of the part's slices (from the bottom) used to tune
  int gap_slices = 4;                 // slices left out between the calibration and test parts
};

struct Scoring {
  std::string match = "coverage:0.5";  // validated by parse_suite (parse_match_rule)
  int connectivity = 26;
  int bins_per_decade = 10;
  int bootstrap_samples = 1000;
  double max_volume_ratio = ScoreOptions{}.max_volume_ratio;  // hit-rule cap (metrics/README.md, Matching)
  // The scoring options of a cell (z-range left to the caller).
  ScoreOptions options() const;
};

// One acceptance criterion: metric op value, op one of >= (min_), <= (max_), |x| <= (max_abs_).
struct Criterion {
  std::string key;     // as written, e.g. "max_abs_porosity_bias_pp"
  std::string metric;  // e.g. "porosity_bias_pp"
  enum Op { at_least, at_most, abs_at_most } op = at_least;
  double value = 0;
  // What is judged: the point value, or its 95 % CI bound (the lower bound for min_, the upper for
  // max_, the larger |bound| for max_abs_) from the record's interval (MetricInfo::ci_key).
  enum On { on_value, on_ci } on = on_value;
  std::string on_note;          // why `on` is what it is when it differs from what was asked, else ""
  bool passes(double x) const;  // NaN never passes
  std::string text() const;     // "jaccard >= 0.7", "jaccard >= 0.7 (95 % CI bound)"
};

struct Suite {
  std::string path, name, description;
  // [suite] validation = true: criteria are judged on their CI bound unless they say on = "value".
  bool validation = false;
  std::string text_sha256;  // of the suite file as read
  std::vector<DatasetSpec> datasets;
  std::vector<MethodSpec> methods;
  Calibration calibration;
  Scoring scoring;
  std::vector<Criterion> criteria;
};

Suite parse_suite(const std::string& toml_text, const std::string& path);
Suite load_suite(const std::string& path);  // relative file paths resolve against the suite's folder

}  // namespace pb::suite
