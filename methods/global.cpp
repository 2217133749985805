// Global histogram thresholds: each computes one threshold from the grey-value histogram of the
// ROI (bins, clip_pct: methods/threshold.hpp); air (pores) is below it. Sources beside each method.
// Conventions: a method that picks a split reports the upper edge of the last bin of the dark
// class (scikit-image and ITK report that bin's centre: half a bin lower, the same split); mean,
// percentile and iso50 report a grey value. Calculators work in bin units (x = bin index), to
// which all are invariant but Li (x = index + 1/2, i.e. the image shifted to a zero minimum).
//
// Degenerate input (defined result and a warning, never a silent split of one population):
//   - constant volume (one occupied bin) or a single-mode histogram (no second significant mode:
//     a crop inside dense material, or all air): no voxel is called air (threshold = the lowest
//     grey value); percentile and manual are exempt (the user chose the split); triangle is made
//     for one peak with a tail of pores (Zack et al. 1977), so a single mode with a dark tail is
//     only warned about (a bright tail: no air);
//   - a method that finds no split (no fixed point, no two modes after smoothing): the same;
//   - everything outside air after the split (no part voxels): porosity undefined, warned.
// Integer data (MethodInput::stored_type): the default bins=auto gives one bin per grey level up
// to 4096 levels (threshold.hpp). When the user sets bins and the histogram range spans more grey
// levels than that, a warning names the bin width in grey levels and the `bins` value that gives
// one bin per level; when it spans fewer, it warns of the empty-bin comb. Every run reports
// chosen["bin_width"] in grey units and chosen["bins"], the bin count used.
#include <algorithm>
#include <cmath>
#include <limits>
#include <stdexcept>

#include "core/error.hpp"
#include "core/format.hpp"
#include "methods/threshold.hpp"

