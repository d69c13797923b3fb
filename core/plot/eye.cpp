// Eye diagram by windowed-sinc interpolation: see eye.hpp.

#include "plot/eye.hpp"

#include <cmath>
#include <numbers>

#include "common/error.hpp"

namespace salvor::plot {

double sinc_interpolate(std::span<const float> y, double t, size_t half_width) {
  const double base = std::floor(t);
  const double frac = t - base;
  if (frac == 0.0 && base >= 0 && base < static_cast<double>(y.size())) return y[static_cast<size_t>(base)];
  const double L = static_cast<double>(half_width);
  double acc = 0;
  for (long j = -static_cast<long>(half_width) + 1; j <= static_cast<long>(half_width); ++j) {
    long idx = static_cast<long>(base) + j;
    if (idx < 0 || idx >= static_cast<long>(y.size())) continue;
    double d = t - static_cast<double>(idx);
    double s = std::sin(std::numbers::pi * d) / (std::numbers::pi * d);
    double w = 0.5 + 0.5 * std::cos(std::numbers::pi * d / L);  // Hann, zero at |d| = L
    acc += y[static_cast<size_t>(idx)] * s * w;
  }
  return acc;
}

size_t draw_eye(std::span<const float> y, DensityPlot& plot, const EyeConfig& cfg, size_t columns) {
  if (cfg.half_width < 2) throw_usage("eye", "half_width must be at least 2");
  if (!(cfg.span_bits > 0 && cfg.span_bits <= 8)) throw_usage("eye", "span_bits must be in (0, 8]");
  const size_t per_trace = cfg.points_per_bit ? static_cast<size_t>(std::ceil(cfg.points_per_bit * cfg.span_bits)) : columns;
  const double half = cfg.span_bits / 2;
  const size_t margin = cfg.half_width;  // skip the ends, where the interpolation lacks neighbours
  size_t traces = 0;
  for (size_t k = margin; k + margin < y.size(); ++k) {
    for (size_t p = 0; p < per_trace; ++p) {
      // The centre of each column, so every column of the grid gets one point per trace.
      double u = -half + cfg.span_bits * (static_cast<double>(p) + 0.5) / static_cast<double>(per_trace);
      plot.add_point(u, sinc_interpolate(y, static_cast<double>(k) + u, cfg.half_width));
    }
    ++traces;
  }
  return traces;
}

}  // namespace salvor::plot
