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
  retain_ = 1.0 - alpha_;  // a = retain a + alpha v: one multiply on the loop's critical path
  smooth_alpha_ = 1.0 - std::exp(-1.0 / static_cast<double>(width_));
  size_t cap = 1;
  while (cap < width_) cap *= 2;
  mask_ = cap - 1;
  ring_x_.assign(2 * cap, 0.0f);
  ring_f_.assign(cap, 0);
  sorted_.reserve(width_);
  scratch_.reserve(width_);
  reset();
}

void ThermalAsperityFilter::reset() {
  sorted_.clear();
  next_in_ = next_center_ = window_start_ = 0;
  window_sum_ = 0.0;
  since_exact_sum_ = 0;
  acc_ = weight_ = 0.0;
  level_updates_ = 0;
  detect_threshold_ = 0.0f;
  threshold_age_ = 0;
  above_ = below_ = 0;
  in_span_ = false;
  smooth_ = 0.0;
}

std::string ThermalAsperityFilter::describe() const {
  std::ostringstream s;
  s << "thermal asperity: running median of " << width_ << " samples, open at " << cfg_.detect_ratio
    << " x rms, close at " << cfg_.release_ratio << " x rms" << (cfg_.suppress ? ", suppressed" : ", flag only");
  return s.str();
}

[[gnu::always_inline]] inline void ThermalAsperityFilter::push(float x, uint8_t f) {
  const size_t slot = next_in_ & mask_;
  ring_x_[slot] = x;
  ring_x_[slot + mask_ + 1] = x;
  ring_f_[slot] = f;
  ++next_in_;
  window_sum_ += x;
  above_ += x > detect_threshold_ ? 1u : 0u;
  below_ += x < -detect_threshold_ ? 1u : 0u;
  if (in_span_) sorted_.insert(std::upper_bound(sorted_.begin(), sorted_.end(), x), x);
}

[[gnu::always_inline]] inline void ThermalAsperityFilter::pop_oldest() {
  const float x = ring_x_[window_start_ & mask_];
  ++window_start_;
  window_sum_ -= x;
  above_ -= x > detect_threshold_ ? 1u : 0u;
  below_ -= x < -detect_threshold_ ? 1u : 0u;
  if (in_span_) sorted_.erase(std::lower_bound(sorted_.begin(), sorted_.end(), x));
}

double ThermalAsperityFilter::exact_median() const {
  const size_t n = window_size();
  if (n == 0) return 0.0;
  if (in_span_ && sorted_.size() == n) {
    return (n % 2) ? sorted_[n / 2] : 0.5 * (static_cast<double>(sorted_[n / 2 - 1]) + sorted_[n / 2]);
  }
  scratch_.assign(window(), window() + n);
  std::sort(scratch_.begin(), scratch_.end());
  return (n % 2) ? scratch_[n / 2] : 0.5 * (static_cast<double>(scratch_[n / 2 - 1]) + scratch_[n / 2]);
}

void ThermalAsperityFilter::sort_window() {
  sorted_.assign(window(), window() + window_size());
  std::sort(sorted_.begin(), sorted_.end());
}

void ThermalAsperityFilter::set_threshold(float t) {
  // The counts of the window's samples beyond +-t, kept up to date by push and pop.
  detect_threshold_ = t;
  const float* w = window();
  const size_t n = window_size();
  uint32_t above = 0, below = 0;  // 32-bit counters: four to a vector register
  for (size_t k = 0; k < n; ++k) {
    above += w[k] > t ? 1u : 0u;
    below += w[k] < -t ? 1u : 0u;
  }
  above_ = above;
  below_ = below;
}

bool ThermalAsperityFilter::median_beyond() const {
  // For an odd count n, median > t exactly when more than n/2 samples are > t.
  const size_t n = window_size();
  return above_ > n / 2 || below_ > n / 2;
}

[[gnu::always_inline]] inline void ThermalAsperityFilter::emit_center(std::span<float> out, std::span<uint8_t> out_flags, size_t& produced) {
  const uint64_t i = next_center_++;
  const float x = ring_x_[i & mask_];
  uint8_t f = ring_f_[i & mask_];
  const size_t n = window_size();
  const bool warm = level_updates_ >= width_ && weight_ > 0.0 && acc_ > 0.0;
  double b = 0.0;  // the median, where it is needed
  if (warm) {
    if (!in_span_) {
      if (threshold_age_++ % 16 == 0 || detect_threshold_ <= 0.0f)
        set_threshold(static_cast<float>(cfg_.detect_ratio * std::sqrt(acc_ / weight_)));
      // The count test needs a full window of odd length; the last half window of a
      // capture (flush) takes the exact median instead.
      const bool beyond = (n == width_) ? median_beyond()
                                        : std::abs(exact_median()) > cfg_.detect_ratio * std::sqrt(acc_ / weight_);
      if (beyond) {
        in_span_ = true;
        sort_window();
        b = exact_median();
        smooth_ = b;
      }
    } else {
      b = exact_median();
      smooth_ += smooth_alpha_ * (b - smooth_);
      if (smooth_ * smooth_ * weight_ < cfg_.release_ratio * cfg_.release_ratio * acc_) {
        in_span_ = false;
        sorted_.clear();
      }
    }
  }
  double y = x;
  if (in_span_) {
    f |= flag_thermal_asperity;
    if (cfg_.suppress) y = x - b;
  } else if (f == 0) {
    const double r = x - window_sum_ / static_cast<double>(n);
    acc_ = retain_ * acc_ + alpha_ * (r * r);
    weight_ = retain_ * weight_ + alpha_;
    ++level_updates_;
  }
  out[produced] = static_cast<float>(y);
  out_flags[produced] = f;
  ++produced;
}

