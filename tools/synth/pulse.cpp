#include "synth/pulse.hpp"

#include <cmath>
#include <numbers>

#include "common/error.hpp"

namespace salvor::synth {

std::string to_string(PulseModel m) { return m == PulseModel::lorentzian ? "lorentzian" : "erf"; }

PulseModel pulse_model_from_string(const std::string& s, const std::string& where) {
  if (s == "lorentzian") return PulseModel::lorentzian;
  if (s == "erf") return PulseModel::erf;
  throw_usage(where, "unknown pulse model '" + s + "' (expected lorentzian or erf)");
}

double erf_step(double t, double t50) {
  static constexpr double k = 1.6651092223153954;  // 2*sqrt(ln 2)
  return std::erf(k * t / t50);
}

double lorentzian_truncation_peak_fraction(double span) { return 1.0 / (1.0 + 4.0 * span * span); }

double lorentzian_truncation_energy_fraction(double span) {
  // int_0^X du/(1+u^2)^2 = (atan X + X/(1+X^2))/2 with u = 2t/PW50, X = 2 span; total pi/4.
  const double x = 2.0 * span;
  return 1.0 - (2.0 / std::numbers::pi) * (std::atan(x) + x / (1.0 + x * x));
}

double erf_truncation_peak_fraction(double span) { return std::erfc(1.6651092223153954 * span); }

}  // namespace salvor::synth
