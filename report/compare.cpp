// porebench compare (report/compare.hpp): the chosen cells of two runs matched by (dataset, scan,
// method), per tracked metric (names, directions, tolerances: metrics/metric_table.cpp) a delta and
// a verdict; a90/95 bounds judged by meaning; runs with nothing in common refused.
#include "report/compare.hpp"

#include <cmath>
#include <set>
#include <sstream>
#include <tuple>

#include "core/error.hpp"
#include "metrics/score.hpp"
#include "report/report.hpp"
#include "suites/results.hpp"
#include "suites/suite.hpp"

namespace pb::report {

namespace {

using Key = std::tuple<std::string, std::string, std::string>;

std::map<Key, const Json*> chosen_cells(const Json& results) {
  std::map<std::string, const Json*> by_id;
  for (const auto& c : results["cells"]) by_id[c["id"]] = &c;
  std::map<Key, const Json*> out;
  for (const auto& s : results["selections"]) out[{s["dataset"], s["scan"], s["method"]}] = by_id.at(s["chosen_cell"]);
  return out;
}

// Paired bootstrap of the mean difference of per-slice Jaccard, over slices defined on both sides.
std::pair<double, double> paired_bootstrap(const Json& base, const Json& cand, int samples, uint64_t seed) {
  std::vector<double> d;
  const Json& a = base["test"]["slices"]["jaccard"];
  const Json& b = cand["test"]["slices"]["jaccard"];
  for (size_t i = 0; i < std::min(a.size(), b.size()); ++i)
    if (a[i].is_number() && b[i].is_number()) d.push_back(b[i].get<double>() - a[i].get<double>());
  // The paired bootstrap of the mean difference is the bootstrap of the differences' mean.
  const auto ci = bootstrap_mean_ci(d, samples, seed);
  return {ci[1], ci[2]};
}

// "<=" when the cell's a90/95 is the all-hit bound, "" otherwise (and for other metrics).
std::string a90_95_relation(const Json& cell, const std::string& metric) {
  if (metric != "a90_95_um" || !cell.contains("test") || !cell["test"].contains("pod")) return "";
  return cell["test"]["pod"].value("a90_95_relation", "");
}

// base/cand bound: that side hit every target and its value is "<= smallest target size".
// - candidate bounded, base not: the candidate hits every target where the base missed some:
//   never a regression ("better: every target hit").
// - base bounded, candidate not: the candidate now misses targets; worse only when its a90/95
//   exceeds the base's bound by more than the tolerance.
// - both bounded: every target hit on both sides; the bounds are target sizes, not performance.
void judge_bound(MetricDelta& d, bool base_bound, bool cand_bound, double tol) {
  d.regression = false;
  if (base_bound && cand_bound) {
    d.verdict = "no difference (every target hit on both sides: a90/95 <= smallest target)";
  } else if (cand_bound) {
    std::ostringstream v;
    v.precision(4);
    v << "better (every target hit: a90/95 <= " << d.cand << " um)";
    d.verdict = v.str();
  } else if (std::isfinite(d.cand) && d.cand - d.base > tol) {
    d.verdict = "worse (targets now missed: a90/95 above the base's all-hit bound)";
    d.regression = true;
  } else if (std::isfinite(d.cand)) {
    d.verdict = "no difference (within the base's all-hit bound)";
  } else {
    d.verdict = "worse (every target was hit; now undefined)";
    d.regression = true;
  }
}

std::string num(double v, int digits = 4) {
  if (!std::isfinite(v)) return "n/a";
  std::ostringstream s;
  s.precision(digits);
  s << v;
  return s.str();
}

}  // namespace

CompareResult compare_runs(const Json& base, const Json& cand, const CompareOptions& o) {
  for (const auto& m : o.metrics) metric_info(m, "compare");
  // Runs of different suite files may still be compared (a model path changed): cells are matched by name.
  const auto a = chosen_cells(base), b = chosen_cells(cand);
  CompareResult r;
  for (const auto& [key, ca] : a) {
    auto it = b.find(key);
    if (it == b.end()) {
      r.unmatched.push_back(std::get<0>(key) + "/" + std::get<1>(key) + "/" + std::get<2>(key) + " (base only)");
      continue;
    }
    const Json* cb = it->second;
    for (const auto& metric : o.metrics) {
      MetricDelta d;
      std::tie(d.dataset, d.scan, d.method) = key;
      d.metric = metric;
      const Better better = find_metric(metric)->better;
      const bool higher_better = better == Better::higher;
      const bool magnitude = better == Better::toward_zero;
      d.base = suite::metric_value(*ca, "test", metric);
      d.cand = suite::metric_value(*cb, "test", metric);
      d.delta = magnitude ? std::abs(d.cand) - std::abs(d.base) : d.cand - d.base;
      d.ci_lo = d.ci_hi = NAN;
      if (metric == "slice_jaccard_mean") std::tie(d.ci_lo, d.ci_hi) = paired_bootstrap(*ca, *cb, o.bootstrap_samples, o.seed);
      const double tol = o.tolerance.count(metric) ? o.tolerance.at(metric) : 0.0;
      const double worse = higher_better ? -d.delta : d.delta;  // > 0: the candidate is worse
      const std::string rel_a = a90_95_relation(*ca, metric), rel_b = a90_95_relation(*cb, metric);
      if (rel_a == "<=" || rel_b == "<=") {
        // a90/95 as the bound "<= smallest target" (every target hit) is judged by its meaning.
        judge_bound(d, rel_a == "<=", rel_b == "<=", tol);
      } else if (!std::isfinite(d.delta)) {
        d.verdict = std::isfinite(d.base) != std::isfinite(d.cand) ? (std::isfinite(d.base) ? "worse (now undefined)" : "better (now defined)")
                                                                    : "undefined";
        d.regression = std::isfinite(d.base) && !std::isfinite(d.cand);
      } else if (std::isfinite(d.ci_lo)) {
        const bool ci_worse = higher_better ? d.ci_hi < 0 : d.ci_lo > 0;
        const bool ci_better = higher_better ? d.ci_lo > 0 : d.ci_hi < 0;
        d.verdict = ci_worse ? "worse" : ci_better ? "better" : "no difference";
        d.regression = ci_worse && worse > tol;
      } else {
        d.verdict = worse > tol ? "worse" : -worse > tol ? "better" : "no difference";
        d.regression = worse > tol;
      }
      r.any_regression = r.any_regression || d.regression;
      r.rows.push_back(d);
    }
  }
  for (const auto& [key, _] : b)
    if (!a.count(key)) r.unmatched.push_back(std::get<0>(key) + "/" + std::get<1>(key) + "/" + std::get<2>(key) + " (candidate only)");
  if (r.rows.empty()) {
    // Nothing in common: refuse rather than report "no regression" over zero rows.
    auto side = [](const std::map<Key, const Json*>& m) {
      std::set<std::string> ds, ms;
      for (const auto& [k, _] : m) ds.insert(std::get<0>(k) + "/" + std::get<1>(k)), ms.insert(std::get<2>(k));
      std::string t = "datasets/scans {";
      for (const auto& x : ds) t += (t.back() == '{' ? "" : ", ") + x;
      t += "}, methods {";
      for (const auto& x : ms) t += (t.back() == '{' ? "" : ", ") + x;
      return t + "}";
    };
    throw InputError("compare: the two runs have no (dataset, scan, method) in common, so nothing can be compared; base: " +
                     side(a) + "; candidate: " + side(b));
  }
  return r;
}

std::string compare_markdown(const CompareResult& r, const std::string& base_dir, const std::string& cand_dir,
                             const CompareOptions& o) {
  std::ostringstream md;
  md << "# porebench compare\n\nBase: `" << base_dir << "`  \nCandidate: `" << cand_dir << "`\n\n";
  md << "> " << kCaution << "\n\n";
  md << "Tolerances:";
  for (const auto& m : o.metrics) md << " " << m << " " << (o.tolerance.count(m) ? num(o.tolerance.at(m)) : "0") << ";";
  md << " slice Jaccard: paired bootstrap 95 % CI over test slices (" << o.bootstrap_samples << " resamples).\n\n";
  md << "| dataset | scan | method | metric | base | candidate | delta | 95 % CI | verdict |\n|---|---|---|---|---:|---:|---:|---|---|\n";
  for (const auto& d : r.rows)
    md << "| " << d.dataset << " | " << d.scan << " | " << d.method << " | " << d.metric << " | " << num(d.base) << " | "
       << num(d.cand) << " | " << num(d.delta) << " | "
       << (std::isfinite(d.ci_lo) ? num(d.ci_lo) + " – " + num(d.ci_hi) : "") << " | " << d.verdict
       << (d.regression ? " **REGRESSION**" : "") << " |\n";
  if (!r.unmatched.empty()) {
    md << "\nNot compared (present on one side only):\n\n";
    for (const auto& u : r.unmatched) md << "- " << u << "\n";
  }
  md << "\nVerdict: " << (r.any_regression ? "at least one tracked metric regresses beyond its tolerance." : "no tracked metric regresses beyond its tolerance.") << "\n";
  return md.str();
}

}  // namespace pb::report
