#pragma once
// Paired datasets of a suite: real scans of one part. One reference (a high-quality scan that a
// named method segments ONCE per dataset, or a reference mask) and a series of fast scans, each a
// file entry with its own geometry (suites/pairs.hpp), its label, projection count and exposure:
//
//   [[dataset]]
//   name = "blank-0042"
//   kind = "paired"
//   reference_scan = { path = "ref-1200p.tif", spacing_mm = [0.01, 0.01, 0.01] }  # or a path
//   reference_method = "median+otsu"
//   reference_projections = 1200
//   part_mask = "part.mha"          # optional, on the reference's grid (carried along with it)
//   align = "auto"                  # auto | markers | intensity | none (default: auto with a
//                                   # reference scan, none with a reference mask)
//   scans = [ { path = "fast-400p.mha", projections = 400, i0 = 2.5, i0_unit = "mAs" },
//             { path = "fast-200p.raw", projections = 200, label = "200p-raw", align = "intensity",
//               spacing_mm = [0.0104, 0.0104, 0.0104], raw = { dims = [96, 96, 96], type = "uint16" } } ]
//
// A consensus reference instead of one method (against the bias of a reference made by the
// method under trial): `reference_consensus` lists two or more raters, each in the form of a
// [[method]] entry with one parameter set (a name, or { name, label, params }), each run on the
// reference scan; STAPLE (Warfield, Zou & Wells 2004, metrics/staple.hpp) combines them, W >= 0.5
// is the reference. Each rater's STAPLE sensitivity and specificity and the iterations go into the
// record; the rankings mark every rater's method "reference rater". Exclusive with
// reference_method/reference_params and reference_mask.
//   reference_consensus = [ "otsu", { name = "sauvola", params = { window = 31, k = 0.2 } },
//                           { name = "median+otsu", label = "otsu-median", params = { "median.radius" = 1 } } ]
//
// reference_resample = "grey" (default) | "mask": when a fast scan's grid or pose differs, the
// reference scan is resampled linearly onto it and the reference made again there: a method with
// one threshold re-applied at the threshold it chose on the reference scan (pre-filters and pore
// options as they were), any other method (local thresholds, region growing) re-run with its
// parameters, a consensus by making each rater so and fusing them by STAPLE's rule fitted on the
// reference grid (metrics/staple.hpp staple_fuse). "mask" resamples the reference pores by nearest
// neighbour, as a reference mask and a predictions method always are. The record says which.
//
// The older form (one `scan`, `projections`, and `raw`/`spacing_mm` for the scan and the reference
// scan) still parses: a series of one scan labelled "scan".
// Each fast scan becomes cells like a synthetic scan: the reference pores (and the part mask) are
// registered onto the scan and resampled on its grid (align_reference), and its slices are split
// there. The alignment record (transform, residuals, method, or the shift check) goes into the
// dataset's record (suite.json, results.json, validation record); a registration that fails makes
// that scan's cells fail with the reason (reported, never scored).
#include <functional>
#include <string>
#include <toml++/toml.h>

#include "suites/datasets.hpp"
#include "suites/suite.hpp"

namespace pb::suite {

// Reports a bad value at a place in the suite file; must throw (suite.cpp's Reader::fail).
using FailAt = std::function<void(const toml::source_region&, const std::string&)>;

// Fills the paired fields of `d` from its [[dataset]] table. Files are not opened (the preflight
// does): a suite parses before the files are made. `where` is "[[dataset]] 'NAME'".
void parse_paired_dataset(const toml::table& t, const std::string& base_dir, const std::string& where,
                          const FailAt& fail, DatasetSpec& d);

// Every file of a paired dataset: present, readable, headers and data sizes sound, float scans
// finite, and no conflicting geometry ('raw' for a file whose header states its geometry,
// 'spacing_mm' contradicting the header, a part mask or reference mask off the reference grid).
// Throws InputError naming the field (e.g. "scans[2] (200p)"), the file and the values.
void preflight_paired(const DatasetSpec& d);

// The variants (one per fast scan) and the files their cells will read; writes nothing.
void describe_paired(const DatasetSpec& d, Dataset& p);

// Loads and segments the reference once, registers and resamples it onto every fast scan, splits
// each scan's slices, draws the montage backgrounds and fills the record.
void prepare_paired(Dataset& p, const Calibration& c, const std::string& out_dir, const LogFn& log);

}  // namespace pb::suite
