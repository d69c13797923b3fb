#pragma once
// Small helpers shared by the synth tests: hand-made bit patterns and a plain renderer set-up.

#include <cstdint>
#include <vector>

#include "synth/renderer.hpp"

namespace salvor::synth::testing {

// A track of `length` zeros with ones at the given positions.
inline std::vector<uint8_t> bits_with_ones(size_t length, const std::vector<size_t>& ones) {
  std::vector<uint8_t> b(length, 0);
  for (size_t i : ones) b.at(i) = 1;
  return b;
}

// Ones every `spacing` bits starting at `first` (an even count, so no write splice).
inline std::vector<uint8_t> sparse_bits(size_t length, size_t spacing, size_t first) {
  std::vector<uint8_t> b(length, 0);
  size_t n = 0;
  for (size_t i = first; i < length; i += spacing, ++n) b[i] = 1;
  if (n % 2) b[first] = 0;  // keep an even number of transitions
  return b;
}

// Noiseless, no front end, no lead or tail, sampling phase 0.
inline RenderConfig plain_config(double density, double samples_per_bit) {
  RenderConfig c;
  c.model = PulseModel::lorentzian;
  c.density = density;
  c.samples_per_bit = samples_per_bit;
  c.lead_bits = 0;
  c.tail_bits = 0;
  c.sampling_phase = 0;
  c.digitizer = {SampleFormat::float32, 4.0};
  return c;
}

inline std::vector<double> render_all(Renderer& r) {
  std::vector<double> out(r.total_samples());
  r.process_analog(out);
  return out;
}

// Peak time (in sample units) by a parabola through the largest |sample| and its neighbours.
inline double parabolic_peak(const std::vector<double>& y, size_t i) {
  const double a = y[i - 1], b = y[i], c = y[i + 1];
  const double den = a - 2 * b + c;
  return static_cast<double>(i) + (den == 0 ? 0.0 : 0.5 * (a - c) / den);
}

}  // namespace salvor::synth::testing
