#include "equalize/equalizer.hpp"

#include <cmath>
#include <cstdio>
#include <string>

#include "common/error.hpp"
#include "equalize/equalizer_kernels.hpp"
#include "equalize/targets.hpp"

namespace salvor::equalize {

namespace {

constexpr size_t kMaxTargetTaps = 6;  // as SALVOR_MAX_TARGET_TAPS in detect/salvor_detector.h
constexpr double kNlmsRegularization = 1e-9;  // keeps NLMS finite on an all-zero window

std::string num(double v) {
  char buf[48];
  std::snprintf(buf, sizeof buf, "%.6g", v);
  return buf;
}

void validate(const EqualizerConfig& c) {
  if (c.taps < 5 || c.taps > 31) throw_usage("equalizer taps", "value " + std::to_string(c.taps) + " is outside 5..31");
  if (c.delay >= c.taps) {
    throw_usage("equalizer delay", "value " + std::to_string(c.delay) + " must be below the tap count " +
                                       std::to_string(c.taps));
  }
  if (c.target.empty() || c.target.size() > kMaxTargetTaps) {
    throw_usage("equalizer target", "has " + std::to_string(c.target.size()) + " taps, expected 1..6");
  }
  bool any = false;
  for (double f : c.target) {
    if (!std::isfinite(f)) throw_usage("equalizer target", "tap is not finite");
    any = any || f != 0.0;
  }
  if (!any) throw_usage("equalizer target", "all taps are zero");
  if (!c.initial_taps.empty()) {
    if (c.initial_taps.size() != c.taps) {
      throw_usage("equalizer initial_taps", std::to_string(c.initial_taps.size()) + " values for " +
                                                std::to_string(c.taps) + " taps");
    }
    for (double w : c.initial_taps)
      if (!std::isfinite(w)) throw_usage("equalizer initial_taps", "value is not finite");
  }
  if (!std::isfinite(c.step_size) || c.step_size <= 0.0) {
    throw_usage("equalizer step_size", "value " + num(c.step_size) + " must be > 0");
  }
  if (c.normalized && c.step_size >= 2.0) {
    throw_usage("equalizer step_size", "NLMS step size " + num(c.step_size) + " must be below 2 (Haykin, NLMS)");
  }
  if (!std::isfinite(c.input_power) || c.input_power < 0.0) {
    throw_usage("equalizer input_power", "value " + num(c.input_power) + " must be >= 0");
  }
  if (!c.normalized && c.input_power > 0.0) {
    const double bound = 2.0 / (static_cast<double>(c.taps) * c.input_power);
    if (c.step_size >= bound) {
      throw_usage("equalizer step_size",
                  "LMS step size " + num(c.step_size) + " is at or above the stability bound 2/(N E[x^2]) = " +
                      num(bound) + " for N = " + std::to_string(c.taps) + ", E[x^2] = " + num(c.input_power) +
                      " (Widrow & Stearns 1985)");
    }
  }
  if (c.max_decision_latency > 65536) {
    throw_usage("equalizer max_decision_latency", "value " + std::to_string(c.max_decision_latency) + " is above 65536");
  }
  if (!(c.mse_time_constant >= 1.0) || !std::isfinite(c.mse_time_constant)) {
    throw_usage("equalizer mse_time_constant", "value " + num(c.mse_time_constant) + " must be >= 1");
  }
}

}  // namespace

Equalizer::Equalizer(const EqualizerConfig& config) : config_(config) {
  validate(config_);
  if (config_.initial_taps.empty()) {
    w_initial_.assign(config_.taps, 0.0);
    w_initial_[config_.delay] = 1.0;
  } else {
    w_initial_ = config_.initial_taps;
  }
  ring_size_ = config_.taps + config_.max_decision_latency + kMaxTargetTaps + 2;
  padded_taps_ = (config_.taps + detail::kTapPadding - 1) / detail::kTapPadding * detail::kTapPadding;
  update_mask_.assign(padded_taps_, 0.0);
  window_mask_.assign(padded_taps_, 0.0);
  for (size_t k = 0; k < config_.taps; ++k) {
    window_mask_[k] = 1.0;
    // w_rev[k] is w[taps-1-k]
    update_mask_[k] = (config_.fix_main_tap && config_.taps - 1 - k == config_.delay) ? 0.0 : 1.0;
  }
  reset();
}

struct Equalizer::KernelView {
  detail::LmsKernelState s;
};

void Equalizer::load_kernel_state(KernelView& v) {
  detail::LmsKernelState& s = v.s;
  s.x = line_x_.data();
  s.bad = line_bad_.data();
  s.level = line_level_.data();
  s.ring = ring_size_;
  s.next_slot = next_slot_;
  s.w_rev = w_rev_.data();
  s.update_mask = update_mask_.data();
  s.window_mask = window_mask_.data();
  s.taps = config_.taps;
  s.padded = padded_taps_;
  s.delay = config_.delay;
  s.target = config_.target.data();
  s.target_len = config_.target.size();
  s.normalized = config_.normalized;
  s.step_size = config_.step_size;
  s.mse_time_constant = config_.mse_time_constant;
  s.n_in = n_in_;
  s.n_out = n_out_;
  s.last_bad_plus1 = last_bad_plus1_;
  s.pending_mu1 = pending_mu1_;
  s.pending_mu2 = pending_mu2_;
  s.running_mse = running_mse_;
  s.running_started = running_started_;
  s.span_sum = span_sum_;
  s.total_sum = total_sum_;
  s.span_count = span_count_;
  s.total_count = total_count_;
}

void Equalizer::store_kernel_state(const KernelView& v) {
  const detail::LmsKernelState& s = v.s;
  next_slot_ = s.next_slot;
  n_in_ = s.n_in;
  n_out_ = s.n_out;
  last_bad_plus1_ = s.last_bad_plus1;
  pending_mu1_ = s.pending_mu1;
  pending_mu2_ = s.pending_mu2;
  running_mse_ = s.running_mse;
  running_started_ = s.running_started;
  span_sum_ = s.span_sum;
  total_sum_ = s.total_sum;
  span_count_ = s.span_count;
  total_count_ = s.total_count;
  // Public taps: w_rev with the pending updates applied, oldest first (as fold_pending does).
  const size_t taps = config_.taps;
  const size_t last = (s.next_slot + ring_size_ - 1) % ring_size_;
  const double* x1 = line_x_.data() + (last + ring_size_ - (taps - 1)) % ring_size_;
  const double* x2 = line_x_.data() + (last + 2 * ring_size_ - 1 - (taps - 1)) % ring_size_;
  for (size_t i = 0; i < taps; ++i) {
    const size_t k = taps - 1 - i;
    double w = w_rev_[k];
    if (s.pending_mu2 != 0.0) w = w + s.pending_mu2 * (update_mask_[k] * x2[k]);
    if (s.pending_mu1 != 0.0) w = w + s.pending_mu1 * (update_mask_[k] * x1[k]);
    w_[i] = w;
  }
}

void Equalizer::reset() {
  w_ = w_initial_;
  pending_mu1_ = pending_mu2_ = 0.0;  // updates of the old taps, dropped with them
  w_rev_.assign(padded_taps_, 0.0);
  for (size_t i = 0; i < config_.taps; ++i) w_rev_[config_.taps - 1 - i] = w_[i];
  trained_ = false;
  running_mse_ = 0.0;
  running_started_ = false;
  span_sum_ = total_sum_ = 0.0;
  span_count_ = total_count_ = 0;
  restart_span();
}

void Equalizer::restart_span() {
  n_in_ = n_out_ = next_decision_ = 0;
  if (config_.reference_kernel) {
    x_.assign(ring_size_, 0.0);
    x_bad_.assign(ring_size_, 0);
    level_.assign(ring_size_, 0);
    return;
  }
  if ((pending_mu1_ != 0.0 || pending_mu2_ != 0.0) && !line_x_.empty()) {
    KernelView view;
    load_kernel_state(view);
    detail::fold_pending_updates(view.s);
    store_kernel_state(view);
  }
  // Doubled lines; the extra padded_taps_ let a padded window start anywhere in the ring.
  const size_t length = 2 * ring_size_ + padded_taps_;
  line_x_.assign(length, 0.0);
  line_bad_.assign(length, 0);
  line_level_.assign(length, 0);
  next_slot_ = 0;
  last_bad_plus1_ = 0;
}

double Equalizer::output_at(uint64_t j) const {
  // y_j = sum_i w_i x_{j+delay-i}; samples before the span start are zero.
  const uint64_t newest = j + config_.delay;
  double y = 0.0;
  for (size_t i = 0; i < config_.taps && i <= newest; ++i) y += w_[i] * x_[slot(newest - i)];
  return y;
}

bool Equalizer::window_clean(uint64_t j) const {
  const uint64_t newest = j + config_.delay;
  if (newest + 1 < config_.taps) return false;  // window reaches before the span start
  for (size_t i = 0; i < config_.taps; ++i)
    if (x_bad_[slot(newest - i)]) return false;
  return true;
}

bool Equalizer::desired_at(uint64_t j, double& d) const {
  // d_j = sum_m f_m a_{j-m}; every level in the window must be known.
  const size_t len = config_.target.size();
  if (j + 1 < len) return false;
  d = 0.0;
  for (size_t m = 0; m < len; ++m) {
    const int8_t a = level_[slot(j - m)];
    if (a == 0) return false;
    d += config_.target[m] * a;
  }
  return true;
}

void Equalizer::adapt_at(uint64_t j, double y, bool allow_update) {
  double d = 0.0;
  if (!window_clean(j) || !desired_at(j, d)) return;
  const double e = d - y;
  const double e2 = e * e;
  span_sum_ += e2;
  total_sum_ += e2;
  ++span_count_;
  ++total_count_;
  if (!running_started_) {
    running_mse_ = e2;
    running_started_ = true;
  } else {
    running_mse_ += (e2 - running_mse_) / config_.mse_time_constant;
  }
  if (!allow_update) return;
  const uint64_t newest = j + config_.delay;
  double gain = config_.step_size;
  if (config_.normalized) {
    double energy = 0.0;
    for (size_t i = 0; i < config_.taps; ++i) {
      const double v = x_[slot(newest - i)];
      energy += v * v;
    }
    gain /= kNlmsRegularization + energy;
  }
  for (size_t i = 0; i < config_.taps; ++i) {
    if (config_.fix_main_tap && i == config_.delay) continue;
    w_[i] += gain * e * x_[slot(newest - i)];
  }
}

Progress Equalizer::run(std::span<const float> in, const int8_t* levels, std::span<float> out,
                        std::span<const uint8_t> erasure, bool padding) {
  if (!erasure.empty() && erasure.size() != in.size()) {
    throw_usage("equalizer erasure flags", std::to_string(erasure.size()) + " flags for " +
                                               std::to_string(in.size()) + " samples");
  }
  if (out.size() < in.size()) {
    throw_usage("equalizer output", "room for " + std::to_string(out.size()) + " samples, need " +
                                        std::to_string(in.size()));
  }
  Progress progress;
  if (!config_.reference_kernel) {
    if (levels) {
      for (size_t t = 0; t < in.size(); ++t) {
        const int8_t a = levels[t];
        if (a != 1 && a != -1 && a != 0) {
          throw_usage("equalizer training levels", "value " + std::to_string(a) + " at " + std::to_string(t) +
                                                       " is not +1, -1 or 0");
        }
      }
    }
    KernelView view;
    load_kernel_state(view);
    const size_t before = total_count_;
    progress.produced = detail::run_span(view.s, in.data(), levels, erasure.empty() ? nullptr : erasure.data(),
                                         padding, out.data(), in.size());
    progress.consumed = in.size();
    store_kernel_state(view);
    if (levels && total_count_ != before) trained_ = true;
    return progress;
  }
  for (size_t t = 0; t < in.size(); ++t) {
    const float v = in[t];
    const size_t s = slot(n_in_);
    const bool finite = std::isfinite(v);
    x_[s] = finite ? v : 0.0;
    x_bad_[s] = padding || !finite || (!erasure.empty() && erasure[t]);
    if (levels) {
      const int8_t a = levels[t];
      if (a != 1 && a != -1 && a != 0) {
        throw_usage("equalizer training levels", "value " + std::to_string(a) + " at " + std::to_string(t) +
                                                     " is not +1, -1 or 0");
      }
      level_[s] = a;
    } else {
      level_[s] = 0;
    }
    ++n_in_;
    ++progress.consumed;
    if (n_in_ <= config_.delay) continue;
    const uint64_t j = n_in_ - 1 - config_.delay;
    const double y = output_at(j);
    out[progress.produced++] = static_cast<float>(y);
    n_out_ = j + 1;
    if (levels) {
      const size_t before = total_count_;
      adapt_at(j, y, true);
      if (total_count_ != before) trained_ = true;
    }
  }
  return progress;
}

Progress Equalizer::process(std::span<const float> in, std::span<float> out, std::span<const uint8_t> erasure) {
  return run(in, nullptr, out, erasure, false);
}

Progress Equalizer::train(std::span<const float> in, std::span<const int8_t> levels, std::span<float> out,
                          std::span<const uint8_t> erasure) {
  if (levels.size() != in.size()) {
    throw_usage("equalizer training levels", std::to_string(levels.size()) + " levels for " +
                                                 std::to_string(in.size()) + " samples");
  }
  return run(in, levels.data(), out, erasure, false);
}

void Equalizer::adapt_decided(uint64_t first_output, std::span<const int8_t> levels) {
  if (levels.empty()) return;
  if (first_output < next_decision_) {
    throw_usage("equalizer decisions", "position " + std::to_string(first_output) +
                                           " goes backwards (next expected " + std::to_string(next_decision_) + ")");
  }
  const uint64_t last = first_output + levels.size() - 1;
  if (last >= n_out_) {
    throw_usage("equalizer decisions", "position " + std::to_string(last) + " has not been produced yet (" +
                                           std::to_string(n_out_) + " outputs so far)");
  }
  if (n_out_ - first_output > config_.max_decision_latency) {
    throw_usage("equalizer decisions", "position " + std::to_string(first_output) + " is " +
                                           std::to_string(n_out_ - first_output) +
                                           " outputs behind, more than max_decision_latency " +
                                           std::to_string(config_.max_decision_latency));
  }
  for (size_t k = 0; k < levels.size(); ++k) {
    const int8_t a = levels[k];
    if (a != 1 && a != -1 && a != 0) {
      throw_usage("equalizer decisions", "value " + std::to_string(a) + " is not +1, -1 or 0");
    }
  }
  if (config_.reference_kernel) {
    for (size_t k = 0; k < levels.size(); ++k) {
      const uint64_t j = first_output + k;
      level_[slot(j)] = levels[k];
      adapt_at(j, output_at(j), adapting());
    }
  } else {
    KernelView view;
    load_kernel_state(view);
    for (size_t k = 0; k < levels.size(); ++k) {
      const uint64_t j = first_output + k;
      const size_t sj = slot(j);
      line_level_[sj] = line_level_[sj + ring_size_] = levels[k];
      detail::adapt_past(view.s, j, adapting());
    }
    store_kernel_state(view);
  }
  next_decision_ = last + 1;
}

size_t Equalizer::flush(std::span<float> out) {
  const size_t pending = static_cast<size_t>(std::min<uint64_t>(n_in_, config_.delay));
  if (out.size() < pending) {
    throw_usage("equalizer output", "room for " + std::to_string(out.size()) + " samples, flush needs " +
                                        std::to_string(pending));
  }
  std::vector<float> zeros(pending, 0.0f);
  const Progress p = run(zeros, nullptr, out, {}, true);
  restart_span();
  return p.produced;
}

ErrorStats Equalizer::total_stats() const {
  return ErrorStats{total_count_, total_count_ ? total_sum_ / static_cast<double>(total_count_) : 0.0};
}

ErrorStats Equalizer::take_span_stats() {
  ErrorStats s{span_count_, span_count_ ? span_sum_ / static_cast<double>(span_count_) : 0.0};
  span_sum_ = 0.0;
  span_count_ = 0;
  return s;
}

std::string Equalizer::describe() const {
  std::string s = "equalizer: " + std::to_string(config_.taps) + " taps, delay " + std::to_string(config_.delay) +
                  ", target " + config_.target_name + " (" + polynomial_text(config_.target) + "), " +
                  (config_.normalized ? "NLMS mu~=" : "LMS mu=") + num(config_.step_size);
  if (config_.fix_main_tap) s += ", main tap fixed";
  if (config_.freeze_after_training) s += ", frozen after training";
  s += ", decision latency <= " + std::to_string(config_.max_decision_latency);
  return s;
}

std::vector<int8_t> levels_from_nrzi(std::span<const uint8_t> bits, int8_t level_before) {
  if (level_before != 1 && level_before != -1) throw_usage("level before", "must be +1 or -1");
  std::vector<int8_t> levels(bits.size());
  int8_t level = level_before;
  for (size_t k = 0; k < bits.size(); ++k) {
    if (bits[k]) level = static_cast<int8_t>(-level);
    levels[k] = level;
  }
  return levels;
}

}  // namespace salvor::equalize
