#pragma once
// The probability-map part of report.html (metrics/probability.hpp): for each scan of a dataset
// whose chosen cells carry a probability map, a table (average precision, Brier score, ECE), the
// threshold curve (test-slice Jaccard at t = 0.05..0.95, each method's chosen threshold marked)
// and a reliability diagram (fraction positive against mean probability per bin, the diagonal
// being perfect calibration). Empty when no chosen cell of the dataset has a probability map.
#include <string>

#include "report/report.hpp"

namespace pb::report {

std::string probability_section_html(const Json& results, const Json& dataset);

}  // namespace pb::report
