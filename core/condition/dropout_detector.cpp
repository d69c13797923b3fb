#include "condition/dropout_detector.hpp"

#include <algorithm>
#include <cmath>
#include <sstream>

#include "common/error.hpp"
#include "condition/flags.hpp"

namespace salvor {

DropoutDetector::DropoutDetector(const DropoutDetectorConfig& c) : cfg_(c) {
  const std::string w = "condition.dropout.";
  if (!(c.samples_per_bit > 1.0) || !std::isfinite(c.samples_per_bit))
    throw_usage(w + "samples_per_bit", "must be > 1, got " + std::to_string(c.samples_per_bit));
  if (!(c.window_bits >= 1.0 && c.window_bits <= 4096.0))
    throw_usage(w + "window_bits", "must be in [1, 4096], got " + std::to_string(c.window_bits));
  if (!(c.threshold > 0.0 && c.threshold < 1.0))
    throw_usage(w + "threshold", "must be in (0, 1), got " + std::to_string(c.threshold));
  if (!(c.level_time_constant_bits >= 10.0 && c.level_time_constant_bits <= 1e7))
    throw_usage(w + "level_time_constant_bits", "must be in [10, 1e7], got " + std::to_string(c.level_time_constant_bits));
  half_ = std::max<size_t>(1, static_cast<size_t>(std::lround(0.5 * c.window_bits * c.samples_per_bit)));
  width_ = 2 * half_ + 1;
  alpha_ = 1.0 - std::exp(-1.0 / (c.level_time_constant_bits * c.samples_per_bit));
  retain_ = 1.0 - alpha_;  // a = retain a + alpha v: one multiply on the loop's critical path
  size_t cap = 1;
  while (cap < width_) cap *= 2;
  mask_ = cap - 1;
  ring_x_.assign(cap, 0.0f);
  ring_f_.assign(cap, 0);
  reset();
}

void DropoutDetector::reset() {
  sum_abs_ = 0.0;
  next_in_ = next_center_ = window_start_ = 0;
  since_recompute_ = 0;
  level_ = Level{};
}

std::string DropoutDetector::describe() const {
  std::ostringstream s;
  s << "dropout: envelope over " << width_ << " samples below " << cfg_.threshold << " x running level";
  return s.str();
}

double DropoutDetector::exact_sum(uint64_t from, uint64_t to) const {
  double sum = 0.0;
  for (uint64_t k = from; k < to; ++k) sum += std::abs(ring_x_[k & mask_]);
  return sum;
}

[[gnu::always_inline]] inline void DropoutDetector::pop_oldest() {
  sum_abs_ -= std::abs(ring_x_[window_start_ & mask_]);
  ++window_start_;
}

[[gnu::always_inline]] inline void DropoutDetector::emit_center(std::span<float> out, std::span<uint8_t> out_flags, size_t& produced) {
  while (window_start_ + half_ < next_center_) pop_oldest();
  if (++since_recompute_ >= width_) {  // exact sum now and then: no rounding drift
    since_recompute_ = 0;
    sum_abs_ = exact_sum(window_start_, next_in_);
  }
  const uint64_t i = next_center_++;
  const float x = ring_x_[i & mask_];
  uint8_t f = ring_f_[i & mask_];
  f = classify(x, f, sum_abs_, static_cast<double>(next_in_ - window_start_), level_);
  out[produced] = x;
  out_flags[produced] = f;
  ++produced;
}

[[gnu::always_inline]] inline uint8_t DropoutDetector::classify(float x, uint8_t f, double sum, double count,
                                                                Level& level) const {
  // envelope < threshold x level, with envelope = sum / count and level = acc / weight,
  // compared without the two divisions.
  if (level.updates >= width_ && level.weight > 0.0 && sum * level.weight < cfg_.threshold * level.acc * count)
    f |= flag_dropout;
  if (f == 0) {
    level.acc = retain_ * level.acc + alpha_ * std::abs(x);
    level.weight = retain_ * level.weight + alpha_;
    ++level.updates;
  }
  return f;
}

size_t DropoutDetector::run_steady(const float* in, const uint8_t* in_flags, float* out, uint8_t* out_flags, size_t k,
                                   size_t n, size_t& produced) {
  // The steady state (full window, one output per input) with the state in locals, since a
  // flag byte store may alias any member. Same arithmetic, in the same order, as
  // process / pop_oldest / emit_center.
  float* rx = ring_x_.data();
  uint8_t* rf = ring_f_.data();
  const uint64_t mask = mask_;
  const size_t width = width_;
  uint64_t nin = next_in_, ws = window_start_, nc = next_center_, since = since_recompute_;
  double sum = sum_abs_;
  Level level = level_;
  const double count = static_cast<double>(width);
  for (; k < n; ++k) {
    sum -= std::abs(rx[ws & mask]);
    ++ws;
    rx[nin & mask] = in[k];
    rf[nin & mask] = in_flags[k];
    sum += std::abs(in[k]);
    ++nin;
    if (++since >= width) {
      since = 0;
      sum = exact_sum(ws, nin);
    }
    const uint64_t i = nc++;
    const float x = rx[i & mask];
    const uint8_t f = classify(x, rf[i & mask], sum, count, level);
    out[produced] = x;
    out_flags[produced] = f;
    ++produced;
  }
  next_in_ = nin;
  window_start_ = ws;
  next_center_ = nc;
  since_recompute_ = since;
  sum_abs_ = sum;
  level_ = level;
  return k;
}

Progress DropoutDetector::process(std::span<const float> in, std::span<const uint8_t> in_flags,
                                  std::span<float> out, std::span<uint8_t> out_flags) {
  const size_t n = std::min(in.size(), out.size());
  size_t produced = 0;
  for (size_t k = 0; k < n; ++k) {
    if (next_in_ - window_start_ == width_ && next_in_ == next_center_ + half_) {
      run_steady(in.data(), in_flags.data(), out.data(), out_flags.data(), k, n, produced);
      break;  // it runs to the end of the input
    }
    if (next_in_ - window_start_ == width_) pop_oldest();
    ring_x_[next_in_ & mask_] = in[k];
    ring_f_[next_in_ & mask_] = in_flags[k];
    sum_abs_ += std::abs(in[k]);
    ++next_in_;
    if (next_in_ >= next_center_ + half_ + 1) emit_center(out, out_flags, produced);
  }
  return {n, produced};
}

Progress DropoutDetector::flush(std::span<float> out, std::span<uint8_t> out_flags) {
  size_t produced = 0;
  while (next_center_ < next_in_ && produced < out.size()) emit_center(out, out_flags, produced);
  return {0, produced};
}

}  // namespace salvor
