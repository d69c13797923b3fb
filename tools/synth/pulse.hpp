#pragma once
// Isolated-transition readback models, evaluated analytically at any time.
//
// Longitudinal recording: the Lorentzian transition response
//     h(t) = A / (1 + (2t/PW50)^2),
// PW50 = full width at half of the peak A (Bergmans, Digital Baseband Transmission and
// Recording, Kluwer 1996, ch. 3; Wang & Taratorin, Magnetic Information Storage Technology,
// Academic Press 1999, ch. 9). It is the readback of an arctangent transition under a
// zero-gap head (Williams & Comstock, AIP Conf. Proc. 5, 1971).
//
// Perpendicular recording: the step response of a transition with the erf model
//     s(t) = A * erf(2*sqrt(ln 2) * t / T50),
// with the convention that T50 is the full width at half maximum of the derivative pulse
// ds/dt (a Gaussian), so s(T50/2) = A*erf(sqrt(ln 2)) = 0.76097*A. (This T50 is not the
// -50%..+50% rise time used with the tanh model.) Wang & Taratorin 1999; Vasic & Kurtas
// (eds.), Coding and Signal Processing for Magnetic Recording Systems, CRC 2005.
//
// Times and widths are in the same unit (the renderer uses nominal channel bit periods T,
// so the width is the channel density PW50/T or T50/T).

#include <string>

namespace salvor::synth {

enum class PulseModel { lorentzian, erf };

std::string to_string(PulseModel m);
PulseModel pulse_model_from_string(const std::string& s, const std::string& where);

// Lorentzian with unit peak and full width at half maximum `pw50`.
inline double lorentzian(double t, double pw50) {
  const double u = 2.0 * t / pw50;
  return 1.0 / (1.0 + u * u);
}

// erf step from -1 to +1 whose derivative has full width at half maximum `t50`.
double erf_step(double t, double t50);

// Truncation of the Lorentzian: contributions beyond |t| > span_widths * PW50 are dropped.
// The largest dropped value of one transition is lorentzian(span*PW50) = 1/(1 + 4 span^2)
// of its peak; since transition polarities alternate and the dropped tails shrink with
// distance on each side, the total error of the readback is at most 2/(1 + 4 span^2) of A
// (alternating-series bound; 0.5 % at span 10); and the fraction of its energy beyond the span is
// 1 - (2/pi) * (atan(2 span) + 2 span/(1 + 4 span^2)) (from the closed-form integral of h^2).
double lorentzian_truncation_peak_fraction(double span_widths);
double lorentzian_truncation_energy_fraction(double span_widths);

// For the erf model the step is rendered exactly beyond the span (as a level), and only the
// difference s(t) - sign(t) is truncated; that difference at span*T50 is
// erfc(2 sqrt(ln2) span), below 1e-10 for span >= 3.
double erf_truncation_peak_fraction(double span_widths);

}  // namespace salvor::synth
