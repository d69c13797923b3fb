#pragma once
// Gain normalisation: a feed-forward AGC that scales the signal so that its running rms
// equals reference_rms. The mean square is an exponentially weighted average with time
// constant time_constant_bits; its start-up bias is removed by dividing by the sum of the
// weights so far (the bias correction of D. P. Kingma & J. Ba, "Adam", ICLR 2015, sec. 3),
// so the level is right from the first samples without a look-ahead.
//
// Samples carrying any flag (clipped, thermal asperity, dropout) do not update the level:
// the gain holds across them. freeze(true) holds the gain as well (e.g. after the
// preamble, when a later gain loop takes over).
//
// Speed: where every sample of a block of 8 updates the level (no flag, not frozen), the
// block runs in one vector (block_recursions.hpp); reference_kernel = true keeps the plain
// sample-by-sample recursion, which tests/condition compare it with.
//
// Time behaviour (tested): after an amplitude step the mean square moves towards the new
// level as 1 - exp(-t / tau); within 5 tau the output rms is within 1 % of the reference.

#include <cstdint>
#include <span>
#include <string>

#include "common/stream.hpp"
#include "condition/block_recursions.hpp"

namespace salvor {

struct AgcConfig {
  double samples_per_bit = 0.0;       // capture samples per channel bit, > 1
  double time_constant_bits = 500.0;  // level averaging time constant in bits, [1, 1e7]
  double reference_rms = 1.0;         // output rms the gain aims for, > 0
  double max_gain = 1e6;              // gain limit (silence must not blow up), > 0
  bool frozen = false;                // start with the gain held at initial_gain
  double initial_gain = 1.0;          // gain while frozen before any level was measured, > 0
  bool reference_kernel = false;      // true: the plain recursion, one sample at a time
};

class Agc {
 public:
  explicit Agc(const AgcConfig& config);
  Progress process(std::span<const float> in, std::span<float> out);
  Progress process(std::span<const float> in, std::span<const uint8_t> in_flags,
                   std::span<float> out, std::span<uint8_t> out_flags);
  void reset();
  std::string describe() const;

  void freeze(bool frozen) { frozen_ = frozen; }
  bool frozen() const { return frozen_; }
  double gain() const { return gain_; }
  // Bias-corrected running mean square of the input (0 before any update).
  double input_mean_square() const { return level_.weight > 0.0 ? level_.acc / level_.weight : 0.0; }

 private:
  template <bool with_flags>
  Progress run_reference(std::span<const float> in, std::span<const uint8_t> in_flags, std::span<float> out,
                         std::span<uint8_t> out_flags);
  template <bool with_flags>
  Progress run(std::span<const float> in, std::span<const uint8_t> in_flags, std::span<float> out,
               std::span<uint8_t> out_flags);
  AgcConfig cfg_;
  double gain_ = 1.0;  // as after the newest sample
  bool frozen_ = false;
  // The bias-corrected mean square (acc / weight), a block average (block_recursions.hpp);
  // the reference recursion updates its acc and weight directly.
  block_recursions::AverageBlockTables tables_;
  block_recursions::BlockAverage level_;
};

}  // namespace salvor
