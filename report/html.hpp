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

// The POD panel of one selected cell (a results.json cell; nullptr: missing) as one <svg>: the
// fit, the one-sided 95 % lower likelihood-ratio band of the cell's pod.band (data-series
// "pod-band", lower edge "pod-band-lower"), binned POD, the POD 0.9 line ("pod-0.9"), the smallest
// reference pore ("smallest-target"), a90 ("a90") and a90/95 ("a90_95"), extrapolated values and
// the all-hit bound named so in the legend and the note. `id` must be unique in the page.
std::string pod_panel_svg(const std::string& id, const std::string& method, const std::string& colour, const Json* cell);

// report.html and montages/<dataset>__<scan>.png into out_dir (the HTML reporter, reporter.cpp).
void write_html_and_montages(const Json& results, const std::string& out_dir);

}  // namespace pb::report
