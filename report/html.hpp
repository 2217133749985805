#pragma once
// Pieces of report.html that tests check on their own (report/html.cpp).
#include <string>
#include <utility>
#include <vector>

#include "report/report.hpp"

namespace pb::report {

// The fitted POD at a size and its pointwise 95 % band: the interval of the linear predictor
// eta = b0 + b1 ln a, var(eta) = c00 + 2 ln(a) c01 + ln(a)^2 c11 (delta method), mapped through the
// inverse link ("logit" or "probit"). NaN where the variance is negative or a value is missing.
struct PodBandPoint {
  double pod, lo, hi;
};
PodBandPoint pod_band_at(const std::string& link, double b0, double b1, double c00, double c01, double c11, double size_um);

// Pareto-optimal points for minimum runtime and maximum quality (no other point is at least as
// fast and at least as good, and better in one): indices in order of runtime. Points with a
// missing value are never on the front.
std::vector<size_t> pareto_front(const std::vector<std::pair<double, double>>& runtime_quality);

// report.html and montages/<dataset>__<scan>.png into out_dir (called by write_documents).
void write_html_and_montages(const Json& results, const std::string& out_dir);

}  // namespace pb::report