namespace pb {

namespace {

constexpr double kSkip = -std::numeric_limits<double>::infinity();  // a split best_split skips

// The split {0..k} | {k+1..}, k in [0, bins - 2], with the highest score, the first on ties; -1
// when no score beats -inf (skipped splits score kSkip). `score` is called once per k, in
// increasing order, so that it may keep running sums.
template <class Score>
int best_split(int bins, Score score) {
  double best = -INFINITY;
  int best_k = -1;
  for (int k = 0; k + 1 < bins; ++k) {
    const double s = score(k);
    if (s > best) {
      best = s;
      best_k = k;
    }
  }
  return best_k;
}

}  // namespace

// Index k maximising the between-class variance w0*w1*(m0-m1)^2 of the split {0..k} | {k+1..}.
// Bin centres stand for the grey values, as in scikit-image's threshold_otsu.
int otsu_split(const Histogram& h) {
  const int n = h.bins();
  double total = 0, total_sum = 0;
  for (int i = 0; i < n; ++i) {
    total += double(h.counts[size_t(i)]);
    total_sum += double(h.counts[size_t(i)]) * h.centre(i);
  }
  double w0 = 0, s0 = 0;
  const int k = best_split(n, [&](int k) {
    w0 += double(h.counts[size_t(k)]);
    s0 += double(h.counts[size_t(k)]) * h.centre(k);
    const double w1 = total - w0;
    if (w0 <= 0 || w1 <= 0) return kSkip;
    const double d = s0 / w0 - (total_sum - s0) / w1;
    return w0 * w1 * d * d;
  });
  return std::max(k, 0);
}

namespace {

// Li's cross-entropy criterion (Li & Lee 1993, eq. 8, the terms that depend on the split) for the
// split {0..k} | {k+1..}, with x = bin index + 1/2. +inf when a class is empty.
double li_criterion(const Histogram& h, int k) {
  double m0a = 0, m1a = 0, m0b = 0, m1b = 0;
  for (int i = 0; i < h.bins(); ++i) {
    const double c = double(h.counts[size_t(i)]), x = i + 0.5;
    (i <= k ? m0a : m0b) += c;
    (i <= k ? m1a : m1b) += c * x;
  }
  if (m0a <= 0 || m0b <= 0) return std::numeric_limits<double>::infinity();
  return -m1a * std::log(m1a / m0a) - m1b * std::log(m1b / m0b);
}

// A calculator that finds no split throws this; the run turns it into "no air" and a warning.
struct NoSplit : std::runtime_error {
  using std::runtime_error::runtime_error;
};

struct Choice {
  double threshold = 0;
  std::vector<std::pair<std::string, double>> extra;  // reported after threshold and bin_width
};

using Calc = std::function<Choice(const Histogram&, const ParamValues&)>;
using Counts = std::vector<double>;

Counts counts_of(const Histogram& h) { return Counts(h.counts.begin(), h.counts.end()); }
Choice split_at(const Histogram& h, int k) { return {h.edge(k + 1), {}}; }

// Prefix sums of counts, counts*x and counts*x^2 with x = bin index: S[k] covers bins 0..k.
struct Prefix {
  std::vector<double> n, s, q;
  explicit Prefix(const Histogram& h) {
    double a = 0, b = 0, c = 0;
    for (int i = 0; i < h.bins(); ++i) {
      const double f = double(h.counts[size_t(i)]);
      a += f;
      b += f * i;
      c += f * double(i) * i;
      n.push_back(a);
      s.push_back(b);
      q.push_back(c);
    }
  }
  double total() const { return n.back(); }
};

// --- modality -------------------------------------------------------------------------------
// Number of significant modes: on the histogram merged to at most 256 bins, a peak (plateau) is
// significant when its persistence (peak minus the highest saddle towards a higher peak) exceeds
// 4 Poisson standard deviations of the difference, 4*sqrt(peak + saddle); the highest peak always
// counts. Persistence of peaks: Edelsbrunner H., Harer J. (2010) Computational Topology (from memory); the
// 4-sigma noise rule is our choice.
// With clipping, the end bins also hold the clipped tails: they take their neighbours' counts here
// so that the clipped tails do not pose as modes. Integer data binned finer than one grey level
// leave bins empty by construction (a comb); the bins are merged into grey levels first, else every empty bin
// is a saddle of depth zero and every level a "mode"; each bin goes to the level nearest its
// centre (a voxel lies within half a bin of its bin's centre).
int significant_modes(const Histogram& h, bool clipped, bool integer_data) {
  Counts raw = counts_of(h), c;
  if (clipped) {
    raw.front() = raw[1];
    raw.back() = raw[raw.size() - 2];
  }
  if (integer_data && h.width() < 1) {  // one entry per grey level: the level nearest each bin centre
    Counts levels(size_t(std::floor(h.hi) - std::ceil(h.lo)) + 1, 0.0);
    for (int i = 0; i < h.bins(); ++i) {
      const double level = std::clamp(std::round(h.centre(i)) - std::ceil(h.lo), 0.0, double(levels.size() - 1));
      levels[size_t(level)] += raw[size_t(i)];
    }
    raw.swap(levels);
  }
  const int bins = int(raw.size()), f = (bins + 255) / 256;
  for (int i = 0; i < bins; i += f) {
    double s = 0;
    for (int j = i; j < std::min(bins, i + f); ++j) s += raw[size_t(j)];
    c.push_back(s);
  }
  const int n = int(c.size());
  int modes = 0;
  for (int i = 0; i < n;) {
    int e = i;  // plateau [i, e]
    while (e + 1 < n && c[size_t(e + 1)] == c[size_t(i)]) ++e;
    const double p = c[size_t(i)];
    const bool peak = (i == 0 || c[size_t(i - 1)] < p) && (e == n - 1 || c[size_t(e + 1)] < p) && p > 0;
    if (peak) {
      // Walk left (ties count as higher, so that equal peaks are counted once) and right.
      double saddle = -1, low = p;
      for (int j = i - 1; j >= 0; --j) {
        low = std::min(low, c[size_t(j)]);
        if (c[size_t(j)] >= p) {
          saddle = std::max(saddle, low);
          break;
        }
      }
      low = p;
      for (int j = e + 1; j < n; ++j) {
        low = std::min(low, c[size_t(j)]);
        if (c[size_t(j)] > p) {
          saddle = std::max(saddle, low);
          break;
        }
      }
      if (saddle < 0 || p - saddle > 4.0 * std::sqrt(p + saddle)) ++modes;
    }
    i = e + 1;
  }
  return modes;
}

// --- the calculators -------------------------------------------------------------------------

// Ridler T.W., Calvard S. (1978) Picture thresholding using an iterative selection method. IEEE
// Trans. Syst. Man Cybern. 8(8):630-632. The lowest split k whose class means m0 (bins <= k) and
// m1 satisfy 0 <= (m0 + m1)/2 - x_k < 1 bin: a fixed point of the iteration, chosen as in
// scikit-image's threshold_isodata.
Choice isodata(const Histogram& h, const ParamValues&) {
  const Prefix P(h);
  for (int k = 0; k + 1 < h.bins(); ++k) {
    const double n0 = P.n[size_t(k)], n1 = P.total() - n0;
    if (n0 <= 0 || n1 <= 0) continue;
    const double mid = 0.5 * (P.s[size_t(k)] / n0 + (P.s.back() - P.s[size_t(k)]) / n1);
    if (mid - k >= 0 && mid - k < 1) return split_at(h, k);
  }
  throw NoSplit("isodata found no fixed point (t = mean of the two class means)");
}

// Li C.H., Lee C.K. (1993) Minimum cross entropy thresholding. Pattern Recognit. 26(4):617-625;
// Li C.H., Tam P.K.S. (1998) An iterative algorithm for minimum cross entropy thresholding.
// Pattern Recognit. Lett. 18(8):771-776. Iterates t = (m1 - m0)/(ln m1 - ln m0) from the mean
// (x = bin index + 1/2 > 0) to half a bin, then steps to a neighbouring split while that lowers
// the criterion (the iteration's fixed point is a stationary point of it, up to binning).
Choice li(const Histogram& h, const ParamValues&) {
  const int n = h.bins();
  auto split_of = [n](double t) { return std::clamp(int(std::floor(t - 0.5)), 0, n - 2); };
  double tot = 0, sum = 0;
  for (int i = 0; i < n; ++i) {
    tot += double(h.counts[size_t(i)]);
    sum += double(h.counts[size_t(i)]) * (i + 0.5);
  }
  double t = sum / tot;
  for (int it = 0; it < 1000; ++it) {
    const int k = split_of(t);
    double n0 = 0, s0 = 0;
    for (int i = 0; i <= k; ++i) {
      n0 += double(h.counts[size_t(i)]);
      s0 += double(h.counts[size_t(i)]) * (i + 0.5);
    }
    if (n0 <= 0 || n0 >= tot) break;  // a class is empty: keep the current split
    const double m0 = s0 / n0, m1 = (sum - s0) / (tot - n0);
    const double next = (m1 - m0) / (std::log(m1) - std::log(m0));
    const bool done = std::abs(next - t) < 0.5;
    t = next;
    if (done) break;
  }
  int k = split_of(t);
  for (double here = li_criterion(h, k);;) {
    const double lo = k > 0 ? li_criterion(h, k - 1) : INFINITY, hi = k + 2 < n ? li_criterion(h, k + 1) : INFINITY;
    if (lo < here && lo <= hi) {
      --k;
      here = lo;
    } else if (hi < here) {
      ++k;
      here = hi;
    } else {
      break;
    }
  }
  if (!std::isfinite(li_criterion(h, k))) throw NoSplit("li: a class is empty at every split");
  return split_at(h, k);
}

// Yen J.C., Chang F.J., Chang S. (1995) A new criterion for automatic multilevel thresholding.
// IEEE Trans. Image Process. 4(3):370-378. Maximises the entropic correlation
// ln[(P(1-P))^2 / (sum_{i<=k} p_i^2 * sum_{i>k} p_i^2)].
Choice yen(const Histogram& h, const ParamValues&) {
  const int n = h.bins();
  const double tot = double(h.total());
  std::vector<double> p(size_t(n), 0.0), sq_above(size_t(n) + 1, 0.0);
  for (int i = 0; i < n; ++i) p[size_t(i)] = double(h.counts[size_t(i)]) / tot;
  for (int i = n - 1; i >= 0; --i) sq_above[size_t(i)] = sq_above[size_t(i) + 1] + p[size_t(i)] * p[size_t(i)];
  double P = 0, sq = 0;
  const int best_k = best_split(n, [&](int k) {
    P += p[size_t(k)];
    sq += p[size_t(k)] * p[size_t(k)];
    if (sq <= 0 || sq_above[size_t(k) + 1] <= 0) return kSkip;
    return 2 * std::log(P * (1 - P)) - std::log(sq * sq_above[size_t(k) + 1]);
  });
  if (best_k < 0) throw NoSplit("yen: no split leaves both classes occupied");
  return split_at(h, best_k);
}

// Zack G.W., Rogers W.E., Latt S.A. (1977) Automatic measurement of sister chromatid exchange
// frequency. J. Histochem. Cytochem. 25(7):741-753. The line from the peak to the end of the longer
// tail; the split is the bin farthest below that line (scikit-image's threshold_triangle layout:
// the line starts at zero height at the last occupied bin of the tail).
Choice triangle(const Histogram& h, const ParamValues&) {
  const int n = h.bins();
  Counts c = counts_of(h);
  int peak = int(std::max_element(c.begin(), c.end()) - c.begin());
  int low = 0, high = n - 1;
  while (c[size_t(low)] == 0) ++low;
  while (c[size_t(high)] == 0) --high;
  const bool flip = peak - low < high - peak;  // the longer tail is above the peak
  if (flip) {
    std::reverse(c.begin(), c.end());
    low = n - high - 1;
    peak = n - peak - 1;
  }
  const int width = peak - low;
  if (width < 1) throw NoSplit("triangle: the histogram peak is at its end");
  const double height = c[size_t(peak)];
  double best = -INFINITY;
  int level = low;
  for (int x = 0; x < width; ++x) {
    const double d = height * x - width * c[size_t(x + low)];
    if (d > best) {
      best = d;
      level = x + low;
    }
  }
  if (flip) level = n - level - 1;
  return split_at(h, std::min(level, n - 2));
}

// Kapur J.N., Sahoo P.K., Wong A.K.C. (1985) A new method for gray-level picture thresholding
// using the entropy of the histogram. Comput. Vis. Graph. Image Process. 29(3):273-285. Maximises
// the sum of the two class entropies H_k = ln P_k - sum p_i ln p_i / P_k.
Choice kapur(const Histogram& h, const ParamValues&) {
  const int n = h.bins();
  const double tot = double(h.total());
  double plogp_all = 0;
  for (auto c : h.counts)
    if (c > 0) plogp_all += double(c) / tot * std::log(double(c) / tot);
  double P = 0, plogp = 0;
  const int best_k = best_split(n, [&](int k) {
    const double p = double(h.counts[size_t(k)]) / tot;
    P += p;
    if (p > 0) plogp += p * std::log(p);
    const double Q = 1 - P;
    if (P <= 0 || Q <= 1e-15) return kSkip;
    return std::log(P) - plogp / P + std::log(Q) - (plogp_all - plogp) / Q;
  });
  if (best_k < 0) throw NoSplit("kapur: no split leaves both classes occupied");
  return split_at(h, best_k);
}

// Kittler J., Illingworth J. (1986) Minimum error thresholding. Pattern Recognit. 19(1):41-47.
// Minimises J = 1 + 2[P0 ln s0 + P1 ln s1] - 2[P0 ln P0 + P1 ln P1] over all splits (the global
// minimum of eq. 15, not the paper's iteration). A class is never narrower than one bin: its
// variance is floored at 1/12 bin^2 (uniform within a bin), so one-bin classes cannot give -inf.
Choice kittler_illingworth(const Histogram& h, const ParamValues&) {
  const Prefix S(h);
  const double N = S.total();
  const int best_k = best_split(h.bins(), [&](int k) {  // the minimum of J: the maximum of -J
    const double n0 = S.n[size_t(k)], n1 = N - n0;
    if (n0 <= 0 || n1 <= 0) return kSkip;
    const double m0 = S.s[size_t(k)] / n0, m1 = (S.s.back() - S.s[size_t(k)]) / n1;
    const double v0 = std::max(S.q[size_t(k)] / n0 - m0 * m0, 1.0 / 12);
    const double v1 = std::max((S.q.back() - S.q[size_t(k)]) / n1 - m1 * m1, 1.0 / 12);
    const double P0 = n0 / N, P1 = n1 / N;
    return -(1 + P0 * std::log(v0) + P1 * std::log(v1) - 2 * (P0 * std::log(P0) + P1 * std::log(P1)));
  });
  if (best_k < 0) throw NoSplit("kittler-illingworth: no split leaves both classes occupied");
  return split_at(h, best_k);
}

// Huang L.K., Wang M.J.J. (1995) Image thresholding by minimizing the measures of fuzziness.
// Pattern Recognit. 28(1):41-51. Membership u(x) = 1/(1 + |x - m|/C) to the mean m of its class,
// C = occupied range; minimises sum h(x) S(u(x)) with Shannon's S. Class means are rounded to the
// nearest bin (as in ImageJ's port), so S is a table over integer distances. O(bins^2): about
// 10 s at bins=65536 on two loaded cores, milliseconds at the default 256.
Choice huang(const Histogram& h, const ParamValues&) {
  const int n = h.bins();
  int first = 0, last = n - 1;
  while (h.counts[size_t(first)] == 0) ++first;
  while (h.counts[size_t(last)] == 0) --last;
  if (last <= first) throw NoSplit("huang: one occupied bin");
  const double C = last - first;
  std::vector<double> S(size_t(last - first) + 1, 0.0);
  for (size_t d = 1; d < S.size(); ++d) {
    const double u = 1.0 / (1.0 + double(d) / C);
    S[d] = -u * std::log(u) - (1 - u) * std::log(1 - u);
  }
  const Prefix P(h);
  std::vector<double> E(size_t(n), INFINITY);
#pragma omp parallel for schedule(static)
  for (int t = first; t < last; ++t) {
    const double n0 = P.n[size_t(t)] - (first > 0 ? P.n[size_t(first - 1)] : 0), n1 = P.total() - P.n[size_t(t)];
    if (n0 <= 0 || n1 <= 0) continue;
    const long m0 = std::lround(P.s[size_t(t)] / n0), m1 = std::lround((P.s.back() - P.s[size_t(t)]) / n1);
    double e = 0;
    for (int i = first; i <= last; ++i) e += S[size_t(std::labs(i - (i <= t ? m0 : m1)))] * double(h.counts[size_t(i)]);
    E[size_t(t)] = e;
  }
  const int t = int(std::min_element(E.begin(), E.end()) - E.begin());
  if (!std::isfinite(E[size_t(t)])) throw NoSplit("huang: no split leaves both classes occupied");
  return split_at(h, t);
}

// Tsai W.H. (1985) Moment-preserving thresholding: a new approach. Comput. Vis. Graph. Image
// Process. 29(3):377-393. The two-level image with the histogram's first three moments has a
// dark fraction p0; the split is the first bin at which the cumulative fraction exceeds p0.
Choice moments(const Histogram& h, const ParamValues&) {
  const int n = h.bins();
  const double tot = double(h.total());
  double m1 = 0, m2 = 0, m3 = 0;
  for (int i = 0; i < n; ++i) {
    const double p = double(h.counts[size_t(i)]) / tot, x = (i + 0.5) / n;  // x in (0, 1): well conditioned
    m1 += x * p;
    m2 += x * x * p;
    m3 += x * x * x * p;
  }
  const double cd = m2 - m1 * m1;
  if (!(cd > 0)) throw NoSplit("moments: zero variance");
  const double c0 = (-m2 * m2 + m1 * m3) / cd, c1 = (m1 * m2 - m3) / cd;
  const double disc = c1 * c1 - 4 * c0;
  if (!(disc > 0)) throw NoSplit("moments: no two-level solution (discriminant <= 0)");
  const double z0 = 0.5 * (-c1 - std::sqrt(disc)), z1 = 0.5 * (-c1 + std::sqrt(disc));
  const double p0 = (z1 - m1) / (z1 - z0);
  double acc = 0;
  int k = n - 2;
  for (int i = 0; i < n; ++i) {
    acc += double(h.counts[size_t(i)]) / tot;
    if (acc > p0) {
      k = std::min(i, n - 2);
      break;
    }
  }
  Choice c = split_at(h, k);
  c.extra.emplace_back("dark_fraction", p0);
  return c;
}

// Prewitt J.M.S., Mendelsohn M.L. (1966) The analysis of cell images. Ann. N.Y. Acad. Sci.
// 128:1035-1053. minimum: the histogram is smoothed by a 3-bin running mean (ends reflected) until
// it has fewer than three maxima (plateau-aware), as in scikit-image's threshold_minimum; it must
// end with exactly two; the split is the lowest smoothed bin between them.
struct TwoModes {
  int a = 0, b = 0;
  Counts smooth;
};
TwoModes smooth_to_two_modes(const Histogram& h, const char* method) {  // method: for messages
  Counts s = counts_of(h), t(s.size());
  const int n = int(s.size());
  std::vector<int> maxima;
  for (int it = 0; it < 10000; ++it) {
    for (int i = 0; i < n; ++i)
      t[size_t(i)] = (s[size_t(std::max(i - 1, 0))] + s[size_t(i)] + s[size_t(std::min(i + 1, n - 1))]) / 3.0;
    s.swap(t);
    maxima.clear();
    int dir = 1;
    for (int i = 0; i + 1 < n; ++i) {
      if (dir > 0 && s[size_t(i + 1)] < s[size_t(i)]) {
        dir = -1;
        maxima.push_back(i);
      } else if (dir < 0 && s[size_t(i + 1)] > s[size_t(i)]) {
        dir = 1;
      }
    }
    if (maxima.size() < 3) break;
  }
  if (maxima.size() != 2)
    throw NoSplit(std::string(method) + ": smoothing did not leave exactly two modes (" + std::to_string(maxima.size()) +
                  " after up to 10000 passes; fewer bins help)");
  return {maxima[0], maxima[1], std::move(s)};
}

// intermodes: Prewitt & Mendelsohn's midpoint of the two modes, with the smoothing of ImageJ's port
// (as in ITK's IntermodesThresholdCalculator): 3-bin running mean with zero ends, repeated until
// exactly two strict maxima, at most 10000 passes; the split is the floor of their mean index.
Choice intermodes(const Histogram& h, const ParamValues&) {
  Counts s = counts_of(h), t(s.size());
  const int n = int(s.size());
  auto strict_maxima = [&] {
    std::vector<int> m;
    for (int i = 1; i + 1 < n && m.size() < 3; ++i)
      if (s[size_t(i - 1)] < s[size_t(i)] && s[size_t(i + 1)] < s[size_t(i)]) m.push_back(i);
    return m;
  };
  std::vector<int> m = strict_maxima();
  for (int it = 0; m.size() != 2; ++it) {
    if (it == 10000) throw NoSplit("intermodes: smoothing did not leave exactly two modes in 10000 passes (fewer bins help)");
    for (int i = 0; i < n; ++i)
      t[size_t(i)] = ((i > 0 ? s[size_t(i - 1)] : 0.0) + s[size_t(i)] + (i + 1 < n ? s[size_t(i + 1)] : 0.0)) / 3.0;
    s.swap(t);
    m = strict_maxima();
  }
  return split_at(h, (m[0] + m[1]) / 2);
}

Choice minimum(const Histogram& h, const ParamValues&) {
  const TwoModes m = smooth_to_two_modes(h, "minimum");
  const auto first = m.smooth.begin() + m.a;
  return split_at(h, m.a + int(std::min_element(first, m.smooth.begin() + m.b + 1) - first));
}

// iso50: halfway between the air and the material peak (common practice in CT, no source). The
// peaks are the modes of the two classes of Otsu's split, on the histogram smoothed by a running
// mean of 2*ceil(bins/256)+1 bins.
Choice iso50(const Histogram& h, const ParamValues&) {
  const int n = h.bins(), k = otsu_split(h), r = (n + 255) / 256;
  Counts s(size_t(n), 0.0);
  for (int i = 0; i < n; ++i) {
    for (int j = std::max(0, i - r); j <= std::min(n - 1, i + r); ++j) s[size_t(i)] += double(h.counts[size_t(j)]);
  }
  auto mode = [&](int a, int b) {  // argmax of the smoothed counts in [a, b), ties to the larger raw count
    int best = a;
    for (int i = a + 1; i < b; ++i)
      if (s[size_t(i)] > s[size_t(best)] || (s[size_t(i)] == s[size_t(best)] && h.counts[size_t(i)] > h.counts[size_t(best)]))
        best = i;
    return best;
  };
  const int air = mode(0, k + 1), mat = mode(k + 1, n);
  Choice c{0.5 * (h.centre(air) + h.centre(mat)), {}};
  c.extra.emplace_back("air_peak", h.centre(air));
  c.extra.emplace_back("material_peak", h.centre(mat));
  return c;
}

// Glasbey C.A. (1993) An analysis of histogram-based thresholding algorithms. CVGIP Graph. Models
// Image Process. 55(6):532-537 (the mean as a threshold). From the histogram (bin centres): within
// half a bin of the voxel mean; with clip_pct > 0 the clipped tails sit in the end bins.
Choice mean(const Histogram& h, const ParamValues&) {
  double tot = 0, sum = 0;
  for (int i = 0; i < h.bins(); ++i) {
    tot += double(h.counts[size_t(i)]);
    sum += double(h.counts[size_t(i)]) * h.centre(i);
  }
  return {sum / tot, {}};
}

// percentile: air_pct % of the ROI voxels are called air (the p-tile method, Doyle W. (1962)
// Operations useful for similarity-invariant pattern recognition. J. ACM 9(2):259-267; citation
// from memory),
// interpolated linearly within the bin.
Choice percentile(const Histogram& h, const ParamValues& p) {
  const double pct = p.num("air_pct");
  if (pct >= 100) return {std::nextafter(double(std::nextafter(float(h.hi), INFINITY)), INFINITY), {}};  // all voxels
  return {histogram_quantile(h, pct / 100.0), {}};
}

// --- the shared run --------------------------------------------------------------------------

// Warnings on the resolution of a histogram of integer data with bins set by the user (see the
// file header); bins=auto is one bin per level where it can be.
std::vector<std::string> resolution_warnings(VoxelType stored, const ParamValues& p, const Histogram& h) {
  if (!integer_type(stored) || p.is_word("bins")) return {};
  const double levels = grey_levels(h.lo, h.hi);
  const int bins = h.bins();
  const std::string one_per_level = levels <= kAutoMaxLevels ? "bins=auto or bins=" + format_number(levels, 6) : "bins=" + format_number(std::min(levels, 65536.0), 6);
  if (levels > bins)
    return {std::string(voxel_type_name(stored)) + " data span " + format_number(levels, 6) + " grey levels over the histogram range [" +
            format_number(h.lo, 6) + ", " + format_number(h.hi, 6) + "] but bins=" + std::to_string(bins) + ": some bins hold more than one level (bin width " +
            format_number(h.width(), 6) + " grey levels), so the threshold is resolved to that; set " + one_per_level +
            " for one bin per grey level"};
  if (levels >= 2 && levels < bins)
    return {std::string(voxel_type_name(stored)) + " data span only " + format_number(levels, 6) + " grey levels but bins=" +
            std::to_string(bins) + ": bins are narrower than one grey level and some are empty by construction, which "
            "misleads peak-based methods; set " + one_per_level};
  return {};
}

// The threshold below every voxel in the ROI: no air.
double no_air_threshold(const std::function<double()>& lowest, const Histogram& h, const ParamValues& p) {
  if (p.num("clip_pct") <= 0) return h.lo;
  return lowest();
}

// What a method needs of the histogram's shape (the two-mode guard of the file header).
enum class Shape {
  two_modes,       // a split between two populations: a single significant mode gives no air
  peak_with_tail,  // one peak and a tail (triangle): a single mode is its case, only said
  any,             // the user chose the split (percentile)
};

MethodInfo global_method(std::string name, std::string doc, std::string citation, Calc calc, Shape shape,
                         std::vector<ParamSpec> extra = {}) {
  // histogram_method gives the shared schema (bins, clip_pct) and family; the run is ours, so that
  // degenerate histograms and integer resolution are handled the same way for every method.
  MethodInfo m = histogram_method(name, std::move(doc), std::move(citation),
                                  [calc](const Histogram& h, const ParamValues& p) {
                                    return ThresholdChoice{calc(h, p).threshold, {}};
                                  },
                                  std::move(extra));
  HistogramDecider decide = [calc, shape, name](const Histogram& h, VoxelType stored, const std::function<double()>& lowest,
                                                 const ParamValues& p) {
    std::vector<std::string> warnings = resolution_warnings(stored, p, h);
    Choice c;
    auto no_air = [&](const std::string& why) {
      c = Choice{no_air_threshold(lowest, h, p), {}};
      warnings.push_back(why + ": no voxel is called air (threshold " + format_number(c.threshold, 6) +
                         " = the lowest grey value); if the part has pores, include surrounding air in the volume or "
                         "use manual or percentile");
    };
    const bool single_mode = shape != Shape::any && h.bins() >= 3 &&
                             significant_modes(h, p.num("clip_pct") > 0, integer_type(stored)) < 2;
    if (single_occupied_bin(h)) {
      no_air(name + ": the grey-value histogram has a single occupied bin (constant volume)");
    } else if (shape == Shape::two_modes && single_mode) {
      no_air(name + ": the grey-value histogram has a single significant mode (dense material only, or all air)");
    } else {
      try {
        c = calc(h, p);
        if (single_mode) {
          // peak_with_tail: pores are dark, so only a tail below the peak can be air.
          const int peak = int(std::max_element(h.counts.begin(), h.counts.end()) - h.counts.begin());
          if (c.threshold > h.centre(peak))
            no_air(name + ": the grey-value histogram has a single significant mode whose longer tail is brighter "
                          "than its peak (no dark tail of pores)");
          else
            warnings.push_back(name + ": the grey-value histogram has a single significant mode; the threshold cuts off "
                                      "its dark tail (what " + name + " is made for: one peak and a tail of pores); "
                                      "check that the tail is air and not the noise of a single phase");
        }
      } catch (const NoSplit& e) {
        no_air(e.what());
      }
    }
    HistogramDecision d{ThresholdChoice{c.threshold, std::move(warnings)}, {{"bin_width", h.width()}, {"bins", h.bins()}}};
    d.chosen.insert(d.chosen.end(), c.extra.begin(), c.extra.end());
    return d;
  };
  m.slabs = histogram_slabs(decide);
  m.run = [decide, name](const MethodInput& in, const ParamValues& p) {
    const Histogram h = method_histogram(in, p);
    HistogramDecision d = decide(h, in.stored_type, [&in] { return compute_stats(in.volume, in.roi).min; }, p);
    MethodOutput out = apply_threshold(in, d.choice, name);
    out.chosen.insert(out.chosen.end(), d.chosen.begin(), d.chosen.end());
    return out;
  };
  return m;
}

MethodInfo manual_info() {
  return {"manual", "global", "A fixed threshold in grey units given by the user: air is below it",
          "none (user-chosen threshold)",
          {{"threshold", ParamType::Float, "", -3.4e38, 3.4e38, {}, "grey", "the threshold in grey-value units"}},
          [](const MethodInput& in, const ParamValues& p) {
            return apply_threshold(in, ThresholdChoice{p.num("threshold"), {}}, "manual");
          },
          nullptr};  // not by slabs
}

const char* kOtsu = "Otsu N. (1979) A threshold selection method from gray-level histograms. IEEE Trans. Syst. Man Cybern. 9(1):62-66";
const char* kPrewitt = "Prewitt J.M.S., Mendelsohn M.L. (1966) The analysis of cell images. Ann. N.Y. Acad. Sci. 128:1035-1053";

}  // namespace

PB_REGISTER_METHOD(global_method(
    "otsu", "Otsu's method: the threshold that maximises the between-class variance of the histogram", kOtsu,
    [](const Histogram& h, const ParamValues&) { return split_at(h, otsu_split(h)); }, Shape::two_modes));
PB_REGISTER_METHOD(manual_info());
PB_REGISTER_METHOD(global_method("iso50",
                                 "halfway between the air and the material histogram peaks (the modes of Otsu's two classes)",
                                 "common practice in CT, no published source; peaks split by Otsu (1979)", iso50, Shape::two_modes));
PB_REGISTER_METHOD(global_method("isodata", "Ridler-Calvard iterative selection: the threshold halfway between the two class means",
                                 "Ridler T.W., Calvard S. (1978) Picture thresholding using an iterative selection method. "
                                 "IEEE Trans. Syst. Man Cybern. 8(8):630-632",
                                 isodata, Shape::two_modes));
PB_REGISTER_METHOD(global_method("triangle", "the bin farthest below the line from the histogram peak to the end of its longer tail",
                                 "Zack G.W., Rogers W.E., Latt S.A. (1977) Automatic measurement of sister chromatid exchange "
                                 "frequency. J. Histochem. Cytochem. 25(7):741-753",
                                 triangle, Shape::peak_with_tail));
PB_REGISTER_METHOD(global_method("li", "minimum cross entropy between the image and its two-level version (iterative)",
                                 "Li C.H., Lee C.K. (1993) Minimum cross entropy thresholding. Pattern Recognit. 26(4):617-625; "
                                 "Li C.H., Tam P.K.S. (1998) An iterative algorithm for minimum cross entropy thresholding. "
                                 "Pattern Recognit. Lett. 18(8):771-776",
                                 li, Shape::two_modes));
PB_REGISTER_METHOD(global_method("yen", "maximum entropic correlation of the two classes",
                                 "Yen J.C., Chang F.J., Chang S. (1995) A new criterion for automatic multilevel thresholding. "
                                 "IEEE Trans. Image Process. 4(3):370-378",
                                 yen, Shape::two_modes));
PB_REGISTER_METHOD(global_method("kapur", "maximum entropy: the split maximising the sum of the two class entropies",
                                 "Kapur J.N., Sahoo P.K., Wong A.K.C. (1985) A new method for gray-level picture thresholding "
                                 "using the entropy of the histogram. Comput. Vis. Graph. Image Process. 29(3):273-285",
                                 kapur, Shape::two_modes));
PB_REGISTER_METHOD(global_method("kittler-illingworth", "minimum error: the split that best fits two Gaussian classes",
                                 "Kittler J., Illingworth J. (1986) Minimum error thresholding. Pattern Recognit. 19(1):41-47",
                                 kittler_illingworth, Shape::two_modes));
PB_REGISTER_METHOD(global_method("huang", "minimum fuzziness (Shannon entropy of memberships to the class means)",
                                 "Huang L.K., Wang M.J.J. (1995) Image thresholding by minimizing the measures of fuzziness. "
                                 "Pattern Recognit. 28(1):41-51",
                                 huang, Shape::two_modes));
PB_REGISTER_METHOD(global_method("moments", "moment-preserving: the two-level image keeps the first three moments",
                                 "Tsai W.H. (1985) Moment-preserving thresholding: a new approach. Comput. Vis. Graph. Image "
                                 "Process. 29(3):377-393",
                                 moments, Shape::two_modes));
PB_REGISTER_METHOD(global_method("intermodes", "smooth the histogram until bimodal; the midpoint between the two peaks",
                                 kPrewitt, intermodes, Shape::two_modes));
PB_REGISTER_METHOD(global_method("minimum", "smooth the histogram until bimodal; the minimum between the two peaks",
                                 kPrewitt, minimum, Shape::two_modes));
PB_REGISTER_METHOD(global_method("mean", "the mean grey value", "Glasbey C.A. (1993) An analysis of histogram-based "
                                 "thresholding algorithms. CVGIP Graph. Models Image Process. 55(6):532-537",
                                 mean, Shape::two_modes));
PB_REGISTER_METHOD(global_method(
    "percentile", "a given percentage of the ROI voxels is called air (p-tile)",
    "Doyle W. (1962) Operations useful for similarity-invariant pattern recognition. J. ACM 9(2):259-267", percentile, Shape::any,
    {{"air_pct", ParamType::Float, "1", 0, 100, {}, "%", "percentage of the ROI voxels below the threshold (called air)"}}));

}  // namespace pb
