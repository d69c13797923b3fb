#pragma once
// Gains of a second-order (proportional + integral) digital phase-locked loop from its
// noise bandwidth and damping.
//
// Literature: M. Rice, "Digital Communications: A Discrete-Time Approach", Pearson 2009,
// appendix C (loop filter F(z) = K1 + K2/(1 - z^-1), NCO K0 z^-1/(1 - z^-1)):
//   theta = BnT / (zeta + 1/(4 zeta))
//   Kp K0 K1 = 4 zeta theta / (1 + 2 zeta theta + theta^2)
//   Kp K0 K2 = 4 theta^2    / (1 + 2 zeta theta + theta^2)
// F. M. Gardner, "Phaselock Techniques", 3rd ed., Wiley 2005 (Bn = (wn/2)(zeta + 1/(4 zeta))).

namespace salvor::timing {

struct LoopGains {
  double proportional = 0;  // K1
  double integral = 0;      // K2
};

// `noise_bandwidth` is BnT (loop noise bandwidth times the update period), `damping` is
// zeta, `detector_gain` is Kp K0 (slope of the timing error detector times NCO gain).
// Throws salvor::Error(usage) for values outside 0 < BnT < 0.25, zeta > 0, gain != 0.
LoopGains pi_loop_gains(double noise_bandwidth, double damping, double detector_gain = 1.0);

}  // namespace salvor::timing
