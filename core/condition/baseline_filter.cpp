#include "condition/baseline_filter.hpp"

#include <algorithm>
#include <cmath>
#include <sstream>

#include "common/error.hpp"

namespace salvor {

BaselineFilter::BaselineFilter(const BaselineFilterConfig& c) {
  if (!(c.samples_per_bit > 1.0) || !std::isfinite(c.samples_per_bit))
    throw_usage("condition.baseline.samples_per_bit", "must be > 1, got " + std::to_string(c.samples_per_bit));
  if (!(c.corner_fraction > 0.0 && c.corner_fraction <= 0.05))
    throw_usage("condition.baseline.corner_fraction", "must be in (0, 0.05] of the bit rate, got " +
                                                          std::to_string(c.corner_fraction));
  corner_ = c.corner_fraction / c.samples_per_bit;
  const double w0 = 2.0 * 3.14159265358979323846 * corner_;
  const double alpha = std::sin(w0) / (2.0 * (1.0 / std::sqrt(2.0)));
  const double cw = std::cos(w0);
  const double a0 = 1.0 + alpha;
  b0_ = (1.0 + cw) / 2.0 / a0;
  b1_ = -(1.0 + cw) / a0;
  b2_ = (1.0 + cw) / 2.0 / a0;
  a1_ = -2.0 * cw / a0;
  a2_ = (1.0 - alpha) / a0;
  reference_kernel_ = c.reference_kernel;
  tables_ = block_recursions::biquad_block_tables(b0_, b1_, b2_, a1_, a2_);
}

void BaselineFilter::reset() {
  s1_ = s2_ = 0.0;
  primed_ = false;
  fill_ = 0;
}

std::string BaselineFilter::describe() const {
  std::ostringstream s;
  s << "baseline: 2nd-order Butterworth high-pass, corner " << corner_ << " cycles/sample";
  return s.str();
}

Progress BaselineFilter::process_reference(std::span<const float> in, std::span<float> out) {
  const size_t n = std::min(in.size(), out.size());
  for (size_t i = 0; i < n; ++i) {
    const double x = in[i];
    if (!primed_) {
      // Steady state for constant input x: output 0, s1 = -b0 x, s2 = (b2 - a2 * 0) x.
      s1_ = -b0_ * x;
      s2_ = b2_ * x;
      primed_ = true;
    }
    const double y = b0_ * x + s1_;
    s1_ = b1_ * x - a1_ * y + s2_;
    s2_ = b2_ * x - a2_ * y;
    out[i] = static_cast<float>(y);
  }
  return {n, n};
}

Progress BaselineFilter::process(std::span<const float> in, std::span<float> out) {
  if (reference_kernel_) return process_reference(in, out);
  using block_recursions::kBlock;
  const size_t n = std::min(in.size(), out.size());
  if (n > 0 && !primed_) {
    const double x = in[0];  // steady state for a constant input x, as in the reference
    s1_ = -b0_ * x;
    s2_ = b2_ * x;
    primed_ = true;
  }
  size_t i = 0;
  while (i < n) {
    if (fill_ == 0 && n - i >= kBlock) {
      const size_t blocks = (n - i) / kBlock;
      block_recursions::biquad_blocks(tables_, in.data() + i, out.data() + i, blocks, s1_, s2_);
      i += blocks * kBlock;
      continue;
    }
    // A block cut by the call's edges: its lanes one at a time, the same sums as the kernel's.
    block_x_[fill_] = in[i];
    out[i] = block_recursions::to_float_clamped(block_recursions::biquad_lane(tables_, block_x_, fill_, s1_, s2_));
    ++i;
    if (++fill_ == kBlock) {
      block_recursions::biquad_next_state(tables_, block_x_, s1_, s2_);
      fill_ = 0;
    }
  }
  return {n, n};
}

Progress BaselineFilter::process(std::span<const float> in, std::span<const uint8_t> in_flags,
                                 std::span<float> out, std::span<uint8_t> out_flags) {
  const auto p = process(in, out);
  std::copy_n(in_flags.begin(), p.produced, out_flags.begin());
  return p;
}

}  // namespace salvor
