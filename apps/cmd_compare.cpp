// porebench compare BASE_DIR CAND_DIR: the regression gate for model and method updates.
#include <fstream>
#include <iostream>
#include <memory>

#include "apps/cli.hpp"
#include "core/error.hpp"
#include "metrics/metric_table.hpp"
#include "report/compare.hpp"
#include "suites/suite.hpp"

namespace pb::cli {
namespace {

Action setup_compare(CLI::App& app) {
  app.description("compare two runs of a suite: deltas with paired bootstrap CIs, exit 1 on a regression");
  struct Args {
    std::string base, cand, out;
    std::vector<std::string> metrics, tolerances;
  };
  auto a = std::make_shared<Args>();
  app.add_option("BASE_DIR", a->base, "run folder of the base (e.g. the released model)")->required();
  app.add_option("CAND_DIR", a->cand, "run folder of the candidate")->required();
  app.add_option("--metric", a->metrics, "metric to track (repeatable; names and defaults: metrics/METRICS.md)");
  app.add_option("--tolerance", a->tolerances, "METRIC=VALUE: how much worse is still no regression (repeatable)");
  app.add_option("-o,--output", a->out, "also write the Markdown to this file");
  return [a] {
    report::CompareOptions o;
    for (const auto& m : a->metrics) metric_info(m, "--metric");
    if (!a->metrics.empty()) o.metrics = a->metrics;
    for (const auto& t : a->tolerances) {
      const auto eq = t.find('=');
      char* end = nullptr;
      const double v = eq == std::string::npos ? 0 : std::strtod(t.c_str() + eq + 1, &end);
      if (eq == std::string::npos || end == t.c_str() + eq + 1 || *end || !(v >= 0))
        throw InputError("--tolerance must be METRIC=VALUE with VALUE >= 0, got '" + t + "'");
      const std::string m = t.substr(0, eq);
      metric_info(m, "--tolerance");
      o.tolerance[m] = v;
    }
    if (!a->out.empty()) check_writable(a->out);
    const auto base = load_results(a->base), cand = load_results(a->cand);
    const auto r = reading_records(a->base + "/results.json or " + a->cand + "/results.json",
                                   [&] { return report::compare_runs(base, cand, o); });
    const std::string md = report::compare_markdown(r, a->base, a->cand, o);
    std::cout << md;
    if (!a->out.empty()) write_text_atomic(a->out, md);
    return r.any_regression ? int(kExitCriteria) : 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("compare", 7, setup_compare);

}  // namespace pb::cli
