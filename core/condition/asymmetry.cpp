#include "condition/asymmetry.hpp"

#include <algorithm>
#include <cmath>
#include <sstream>

#include "common/error.hpp"

namespace salvor {

AsymmetryCorrector::AsymmetryCorrector(const AsymmetryConfig& c) : cfg_(c) {
  const std::string w = "condition.asymmetry.";
  if (!(c.samples_per_bit > 1.0) || !std::isfinite(c.samples_per_bit))
    throw_usage(w + "samples_per_bit", "must be > 1, got " + std::to_string(c.samples_per_bit));
  if (!(std::abs(c.c) < 0.5))
    throw_usage(w + "c", "must be within +-0.5, got " + std::to_string(c.c));
  if (c.min_peaks < 1) throw_usage(w + "min_peaks", "must be >= 1, got " + std::to_string(c.min_peaks));
  if (!(c.peak_threshold > 0.0 && c.peak_threshold < 2.0))
    throw_usage(w + "peak_threshold", "must be in (0, 2), got " + std::to_string(c.peak_threshold));
  if (!(c.level_time_constant_bits >= 10.0 && c.level_time_constant_bits <= 1e7))
    throw_usage(w + "level_time_constant_bits", "must be in [10, 1e7], got " + std::to_string(c.level_time_constant_bits));
  alpha_ = 1.0 - std::exp(-1.0 / (c.level_time_constant_bits * c.samples_per_bit));
  reset();
}

void AsymmetryCorrector::reset() {
  acc_ = weight_ = 0.0;
  state_ = 0;
  extreme_ = 0.0;
  sum_pos_ = sum_pos2_ = sum_neg_ = sum_neg2_ = sum_m_ = 0.0;
  n_pos_ = n_neg_ = 0;
}

std::string AsymmetryCorrector::describe() const {
  std::ostringstream s;
  s << "asymmetry: ";
  switch (cfg_.mode) {
    case AsymmetryMode::off: s << "off"; break;
    case AsymmetryMode::given: s << "c = " << cfg_.c; break;
    case AsymmetryMode::estimate: s << "c estimated from peaks (after " << cfg_.min_peaks << " of each sign)"; break;
  }
  return s.str();
}

double AsymmetryCorrector::estimated_coefficient() const {
  if (n_pos_ == 0 || n_neg_ == 0) return 0.0;
  const double mp = sum_pos_ / n_pos_, mn = sum_neg_ / n_neg_;
  const double m = sum_m_ / static_cast<double>(n_pos_ + n_neg_);
  const double den = sum_pos2_ / n_pos_ + sum_neg2_ / n_neg_ - 2.0 * m;
  return den > 0.0 ? (mp - mn) / den : 0.0;
}

double AsymmetryCorrector::coefficient() const {
  switch (cfg_.mode) {
    case AsymmetryMode::off: return 0.0;
    case AsymmetryMode::given: return cfg_.c;
    case AsymmetryMode::estimate:
      if (n_pos_ < static_cast<uint64_t>(cfg_.min_peaks) || n_neg_ < static_cast<uint64_t>(cfg_.min_peaks)) return 0.0;
      return std::clamp(estimated_coefficient(), -0.49, 0.49);
  }
  return 0.0;
}

template <bool with_flags>
Progress AsymmetryCorrector::run(std::span<const float> in, std::span<const uint8_t> in_flags,
                                 std::span<float> out, std::span<uint8_t> out_flags) {
  const size_t n = std::min(in.size(), out.size());
  for (size_t i = 0; i < n; ++i) {
    const double y = in[i];
    bool clean = true;
    if constexpr (with_flags) {
      out_flags[i] = in_flags[i];
      clean = in_flags[i] == 0;
    }
    if (clean) {
      acc_ += alpha_ * (y * y - acc_);
      weight_ += alpha_ * (1.0 - weight_);
    }
    const double m = weight_ > 0.0 ? acc_ / weight_ : 0.0;
    if (cfg_.mode == AsymmetryMode::estimate) {
      if (!clean) {
        state_ = 0;  // a flagged stretch breaks the excursion: its peak is not trusted
      } else {
        const double h = cfg_.peak_threshold * std::sqrt(m);
        if (state_ >= 0 && y < -h) {
          if (state_ > 0) { sum_pos_ += extreme_; sum_pos2_ += extreme_ * extreme_; sum_m_ += m; ++n_pos_; }
          state_ = -1;
          extreme_ = y;
        } else if (state_ <= 0 && y > h) {
          if (state_ < 0) { sum_neg_ -= extreme_; sum_neg2_ += extreme_ * extreme_; sum_m_ += m; ++n_neg_; }
          state_ = 1;
          extreme_ = y;
        } else if (state_ > 0) {
          extreme_ = std::max(extreme_, y);
        } else if (state_ < 0) {
          extreme_ = std::min(extreme_, y);
        }
      }
    }
    const double c = coefficient();
    out[i] = static_cast<float>(c == 0.0 ? y : y - c * (y * y - m));
  }
  return {n, n};
}

Progress AsymmetryCorrector::process(std::span<const float> in, std::span<float> out) {
  return run<false>(in, {}, out, {});
}

Progress AsymmetryCorrector::process(std::span<const float> in, std::span<const uint8_t> in_flags,
                                     std::span<float> out, std::span<uint8_t> out_flags) {
  return run<true>(in, in_flags, out, out_flags);
}

}  // namespace salvor
