#pragma once
// DC and baseline-wander removal: a 2nd-order Butterworth high-pass biquad (bilinear
// transform with prewarped corner; R. Bristow-Johnson, "Cookbook formulae for audio EQ
// biquad filter coefficients", HPF with Q = 1/sqrt(2)), run in double precision because
// the poles sit within ~1e-3 of z = 1.
//
// Corner: corner_fraction x bit rate, default 1e-3. The Lorentzian channel has a spectral
// null at DC (read-channel-theory.md section 1: random NRZ data through h(t) has power
// spectrum ~ sin^2(pi f T) exp(-2 pi PW50 f)), so little signal sits below the corner:
// the signal power removed by this filter at 1e-3/T is -62 dB (PW50/T = 1.5), -59 dB
// (2.0), -56 dB (2.5), -54 dB (3.0) of the total [computed with scipy.integrate.quad].
// The waveform error the filter leaves on data, |1 - H(f)|^2 weighted by that spectrum,
// is larger because the phase response reaches well above the corner: -39 / -37 / -36 /
// -34 dB for the same densities (a baseline wander far below a read channel's noise);
// a corner of 1e-4/T brings it to -59 .. -54 dB at the price of 10 x slower settling
// [computed; tests/condition measure -35.6 dB at PW50 = 2.5 T].
// A baseline sinusoid at f is attenuated by (f/fc)^2 below the corner (-40 dB a decade
// down); a DC offset is removed completely. Perpendicular recording (DC content) would
// lose more: lower the corner there.
//
// Start: the state is primed to the steady state for a constant input equal to the first
// sample (the scipy.signal.lfilter_zi convention), so a DC offset does not ring.
//
// Speed: the recursion runs in blocks of 8 samples (block_recursions.hpp), one vector of
// outputs per block; reference_kernel = true keeps the plain sample-by-sample recursion,
// which tests/condition compare it with.

#include <cstdint>
#include <span>
#include <string>

#include "common/stream.hpp"
#include "condition/block_recursions.hpp"

namespace salvor {

struct BaselineFilterConfig {
  double samples_per_bit = 0.0;   // capture samples per channel bit, > 1
  double corner_fraction = 1e-3;  // -3 dB corner as a fraction of the bit rate, (0, 0.05]
  bool reference_kernel = false;  // true: the plain recursion, one sample at a time
};

class BaselineFilter {
 public:
  explicit BaselineFilter(const BaselineFilterConfig& config);
  Progress process(std::span<const float> in, std::span<float> out);
  // Flags pass through unchanged (the filter adds none).
  Progress process(std::span<const float> in, std::span<const uint8_t> in_flags,
                   std::span<float> out, std::span<uint8_t> out_flags);
  void reset();
  std::string describe() const;
  // Normalised coefficients b0 b1 b2 / 1 a1 a2 (for tests and reports).
  double b0() const { return b0_; }
  double b1() const { return b1_; }
  double b2() const { return b2_; }
  double a1() const { return a1_; }
  double a2() const { return a2_; }
  double corner_cycles_per_sample() const { return corner_; }

 private:
  Progress process_reference(std::span<const float> in, std::span<float> out);
  double corner_;
  double b0_, b1_, b2_, a1_, a2_;
  bool reference_kernel_ = false;
  // Transposed direct form II state; in block mode, the state at the current block's start.
  double s1_ = 0.0, s2_ = 0.0;
  bool primed_ = false;
  block_recursions::BiquadBlockTables tables_;
  double block_x_[block_recursions::kBlock] = {};  // inputs of the current block so far
  size_t fill_ = 0;                                // samples of the current block so far
};

}  // namespace salvor