size_t ThermalAsperityFilter::run_steady(const float* in, const uint8_t* in_flags, float* out, uint8_t* out_flags,
                                         size_t k, size_t n, size_t& produced, bool& opens) {
  // The steady state outside a span (full window, warm level, one output per input), with
  // the state in locals: a flag byte store may alias any member, and would otherwise force
  // every member to be reloaded after it. Same arithmetic as push / pop_oldest /
  // emit_center; stops (opens = true) on the sample whose test opens a span, which the
  // caller then emits the general way, or when the state leaves the steady case.
  opens = false;
  float* rx = ring_x_.data();
  const uint8_t* rf = ring_f_.data();
  uint8_t* rfw = ring_f_.data();
  const uint64_t mask = mask_, cap = mask_ + 1;
  const size_t width = width_, half_count = width_ / 2;
  uint64_t nin = next_in_, ws = window_start_, nc = next_center_, since = since_exact_sum_, lu = level_updates_,
           age = threshold_age_;
  double sum = window_sum_, acc = acc_, weight = weight_;
  const double alpha = alpha_, retain = retain_;
  float thr = detect_threshold_;
  uint32_t above = above_, below = below_;
  auto store = [&] {
    next_in_ = nin;
    window_start_ = ws;
    next_center_ = nc;
    since_exact_sum_ = since;
    level_updates_ = lu;
    threshold_age_ = age;
    window_sum_ = sum;
    acc_ = acc;
    weight_ = weight;
    detect_threshold_ = thr;
    above_ = above;
    below_ = below;
  };
  for (; k < n; ++k) {
    if (!(acc > 0.0 && weight > 0.0)) break;  // level gone (long silence): the general path
    // pop the oldest, push the new sample
    const float old = rx[ws & mask];
    ++ws;
    const float x_in = in[k];
    const uint64_t slot = nin & mask;
    rx[slot] = x_in;
    rx[slot + cap] = x_in;
    rfw[slot] = in_flags[k];
    ++nin;
    sum += static_cast<double>(x_in) - static_cast<double>(old);
    above += (x_in > thr ? 1u : 0u) - (old > thr ? 1u : 0u);
    below += (x_in < -thr ? 1u : 0u) - (old < -thr ? 1u : 0u);
    if (++since >= 4096) {
      since = 0;
      sum = 0.0;
      const float* w = rx + (ws & mask);
      for (size_t j = 0; j < width; ++j) sum += w[j];
    }
    // the centre's test
    if (age++ % 16 == 0) {
      thr = static_cast<float>(cfg_.detect_ratio * std::sqrt(acc / weight));
      const float* w = rx + (ws & mask);
      uint32_t a = 0, b = 0;
      for (size_t j = 0; j < width; ++j) {
        a += w[j] > thr ? 1u : 0u;
        b += w[j] < -thr ? 1u : 0u;
      }
      above = a;
      below = b;
    }
    if (above > half_count || below > half_count) {
      --age;  // the general emit repeats this sample's threshold step (same value)
      store();
      opens = true;
      return k + 1;
    }
    const uint64_t i = nc++;
    const float x = rx[i & mask];
    const uint8_t f = rf[i & mask];
    if (f == 0) {
      const double r = x - sum / static_cast<double>(width);  // as emit_center, to the bit
      acc = retain * acc + alpha * (r * r);
      weight = retain * weight + alpha;
      ++lu;
    }
    out[produced] = x;
    out_flags[produced] = f;
    ++produced;
  }
  store();
  return k;
}

Progress ThermalAsperityFilter::process(std::span<const float> in, std::span<const uint8_t> in_flags,
                                        std::span<float> out, std::span<uint8_t> out_flags) {
  const size_t n = std::min(in.size(), out.size());
  size_t produced = 0;
  for (size_t k = 0; k < n; ++k) {
    const bool steady = !in_span_ && level_updates_ >= width_ && weight_ > 0.0 && acc_ > 0.0 &&
                        detect_threshold_ > 0.0f && next_in_ - window_start_ == width_ &&
                        next_in_ == next_center_ + half_;
    if (steady) {
      const size_t k0 = k;
      bool opens = false;
      k = run_steady(in.data(), in_flags.data(), out.data(), out_flags.data(), k, n, produced, opens);
      if (opens) emit_center(out, out_flags, produced);  // that sample is pushed; emit it the general way
      if (k >= n) break;
      if (k != k0) {
        --k;  // the loop's ++k: continue at sample k
        continue;
      }
    }
    // Window of the next centre c: [c - half, c + half]; drop what falls out first.
    if (next_in_ - window_start_ == width_) pop_oldest();
    push(in[k], in_flags[k]);
    if (++since_exact_sum_ >= 4096) {  // exact window sum now and then: no rounding drift
      since_exact_sum_ = 0;
      window_sum_ = 0.0;
      for (size_t j = 0; j < window_size(); ++j) window_sum_ += window()[j];
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
