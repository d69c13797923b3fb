#pragma once
// An eye diagram from bit-spaced (one sample per bit) equalized samples: the samples
// are interpolated between the bit instants with a Hann-windowed sinc (band-limited
// reconstruction, the sampling theorem: Shannon, Proc. IRE 37(1), 1949; window after
// Harris, Proc. IEEE 66(1), 1978) and every two-bit stretch centred on a bit instant
// is drawn into a DensityPlot, so the plot's size does not depend on the sector length.

#include <cstddef>
#include <span>
#include <vector>

#include "plot/svg_plot.hpp"

namespace salvor::plot {

struct EyeConfig {
  size_t half_width = 12;        // sinc taps on each side of the point (>= 2)
  size_t points_per_bit = 0;     // 0: one per density column
  double span_bits = 2.0;        // trace length, centred on a bit instant
};

// The band-limited value of the sequence y at fractional index t.
double sinc_interpolate(std::span<const float> y, double t, size_t half_width);

// Draws the eye of y into `plot` (whose x axis is in bits, spanning [-span/2, span/2]).
// Returns the number of traces drawn.
size_t draw_eye(std::span<const float> y, DensityPlot& plot, const EyeConfig& cfg, size_t columns);

}  // namespace salvor::plot
