#pragma once
// Suite side of the predictions method (methods/predictions.hpp): its `file` parameter is a path
// template with {dataset} and {scan} (the dataset name and the scan name of the cell, e.g.
// "scan-400p"), relative to the suite file. The runner fills it per cell; the preflight checks
// every file the suite will read before any cell runs.
#include <string>
#include <vector>

#include "suites/suite.hpp"

namespace pb::suite {

// The "key=value" settings of grid point `g` of method `m` for a cell of `dataset`/`scan`: for a
// predictions method, file's {dataset} and {scan} filled and a relative path resolved against the
// folder of `suite_path`; other methods' settings as they are.
std::vector<std::string> cell_settings(const MethodSpec& m, size_t g, const std::string& dataset,
                                       const std::string& scan, const std::string& suite_path);

// Every prediction file of every predictions entry, dataset scan and grid point: present and
// readable, sound (read_volume's header, size and memory checks), the scan's geometry where it is
// known before the run (paired scans: their header; synthetic scans: the recipe's grid, unless
// posed), and values fit for the kind (probability in [0, 1]; the pore label present); a runtime
// sidecar, when present, valid. InputError naming the method entry, the dataset, the file.
void preflight_predictions(const Suite& s);

}  // namespace pb::suite
