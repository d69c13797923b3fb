#pragma once
// Thermal asperity (TA): a head-disk contact heats the MR element and the readback
// baseline jumps by several times the signal amplitude, then decays exponentially over
// hundreds of bits (the effect and its baseline-restoration remedy: R. D. Cideciyan et
// al., "A PRML system for digital magnetic recording", IEEE JSAC 10(1):38-56, 1992,
// and Wang & Taratorin, Magnetic Information Storage Technology, 1999 [memory]).
//
// Detection: the baseline is estimated by a running median over a centred window of
// window_bits (a median follows the sharp onset without the lag of a linear low-pass,
// and the DC-free data hardly moves it; J. W. Tukey, Exploratory Data Analysis, 1977, for
// running medians [memory]). A span opens when |baseline| > detect_ratio x signal rms and
// closes when the baseline, smoothed inside the span by a one-pole low-pass with the
// window's length as time constant (the raw median scatters by ~0.2 rms on data and would
// close the span early), falls below release_ratio x signal rms. The signal rms is tracked
// from the residual (input - window mean) outside flagged samples, time constant
// level_time_constant_bits. Suppression: inside the span the baseline is subtracted. The
// span is flagged `thermal_asperity`. Thresholds: common practice, no source.
//
// Cost: outside a span only the test "median > T or < -T" is needed, and for a full window
// of odd length n that is exactly "more than n/2 samples above T (below -T)": two counts,
// kept up to date as samples enter and leave, instead of a sorted window. The threshold
// T = detect_ratio x rms is refreshed (and the counts recounted) every 16 samples; the rms
// moves by about 1 % in that time at the default time constant.
// The window is kept sorted only inside a span, where the median's value is used.
//
// Output sample i is input sample i; the centred window needs half a window of look-ahead,
// held back by process() and emitted by flush().

#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"

namespace salvor {

struct ThermalAsperityConfig {
  double samples_per_bit = 0.0;            // capture samples per channel bit, > 1
  double window_bits = 16.0;               // running-median window, [2, 4096]
  double detect_ratio = 2.0;               // span opens at |baseline| > ratio x rms, > release
  double release_ratio = 0.3;              // span closes at |smoothed baseline| < ratio x rms, > 0
  double level_time_constant_bits = 2000;  // signal rms tracking, [10, 1e7]
  bool suppress = true;                    // subtract the baseline inside spans
};

class ThermalAsperityFilter {
 public:
  explicit ThermalAsperityFilter(const ThermalAsperityConfig& config);
  Progress process(std::span<const float> in, std::span<const uint8_t> in_flags,
                   std::span<float> out, std::span<uint8_t> out_flags);
  Progress flush(std::span<float> out, std::span<uint8_t> out_flags);
  void reset();
  std::string describe() const;
  size_t lookahead() const { return half_; }
  double signal_rms() const;  // tracked rms of input - baseline outside flagged samples

 private:
  void push(float x, uint8_t f);
  void pop_oldest();
  void emit_center(std::span<float> out, std::span<uint8_t> out_flags, size_t& produced);
  const float* window() const { return ring_x_.data() + (window_start_ & mask_); }
  size_t window_size() const { return static_cast<size_t>(next_in_ - window_start_); }
  double exact_median() const;     // of the window as it is now (sorts a copy)
  void sort_window();              // sorted_ := the window, sorted (at a span's start)
  bool median_beyond() const;  // |median| > detect_threshold_, full window only
  void set_threshold(float t);
  size_t run_steady(const float* in, const uint8_t* in_flags, float* out, uint8_t* out_flags, size_t k, size_t n,
                    size_t& produced, bool& opens);  // detect_threshold_ = t, and the counts beyond it

  ThermalAsperityConfig cfg_;
  size_t half_, width_;
  double alpha_;
  double retain_ = 1.0;  // 1 - alpha_
  size_t mask_ = 0;             // ring capacity (a power of two >= width_) minus one
  std::vector<float> ring_x_;   // doubled: sample i at (i & mask_) and (i & mask_) + capacity
  std::vector<uint8_t> ring_f_;
  std::vector<float> sorted_;   // the window sorted, kept only inside a span
  mutable std::vector<float> scratch_;
  uint64_t next_in_ = 0;       // index of the next input sample
  uint64_t next_center_ = 0;   // index of the next output sample
  uint64_t window_start_ = 0;  // oldest index in the window
  double window_sum_ = 0.0;    // sum of the window (for its mean)
  uint64_t since_exact_sum_ = 0;
  double acc_ = 0.0, weight_ = 0.0;
  uint64_t level_updates_ = 0;
  float detect_threshold_ = 0.0f;  // detect_ratio x rms, refreshed every 16 samples
  uint64_t threshold_age_ = 0;
  uint32_t above_ = 0, below_ = 0;  // window samples > detect_threshold_, < -detect_threshold_
  bool in_span_ = false;
  double smooth_ = 0.0;  // low-passed baseline inside a span
  double smooth_alpha_ = 0.0;
};

}  // namespace salvor
