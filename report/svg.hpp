#pragma once
// A small SVG plot writer of our own for report.html: one panel with linear or log axes, ticks and
// grid, lines with markers, error bars, shaded bands, reference lines, histogram steps and a legend;
// and a grouped bar chart. Output is one well-formed <svg> element; all text is XML-escaped.
// Honest with missing values: a non-finite value (or one <= 0 on a log axis) is never drawn, lines
// break there, and nothing is invented to fill the gap.
#include <string>
#include <vector>

namespace pb::report::svg {

// XML escaping for text and attribute values (& < > " ').
std::string escape(const std::string& s);

enum class Marker { none, circle, square, triangle, diamond, cross };
Marker marker_for(size_t i);  // a distinct shape per series, so that colour is not the only cue

struct Axis {
  std::string label;
  bool log = false;
  double lo = 0, hi = 0;       // fixed range when lo < hi; otherwise from the data
  std::vector<double> ticks;   // explicit tick positions; empty: automatic
  bool include_zero = false;   // linear, automatic range: always show 0
};

struct Style {
  std::string color = "#333333";
  double width = 1.6;   // stroke width; 0 = no line (markers only)
  bool dashed = false;
  Marker marker = Marker::circle;
  double marker_size = 4;
  double opacity = 1;
  std::string series;   // non-empty: written as data-series="..." on the drawn element (tests find it)
};

class Plot {
 public:
  // `id` must be unique in the page (clip path); width and height of the whole panel in px,
  // before the legend and notes, which are added below.
  Plot(std::string id, double width_px, double height_px, std::string title = "");
  Axis x, y;

  // A polyline through (xs, ys) in the given order with optional markers; `name` empty = no legend.
  void line(const std::string& name, const std::vector<double>& xs, const std::vector<double>& ys, const Style& s);
  // Vertical error bars from lo to hi at xs (a bar with a missing end is not drawn).
  void error_bars(const std::vector<double>& xs, const std::vector<double>& lo, const std::vector<double>& hi,
                  const std::string& color);
  // A shaded band between lo(x) and hi(x); split where a value is missing.
  void band(const std::string& name, const std::vector<double>& xs, const std::vector<double>& lo,
            const std::vector<double>& hi, const std::string& color, double opacity = 0.2,
            const std::string& series = "");
  // Histogram on bin edges (counts.size() + 1 == edges.size()) as an outline; filled optionally.
  // On a log y axis an empty bin drops to the bottom of the panel.
  void steps(const std::string& name, const std::vector<double>& edges, const std::vector<double>& counts,
             const Style& s, bool filled);
  // Reference lines across the panel, with a short label at the end.
  void hline(double yv, const Style& s, const std::string& label = "", bool label_left = false);
  void vline(double xv, const Style& s, const std::string& label = "");
  // Text at data coordinates.
  void text(double xv, double yv, const std::string& t, const std::string& color = "#333333");
  // A line of text under the panel (e.g. which values are not defined).
  void note(const std::string& t);

  std::string render() const;

 private:
  enum class Kind { line, error_bars, band, steps, steps_filled, hline, vline, text };
  struct Item {
    Kind kind;
    std::vector<double> xs, ys, lo, hi;
    Style style;
    std::string label;
  };
  struct LegendEntry {
    std::string name;
    Style style;
    bool swatch;  // a band: a filled square
  };
  std::string id_, title_;
  double w_, h_;
  std::vector<Item> items_;
  std::vector<std::string> notes_;
  std::vector<LegendEntry> legend_;
};

// Grouped bars: one group of bars per category along x, one bar per series within a group;
// values[series][category]; a missing value gets an "n/a" mark instead of a bar. Reference lines
// are dashed, their labels go into the legend.
struct BarSeries {
  std::string name, color;
  std::vector<double> values;
};
std::string bar_chart(const std::string& id, double width_px, double height_px, const std::string& title,
                      const std::vector<std::string>& categories, const std::vector<BarSeries>& series,
                      const std::string& y_label, const std::vector<std::pair<double, std::string>>& ref_lines);

}  // namespace pb::report::svg
