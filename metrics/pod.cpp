// Hit/miss probability of detection (MIL-HDBK-1823A 2009, ch. 4; ASTM E2862-18): maximum
// likelihood fit of POD(a) = F(b0 + b1 ln a) by Newton's method with step halving (for the logit
// link Newton is IRLS), covariance = inverse observed information, a90/95 from the profile
// likelihood of ln a90 (Venzon & Moolgavkar 1988, Appl. Stat. 37:87, solved here by bracketing and
// Alefeld, Potra & Shi's TOMS 748 root finder, Boost.Math), Wald bound by the delta method, Clopper &
// Pearson (1934) binned intervals.
#include "metrics/pod.hpp"

#include <Eigen/Dense>
#include <algorithm>
#include <boost/math/distributions/chi_squared.hpp>
#include <boost/math/distributions/normal.hpp>
#include <boost/math/special_functions/beta.hpp>
#include <boost/math/tools/toms748_solve.hpp>
#include <cmath>

#include "core/error.hpp"

namespace pb {

const char* pod_link_name(PodLink l) { return l == PodLink::logit ? "logit" : "probit"; }

PodLink parse_pod_link(const std::string& s) {
  if (s == "logit") return PodLink::logit;
  if (s == "probit") return PodLink::probit;
  throw InputError("pod link: '" + s + "' is not supported; use logit or probit");
}

namespace {

// Per observation: log-likelihood, first and second derivative with respect to eta.
struct Terms {
  double ll, d1, d2;
};

// Logit: ll = y eta - log(1 + e^eta), computed stably (e^-eta computed once where both use it);
// p = 1 / (1 + e^-eta). The same for both outcomes at one eta.
struct LogitParts {
  double log1pexp, p;
  Terms terms(int y, double eta) const { return {y * eta - log1pexp, y - p, -p * (1 - p)}; }
};
inline LogitParts logit_parts(double eta) {
  const double em = eta > 0 ? std::exp(-eta) : 0;
  return {eta > 0 ? eta + std::log1p(em) : std::log1p(std::exp(eta)), 1 / (1 + (eta > 0 ? em : std::exp(-eta)))};
}

inline Terms obs_terms(PodLink link, int y, double eta) {
  if (link == PodLink::logit) return logit_parts(eta).terms(y, eta);
  // probit: ll = log Phi(q eta), q = 2y - 1; lambda = q phi(q eta) / Phi(q eta).
  const double q = y ? 1.0 : -1.0, u = q * eta;
  double logPhi, g;  // g = phi(u) / Phi(u)
  if (u > -30) {
    const double Phi = 0.5 * std::erfc(-u / std::sqrt(2.0));
    logPhi = std::log(Phi);
    g = std::exp(-0.5 * u * u) / std::sqrt(2 * M_PI) / Phi;
  } else {  // Mills-ratio asymptotics (Abramowitz & Stegun 26.2.12)
    logPhi = -0.5 * u * u - std::log(-u) - 0.5 * std::log(2 * M_PI);
    g = -u - 1 / u;
  }
  const double lambda = q * g;
  return {logPhi, lambda, -lambda * (lambda + eta)};
}

// Targets grouped by size: the likelihood depends on each distinct ln(size) only through its hit
// and miss counts (voxelised pores share sizes, so thousands of targets make a few hundred groups).
struct Groups {
  std::vector<double> x, hits, misses;  // ascending x
};

Groups group_targets(const std::vector<double>& x, const std::vector<int>& y) {
  std::vector<size_t> order(x.size());
  for (size_t i = 0; i < order.size(); ++i) order[i] = i;
  std::sort(order.begin(), order.end(), [&](size_t a, size_t b) { return x[a] < x[b]; });
  Groups g;
  for (size_t i : order) {
    if (g.x.empty() || g.x.back() != x[i]) g.x.push_back(x[i]), g.hits.push_back(0), g.misses.push_back(0);
    (y[i] ? g.hits : g.misses).back() += 1;
  }
  return g;
}

// Sum of obs_terms over group i at eta. Logit hits and misses share log(1 + e^eta) and p: computed
// once, in the operations of obs_terms.
inline Terms group_terms(PodLink link, const Groups& g, size_t i, double eta) {
  Terms t{0, 0, 0};
  if (link == PodLink::logit && g.hits[i] > 0 && g.misses[i] > 0) {
    const LogitParts lp = logit_parts(eta);
    const Terms h = lp.terms(1, eta), m = lp.terms(0, eta);
    t.ll += g.hits[i] * h.ll, t.d1 += g.hits[i] * h.d1, t.d2 += g.hits[i] * h.d2;
    t.ll += g.misses[i] * m.ll, t.d1 += g.misses[i] * m.d1, t.d2 += g.misses[i] * m.d2;
    return t;
  }
  if (g.hits[i] > 0) {
    const Terms h = obs_terms(link, 1, eta);
    t.ll += g.hits[i] * h.ll, t.d1 += g.hits[i] * h.d1, t.d2 += g.hits[i] * h.d2;
  }
  if (g.misses[i] > 0) {
    const Terms m = obs_terms(link, 0, eta);
    t.ll += g.misses[i] * m.ll, t.d1 += g.misses[i] * m.d1, t.d2 += g.misses[i] * m.d2;
  }
  return t;
}

struct Eval {
  double ll = 0;
  Eigen::Vector2d grad = Eigen::Vector2d::Zero();
  Eigen::Matrix2d hess = Eigen::Matrix2d::Zero();
};

Eval evaluate(PodLink link, const Groups& g, double b0, double b1) {
  Eval e;
  const std::vector<double>& x = g.x;
  for (size_t i = 0; i < x.size(); ++i) {
    const Terms t = group_terms(link, g, i, b0 + b1 * x[i]);
    e.ll += t.ll;
    e.grad += t.d1 * Eigen::Vector2d(1, x[i]);
    e.hess(0, 0) += t.d2;
    e.hess(0, 1) += t.d2 * x[i];
    e.hess(1, 1) += t.d2 * x[i] * x[i];
  }
  e.hess(1, 0) = e.hess(0, 1);
  return e;
}

// Profile: for fixed theta = ln a90, eta = g90 + b1 (x - theta); maximise over b1 by 1D Newton.
// Each evaluation gives the log-likelihood and both derivatives, so the accepted trial point's
// evaluation serves the next step (evaluating it again gave the same bits at twice the cost).
double profile_ll(PodLink link, const Groups& g, double g90, double theta, double& b1) {
  auto ll_at = [&](double b, double& d1, double& d2) {
    double ll = 0, a = 0, c = 0;
    for (size_t i = 0; i < g.x.size(); ++i) {
      const double z = g.x[i] - theta;
      const Terms t = group_terms(link, g, i, g90 + b * z);
      ll += t.ll, a += t.d1 * z, c += t.d2 * z * z;
    }
    d1 = a, d2 = c;
    return ll;
  };
  double d1, d2, ll = ll_at(b1, d1, d2);
  for (int it = 0; it < 100; ++it) {
    if (!(d2 < 0)) break;
    double step = -d1 / d2, nd1, nd2;
    double nb = b1 + step, nll = ll_at(nb, nd1, nd2);
    for (int h = 0; h < 40 && !(nll >= ll - 1e-12); ++h) step *= 0.5, nb = b1 + step, nll = ll_at(nb, nd1, nd2);
    const bool done = std::fabs(step) < 1e-10 * (1 + std::fabs(b1));
    b1 = nb;
    ll = nll, d1 = nd1, d2 = nd2;
    if (done) break;
  }
  return ll;
}

double inverse_link(PodLink link, double eta) {
  return link == PodLink::probit ? 0.5 * std::erfc(-eta / std::sqrt(2.0)) : 1.0 / (1.0 + std::exp(-eta));
}

double link_quantile(PodLink link, double p) {
  if (link == PodLink::logit) return std::log(p / (1 - p));
  return boost::math::quantile(boost::math::normal(), p);
}

}  // namespace

double pod_curve(PodLink link, double b0, double b1, double size_um) {
  if (!(size_um > 0)) return kMetricNaN;
  return inverse_link(link, b0 + b1 * std::log(size_um));
}

double pod_size_at(const PodFit& f, double p) {
  if (!f.estimable || !(f.b1 > 0)) return kMetricNaN;
  return std::exp((link_quantile(f.link, p) - f.b0) / f.b1);
}

namespace {

const double kChi2_90 = boost::math::quantile(boost::math::chi_squared(1.0), 0.90);  // 2.7055

// Phase 1: check the targets, take logs, count hits, note the size range.
void prepare_targets(const std::vector<double>& sizes_um, const std::vector<int>& hit, PodFit& f, std::vector<double>& x,
                     std::vector<int>& y) {
  if (sizes_um.size() != hit.size())
    throw InputError("pod: " + std::to_string(sizes_um.size()) + " sizes but " + std::to_string(hit.size()) +
                     " hit/miss values");
  f.n_targets = int64_t(sizes_um.size());
  for (size_t i = 0; i < sizes_um.size(); ++i) {
    if (!(sizes_um[i] > 0) || !std::isfinite(sizes_um[i]))
      throw InputError("pod: target " + std::to_string(i) + " has size " + std::to_string(sizes_um[i]) +
                       " um; sizes must be positive");
    x.push_back(std::log(sizes_um[i]));
    y.push_back(hit[i] ? 1 : 0);
    f.n_hits += y.back();
  }
  if (!sizes_um.empty()) {
    f.smallest_target_um = *std::min_element(sizes_um.begin(), sizes_um.end());
    f.largest_target_um = *std::max_element(sizes_um.begin(), sizes_um.end());
  }
  if (f.n_targets < 60)
    f.warnings.push_back(std::to_string(f.n_targets) +
                         " targets: MIL-HDBK-1823A recommends at least 60 for a hit/miss POD");
}

// Phase 2: the cases without a maximum-likelihood estimate; empty when a fit exists.
std::string degenerate_reason(const PodFit& f, const std::vector<double>& x, const std::vector<int>& y) {
  if (f.n_targets == 0) return "no targets";
  if (f.n_hits == 0) return "all targets missed";
  if (f.n_hits == f.n_targets) return "all targets hit";
  double min_hit = INFINITY, max_hit = -INFINITY, min_miss = INFINITY, max_miss = -INFINITY;
  for (size_t i = 0; i < x.size(); ++i) {
    if (y[i])
      min_hit = std::min(min_hit, x[i]), max_hit = std::max(max_hit, x[i]);
    else
      min_miss = std::min(min_miss, x[i]), max_miss = std::max(max_miss, x[i]);
  }
  if (std::min(min_hit, min_miss) == std::max(max_hit, max_miss))
    return "all targets have the same size: no size dependence can be fitted";
  if (max_miss <= min_hit || max_hit <= min_miss)
    return "hits and misses are separated by size (complete or quasi-complete separation): "
           "no maximum-likelihood estimate exists";
  return "";
}

// Phase 3: Newton with step halving from b = (link quantile of the hit rate, 0). Fills b0, b1,
// covariance, deviance; returns the maximum log-likelihood (NaN with `reason` set on failure).
double newton_fit(PodLink link, const Groups& groups, PodFit& f) {
  const double rate = double(f.n_hits) / double(f.n_targets);
  Eigen::Vector2d b(link_quantile(link, rate), 0);
  Eval e = evaluate(link, groups, b[0], b[1]);
  for (f.iterations = 1; f.iterations <= 100; ++f.iterations) {
    const Eigen::Matrix2d negH = -e.hess;
    Eigen::Vector2d step = negH.ldlt().solve(e.grad);
    if (!step.allFinite()) break;
    Eigen::Vector2d nb = b + step;
    Eval ne = evaluate(link, groups, nb[0], nb[1]);
    for (int h = 0; h < 40 && !(ne.ll >= e.ll - 1e-12); ++h) step *= 0.5, nb = b + step, ne = evaluate(link, groups, nb[0], nb[1]);
    b = nb;
    e = ne;
    if (step.cwiseAbs().maxCoeff() < 1e-10 * (1 + b.cwiseAbs().maxCoeff())) {
      f.converged = true;
      break;
    }
  }
  if (!f.converged) return f.reason = "Newton iterations did not converge in 100 steps", kMetricNaN;
  const Eigen::Matrix2d cov = (-e.hess).inverse();
  if (!cov.allFinite() || cov(0, 0) <= 0 || cov(1, 1) <= 0)
    return f.converged = false, f.reason = "information matrix is singular", kMetricNaN;
  f.estimable = true;
  f.b0 = b[0], f.b1 = b[1];
  f.cov00 = cov(0, 0), f.cov01 = cov(0, 1), f.cov11 = cov(1, 1);
  f.deviance = -2 * e.ll;
  return e.ll;
}

// Where the profile deviance rise crosses chi2_1(0.90) between `in` (rise_in <= the bound, the
// side of the fit) and `out` (rise_out above it): TOMS 748 (Alefeld, Potra & Shi 1995, ACM TOMS
// 21:327, from memory; Boost.Math's toms748_solve) to a bracket of 1e-10 (1 + |x|), at most 60 steps, the
// midpoint of the last bracket. Over the quick suite's 1,614 searches it took 14,547 profile fits,
// brackets included, where bisection to the same width took 57,190. A rise that is not a number
// counts as within the bound, as bisection had it.
template <class Rise>
double crossing(Rise& rise, double in, double rise_in, double out, double rise_out) {
  auto excess = [](double r) { return std::isnan(r) ? -kChi2_90 : r - kChi2_90; };
  auto f = [&](double t) { return excess(rise(t)); };
  const auto close = [](double a, double b) { return std::fabs(b - a) <= 1e-10 * (1 + std::max(std::fabs(a), std::fabs(b))); };
  const double a = std::min(in, out), b = std::max(in, out);
  const double fin = excess(rise_in), fout = excess(rise_out);
  boost::uintmax_t steps = 60;
  const auto r = boost::math::tools::toms748_solve(f, a, b, in < out ? fin : fout, in < out ? fout : fin, close, steps);
  return 0.5 * (r.first + r.second);
}

// Phase 4: a90/95, the largest theta = ln a > ln a90 whose profile deviance rise stays within
// chi2_1(0.90), by bracketing and crossing(); the Wald bound beside it.
void a90_95_bound(PodLink link, const Groups& groups, const std::vector<double>& x, double llmax, PodFit& f) {
  const double g90 = link_quantile(link, 0.9);
  const double theta = (g90 - f.b0) / f.b1;
  const Eigen::Matrix2d cov{{f.cov00, f.cov01}, {f.cov01, f.cov11}};
  const Eigen::Vector2d grad(-1 / f.b1, -theta / f.b1);
  const double var = grad.dot(cov * grad);
  f.a90_95_wald_um = std::exp(theta + boost::math::quantile(boost::math::normal(), 0.95) * std::sqrt(var));
  double b1 = f.b1;
  auto rise = [&](double t) { return 2 * (llmax - profile_ll(link, groups, g90, t, b1)); };
  const double xmax = *std::max_element(x.begin(), x.end()), xmin = *std::min_element(x.begin(), x.end());
  const double span = std::max(xmax - xmin, 1e-3);
  double lo = theta, hi = theta, step = 0.02 * span;
  double rise_lo = 0, rise_hi = 0;  // at the fit (theta) the profile is the maximum: no rise
  const double limit = theta + 20 * span;  // beyond this the bound is reported as unbounded
  bool bracketed = false;
  while (hi < limit) {
    lo = hi, rise_lo = rise_hi;
    hi = std::min(hi + step, limit);
    rise_hi = rise(hi);
    if (rise_hi > kChi2_90) {
      bracketed = true;
      break;
    }
    step *= 1.5;
  }
  if (!bracketed) {
    f.a90_95_reason = "the profile likelihood does not reach the chi-square bound: a90/95 is unbounded";
    f.warnings.push_back(f.a90_95_reason);
    return;
  }
  b1 = f.b1;
  f.a90_95_um = std::exp(crossing(rise, lo, rise_lo, hi, rise_hi));
}


// Lower end of the profile-likelihood interval of eta at x0 = ln a: eta = e + b1 (x - x0), e from
// the fitted value downwards until the deviance rise passes chi2_1(0.90).
double lower_eta_lr(PodLink link, const Groups& groups, double llmax, const PodFit& f, double x0) {
  const double eta_hat = f.b0 + f.b1 * x0;
  const double se = std::sqrt(std::max(f.cov00 + 2 * x0 * f.cov01 + x0 * x0 * f.cov11, 1e-12));
  double b1 = f.b1;
  auto rise = [&](double e) { return 2 * (llmax - profile_ll(link, groups, e, x0, b1)); };
  double hi = eta_hat, lo = eta_hat, step = 0.5 * se;
  double rise_hi = 0, rise_lo = 0;  // at the fitted eta the profile is the maximum: no rise
  const double limit = eta_hat - 100 * se - 50;
  bool bracketed = false;
  while (lo > limit) {
    hi = lo, rise_hi = rise_lo;
    lo = std::max(lo - step, limit);
    rise_lo = rise(lo);
    if (rise_lo > kChi2_90) {
      bracketed = true;
      break;
    }
    step *= 1.5;
  }
  if (!bracketed) return -INFINITY;
  b1 = f.b1;
  return crossing(rise, hi, rise_hi, lo, rise_lo);
}

// The band's 41 log-spaced sizes from the smaller of half the smallest target and a90/95 / 1.2 to
// the larger of the largest target and 1.2 a90/95 (a90_95 NaN: unbounded, the targets' range).
std::vector<double> band_sizes(const PodFit& f, double a90_95) {
  const bool bounded = std::isfinite(a90_95);
  const double a0 = std::min(0.5 * f.smallest_target_um, bounded ? a90_95 / 1.2 : INFINITY);
  const double a1 = std::max(f.largest_target_um, bounded ? 1.2 * a90_95 : 0.0);
  const int n = 41;
  std::vector<double> sizes;
  for (int k = 0; k < n; ++k) sizes.push_back(a0 * std::pow(a1 / a0, double(k) / (n - 1)));
  return sizes;
}

// One point of the band: the fit and the lower bound at size a. Each size's bound is its own
// search (it starts from the fit, no state shared between sizes).
PodFit::BandPoint band_point(PodLink link, const Groups& groups, double llmax, const PodFit& f, double a) {
  const double x0 = std::log(a);
  return {a, inverse_link(link, f.b0 + f.b1 * x0), inverse_link(link, lower_eta_lr(link, groups, llmax, f, x0))};
}

// a90/95 (phase 4) and the band on band_sizes(a90/95) plus a90/95 itself (where the lower bound is
// 0.9 by construction). The a90/95 search is one chain of profile fits; while one thread walks it,
// the others compute the band on the sizes a90/95 most often leaves as they are (the targets'
// range: a90/95 within [0.6 x the smallest, the largest / 1.2]). Those points are kept when the
// sizes turn out the same (compared exactly), otherwise computed anew; each point is its own
// search, stored in order: the same values for any thread count.
void a90_95_and_band(PodLink link, const Groups& groups, const std::vector<double>& x, double llmax, PodFit& f) {
  const PodFit fit = f;  // the estimates the band reads (a90_95_bound writes f meanwhile)
  const std::vector<double> guess = band_sizes(fit, kMetricNaN);
  std::vector<PodFit::BandPoint> guessed(guess.size());
  const int64_t ng = int64_t(guess.size());
#pragma omp parallel for schedule(dynamic, 1)
  for (int64_t k = -1; k < ng; ++k) {
    if (k < 0)
      a90_95_bound(link, groups, x, llmax, f);
    else
      guessed[size_t(k)] = band_point(link, groups, llmax, fit, guess[size_t(k)]);
  }
  const double a9095 = f.a90_95_um;
  const std::vector<double> sizes = band_sizes(fit, a9095);
  if (sizes == guess) {
    f.band = std::move(guessed);
  } else {
    f.band.resize(sizes.size());
    const int64_t ns = int64_t(sizes.size());
#pragma omp parallel for schedule(dynamic, 1)
    for (int64_t k = 0; k < ns; ++k) f.band[size_t(k)] = band_point(link, groups, llmax, fit, sizes[size_t(k)]);
  }
  if (std::isfinite(a9095) && std::find(sizes.begin(), sizes.end(), a9095) == sizes.end()) {
    const auto at = std::upper_bound(sizes.begin(), sizes.end(), a9095) - sizes.begin();
    f.band.insert(f.band.begin() + at, band_point(link, groups, llmax, fit, a9095));
  }
}

}  // namespace

PodFit fit_pod(const std::vector<double>& sizes_um, const std::vector<int>& hit, PodLink link) {
  PodFit f;
  f.link = link;
  std::vector<double> x;
  std::vector<int> y;
  prepare_targets(sizes_um, hit, f, x, y);
  f.reason = degenerate_reason(f, x, y);
  if (f.n_targets > 0 && f.n_hits == f.n_targets) {
    // No fit exists, but the data say something: every target down to the smallest was hit.
    f.a90_95_um = f.smallest_target_um;
    f.a90_95_is_bound = true;
    f.a90_95_reason = "every target hit: a90/95 is reported as the bound <= the smallest target size (" +
                      std::to_string(f.smallest_target_um) + " um); there are no data below it";
    return f;
  }
  if (!f.reason.empty()) return f;
  const Groups groups = group_targets(x, y);
  const double llmax = newton_fit(link, groups, f);
  if (!f.estimable) return f;
  if (!(f.b1 > 0)) {
    f.a90_95_reason = "POD does not increase with size (b1 <= 0): a50, a90 and a90/95 are undefined";
    f.warnings.push_back(f.a90_95_reason);
    return f;
  }
  f.a50_um = pod_size_at(f, 0.5);
  f.a90_um = pod_size_at(f, 0.9);
  a90_95_and_band(link, groups, x, llmax, f);
  f.a90_extrapolated = f.a90_um < f.smallest_target_um;
  f.a90_95_extrapolated = f.a90_95_um < f.smallest_target_um;
  if (f.a90_extrapolated)
    f.warnings.push_back("a90 lies below the smallest target (" + std::to_string(f.smallest_target_um) +
                         " um): extrapolated beyond the data");
  return f;
}

double pod_lower_bound_at(const PodFit& f, const std::vector<double>& sizes_um, const std::vector<int>& hit, double size_um) {
  if (!f.estimable || !(size_um > 0)) return kMetricNaN;
  PodFit g;
  std::vector<double> x;
  std::vector<int> y;
  prepare_targets(sizes_um, hit, g, x, y);
  const Groups groups = group_targets(x, y);
  const double llmax = -0.5 * f.deviance;
  return inverse_link(f.link, lower_eta_lr(f.link, groups, llmax, f, std::log(size_um)));
}

std::pair<double, double> clopper_pearson(int64_t k, int64_t n, double conf) {
  if (n <= 0) return {kMetricNaN, kMetricNaN};
  const double a = 1 - conf;
  const double lo = k == 0 ? 0.0 : boost::math::ibeta_inv(double(k), double(n - k + 1), a / 2);
  const double hi = k == n ? 1.0 : boost::math::ibeta_inv(double(k + 1), double(n - k), 1 - a / 2);
  return {lo, hi};
}

std::vector<PodBin> binned_pod(const std::vector<double>& sizes_um, const std::vector<int>& hit,
                               const std::vector<double>& edges_um, double conf) {
  std::vector<PodBin> bins;
  for (size_t k = 0; k + 1 < edges_um.size(); ++k) {
    PodBin b;
    b.lo_um = edges_um[k], b.hi_um = edges_um[k + 1];
    const bool last = k + 2 == edges_um.size();
    for (size_t i = 0; i < sizes_um.size(); ++i) {
      const double s = sizes_um[i];
      if (s >= b.lo_um && (s < b.hi_um || (last && s <= b.hi_um * (1 + 1e-12)))) ++b.n, b.hits += hit[i] != 0;
    }
    if (b.n > 0) {
      b.pod = double(b.hits) / double(b.n);
      std::tie(b.ci_lo, b.ci_hi) = clopper_pearson(b.hits, b.n, conf);
    } else {
      b.pod = b.ci_lo = b.ci_hi = kMetricNaN;
    }
    bins.push_back(b);
  }
  return bins;
}

}  // namespace pb
