#pragma once
// A short fixed FIR inside the timing loop that shapes the Lorentzian channel towards the
// EPR4 transition response (1 + D)^2 / 2 = [0.5, 1, 0.5], so that the data-mode timing
// error detector can use target-level decisions before the adaptive equalizer (a later
// stage) has converged.
//
// Literature: Lorentzian isolated-transition response h(t) = 1 / (1 + (2t/PW50)^2)
// (H. N. Bertram, "Theory of Magnetic Recording", CUP 1994; J. W. M. Bergmans, "Digital
// Baseband Transmission and Recording", Kluwer 1996). EPR4 = (1 - D)(1 + D)^2 in the NRZ
// domain, i.e. (1 + D)^2 on transitions (H. K. Thapar & A. M. Patel, IEEE Trans. Magn.
// 23(5):3666-3668, 1987). The taps are a regularised least-squares (zero-forcing) fit.

#include <vector>

namespace salvor::timing {

// Lorentzian isolated-transition response at x bit periods, peak 1, width pw50_bits.
double lorentzian_transition(double x_bits, double pw50_bits);

// Taps w[0..taps-1] (odd count) with sum_i w[i] h(n - i) ~ target(n - (taps-1)/2) for
// the EPR4 transition target [0.5, 1, 0.5]. `ridge` penalises |w|^2 (noise enhancement).
std::vector<double> design_epr4_prefilter(double pw50_bits, int taps, double ridge);

// The equalised transition response p(x) = sum_i w[i] h(x - i) at x bit periods.
double prefiltered_transition(const std::vector<double>& taps, double pw50_bits, double x_bits);

}  // namespace salvor::timing
