#include "compare/svg_plot.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <sstream>

namespace salvor::compare {

namespace {

// Okabe–Ito, without yellow (too light on white).
const char* const kPalette[] = {"#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000"};
constexpr int kPaletteSize = 7;

std::string num(double v) {
  char b[32];
  std::snprintf(b, sizeof b, "%.2f", v);
  return b;
}

std::string tick_text(double v) {
  char b[32];
  if (v != 0 && (std::fabs(v) < 1e-3 || std::fabs(v) >= 1e5)) std::snprintf(b, sizeof b, "%.0e", v);
  else std::snprintf(b, sizeof b, "%g", v);
  return b;
}

// Marker k (shape by series) at (x, y), filled or hollow.
std::string marker(int k, double x, double y, const char* colour, bool hollow) {
  std::ostringstream o;
  const std::string fill = hollow ? "white" : colour;
  const std::string common = " fill=\"" + fill + "\" stroke=\"" + colour + "\" stroke-width=\"1.5\"/>";
  const double r = 4.5;
  switch (k % 4) {
    case 0: o << "<circle cx=\"" << num(x) << "\" cy=\"" << num(y) << "\" r=\"" << num(r) << "\"" << common; break;
    case 1: o << "<rect x=\"" << num(x - r) << "\" y=\"" << num(y - r) << "\" width=\"" << num(2 * r) << "\" height=\""
              << num(2 * r) << "\"" << common; break;
    case 2: o << "<polygon points=\"" << num(x) << "," << num(y - r - 1) << " " << num(x - r - 1) << "," << num(y + r)
              << " " << num(x + r + 1) << "," << num(y + r) << "\"" << common; break;
    default: o << "<polygon points=\"" << num(x) << "," << num(y - r - 1) << " " << num(x + r + 1) << "," << num(y)
               << " " << num(x) << "," << num(y + r + 1) << " " << num(x - r - 1) << "," << num(y) << "\"" << common;
  }
  return o.str();
}

}  // namespace

std::string xml_escape(const std::string& s) {
  std::string o;
  for (char c : s) {
    switch (c) {
      case '&': o += "&amp;"; break;
      case '<': o += "&lt;"; break;
      case '>': o += "&gt;"; break;
      case '"': o += "&quot;"; break;
      default: o += c;
    }
  }
  return o;
}

std::vector<double> nice_ticks(double lo, double hi, int target) {
  if (!(hi > lo)) return {lo};
  const double raw = (hi - lo) / std::max(1, target);
  const double mag = std::pow(10.0, std::floor(std::log10(raw)));
  double step = mag;
  for (double m : {1.0, 2.0, 5.0, 10.0})
    if (m * mag >= raw) {
      step = m * mag;
      break;
    }
  std::vector<double> t;
  for (double v = std::ceil(lo / step - 1e-9) * step; v <= hi + 1e-9 * step; v += step)
    t.push_back(std::fabs(v) < 1e-12 * step ? 0.0 : v);
  return t;
}

std::string line_plot_svg(const PlotSpec& spec) {
  const double W = spec.width, H = spec.height;
  const double left = 78, right = 170, top = 40, bottom = 62;  // legend on the right
  const double pw = W - left - right, ph = H - top - bottom;

  // Data ranges.
  double xmin = std::numeric_limits<double>::infinity(), xmax = -xmin;
  double ymin_pos = std::numeric_limits<double>::infinity(), ymin = ymin_pos, ymax = -ymin_pos;
  bool any = false, zero_on_log = false;
  for (const auto& s : spec.series)
    for (auto [x, y] : s.points) {
      if (!std::isfinite(x) || !std::isfinite(y)) continue;
      any = true;
      xmin = std::min(xmin, x);
      xmax = std::max(xmax, x);
      ymin = std::min(ymin, y);
      ymax = std::max(ymax, y);
      if (y > 0) ymin_pos = std::min(ymin_pos, y);
    }
  if (!any) {
    xmin = 0;
    xmax = 1;
    ymin = 0;
    ymax = 1;
  }
  if (xmax - xmin < 1e-12) {
    xmin -= 0.5;
    xmax += 0.5;
  }
  double y0, y1;  // axis range (log: decades as exponents)
  if (spec.log_y) {
    if (!std::isfinite(ymin_pos)) ymin_pos = 1e-6;  // nothing positive: an empty decade range
    y0 = std::floor(std::log10(ymin_pos)) - (ymin <= 0 ? 1 : 0);
    y1 = std::ceil(std::log10(std::max(ymax, ymin_pos)));
    if (y1 <= y0) y1 = y0 + 1;
  } else {
    y0 = std::min(0.0, ymin);
    y1 = ymax > y0 ? ymax : y0 + 1;
    auto t = nice_ticks(y0, y1);
    y1 = std::max(y1, t.back());
  }
  const double xpad = 0.04 * (xmax - xmin);
  const double x0 = xmin - xpad, x1 = xmax + xpad;
  auto px = [&](double x) { return left + (x - x0) / (x1 - x0) * pw; };
  auto py = [&](double y) {
    double v = spec.log_y ? (y > 0 ? std::log10(y) : y0) : y;
    v = std::clamp(v, y0, y1);
    return top + ph - (v - y0) / (y1 - y0) * ph;
  };

  std::ostringstream o;
  o << "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"" << W << "\" height=\"" << H << "\" viewBox=\"0 0 " << W
    << " " << H << "\" font-family=\"sans-serif\" font-size=\"12\">\n";
  o << "<rect width=\"100%\" height=\"100%\" fill=\"white\"/>\n";
  o << "<text x=\"" << num(left + pw / 2) << "\" y=\"22\" text-anchor=\"middle\" font-size=\"14\">"
    << xml_escape(spec.title) << "</text>\n";
  // Grid and ticks.
  o << "<g stroke=\"#d9d9d9\" stroke-width=\"1\">\n";
  std::vector<std::pair<double, std::string>> yt;
  if (spec.log_y) {
    for (int e = static_cast<int>(y0); e <= static_cast<int>(y1); ++e) {
      char b[16];
      std::snprintf(b, sizeof b, "1e%d", e);
      yt.emplace_back(std::pow(10.0, e), e == 0 ? "1" : b);
    }
  } else {
    for (double v : nice_ticks(y0, y1)) yt.emplace_back(v, tick_text(v));
  }
  for (const auto& [v, _] : yt) o << "<line x1=\"" << num(left) << "\" x2=\"" << num(left + pw) << "\" y1=\"" << num(py(v))
                                  << "\" y2=\"" << num(py(v)) << "\"/>\n";
  const auto xt = nice_ticks(xmin, xmax);
  for (double v : xt)
    if (v >= x0 && v <= x1)
      o << "<line y1=\"" << num(top) << "\" y2=\"" << num(top + ph) << "\" x1=\"" << num(px(v)) << "\" x2=\"" << num(px(v))
        << "\"/>\n";
  o << "</g>\n";
  o << "<rect x=\"" << num(left) << "\" y=\"" << num(top) << "\" width=\"" << num(pw) << "\" height=\"" << num(ph)
    << "\" fill=\"none\" stroke=\"black\"/>\n";
  for (const auto& [v, text] : yt)
    o << "<text x=\"" << num(left - 6) << "\" y=\"" << num(py(v) + 4) << "\" text-anchor=\"end\">" << text << "</text>\n";
  for (double v : xt)
    if (v >= x0 && v <= x1)
      o << "<text x=\"" << num(px(v)) << "\" y=\"" << num(top + ph + 16) << "\" text-anchor=\"middle\">" << tick_text(v)
        << "</text>\n";
  o << "<text x=\"" << num(left + pw / 2) << "\" y=\"" << num(H - 24) << "\" text-anchor=\"middle\">"
    << xml_escape(spec.x_label) << "</text>\n";
  o << "<text transform=\"translate(18," << num(top + ph / 2) << ") rotate(-90)\" text-anchor=\"middle\">"
    << xml_escape(spec.y_label) << "</text>\n";

  // Series.
  for (size_t k = 0; k < spec.series.size(); ++k) {
    const auto& s = spec.series[k];
    const char* colour = kPalette[k % kPaletteSize];
    auto pts = s.points;
    std::sort(pts.begin(), pts.end());
    std::string path;
    for (auto [x, y] : pts) {
      if (!std::isfinite(x) || !std::isfinite(y)) continue;
      path += (path.empty() ? "" : " ") + num(px(x)) + "," + num(py(y));
    }
    if (!path.empty())
      o << "<polyline points=\"" << path << "\" fill=\"none\" stroke=\"" << colour << "\" stroke-width=\"2\"/>\n";
    for (auto [x, y] : pts) {
      if (!std::isfinite(x) || !std::isfinite(y)) continue;
      const bool hollow = spec.log_y && y <= 0;
      zero_on_log |= hollow;
      o << marker(static_cast<int>(k), px(x), py(y), colour, hollow) << "\n";
    }
    const double ly = top + 10 + 20.0 * static_cast<double>(k);
    const double lx = left + pw + 14;
    o << "<line x1=\"" << num(lx) << "\" x2=\"" << num(lx + 24) << "\" y1=\"" << num(ly) << "\" y2=\"" << num(ly)
      << "\" stroke=\"" << colour << "\" stroke-width=\"2\"/>" << marker(static_cast<int>(k), lx + 12, ly, colour, false)
      << "<text x=\"" << num(lx + 32) << "\" y=\"" << num(ly + 4) << "\">" << xml_escape(s.label) << "</text>\n";
  }
  if (!any)
    o << "<text x=\"" << num(left + pw / 2) << "\" y=\"" << num(top + ph / 2) << "\" text-anchor=\"middle\" fill=\"#666\">"
      << "no corpus entries in this sweep</text>\n";
  if (zero_on_log)
    o << "<text x=\"" << num(left) << "\" y=\"" << num(H - 6) << "\" fill=\"#444\" font-size=\"11\">"
      << "hollow markers on the bottom edge: zero (no errors counted)</text>\n";
  o << "</svg>\n";
  return o.str();
}

}  // namespace salvor::compare
