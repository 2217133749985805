// The report's SVG plot writer (see svg.hpp). Coordinates in px with 2 decimals; automatic ticks at
// 1-2-5 steps (linear) or at 1, 2, 5 (or 1..9) times powers of ten (log).
#include "report/svg.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <sstream>

#include "core/format.hpp"

namespace pb::report::svg {

std::string escape(const std::string& s) {
  std::string o;
  o.reserve(s.size());
  for (char c : s) switch (c) {
      case '&': o += "&amp;"; break;
      case '<': o += "&lt;"; break;
      case '>': o += "&gt;"; break;
      case '"': o += "&quot;"; break;
      case '\'': o += "&#39;"; break;
      default:
        // Control characters are not allowed in XML 1.0 (tab, newline, CR aside).
        if (static_cast<unsigned char>(c) < 0x20 && c != '\t' && c != '\n' && c != '\r') o += ' ';
        else o += c;
    }
  return o;
}

Marker marker_for(size_t i) {
  static const Marker m[] = {Marker::circle, Marker::square, Marker::triangle, Marker::diamond, Marker::cross};
  return m[i % 5];
}

namespace {

std::string px(double v) {
  char b[32];
  std::snprintf(b, sizeof(b), "%.2f", v);
  return b;
}

std::string safe_id(const std::string& s) {
  std::string o = "p";
  for (char c : s) o += std::isalnum(static_cast<unsigned char>(c)) ? c : '-';
  return o;
}

double text_width(const std::string& s, double font_px) {
  // A rough width estimate for layout (sans-serif averages about 0.56 em per character).
  size_t chars = 0;
  for (unsigned char c : s) chars += (c & 0xC0) != 0x80;  // count UTF-8 code points
  return double(chars) * font_px * 0.56;
}

struct Scale {
  double lo = 0, hi = 1;
  bool log = false;
  std::vector<double> ticks;
  std::vector<bool> labelled;  // per tick: has a label (log axes: minor ticks are unlabelled)
  bool valid(double v) const { return std::isfinite(v) && (!log || v > 0); }
  double t(double v) const { return log ? std::log10(v) : v; }
  double frac(double v) const { return (t(v) - t(lo)) / (t(hi) - t(lo)); }
};

double nice_step(double raw) {
  const double p = std::pow(10.0, std::floor(std::log10(raw)));
  const double m = raw / p;
  return (m <= 1 ? 1 : m <= 2 ? 2 : m <= 5 ? 5 : 10) * p;
}

Scale make_scale(const Axis& a, std::vector<double> vals) {
  Scale s;
  s.log = a.log;
  std::vector<double> ok;
  for (double v : vals)
    if (s.valid(v)) ok.push_back(v);
  for (double v : a.ticks)
    if (s.valid(v)) ok.push_back(v);
  if (a.lo < a.hi && (!a.log || a.lo > 0)) {
    s.lo = a.lo, s.hi = a.hi;
  } else if (ok.empty()) {
    s.lo = a.log ? 1 : 0, s.hi = a.log ? 10 : 1;
  } else {
    s.lo = *std::min_element(ok.begin(), ok.end());
    s.hi = *std::max_element(ok.begin(), ok.end());
    if (!a.log && a.include_zero) s.lo = std::min(s.lo, 0.0), s.hi = std::max(s.hi, 0.0);
    if (s.lo == s.hi) {
      if (a.log) s.lo /= 2, s.hi *= 2;
      else {
        const double d = s.lo == 0 ? 1 : std::abs(s.lo) * 0.1;
        s.lo -= d, s.hi += d;
      }
    }
    if (a.log) {
      const double span = std::log10(s.hi) - std::log10(s.lo), pad = std::max(0.04, 0.06 * span);
      s.lo = std::pow(10.0, std::log10(s.lo) - pad);
      s.hi = std::pow(10.0, std::log10(s.hi) + pad);
    } else {
      const double step = nice_step((s.hi - s.lo) / 5);
      s.lo = std::floor(s.lo / step + 1e-9) * step;
      s.hi = std::ceil(s.hi / step - 1e-9) * step;
    }
  }
  if (!a.ticks.empty()) {
    for (double v : a.ticks)
      if (s.valid(v) && v >= s.lo && v <= s.hi) s.ticks.push_back(v);
    s.labelled.assign(s.ticks.size(), true);
    return s;
  }
  if (!a.log) {
    const double step = nice_step((s.hi - s.lo) / 5);
    for (double v = std::ceil(s.lo / step - 1e-9) * step; v <= s.hi + step * 1e-9; v += step)
      s.ticks.push_back(std::abs(v) < step * 1e-9 ? 0.0 : v);
    s.labelled.assign(s.ticks.size(), true);
    return s;
  }
  const std::vector<std::vector<double>> sets = {{1}, {1, 2, 5}, {1, 2, 3, 4, 5, 6, 7, 8, 9}};
  size_t set = 0;
  for (; set < sets.size(); ++set) {
    s.ticks.clear();
    for (int e = int(std::floor(std::log10(s.lo))); e <= int(std::ceil(std::log10(s.hi))); ++e)
      for (double k : sets[set]) {
        const double v = k * std::pow(10.0, e);
        if (v >= s.lo * (1 - 1e-9) && v <= s.hi * (1 + 1e-9)) s.ticks.push_back(v);
      }
    if (s.ticks.size() >= 3) break;
  }
  if (s.ticks.size() < 2) {  // less than a factor of two in range: linear steps between the ends
    const double step = nice_step((s.hi - s.lo) / 4);
    s.ticks.clear();
    for (double v = std::ceil(s.lo / step - 1e-9) * step; v <= s.hi * (1 + 1e-9); v += step) s.ticks.push_back(v);
    s.labelled.assign(s.ticks.size(), true);
    return s;
  }
  while (set == 0 && s.ticks.size() > 10) {  // many decades: every other one
    std::vector<double> t;
    for (size_t i = 0; i < s.ticks.size(); i += 2) t.push_back(s.ticks[i]);
    s.ticks = t;
  }
  // With 1..9 per decade, only 1, 2, 3 and 5 carry labels (unless there are few ticks).
  for (double v : s.ticks) {
    const double m = v / std::pow(10.0, std::floor(std::log10(v) + 1e-9));
    bool major = s.ticks.size() <= 6 || set < 2;
    for (double k : {1.0, 2.0, 3.0, 5.0}) major = major || std::abs(m - k) < 1e-6;
    s.labelled.push_back(major);
  }
  return s;
}

std::string marker_svg(Marker m, double x, double y, double r, const std::string& color, const std::string& title) {
  std::ostringstream o;
  const std::string c = escape(color);
  const std::string t = title.empty() ? "" : "<title>" + escape(title) + "</title>";
  const std::string close = t.empty() ? "/>" : ">" + t;
  switch (m) {
    case Marker::none: return "";
    case Marker::circle:
      o << "<circle cx=\"" << px(x) << "\" cy=\"" << px(y) << "\" r=\"" << px(r) << "\" fill=\"" << c << "\"" << close
        << (t.empty() ? "" : "</circle>");
      break;
    case Marker::square:
      o << "<rect x=\"" << px(x - r) << "\" y=\"" << px(y - r) << "\" width=\"" << px(2 * r) << "\" height=\"" << px(2 * r)
        << "\" fill=\"" << c << "\"" << close << (t.empty() ? "" : "</rect>");
      break;
    case Marker::triangle:
      o << "<polygon points=\"" << px(x) << "," << px(y - 1.2 * r) << " " << px(x + 1.1 * r) << "," << px(y + 0.8 * r) << " "
        << px(x - 1.1 * r) << "," << px(y + 0.8 * r) << "\" fill=\"" << c << "\"" << close << (t.empty() ? "" : "</polygon>");
      break;
    case Marker::diamond:
      o << "<polygon points=\"" << px(x) << "," << px(y - 1.3 * r) << " " << px(x + 1.1 * r) << "," << px(y) << " " << px(x)
        << "," << px(y + 1.3 * r) << " " << px(x - 1.1 * r) << "," << px(y) << "\" fill=\"" << c << "\"" << close
        << (t.empty() ? "" : "</polygon>");
      break;
    case Marker::cross:
      o << "<path d=\"M" << px(x - r) << " " << px(y - r) << "L" << px(x + r) << " " << px(y + r) << "M" << px(x - r) << " "
        << px(y + r) << "L" << px(x + r) << " " << px(y - r) << "\" stroke=\"" << c << "\" stroke-width=\"2\"" << close
        << (t.empty() ? "" : "</path>");
      break;
  }
  return o.str();
}

std::string stroke_attrs(const Style& s) {
  std::string a = " fill=\"none\" stroke=\"" + escape(s.color) + "\" stroke-width=\"" + px(s.width) + "\"";
  if (s.dashed) a += " stroke-dasharray=\"5,3\"";
  if (s.opacity < 1) a += " stroke-opacity=\"" + px(s.opacity) + "\"";
  return a;
}

std::string series_attr(const Style& s) { return s.series.empty() ? "" : " data-series=\"" + escape(s.series) + "\""; }

// Legend entries flowed in rows under the panel; returns the SVG and adds to `height`.
template <class Entry>
std::string legend_svg(const std::vector<Entry>& entries, double width, double top, double& height) {
  std::ostringstream o;
  double x = 10, y = top + 12;
  int rows = entries.empty() ? 0 : 1;
  for (const auto& e : entries) {
    const double w = 30 + text_width(e.name, 11) + 14;
    if (x + w > width - 6 && x > 10) x = 10, y += 17, ++rows;
    if (e.swatch) {
      o << "<rect x=\"" << px(x) << "\" y=\"" << px(y - 6) << "\" width=\"22\" height=\"10\" fill=\"" << escape(e.style.color)
        << "\" fill-opacity=\"" << px(e.style.opacity) << "\"/>";
    } else {
      if (e.style.width > 0)
        o << "<line x1=\"" << px(x) << "\" y1=\"" << px(y - 1) << "\" x2=\"" << px(x + 22) << "\" y2=\"" << px(y - 1) << "\""
          << stroke_attrs(e.style) << "/>";
      o << marker_svg(e.style.marker, x + 11, y - 1, e.style.marker_size * 0.9, e.style.color, "");
    }
    o << "<text x=\"" << px(x + 28) << "\" y=\"" << px(y + 3) << "\" font-size=\"11\">" << escape(e.name) << "</text>";
    x += w;
  }
  height += rows * 17 + (rows ? 6 : 0);
  return o.str();
}

// Notes wrapped to the panel width.
std::string notes_svg(const std::vector<std::string>& notes, double width, double top, double& height) {
  std::ostringstream o;
  const size_t max_chars = size_t(std::max(20.0, (width - 16) / (10.5 * 0.56)));
  double y = top + 12;
  for (const auto& n : notes) {
    std::istringstream words(n);
    std::string w, line;
    std::vector<std::string> lines;
    while (words >> w) {
      if (!line.empty() && line.size() + 1 + w.size() > max_chars) lines.push_back(line), line.clear();
      line += (line.empty() ? "" : " ") + w;
    }
    if (!line.empty()) lines.push_back(line);
    for (const auto& l : lines) {
      o << "<text x=\"8\" y=\"" << px(y) << "\" font-size=\"10.5\" fill=\"#555555\">" << escape(l) << "</text>";
      y += 14;
      height += 14;
    }
  }
  if (!notes.empty()) height += 4;
  return o.str();
}

struct Frame {
  double ml = 62, mr = 16, mt, mb = 44, pw, ph;
};

std::string axes_svg(const Frame& f, const Scale& sx, const Scale& sy, const Axis& ax, const Axis& ay) {
  std::ostringstream o;
  auto X = [&](double v) { return f.ml + f.pw * sx.frac(v); };
  auto Y = [&](double v) { return f.mt + f.ph * (1 - sy.frac(v)); };
  o << "<g stroke=\"#e3e3e3\" stroke-width=\"1\">";
  for (double v : sx.ticks) o << "<line x1=\"" << px(X(v)) << "\" y1=\"" << px(f.mt) << "\" x2=\"" << px(X(v)) << "\" y2=\"" << px(f.mt + f.ph) << "\"/>";
  for (double v : sy.ticks) o << "<line x1=\"" << px(f.ml) << "\" y1=\"" << px(Y(v)) << "\" x2=\"" << px(f.ml + f.pw) << "\" y2=\"" << px(Y(v)) << "\"/>";
  o << "</g>";
  o << "<rect x=\"" << px(f.ml) << "\" y=\"" << px(f.mt) << "\" width=\"" << px(f.pw) << "\" height=\"" << px(f.ph)
    << "\" fill=\"none\" stroke=\"#888888\"/>";
  o << "<g font-size=\"11\" fill=\"#333333\">";
  for (size_t i = 0; i < sx.ticks.size(); ++i) {
    const double v = sx.ticks[i];
    o << "<line x1=\"" << px(X(v)) << "\" y1=\"" << px(f.mt + f.ph) << "\" x2=\"" << px(X(v)) << "\" y2=\""
      << px(f.mt + f.ph + (sx.labelled[i] ? 4 : 2)) << "\" stroke=\"#888888\"/>";
    if (sx.labelled[i])
      o << "<text x=\"" << px(X(v)) << "\" y=\"" << px(f.mt + f.ph + 16) << "\" text-anchor=\"middle\">" << escape(format_number(v)) << "</text>";
  }
  for (size_t i = 0; i < sy.ticks.size(); ++i) {
    const double v = sy.ticks[i];
    o << "<line x1=\"" << px(f.ml - (sy.labelled[i] ? 4 : 2)) << "\" y1=\"" << px(Y(v)) << "\" x2=\"" << px(f.ml) << "\" y2=\""
      << px(Y(v)) << "\" stroke=\"#888888\"/>";
    if (sy.labelled[i])
      o << "<text x=\"" << px(f.ml - 6) << "\" y=\"" << px(Y(v) + 4) << "\" text-anchor=\"end\">" << escape(format_number(v)) << "</text>";
  }
  o << "</g>";
  const std::string xl = ax.label + (ax.log ? " (log scale)" : "");
  o << "<text x=\"" << px(f.ml + f.pw / 2) << "\" y=\"" << px(f.mt + f.ph + 34) << "\" text-anchor=\"middle\" font-size=\"12\">"
    << escape(xl) << "</text>";
  const std::string yl = ay.label + (ay.log ? " (log)" : "");
  o << "<text transform=\"translate(" << px(14) << "," << px(f.mt + f.ph / 2) << ") rotate(-90)\" text-anchor=\"middle\" font-size=\"12\">"
    << escape(yl) << "</text>";
  return o.str();
}

std::string svg_open(double w, double h, const std::string& title) {
  std::ostringstream o;
  o << "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"" << px(w) << "\" height=\"" << px(h) << "\" viewBox=\"0 0 "
    << px(w) << " " << px(h) << "\" font-family=\"DejaVu Sans, Arial, sans-serif\" role=\"img\">";
  o << "<title>" << escape(title) << "</title>";
  o << "<rect width=\"100%\" height=\"100%\" fill=\"#ffffff\"/>";
  if (!title.empty()) o << "<text x=\"8\" y=\"16\" font-size=\"13\" font-weight=\"bold\">" << escape(title) << "</text>";
  return o.str();
}

}  // namespace

Plot::Plot(std::string id, double width_px, double height_px, std::string title)
    : id_(safe_id(id)), title_(std::move(title)), w_(width_px), h_(height_px) {}

void Plot::line(const std::string& name, const std::vector<double>& xs, const std::vector<double>& ys, const Style& s) {
  items_.push_back({Kind::line, xs, ys, {}, {}, s, name});
  if (!name.empty()) legend_.push_back({name, s, false});
}

void Plot::error_bars(const std::vector<double>& xs, const std::vector<double>& lo, const std::vector<double>& hi,
                      const std::string& color) {
  Style s;
  s.color = color;
  s.width = 1.2;
  items_.push_back({Kind::error_bars, xs, {}, lo, hi, s, ""});
}

void Plot::band(const std::string& name, const std::vector<double>& xs, const std::vector<double>& lo,
                const std::vector<double>& hi, const std::string& color, double opacity, const std::string& series) {
  Style s;
  s.color = color;
  s.opacity = opacity;
  s.series = series;
  items_.push_back({Kind::band, xs, {}, lo, hi, s, name});
  if (!name.empty()) legend_.push_back({name, s, true});
}

void Plot::steps(const std::string& name, const std::vector<double>& edges, const std::vector<double>& counts,
                 const Style& s, bool filled) {
  items_.push_back({filled ? Kind::steps_filled : Kind::steps, edges, counts, {}, {}, s, name});
  if (!name.empty()) {
    Style ls = s;
    ls.marker = Marker::none;
    legend_.push_back({name, ls, filled});
  }
}

void Plot::hline(double yv, const Style& s, const std::string& label, bool label_left) {
  items_.push_back({Kind::hline, {}, {yv}, {}, {label_left ? 1.0 : 0.0}, s, label});
}
void Plot::vline(double xv, const Style& s, const std::string& label) { items_.push_back({Kind::vline, {xv}, {}, {}, {}, s, label}); }
void Plot::text(double xv, double yv, const std::string& t, const std::string& color) {
  Style s;
  s.color = color;
  items_.push_back({Kind::text, {xv}, {yv}, {}, {}, s, t});
}
void Plot::note(const std::string& t) { notes_.push_back(t); }

namespace {

// One rendering of a plot panel: the frame and the two scales, data to px.
struct Canvas {
  Frame f;
  Scale sx, sy;
  double X(double v) const { return f.ml + f.pw * sx.frac(v); }
  double Y(double v) const { return f.mt + f.ph * (1 - sy.frac(v)); }
};

std::string band_svg(const Canvas& c, const std::vector<double>& xs, const std::vector<double>& lo,
                     const std::vector<double>& hi, const Style& st) {
  std::ostringstream body;
  std::vector<std::pair<double, std::pair<double, double>>> run;
  auto flush = [&] {
    if (run.size() >= 2) {
      body << "<polygon points=\"";
      for (const auto& p : run) body << px(c.X(p.first)) << "," << px(c.Y(p.second.second)) << " ";
      for (auto r = run.rbegin(); r != run.rend(); ++r) body << px(c.X(r->first)) << "," << px(c.Y(r->second.first)) << " ";
      body << "\" fill=\"" << escape(st.color) << "\" fill-opacity=\"" << px(st.opacity) << "\" stroke=\"none\""
           << series_attr(st) << "/>";
    }
    run.clear();
  };
  for (size_t i = 0; i < xs.size(); ++i) {
    if (c.sx.valid(xs[i]) && c.sy.valid(lo[i]) && c.sy.valid(hi[i])) run.push_back({xs[i], {lo[i], hi[i]}});
    else flush();
  }
  flush();
  return body.str();
}

std::string steps_svg(const Canvas& c, const std::vector<double>& edges, const std::vector<double>& counts, const Style& st,
                      bool filled) {
  const double bottom = c.f.mt + c.f.ph;
  const double y0 = c.sy.valid(0) ? c.Y(0) : bottom;
  auto YC = [&](double v) { return c.sy.valid(v) ? std::min(c.Y(v), bottom) : bottom; };
  std::ostringstream d;
  bool open = false;
  for (size_t i = 0; i + 1 < edges.size() && i < counts.size(); ++i) {
    const bool ok = c.sx.valid(edges[i]) && c.sx.valid(edges[i + 1]) && std::isfinite(counts[i]);
    if (!ok) {
      if (open) d << "V" << px(y0) << (filled ? "Z" : "");
      open = false;
      continue;
    }
    if (!open) d << "M" << px(c.X(edges[i])) << " " << px(y0);
    d << "V" << px(YC(counts[i])) << "H" << px(c.X(edges[i + 1]));
    open = true;
  }
  if (open) d << "V" << px(y0) << (filled ? "Z" : "");
  if (d.str().empty()) return "";
  if (filled)
    return "<path d=\"" + d.str() + "\" fill=\"" + escape(st.color) + "\" fill-opacity=\"" + px(st.opacity) + "\" stroke=\"none\"/>";
  return "<path d=\"" + d.str() + "\"" + stroke_attrs(st) + "/>";
}

std::string line_svg(const Canvas& c, const std::vector<double>& xs, const std::vector<double>& ys, const Style& st,
                     const std::string& label) {
  std::ostringstream body, d;
  bool pen = false;
  for (size_t i = 0; i < xs.size() && i < ys.size(); ++i) {
    if (!(c.sx.valid(xs[i]) && c.sy.valid(ys[i]))) {
      pen = false;
      continue;
    }
    d << (pen ? "L" : "M") << px(c.X(xs[i])) << " " << px(c.Y(ys[i]));
    pen = true;
  }
  if (st.width > 0 && !d.str().empty()) body << "<path d=\"" << d.str() << "\"" << stroke_attrs(st) << series_attr(st) << "/>";
  for (size_t i = 0; i < xs.size() && i < ys.size(); ++i)
    if (c.sx.valid(xs[i]) && c.sy.valid(ys[i]))
      body << marker_svg(st.marker, c.X(xs[i]), c.Y(ys[i]), st.marker_size, st.color,
                         (label.empty() ? "" : label + ": ") + format_number(xs[i]) + ", " + format_number(ys[i]));
  return body.str();
}

std::string error_bars_svg(const Canvas& c, const std::vector<double>& xs, const std::vector<double>& lo,
                           const std::vector<double>& hi, const Style& st) {
  std::ostringstream body;
  for (size_t i = 0; i < xs.size(); ++i) {
    if (!(c.sx.valid(xs[i]) && c.sy.valid(lo[i]) && c.sy.valid(hi[i]))) continue;
    const double xp = c.X(xs[i]), y1 = c.Y(lo[i]), y2 = c.Y(hi[i]);
    body << "<path d=\"M" << px(xp) << " " << px(y1) << "V" << px(y2) << "M" << px(xp - 3) << " " << px(y1) << "H" << px(xp + 3)
         << "M" << px(xp - 3) << " " << px(y2) << "H" << px(xp + 3) << "\"" << stroke_attrs(st) << "/>";
  }
  return body.str();
}

// A reference line across the panel (body) and its label (overlay, above the data).
void hline_svg(const Canvas& c, double yv, const Style& st, const std::string& label, bool left, std::ostream& body,
               std::ostream& overlay) {
  if (!c.sy.valid(yv) || yv < c.sy.lo || yv > c.sy.hi) return;
  body << "<line x1=\"" << px(c.f.ml) << "\" y1=\"" << px(c.Y(yv)) << "\" x2=\"" << px(c.f.ml + c.f.pw) << "\" y2=\""
       << px(c.Y(yv)) << "\"" << stroke_attrs(st) << series_attr(st) << "/>";
  if (label.empty()) return;
  overlay << "<text x=\"" << px(left ? c.f.ml + 4 : c.f.ml + c.f.pw - 4) << "\" y=\"" << px(c.Y(yv) - 4) << "\" text-anchor=\""
          << (left ? "start" : "end") << "\" font-size=\"10\" fill=\"" << escape(st.color) << "\">" << escape(label) << "</text>";
}

void vline_svg(const Canvas& c, double xv, const Style& st, const std::string& label, std::ostream& body, std::ostream& overlay) {
  if (!c.sx.valid(xv) || xv < c.sx.lo || xv > c.sx.hi) return;
  body << "<line x1=\"" << px(c.X(xv)) << "\" y1=\"" << px(c.f.mt) << "\" x2=\"" << px(c.X(xv)) << "\" y2=\""
       << px(c.f.mt + c.f.ph) << "\"" << stroke_attrs(st) << series_attr(st) << "/>";
  if (label.empty()) return;
  overlay << "<text x=\"" << px(c.X(xv) - 3) << "\" y=\"" << px(c.f.mt + 11) << "\" text-anchor=\"end\" font-size=\"10\" fill=\""
          << escape(st.color) << "\">" << escape(label) << "</text>";
}

std::string text_svg(const Canvas& c, double xv, double yv, const std::string& t, const Style& st) {
  if (!(c.sx.valid(xv) && c.sy.valid(yv))) return "";
  const double xp = c.X(xv);
  const bool right_half = xp > c.f.ml + 0.7 * c.f.pw;  // keep the label inside the panel
  std::ostringstream o;
  o << "<text x=\"" << px(right_half ? xp - 5 : xp + 5) << "\" y=\"" << px(c.Y(yv) - 5) << "\" text-anchor=\""
    << (right_half ? "end" : "start") << "\" font-size=\"10\" fill=\"" << escape(st.color) << "\">" << escape(t) << "</text>";
  return o.str();
}

}  // namespace

// Layout (the frame, and scales over every drawn value), then the items in order inside the
// clipped panel with labels above them, then the legend and the notes below.
std::string Plot::render() const {
  Canvas c;
  c.f.mt = title_.empty() ? 10 : 26;
  c.f.pw = w_ - c.f.ml - c.f.mr;
  c.f.ph = h_ - c.f.mt - c.f.mb;
  std::vector<double> xv, yv;
  for (const auto& it : items_) {
    xv.insert(xv.end(), it.xs.begin(), it.xs.end());
    if (it.kind == Kind::steps || it.kind == Kind::steps_filled) yv.push_back(0);
    if (it.kind == Kind::text) continue;  // annotations do not stretch the axes
    yv.insert(yv.end(), it.ys.begin(), it.ys.end());
    yv.insert(yv.end(), it.lo.begin(), it.lo.end());
    yv.insert(yv.end(), it.hi.begin(), it.hi.end());
  }
  c.sx = make_scale(x, xv), c.sy = make_scale(y, yv);
  std::ostringstream body;
  body << axes_svg(c.f, c.sx, c.sy, x, y);
  const std::string clip = id_ + "-clip";
  body << "<clipPath id=\"" << clip << "\"><rect x=\"" << px(c.f.ml - 6) << "\" y=\"" << px(c.f.mt - 6) << "\" width=\""
       << px(c.f.pw + 12) << "\" height=\"" << px(c.f.ph + 12) << "\"/></clipPath>";
  body << "<g clip-path=\"url(#" << clip << ")\">";
  std::ostringstream overlay;  // labels of reference lines, above the data
  for (const auto& it : items_) {
    switch (it.kind) {
      case Kind::band: body << band_svg(c, it.xs, it.lo, it.hi, it.style); break;
      case Kind::steps:
      case Kind::steps_filled: body << steps_svg(c, it.xs, it.ys, it.style, it.kind == Kind::steps_filled); break;
      case Kind::line: body << line_svg(c, it.xs, it.ys, it.style, it.label); break;
      case Kind::error_bars: body << error_bars_svg(c, it.xs, it.lo, it.hi, it.style); break;
      case Kind::hline: hline_svg(c, it.ys[0], it.style, it.label, !it.hi.empty() && it.hi[0] > 0, body, overlay); break;
      case Kind::vline: vline_svg(c, it.xs[0], it.style, it.label, body, overlay); break;
      case Kind::text: overlay << text_svg(c, it.xs[0], it.ys[0], it.label, it.style); break;
    }
  }
  body << "</g>" << overlay.str();
  double height = h_;
  const std::string legend = legend_svg(legend_, w_, h_ - 6, height);
  const std::string notes = notes_svg(notes_, w_, height - 2, height);
  return svg_open(w_, height, title_) + body.str() + legend + notes + "</svg>";
}

std::string bar_chart(const std::string& id, double width_px, double height_px, const std::string& title,
                      const std::vector<std::string>& categories, const std::vector<BarSeries>& series,
                      const std::string& y_label, const std::vector<std::pair<double, std::string>>& ref_lines) {
  (void)id;
  Frame f;
  f.mt = title.empty() ? 10 : 26;
  f.pw = width_px - f.ml - f.mr;
  f.ph = height_px - f.mt - f.mb;
  std::vector<double> vals{0};
  for (const auto& s : series) vals.insert(vals.end(), s.values.begin(), s.values.end());
  for (const auto& r : ref_lines) vals.push_back(r.first);
  Axis ay;
  ay.label = y_label;
  ay.include_zero = true;
  const Scale sy = make_scale(ay, vals);
  auto Y = [&](double v) { return f.mt + f.ph * (1 - sy.frac(v)); };
  std::ostringstream o;
  o << "<g stroke=\"#e3e3e3\">";
  for (double v : sy.ticks) o << "<line x1=\"" << px(f.ml) << "\" y1=\"" << px(Y(v)) << "\" x2=\"" << px(f.ml + f.pw) << "\" y2=\"" << px(Y(v)) << "\"/>";
  o << "</g><rect x=\"" << px(f.ml) << "\" y=\"" << px(f.mt) << "\" width=\"" << px(f.pw) << "\" height=\"" << px(f.ph)
    << "\" fill=\"none\" stroke=\"#888888\"/>";
  o << "<g font-size=\"11\" fill=\"#333333\">";
  for (double v : sy.ticks)
    o << "<text x=\"" << px(f.ml - 6) << "\" y=\"" << px(Y(v) + 4) << "\" text-anchor=\"end\">" << escape(format_number(v)) << "</text>";
  o << "</g>";
  const double gw = categories.empty() ? f.pw : f.pw / double(categories.size());
  const double bw = series.empty() ? 0 : gw * 0.8 / double(series.size());
  for (size_t c = 0; c < categories.size(); ++c) {
    const double gx = f.ml + gw * double(c) + gw * 0.1;
    for (size_t s = 0; s < series.size(); ++s) {
      const double v = c < series[s].values.size() ? series[s].values[c] : NAN;
      const double bx = gx + bw * double(s);
      const std::string tip = series[s].name + ", " + categories[c] + ": " + format_number(v) + (y_label.empty() ? "" : " " + y_label);
      if (!std::isfinite(v)) {
        o << "<text x=\"" << px(bx + bw / 2) << "\" y=\"" << px(Y(0) - 3) << "\" text-anchor=\"middle\" font-size=\"9\" fill=\"#777777\">n/a<title>"
          << escape(tip) << "</title></text>";
        continue;
      }
      const double y1 = Y(std::max(v, 0.0)), y2 = Y(std::min(v, 0.0));
      o << "<rect x=\"" << px(bx) << "\" y=\"" << px(y1) << "\" width=\"" << px(std::max(1.0, bw - 1)) << "\" height=\""
        << px(std::max(0.5, y2 - y1)) << "\" fill=\"" << escape(series[s].color) << "\"><title>" << escape(tip) << "</title></rect>";
    }
    o << "<text x=\"" << px(f.ml + gw * (double(c) + 0.5)) << "\" y=\"" << px(f.mt + f.ph + 16) << "\" text-anchor=\"middle\" font-size=\"11\">"
      << escape(categories[c]) << "</text>";
  }
  o << "<line x1=\"" << px(f.ml) << "\" y1=\"" << px(Y(0)) << "\" x2=\"" << px(f.ml + f.pw) << "\" y2=\"" << px(Y(0))
    << "\" stroke=\"#333333\"/>";
  for (const auto& r : ref_lines) {
    if (!std::isfinite(r.first) || r.first < sy.lo || r.first > sy.hi) continue;
    o << "<line x1=\"" << px(f.ml) << "\" y1=\"" << px(Y(r.first)) << "\" x2=\"" << px(f.ml + f.pw) << "\" y2=\"" << px(Y(r.first))
      << "\" stroke=\"#B00000\" stroke-dasharray=\"5,3\"/>";
  }
  o << "<text transform=\"translate(14," << px(f.mt + f.ph / 2) << ") rotate(-90)\" text-anchor=\"middle\" font-size=\"12\">"
    << escape(y_label) << "</text>";
  struct Entry {
    std::string name;
    Style style;
    bool swatch;
  };
  std::vector<Entry> entries;
  for (const auto& s : series) {
    Style st;
    st.color = s.color;
    entries.push_back({s.name, st, true});
  }
  for (const auto& r : ref_lines) {
    if (r.second.empty()) continue;
    Style st;
    st.color = "#B00000";
    st.dashed = true;
    st.width = 1.2;
    st.marker = Marker::none;
    entries.push_back({r.second, st, false});
  }
  double height = height_px;
  const std::string legend = legend_svg(entries, width_px, height_px - 14, height);
  return svg_open(width_px, height, title) + o.str() + legend + "</svg>";
}

}  // namespace pb::report::svg
