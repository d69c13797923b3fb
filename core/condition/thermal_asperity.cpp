#include "condition/thermal_asperity.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <sstream>

#include "common/error.hpp"
#include "condition/flags.hpp"

namespace salvor {

double ThermalAsperityFilter::signal_rms() const { return weight_ > 0.0 ? std::sqrt(acc_ / weight_) : 0.0; }

ThermalAsperityFilter::ThermalAsperityFilter(const ThermalAsperityConfig& c) : cfg_(c) {
  const std::string w = "condition.thermal_asperity.";
  if (!(c.samples_per_bit > 1.0) || !std::isfinite(c.samples_per_bit))
    throw_usage(w + "samples_per_bit", "must be > 1, got " + std::to_string(c.samples_per_bit));
  if (!(c.window_bits >= 2.0 && c.window_bits <= 4096.0))
    throw_usage(w + "window_bits", "must be in [2, 4096], got " + std::to_string(c.window_bits));
  if (!(c.release_ratio > 0.0 && c.detect_ratio > c.release_ratio))
    throw_usage(w + "detect_ratio", "need detect_ratio > release_ratio > 0, got " + std::to_string(c.detect_ratio) +
                                        ", " + std::to_string(c.release_ratio));
  if (!(c.level_time_constant_bits >= 10.0 && c.level_time_constant_bits <= 1e7))
    throw_usage(w + "level_time_constant_bits", "must be in [10, 1e7], got " + std::to_string(c.level_time_constant_bits));
  half_ = std::max<size_t>(1, static_cast<size_t>(std::lround(0.5 * c.window_bits * c.samples_per_bit)));
  width_ = 2 * half_ + 1;
  alpha_ = 1.0 - std::exp(-1.0 / (c.level_time_constant_bits * c.samples_per_bit));
  smooth_alpha_ = 1.0 - std::exp(-1.0 / static_cast<double>(width_));
  size_t cap = 1;
  while (cap < width_) cap *= 2;
  mask_ = cap - 1;
  ring_x_.assign(cap, 0.0f);
  ring_f_.assign(cap, 0);
  sorted_.reserve(width_);
  reset();
}

void ThermalAsperityFilter::reset() {
  sorted_.clear();
  next_in_ = next_center_ = window_start_ = 0;
  acc_ = weight_ = 0.0;
  level_updates_ = 0;
  in_span_ = false;
  smooth_ = 0.0;
}

std::string ThermalAsperityFilter::describe() const {
  std::ostringstream s;
  s << "thermal asperity: running median of " << width_ << " samples, open at " << cfg_.detect_ratio
    << " x rms, close at " << cfg_.release_ratio << " x rms" << (cfg_.suppress ? ", suppressed" : ", flag only");
  return s.str();
}

void ThermalAsperityFilter::push(float x, uint8_t f) {
  ring_x_[next_in_ & mask_] = x;
  ring_f_[next_in_ & mask_] = f;
  sorted_.insert(std::upper_bound(sorted_.begin(), sorted_.end(), x), x);
  ++next_in_;
}

void ThermalAsperityFilter::pop_oldest() {
  const float x = ring_x_[window_start_ & mask_];
  sorted_.erase(std::lower_bound(sorted_.begin(), sorted_.end(), x));
  ++window_start_;
}

void ThermalAsperityFilter::push_replacing_oldest(float x, uint8_t f) {
  // pop_oldest() then push() in one pass: only the elements between the old value's
  // place and the new value's place move.
  const float old = ring_x_[window_start_ & mask_];
  ++window_start_;
  ring_x_[next_in_ & mask_] = x;
  ring_f_[next_in_ & mask_] = f;
  ++next_in_;
  float* v = sorted_.data();
  const size_t n = sorted_.size();
  // Ranks by counting rather than by binary search: branch-free and vectorised for the
  // window lengths in use (tens of samples), where a search mispredicts every sample.
  size_t below_old = 0, not_above_new = 0;
  for (size_t k = 0; k < n; ++k) {
    below_old += v[k] < old ? 1 : 0;
    not_above_new += v[k] <= x ? 1 : 0;
  }
  const size_t i = below_old;  // the old value's place (its first copy)
  if (x >= old) {
    const size_t j = not_above_new - 1;  // x's place once the old value is gone
    std::memmove(v + i, v + i + 1, (j - i) * sizeof(float));
    v[j] = x;
  } else {
    const size_t j = not_above_new;  // <= i
    std::memmove(v + j + 1, v + j, (i - j) * sizeof(float));
    v[j] = x;
  }
}

double ThermalAsperityFilter::median() const {
  const size_t n = sorted_.size();
  return (n % 2) ? sorted_[n / 2] : 0.5 * (static_cast<double>(sorted_[n / 2 - 1]) + sorted_[n / 2]);
}

void ThermalAsperityFilter::emit_center(std::span<float> out, std::span<uint8_t> out_flags, size_t& produced) {
  const uint64_t i = next_center_++;
  const float x = ring_x_[i & mask_];
  uint8_t f = ring_f_[i & mask_];
  const double b = median();
  // Compared as squares, |b| > r * sqrt(acc / weight)  <=>  b^2 weight > r^2 acc: no square
  // root or division per sample.
  const bool warm = level_updates_ >= width_ && weight_ > 0.0 && acc_ > 0.0;
  if (warm) {
    if (!in_span_ && b * b * weight_ > cfg_.detect_ratio * cfg_.detect_ratio * acc_) {
      in_span_ = true;
      smooth_ = b;
    } else if (in_span_) {
      smooth_ += smooth_alpha_ * (b - smooth_);
      if (smooth_ * smooth_ * weight_ < cfg_.release_ratio * cfg_.release_ratio * acc_) in_span_ = false;
    }
  }
  double y = x;
  if (in_span_) {
    f |= flag_thermal_asperity;
    if (cfg_.suppress) y = x - b;
  } else if (f == 0) {
    const double r = x - b;
    acc_ += alpha_ * (r * r - acc_);
    weight_ += alpha_ * (1.0 - weight_);
    ++level_updates_;
  }
  out[produced] = static_cast<float>(y);
  out_flags[produced] = f;
  ++produced;
}

Progress ThermalAsperityFilter::process(std::span<const float> in, std::span<const uint8_t> in_flags,
                                        std::span<float> out, std::span<uint8_t> out_flags) {
  const size_t n = std::min(in.size(), out.size());
  size_t produced = 0;
  for (size_t k = 0; k < n; ++k) {
    // Window of the next centre c: [c - half, c + half]; drop what falls out first.
    if (next_in_ - window_start_ == width_) {
      push_replacing_oldest(in[k], in_flags[k]);
    } else {
      push(in[k], in_flags[k]);
    }
    if (next_in_ >= half_ + 1 + next_center_) {
      // next_in_ - 1 == next_center_ + half_: the centre's window is complete.
      while (window_start_ + half_ < next_center_) pop_oldest();
      emit_center(out, out_flags, produced);
    }
  }
  return {n, produced};
}

Progress ThermalAsperityFilter::flush(std::span<float> out, std::span<uint8_t> out_flags) {
  size_t produced = 0;
  while (next_center_ < next_in_ && produced < out.size()) {
    while (window_start_ + half_ < next_center_) pop_oldest();
    emit_center(out, out_flags, produced);
  }
  return {0, produced};
}

}  // namespace salvor
