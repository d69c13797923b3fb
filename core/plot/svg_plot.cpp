// SVG plots: see svg_plot.hpp. Nice tick steps after Heckbert (Graphics Gems, 1990).

#include "plot/svg_plot.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <sstream>

#include "common/error.hpp"

namespace salvor::plot {

namespace {

// Okabe & Ito (2008): blue, vermillion, bluish green, reddish purple, orange, sky blue, black.
constexpr const char* kPalette[] = {"#0072b2", "#d55e00", "#009e73", "#cc79a7", "#e69f00", "#56b4e9", "#000000"};

void check_id(const std::string& id, const char* what) {
  if (id.empty()) throw_usage(what, "plot id is empty");
  for (char c : id)
    if (!(std::isalnum(static_cast<unsigned char>(c)) || c == '-' || c == '_'))
      throw_usage(what, "plot id '" + id + "' may hold only letters, digits, '-' and '_'");
}

void check_size(double w, double h, const std::string& id) {
  if (!(w >= 120 && w <= 4000 && h >= 80 && h <= 4000))
    throw_usage(id, "plot size " + format_number(w) + " x " + format_number(h) + " outside 120..4000 x 80..4000");
}

// Coordinates with one decimal: enough for a screen, short in the file.
std::string px(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.1f", v);
  std::string s = buf;
  if (s.size() > 2 && s.compare(s.size() - 2, 2, ".0") == 0) s.resize(s.size() - 2);
  if (s == "-0") s = "0";
  return s;
}

// Data-to-pixel mapping of one axis.
struct Scale {
  double lo = 0, hi = 1;  // data range (log10 of it for a log axis)
  double p0 = 0, p1 = 1;  // pixel range (p0 at lo)
  bool log = false;
  double operator()(double v) const {
    double t = log ? std::log10(v) : v;
    return p0 + (t - lo) / (hi - lo) * (p1 - p0);
  }
  bool usable(double v) const { return std::isfinite(v) && (!log || v > 0); }
};

// The data range of an axis: fixed ends win; else min/max of the data, padded by 4 %;
// a degenerate range is widened so the mapping stays finite.
std::pair<double, double> axis_range(const Axis& a, double dmin, double dmax) {
  bool have = dmin <= dmax;
  double lo, hi;
  if (a.log) {
    lo = a.min ? std::log10(*a.min) : (have ? std::log10(dmin) : 0.0);
    hi = a.max ? std::log10(*a.max) : (have ? std::log10(dmax) : 1.0);
    if (!a.min && !a.max && have) { lo = std::floor(lo); hi = std::ceil(hi); }
  } else {
    lo = a.min ? *a.min : (have ? dmin : 0.0);
    hi = a.max ? *a.max : (have ? dmax : 1.0);
    double pad = 0.04 * (hi - lo);
    if (!a.min) lo -= pad;
    if (!a.max) hi += pad;
  }
  if (!(hi > lo)) {
    double c = lo, w = std::max(std::abs(c) * 0.05, 0.5);
    lo = c - w;
    hi = c + w;
  }
  return {lo, hi};
}

std::vector<double> ticks_for(const Scale& s) {
  if (s.log) return log_ticks(std::pow(10.0, s.lo), std::pow(10.0, s.hi));
  std::vector<double> t = nice_ticks(s.lo, s.hi, 6);
  std::vector<double> in;
  for (double v : t)
    if (v >= s.lo - 1e-9 * (s.hi - s.lo) && v <= s.hi + 1e-9 * (s.hi - s.lo)) in.push_back(v);
  return in;
}

std::string tick_text(double v, bool log) {
  if (log) {
    double e = std::log10(v);
    if (std::abs(e - std::round(e)) < 1e-9 && (std::abs(e) >= 4)) return "1e" + format_number(std::round(e));
  }
  return format_number(v, 3);
}

struct Frame {
  double left = 64, right = 18, top = 34, bottom = 46;
};

// Axes, grid, ticks and labels shared by both plot kinds.
void draw_axes(std::ostringstream& o, double width, double height, const Frame& f, const Scale& xs,
               const Scale& ys, const Axis& xa, const Axis& ya) {
  const double x0 = f.left, x1 = width - f.right, y0 = height - f.bottom, y1 = f.top;
  o << "<g class=\"grid\" stroke=\"#e3e3e3\" stroke-width=\"1\">";
  for (double t : ticks_for(xs)) o << "<line x1=\"" << px(xs(t)) << "\" y1=\"" << px(y0) << "\" x2=\"" << px(xs(t)) << "\" y2=\"" << px(y1) << "\"/>";
  for (double t : ticks_for(ys)) o << "<line x1=\"" << px(x0) << "\" y1=\"" << px(ys(t)) << "\" x2=\"" << px(x1) << "\" y2=\"" << px(ys(t)) << "\"/>";
  o << "</g>\n";
  o << "<rect class=\"frame\" x=\"" << px(x0) << "\" y=\"" << px(y1) << "\" width=\"" << px(x1 - x0) << "\" height=\"" << px(y0 - y1)
    << "\" fill=\"none\" stroke=\"#888888\" stroke-width=\"1\"/>\n";
  o << "<g class=\"x-axis\" font-size=\"11\" fill=\"#333333\" text-anchor=\"middle\">";
  for (double t : ticks_for(xs))
    o << "<line x1=\"" << px(xs(t)) << "\" y1=\"" << px(y0) << "\" x2=\"" << px(xs(t)) << "\" y2=\"" << px(y0 + 4)
      << "\" stroke=\"#888888\"/><text x=\"" << px(xs(t)) << "\" y=\"" << px(y0 + 16) << "\">" << xml_escape(tick_text(t, xs.log)) << "</text>";
  o << "<text class=\"axis-label\" x=\"" << px((x0 + x1) / 2) << "\" y=\"" << px(height - 8) << "\" font-size=\"12\">"
    << xml_escape(xa.label) << "</text></g>\n";
  o << "<g class=\"y-axis\" font-size=\"11\" fill=\"#333333\" text-anchor=\"end\">";
  for (double t : ticks_for(ys))
    o << "<line x1=\"" << px(x0 - 4) << "\" y1=\"" << px(ys(t)) << "\" x2=\"" << px(x0) << "\" y2=\"" << px(ys(t))
      << "\" stroke=\"#888888\"/><text x=\"" << px(x0 - 7) << "\" y=\"" << px(ys(t) + 4) << "\">" << xml_escape(tick_text(t, ys.log)) << "</text>";
  const double ym = (y0 + y1) / 2;
  o << "<text class=\"axis-label\" x=\"14\" y=\"" << px(ym) << "\" font-size=\"12\" text-anchor=\"middle\" transform=\"rotate(-90 14 "
    << px(ym) << ")\">" << xml_escape(ya.label) << "</text></g>\n";
}

void open_svg(std::ostringstream& o, const std::string& id, double w, double h, const std::string& title) {
  o << "<svg xmlns=\"http://www.w3.org/2000/svg\" class=\"plot\" id=\"" << id << "\" viewBox=\"0 0 " << px(w) << " " << px(h)
    << "\" width=\"" << px(w) << "\" height=\"" << px(h) << "\" font-family=\"sans-serif\" role=\"img\">\n";
  o << "<title>" << xml_escape(title) << "</title>\n";
  o << "<rect width=\"100%\" height=\"100%\" fill=\"#ffffff\"/>\n";
  o << "<text class=\"plot-title\" x=\"64\" y=\"20\" font-size=\"13\" font-weight=\"bold\" fill=\"#222222\">" << xml_escape(title) << "</text>\n";
}

void draw_rules(std::ostringstream& o, const std::vector<Rule>& v, const std::vector<Rule>& h, const Scale& xs,
                const Scale& ys, double x0, double x1, double y0, double y1, bool labels_outside = false) {
  int shown = 0;  // labels of successive vertical rules are staggered so they never collide
  for (const auto& r : v) {
    if (!xs.usable(r.value)) continue;
    double x = xs(r.value);
    if (x < x0 - 0.5 || x > x1 + 0.5) continue;
    o << "<g class=\"rule\"><line x1=\"" << px(x) << "\" y1=\"" << px(y0) << "\" x2=\"" << px(x) << "\" y2=\"" << px(y1) << "\" stroke=\""
      << r.colour << "\" stroke-width=\"1.2\"" << (r.dashed ? " stroke-dasharray=\"5 3\"" : "") << "/>";
    if (!r.label.empty()) {
      bool right_half = x > (x0 + x1) / 2;
      o << "<text x=\"" << px(right_half ? x - 4 : x + 4) << "\" y=\"" << px(y1 + 13 + 14 * (shown++ % 3)) << "\" font-size=\"11\" fill=\"" << r.colour
        << "\" text-anchor=\"" << (right_half ? "end" : "start") << "\">" << xml_escape(r.label) << "</text>";
    }
    o << "</g>\n";
  }
  for (const auto& r : h) {
    if (!ys.usable(r.value)) continue;
    double y = ys(r.value);
    if (y > y0 + 0.5 || y < y1 - 0.5) continue;
    o << "<g class=\"rule\"><line x1=\"" << px(x0) << "\" y1=\"" << px(y) << "\" x2=\"" << px(x1) << "\" y2=\"" << px(y) << "\" stroke=\""
      << r.colour << "\" stroke-width=\"1.2\"" << (r.dashed ? " stroke-dasharray=\"5 3\"" : "") << "/>";
    if (!r.label.empty() && labels_outside)
      o << "<text x=\"" << px(x1 + 5) << "\" y=\"" << px(y + 4) << "\" font-size=\"11\" fill=\"" << r.colour << "\">"
        << xml_escape(r.label) << "</text>";
    else if (!r.label.empty())
      o << "<text x=\"" << px(x1 - 4) << "\" y=\"" << px(y - 3) << "\" font-size=\"10\" fill=\"" << r.colour << "\" text-anchor=\"end\">"
        << xml_escape(r.label) << "</text>";
    o << "</g>\n";
  }
}

}  // namespace

const char* palette_colour(size_t i) { return kPalette[i % (sizeof kPalette / sizeof kPalette[0])]; }

std::string xml_escape(std::string_view s) {
  std::string out;
  out.reserve(s.size());
  for (char c : s) {
    switch (c) {
      case '&': out += "&amp;"; break;
      case '<': out += "&lt;"; break;
      case '>': out += "&gt;"; break;
      case '"': out += "&quot;"; break;
      case '\'': out += "&#39;"; break;
      default:
        // Control characters other than tab/newline are not allowed in XML 1.0.
        if (static_cast<unsigned char>(c) < 0x20 && c != '\t' && c != '\n') out += ' ';
        else out += c;
    }
  }
  return out;
}

std::string format_number(double v, int significant) {
  if (!std::isfinite(v)) return std::isnan(v) ? "n/a" : (v > 0 ? "inf" : "-inf");
  if (v == 0) return "0";
  char buf[48];
  double a = std::abs(v);
  if (a >= 1e6 || a < 1e-4) {
    std::snprintf(buf, sizeof buf, "%.*g", significant, v);
  } else {
    int digits = significant - 1 - static_cast<int>(std::floor(std::log10(a)));
    digits = std::clamp(digits, 0, 10);
    std::snprintf(buf, sizeof buf, "%.*f", digits, v);
    std::string s = buf;
    if (s.find('.') != std::string::npos) {
      while (s.back() == '0') s.pop_back();
      if (s.back() == '.') s.pop_back();
    }
    if (s == "-0") s = "0";
    return s;
  }
  return buf;
}

std::vector<double> nice_ticks(double lo, double hi, int target) {
  std::vector<double> t;
  if (!std::isfinite(lo) || !std::isfinite(hi) || target < 1) return t;
  if (hi < lo) std::swap(lo, hi);
  if (hi == lo) return {lo};
  double raw = (hi - lo) / target;
  double mag = std::pow(10.0, std::floor(std::log10(raw)));
  double f = raw / mag;
  double step = (f < 1.5 ? 1 : f < 3 ? 2 : f < 7 ? 5 : 10) * mag;
  double first = std::ceil(lo / step - 1e-9) * step;
  for (double v = first; v <= hi + 1e-9 * step && t.size() < 100; v += step) t.push_back(std::abs(v) < 1e-12 * step ? 0.0 : v);
  return t;
}

std::vector<double> log_ticks(double lo, double hi) {
  std::vector<double> t;
  if (!(lo > 0) || !(hi > lo) || !std::isfinite(hi)) return t;
  int e0 = static_cast<int>(std::floor(std::log10(lo) + 1e-9)), e1 = static_cast<int>(std::ceil(std::log10(hi) - 1e-9));
  const bool fine = (e1 - e0) <= 2;
  for (int e = e0; e <= e1 && t.size() < 60; ++e) {
    for (double m : {1.0, 2.0, 5.0}) {
      if (m != 1.0 && !fine) continue;
      double v = m * std::pow(10.0, e);
      if (v >= lo * (1 - 1e-9) && v <= hi * (1 + 1e-9)) t.push_back(v);
    }
  }
  return t;
}

XYPlot::XYPlot(PlotConfig config) : cfg_(std::move(config)) {
  check_id(cfg_.id, "plot");
  check_size(cfg_.width, cfg_.height, cfg_.id);
}

void XYPlot::add(Series s) {
  if (s.x.size() != s.y.size())
    throw_usage(cfg_.id, "series '" + s.name + "': " + std::to_string(s.x.size()) + " x values but " + std::to_string(s.y.size()) + " y values");
  if (s.colour.empty()) s.colour = palette_colour(series_.size());
  series_.push_back(std::move(s));
}

std::string XYPlot::svg() const {
  const double inf = std::numeric_limits<double>::infinity();
  double xmin = inf, xmax = -inf, ymin = inf, ymax = -inf;
  bool stems = false;
  for (const auto& s : series_) {
    stems = stems || s.style == SeriesStyle::stem;
    for (size_t i = 0; i < s.x.size(); ++i) {
      double x = s.x[i], y = s.y[i];
      if (!std::isfinite(x) || !std::isfinite(y) || (cfg_.x.log && x <= 0) || (cfg_.y.log && y <= 0)) continue;
      xmin = std::min(xmin, x); xmax = std::max(xmax, x);
      ymin = std::min(ymin, y); ymax = std::max(ymax, y);
    }
  }
  for (const auto& b : bands_) { xmin = std::min(xmin, b.from); xmax = std::max(xmax, b.to); }
  if (stems && !cfg_.y.log) { ymin = std::min(ymin, 0.0); ymax = std::max(ymax, 0.0); }
  Frame f;
  auto [xl, xh] = axis_range(cfg_.x, xmin, xmax);
  auto [yl, yh] = axis_range(cfg_.y, ymin, ymax);
  const double x0 = f.left, x1 = cfg_.width - f.right, y0 = cfg_.height - f.bottom, y1 = f.top;
  Scale xs{xl, xh, x0, x1, cfg_.x.log}, ys{yl, yh, y0, y1, cfg_.y.log};

  std::ostringstream o;
  open_svg(o, cfg_.id, cfg_.width, cfg_.height, cfg_.title);
  o << "<defs><clipPath id=\"" << cfg_.id << "-clip\"><rect x=\"" << px(x0) << "\" y=\"" << px(y1) << "\" width=\"" << px(x1 - x0)
    << "\" height=\"" << px(y0 - y1) << "\"/></clipPath></defs>\n";
  for (const auto& b : bands_) {
    double a = std::clamp(xs(b.from), x0, x1), c = std::clamp(xs(b.to), x0, x1);
    o << "<g class=\"band\"><rect x=\"" << px(a) << "\" y=\"" << px(y1) << "\" width=\"" << px(std::max(c - a, 1.0)) << "\" height=\""
      << px(y0 - y1) << "\" fill=\"" << b.colour << "\" fill-opacity=\"0.35\"/>";
    if (!b.label.empty())
      o << "<text x=\"" << px(c + 4 > x1 - 60 ? a - 4 : c + 4) << "\" y=\"" << px(y0 - 6) << "\" font-size=\"11\" fill=\"#555555\" text-anchor=\""
        << (c + 4 > x1 - 60 ? "end" : "start") << "\">" << xml_escape(b.label) << "</text>";
    o << "</g>\n";
  }
  draw_axes(o, cfg_.width, cfg_.height, f, xs, ys, cfg_.x, cfg_.y);
  o << "<g clip-path=\"url(#" << cfg_.id << "-clip)\">\n";
  for (const auto& s : series_) {
    o << "<g class=\"series\" data-name=\"" << xml_escape(s.name) << "\">";
    if (s.style == SeriesStyle::line) {
      std::string d;
      bool pen = false;
      for (size_t i = 0; i < s.x.size(); ++i) {
        if (!xs.usable(s.x[i]) || !ys.usable(s.y[i])) { pen = false; continue; }
        d += pen ? "L" : "M";
        d += px(xs(s.x[i])) + " " + px(ys(s.y[i]));
        pen = true;
      }
      if (!d.empty())
        o << "<path d=\"" << d << "\" fill=\"none\" stroke=\"" << s.colour << "\" stroke-width=\"" << px(s.stroke_width)
          << "\" stroke-linejoin=\"round\"" << (s.dashed ? " stroke-dasharray=\"6 3\"" : "") << "/>";
    } else {
      const double base = ys.usable(0.0) ? std::clamp(ys(0.0), y1, y0) : y0;
      // Markers as one path of zero-length round-capped strokes: one element for any count.
      std::string d, stems_d;
      for (size_t i = 0; i < s.x.size(); ++i) {
        if (!xs.usable(s.x[i]) || !ys.usable(s.y[i])) continue;
        std::string X = px(xs(s.x[i])), Y = px(ys(s.y[i]));
        d += "M" + X + " " + Y + "h0";
        if (s.style == SeriesStyle::stem) stems_d += "M" + X + " " + px(base) + "V" + Y;
      }
      if (!stems_d.empty())
        o << "<path d=\"" << stems_d << "\" stroke=\"" << s.colour << "\" stroke-width=\"" << px(s.stroke_width) << "\"/>";
      if (!d.empty())
        o << "<path class=\"markers\" d=\"" << d << "\" stroke=\"" << s.colour << "\" stroke-width=\""
          << px(s.style == SeriesStyle::stem ? 7 : std::max(3.0, s.stroke_width * 2.5)) << "\" stroke-linecap=\"round\"/>";
    }
    o << "</g>\n";
  }
  o << "</g>\n";
  draw_rules(o, vrules_, hrules_, xs, ys, x0, x1, y0, y1);
  if (cfg_.legend) {
    // One row at the top right, right-aligned; text width estimated at 6.5 px a character.
    double total = 0;
    for (const auto& s : series_)
      if (!s.name.empty()) total += 30 + 6.5 * static_cast<double>(s.name.size()) + 14;
    double lx = std::max(x1 - total, x0 + 8 + 7.0 * static_cast<double>(cfg_.title.size()));
    o << "<g class=\"legend\" font-size=\"11\" fill=\"#333333\">";
    for (const auto& s : series_) {
      if (s.name.empty()) continue;
      o << "<line x1=\"" << px(lx) << "\" y1=\"16\" x2=\"" << px(lx + 24) << "\" y2=\"16\" stroke=\"" << s.colour << "\" stroke-width=\""
        << (s.style == SeriesStyle::line ? px(std::max(2.0, s.stroke_width)) : "5") << "\""
        << (s.style != SeriesStyle::line ? " stroke-linecap=\"round\" stroke-dasharray=\"0.1 11.9\"" : (s.dashed ? " stroke-dasharray=\"6 3\"" : ""))
        << "/><text x=\"" << px(lx + 30) << "\" y=\"20\">" << xml_escape(s.name) << "</text>";
      lx += 30 + 6.5 * static_cast<double>(s.name.size()) + 14;
    }
    o << "</g>\n";
  }
  o << "</svg>";
  return o.str();
}

DensityPlot::DensityPlot(DensityConfig config) : cfg_(std::move(config)) {
  check_id(cfg_.id, "density plot");
  check_size(cfg_.width, cfg_.height, cfg_.id);
  if (!cfg_.x.min || !cfg_.x.max || !cfg_.y.min || !cfg_.y.max || !(*cfg_.x.max > *cfg_.x.min) || !(*cfg_.y.max > *cfg_.y.min))
    throw_usage(cfg_.id, "a density plot needs a fixed x and y range with max > min");
  if (cfg_.x.log || cfg_.y.log) throw_usage(cfg_.id, "a density plot has linear axes only");
  if (cfg_.columns < 2 || cfg_.columns > 1000 || cfg_.rows < 2 || cfg_.rows > 1000)
    throw_usage(cfg_.id, "grid " + std::to_string(cfg_.columns) + " x " + std::to_string(cfg_.rows) + " outside 2..1000");
  if (cfg_.shade_levels < 2 || cfg_.shade_levels > 32) throw_usage(cfg_.id, "shade_levels must be 2..32");
  grid_.assign(cfg_.columns * cfg_.rows, 0);
}

void DensityPlot::add_point(double x, double y) {
  const double u = (x - *cfg_.x.min) / (*cfg_.x.max - *cfg_.x.min);
  const double v = (*cfg_.y.max - y) / (*cfg_.y.max - *cfg_.y.min);
  if (!(u >= 0 && u <= 1 && v >= 0 && v <= 1)) { ++outside_; return; }
  size_t c = std::min(cfg_.columns - 1, static_cast<size_t>(u * static_cast<double>(cfg_.columns)));
  size_t r = std::min(cfg_.rows - 1, static_cast<size_t>(v * static_cast<double>(cfg_.rows)));
  uint32_t& cell = grid_[r * cfg_.columns + c];
  if (cell != UINT32_MAX) ++cell;
  ++inside_;
}

std::string DensityPlot::svg() const {
  Frame f;
  f.right = 84;  // room for the labels of the horizontal rules, outside the data
  const double x0 = f.left, x1 = cfg_.width - f.right, y0 = cfg_.height - f.bottom, y1 = f.top;
  Scale xs{*cfg_.x.min, *cfg_.x.max, x0, x1, false}, ys{*cfg_.y.min, *cfg_.y.max, y0, y1, false};
  uint32_t peak = 0;
  for (uint32_t c : grid_) peak = std::max(peak, c);
  std::ostringstream o;
  open_svg(o, cfg_.id, cfg_.width, cfg_.height, cfg_.title);
  draw_axes(o, cfg_.width, cfg_.height, f, xs, ys, cfg_.x, cfg_.y);
  const double cw = (x1 - x0) / static_cast<double>(cfg_.columns), ch = (y0 - y1) / static_cast<double>(cfg_.rows);
  // Shade by the square root of the count: a log scale flattens a dense eye into one
  // tone, a linear one hides the sparse crossings (common practice, no source).
  auto level = [&](uint32_t c) -> int {
    if (c == 0 || peak == 0) return 0;
    double r = std::sqrt(static_cast<double>(c) / static_cast<double>(peak));
    int l = 1 + static_cast<int>(r * (cfg_.shade_levels - 1) + 0.5);
    return std::min(l, cfg_.shade_levels);
  };
  o << "<g class=\"density\" fill=\"" << cfg_.colour << "\" shape-rendering=\"crispEdges\">\n";
  for (int l = 1; l <= cfg_.shade_levels; ++l) {
    // One path per shade level; each run of cells of this level along a row is one rectangle.
    std::string d;
    for (size_t r = 0; r < cfg_.rows; ++r) {
      size_t c = 0;
      while (c < cfg_.columns) {
        if (level(grid_[r * cfg_.columns + c]) != l) { ++c; continue; }
        size_t e = c + 1;
        while (e < cfg_.columns && level(grid_[r * cfg_.columns + e]) == l) ++e;
        const std::string run_w = px(static_cast<double>(e - c) * cw);
        d.append("M").append(px(x0 + static_cast<double>(c) * cw)).append(" ").append(px(y1 + static_cast<double>(r) * ch));
        d.append("h").append(run_w).append("v").append(px(ch)).append("h-").append(run_w).append("z");
        c = e;
      }
    }
    if (!d.empty())
      o << "<path d=\"" << d << "\" fill-opacity=\"" << format_number(0.12 + 0.88 * (l - 1) / (cfg_.shade_levels - 1), 3) << "\"/>\n";
  }
  o << "</g>\n";
  draw_rules(o, vrules_, hrules_, xs, ys, x0, x1, y0, y1, true);
  o << "</svg>";
  return o.str();
}

}  // namespace salvor::plot
