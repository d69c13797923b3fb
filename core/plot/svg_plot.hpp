#pragma once
// Small SVG plots for salvor's HTML report: line/marker/stem plots with axes, ticks,
// grid, labels, a legend and an optional log scale, and a density plot that draws any
// number of points in a bounded number of elements (points are binned into a grid).
//
// Tick placement follows the "nice numbers" rule (steps of 1, 2 or 5 times a power of
// ten: P. S. Heckbert, "Nice numbers for graph labels", Graphics Gems, 1990).
// Colours are the Okabe–Ito colour-blind-safe set (Okabe & Ito, "Color Universal
// Design", 2008).
//
// The output is an <svg> element meant to be inlined in HTML (no external references,
// no scripts). Every plot carries class="plot" and the id it was given.

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

namespace salvor::plot {

struct Axis {
  std::string label{};             // with units, e.g. "frequency (MHz)"
  bool log = false;                // logarithmic scale (values <= 0 are skipped)
  std::optional<double> min{}, max{};  // fixed range; default: from the data (padded)
};

enum class SeriesStyle { line, markers, stem };

struct Series {
  std::string name{};              // legend text ("" = not in the legend)
  std::vector<double> x{}, y{};    // same length; NaN in y breaks a line
  std::string colour{};            // "" = next palette colour
  SeriesStyle style = SeriesStyle::line;
  double stroke_width = 1.6;
  bool dashed = false;
};

// A straight line across the plot at a data value (vertical: x; horizontal: y).
struct Rule {
  double value = 0;
  std::string label{};
  std::string colour = "#555555";
  bool dashed = true;
};

// A shaded range of x (e.g. where one sector lies on a trace).
struct Band {
  double from = 0, to = 0;
  std::string label{};
  std::string colour = "#f0e442";
};

struct PlotConfig {
  std::string id{};                // HTML id of the <svg>; must be non-empty, [A-Za-z0-9_-]
  std::string title{};
  double width = 720, height = 280;  // pixels (the viewBox; the page may scale it)
  Axis x{}, y{};
  bool legend = true;
};

class XYPlot {
 public:
  explicit XYPlot(PlotConfig config);  // throws salvor::Error(usage) on a bad id or size
  void add(Series s);                  // throws salvor::Error(usage) if x and y differ in length
  void add_vertical(Rule r) { vrules_.push_back(std::move(r)); }
  void add_horizontal(Rule r) { hrules_.push_back(std::move(r)); }
  void add_band(Band b) { bands_.push_back(std::move(b)); }
  std::string svg() const;
  size_t series_count() const { return series_.size(); }

 private:
  PlotConfig cfg_;
  std::vector<Series> series_;
  std::vector<Rule> vrules_, hrules_;
  std::vector<Band> bands_;
};

// A 2-D histogram drawn as shaded cells: memory and output size are bounded by the grid,
// whatever the number of points. Shade = sqrt(count / peak) quantized to a few levels, runs
// of equal shade along a row merged into one rectangle.
struct DensityConfig {
  std::string id{};
  std::string title{};
  double width = 720, height = 320;
  Axis x{}, y{};                   // min and max are required (the grid's extent)
  size_t columns = 180, rows = 110;
  std::string colour = "#0072b2";  // darkest shade
  int shade_levels = 8;
};

class DensityPlot {
 public:
  explicit DensityPlot(DensityConfig config);  // throws salvor::Error(usage)
  void add_point(double x, double y);          // points outside the extent are counted apart
  void add_horizontal(Rule r) { hrules_.push_back(std::move(r)); }
  void add_vertical(Rule r) { vrules_.push_back(std::move(r)); }
  uint64_t points() const { return inside_ + outside_; }
  uint64_t points_outside() const { return outside_; }
  uint32_t count_at(size_t column, size_t row) const { return grid_[row * cfg_.columns + column]; }
  std::string svg() const;

 private:
  DensityConfig cfg_;
  std::vector<uint32_t> grid_;  // rows x columns, row 0 at the top (highest y)
  uint64_t inside_ = 0, outside_ = 0;
  std::vector<Rule> hrules_, vrules_;
};

// Tick values for [lo, hi]: about `target` steps of 1, 2 or 5 x 10^k, covering the range.
std::vector<double> nice_ticks(double lo, double hi, int target = 6);
// Decade (and, for short ranges, 2 and 5) ticks of a log axis within [lo, hi] (lo > 0).
std::vector<double> log_ticks(double lo, double hi);
// Shortest readable text for a tick or a table value ("0.25", "1e+06", "-3").
std::string format_number(double v, int significant = 4);
// Text and attribute escaping for XML/HTML (& < > " ').
std::string xml_escape(std::string_view s);
// The i-th colour of the palette (cycles).
const char* palette_colour(size_t i);

}  // namespace salvor::plot
