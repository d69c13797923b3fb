#pragma once
// MR-head asymmetry correction. Model (read-channel-theory.md section 3, [memory]):
// y = x + c x^2. After DC removal the x^2 term's mean is gone, so the stage outputs
//     z = y - c (y^2 - m),   m = running mean of y^2,
// which is x + O(c^2) and keeps the baseline where the high-pass left it.
//
// Estimate of c from peak asymmetry: with positive peaks P+ = p + c p^2 - c m and
// negative peaks |P-| = q - c q^2 + c m for a symmetric data pattern (E p = E q, E p^2 = E q^2),
//     c ~= (E P+ - E |P-|) / (E P+^2 + E P-^2 - 2 m)      (first order in c; derived).
// Peaks are the extremes between hysteresis crossings at +-peak_threshold x rms. The
// estimate is used once min_peaks of each sign were seen (before that c = 0); it is
// cumulative, so it settles as the stream goes on. Flagged samples are skipped by the
// estimator.
//
// Scale: c is in units of 1 / (signal units at this point of the chain); the Conditioner
// runs this stage after the AGC, so there c is relative to the reference rms.

#include <cstdint>
#include <span>
#include <string>

#include "common/stream.hpp"

namespace salvor {

enum class AsymmetryMode { off, given, estimate };

struct AsymmetryConfig {
  double samples_per_bit = 0.0;            // capture samples per channel bit, > 1
  AsymmetryMode mode = AsymmetryMode::off;
  double c = 0.0;                          // mode given: the coefficient, |c| < 0.5
  int min_peaks = 64;                      // mode estimate: peaks of each sign before use, >= 1
  double peak_threshold = 0.3;             // hysteresis, fraction of the running rms, (0, 2)
  double level_time_constant_bits = 2000;  // running mean square m, [10, 1e7]
};

class AsymmetryCorrector {
 public:
  explicit AsymmetryCorrector(const AsymmetryConfig& config);
  Progress process(std::span<const float> in, std::span<float> out);
  Progress process(std::span<const float> in, std::span<const uint8_t> in_flags,
                   std::span<float> out, std::span<uint8_t> out_flags);
  void reset();
  std::string describe() const;
  // The coefficient in use now (given, estimated, or 0 while the estimate warms up).
  double coefficient() const;
  // The estimate from the peaks seen so far (0 without peaks of both signs).
  double estimated_coefficient() const;
  uint64_t positive_peaks() const { return n_pos_; }
  uint64_t negative_peaks() const { return n_neg_; }

 private:
  template <bool with_flags>
  Progress run(std::span<const float> in, std::span<const uint8_t> in_flags, std::span<float> out,
               std::span<uint8_t> out_flags);
  AsymmetryConfig cfg_;
  double alpha_;
  double acc_ = 0.0, weight_ = 0.0;  // running mean square (bias corrected)
  int state_ = 0;                    // +1 in a positive excursion, -1 negative, 0 not yet
  double extreme_ = 0.0;
  double sum_pos_ = 0, sum_pos2_ = 0, sum_neg_ = 0, sum_neg2_ = 0, sum_m_ = 0;
  uint64_t n_pos_ = 0, n_neg_ = 0;
};

}  // namespace salvor
