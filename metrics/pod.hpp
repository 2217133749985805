#pragma once
// Probability of detection from hit/miss data: POD(a) = F(b0 + b1 ln a), F = logistic (logit link)
// or standard normal (probit), fitted by maximum likelihood with Newton/IRLS, as in
// MIL-HDBK-1823A (2009) "Nondestructive Evaluation System Reliability Assessment", ch. 4 (hit/miss)
// and ASTM E2862-18. a90 = size with POD 0.9; a90/95 = upper end of the one-sided 95 % interval
// for a90 from the profile likelihood (deviance rise chi2_1(0.90) = 2.706); the delta-method
// (Wald) bound is given too and labelled so. Binned POD uses Clopper & Pearson (1934) intervals.
#include <cstdint>
#include <limits>
#include <string>
#include <utility>
#include <vector>

namespace pb {

inline constexpr double kMetricNaN = std::numeric_limits<double>::quiet_NaN();

enum class PodLink { logit, probit };
const char* pod_link_name(PodLink l);
PodLink parse_pod_link(const std::string& s);  // "logit" | "probit", else InputError

struct PodFit {
  PodLink link = PodLink::logit;
  int64_t n_targets = 0, n_hits = 0;
  bool estimable = false;   // false: all values below are NaN and `reason` says why
  std::string reason;       // empty when estimable
  bool converged = false;
  int iterations = 0;
  double b0 = kMetricNaN, b1 = kMetricNaN;
  double cov00 = kMetricNaN, cov01 = kMetricNaN, cov11 = kMetricNaN;  // of (b0, b1)
  double deviance = kMetricNaN;     // -2 log-likelihood at the maximum
  double a50_um = kMetricNaN, a90_um = kMetricNaN;
  double a90_95_um = kMetricNaN;       // profile likelihood; NaN with `a90_95_reason` if unbounded
  std::string a90_95_reason;
  double a90_95_wald_um = kMetricNaN;  // delta method on ln a90
  // Every target hit: no fit exists, and a90/95 is reported as a bound, a90_95_um <= the smallest
  // target size (a90_95_is_bound, a90_95_reason says so); there are no data below that size.
  bool a90_95_is_bound = false;
  double smallest_target_um = kMetricNaN, largest_target_um = kMetricNaN;
  // a90 / a90/95 below the smallest target: the fit is extrapolated there.
  bool a90_extrapolated = false, a90_95_extrapolated = false;
  // The one POD band: the fit and its one-sided 95 % lower likelihood-ratio bound at log-spaced
  // sizes (same construction as a90/95: its crossing of 0.9 is a90/95), ascending in size, with
  // a90/95 itself among the sizes when it is finite (so that a polyline through the band crosses
  // 0.9 exactly there, not at an interpolation between neighbours). Empty when not estimable.
  struct BandPoint {
    double size_um, pod, lo;
  };
  std::vector<BandPoint> band;
  std::vector<std::string> warnings;   // e.g. fewer than 60 targets
};

// sizes_um > 0 (target sizes), hit = 0/1. Throws InputError on a size <= 0 or length mismatch.
PodFit fit_pod(const std::vector<double>& sizes_um, const std::vector<int>& hit, PodLink link = PodLink::logit);

// Size with POD p under a fit (NaN when not estimable).
double pod_size_at(const PodFit& f, double p);

// The one-sided 95 % lower likelihood-ratio bound of POD at size_um: the smallest POD over the
// parameters whose deviance exceeds the minimum by at most chi2_1(0.90) = 2.706 (profile
// likelihood of eta = b0 + b1 ln a at that size; Venzon & Moolgavkar 1988). Needs the data the fit
// was made from; NaN when the fit is not estimable. fit_pod fills PodFit::band with it.
double pod_lower_bound_at(const PodFit& f, const std::vector<double>& sizes_um, const std::vector<int>& hit, double size_um);

// POD(a) = F(b0 + b1 ln a) of a fit's coefficients (F = logistic or the standard normal CDF); NaN
// for a size that is not positive.
double pod_curve(PodLink link, double b0, double b1, double size_um);

struct PodBin {
  double lo_um = 0, hi_um = 0;  // [lo, hi)
  int64_t n = 0, hits = 0;
  double pod = 0, ci_lo = 0, ci_hi = 0;  // NaN when n = 0
};
// Two-sided Clopper-Pearson interval for k successes in n trials at confidence `conf`.
std::pair<double, double> clopper_pearson(int64_t k, int64_t n, double conf = 0.95);
std::vector<PodBin> binned_pod(const std::vector<double>& sizes_um, const std::vector<int>& hit,
                               const std::vector<double>& edges_um, double conf = 0.95);

}  // namespace pb
