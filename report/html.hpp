#pragma once
// Pieces of report.html that tests check on their own (report/html.cpp).
#include <map>
#include <string>
#include <utility>
#include <vector>

#include "report/report.hpp"

namespace pb::report {

// Pareto-optimal points for minimum runtime and maximum quality (no other point is at least as
// fast and at least as good, and better in one): indices in order of runtime. Points with a
// missing value are never on the front.
std::vector<size_t> pareto_front(const std::vector<std::pair<double, double>>& runtime_quality);

// Each method label's colour (hex) in the plots: from the method's place in the registry, so a
// method keeps its colour between reports (unless two methods of one report want one colour).
std::map<std::string, std::string> method_colours(const Json& results);

// report.html and montages/<dataset>__<scan>.png into out_dir (the HTML reporter, reporter.cpp).
void write_html_and_montages(const Json& results, const std::string& out_dir);

}  // namespace pb::report
