#pragma once
// Pieces of report.html that tests check on their own (report/html.cpp).
#include <string>
#include <utility>
#include <vector>

#include "report/report.hpp"

namespace pb::report {

// Pareto-optimal points for minimum runtime and maximum quality (no other point is at least as
// fast and at least as good, and better in one): indices in order of runtime. Points with a
// missing value are never on the front.
std::vector<size_t> pareto_front(const std::vector<std::pair<double, double>>& runtime_quality);

// report.html and montages/<dataset>__<scan>.png into out_dir (the HTML reporter, reporter.cpp).
void write_html_and_montages(const Json& results, const std::string& out_dir);

}  // namespace pb::report
