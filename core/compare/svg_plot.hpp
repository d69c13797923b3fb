#pragma once
// A small SVG line plot: axes with ticks and labels, a linear x axis, a linear or
// logarithmic (decades) y axis, one polyline with markers per series, and a legend.
// Colours: the Okabe–Ito colour-blind-safe palette (Okabe & Ito, "Color Universal
// Design", 2008), each series also with its own marker shape so it reads in greyscale.
// On a log axis, points at zero cannot be drawn at their value: they sit on the bottom
// edge as hollow markers, and the caption says so.

#include <string>
#include <utility>
#include <vector>

namespace salvor::compare {

struct PlotSeries {
  std::string label;
  std::vector<std::pair<double, double>> points;  // (x, y), drawn in x order
};

struct PlotSpec {
  std::string title;
  std::string x_label;
  std::string y_label;
  bool log_y = false;
  std::vector<PlotSeries> series;
  int width = 640, height = 420;
};

std::string line_plot_svg(const PlotSpec& spec);

// "Nice" tick positions covering [lo, hi] (1, 2, 5 x 10^k steps), about `target` of them.
std::vector<double> nice_ticks(double lo, double hi, int target = 6);

// Escapes &, <, >, " for SVG text.
std::string xml_escape(const std::string& s);

}  // namespace salvor::compare
