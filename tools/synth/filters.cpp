#include "synth/filters.hpp"

#include <algorithm>
#include <cmath>
#include <complex>
#include <numbers>
#include <sstream>

#include "common/error.hpp"

namespace salvor::synth {

ButterworthLowpass::ButterworthLowpass(const ButterworthConfig& cfg) : cfg_(cfg) {
  if (cfg.order < 1 || cfg.order > 12)
    throw_usage("lowpass.order", "order " + std::to_string(cfg.order) + " is outside 1..12");
  if (!(cfg.sample_rate_hz > 0)) throw_usage("lowpass", "sample rate must be positive");
  if (!(cfg.corner_hz > 0) || !(cfg.corner_hz < 0.49 * cfg.sample_rate_hz)) {
    std::ostringstream m;
    m << "corner " << cfg.corner_hz << " Hz must lie between 0 and 0.49 x the sample rate ("
      << cfg.sample_rate_hz << " Hz)";
    throw_usage("lowpass.corner", m.str());
  }
  // Prewarped analog corner for a unit-rate bilinear map s = 2 (z-1)/(z+1) with T = 1.
  const double wc = 2.0 * std::tan(std::numbers::pi * cfg.corner_hz / cfg.sample_rate_hz);
  const int n = cfg.order;
  for (int k = 0; k < n / 2; ++k) {
    // Conjugate pole pair at angle theta from the negative real axis.
    const double theta = std::numbers::pi * (2.0 * k + 1.0) / (2.0 * n);
    const double re = -wc * std::sin(theta);  // pole = wc * exp(j(pi/2 + theta))
    // Analog section: wc^2 / (s^2 - 2 re s + wc^2); bilinear with K = 2.
    const double a0a = 4.0 - 2.0 * 2.0 * re + wc * wc;  // K^2 - 2 re K + wc^2
    Section s{};
    s.b0 = wc * wc / a0a;
    s.b1 = 2.0 * wc * wc / a0a;
    s.b2 = wc * wc / a0a;
    s.a1 = (2.0 * wc * wc - 2.0 * 4.0) / a0a;
    s.a2 = (4.0 + 2.0 * 2.0 * re + wc * wc) / a0a;
    sections_.push_back(s);
  }
  if (n % 2 == 1) {
    // First-order section wc / (s + wc).
    const double a0a = 2.0 + wc;
    Section s{};
    s.b0 = wc / a0a;
    s.b1 = wc / a0a;
    s.b2 = 0;
    s.a1 = (wc - 2.0) / a0a;
    s.a2 = 0;
    sections_.push_back(s);
  }
}

void ButterworthLowpass::process(std::span<double> x) {
  for (Section& s : sections_) {
    for (double& v : x) {
      const double in = v;
      const double out = s.b0 * in + s.s1;
      s.s1 = s.b1 * in - s.a1 * out + s.s2;
      s.s2 = s.b2 * in - s.a2 * out;
      v = out;
    }
  }
}

void ButterworthLowpass::reset() {
  for (Section& s : sections_) s.s1 = s.s2 = 0;
}

std::string ButterworthLowpass::describe() const {
  std::ostringstream o;
  o << "butterworth low-pass order " << cfg_.order << ", corner " << cfg_.corner_hz << " Hz at "
    << cfg_.sample_rate_hz << " Hz (bilinear, prewarped)";
  return o.str();
}

double ButterworthLowpass::magnitude_at(double f) const { return std::abs(response_at(f)); }

double ButterworthLowpass::group_delay_samples(double f) const {
  const double df = 1e-6 * cfg_.sample_rate_hz;
  const double lo = std::max(0.0, f - df), hi = f + df;
  const double dphi = std::arg(response_at(hi) / response_at(lo));  // small: no unwrapping needed
  return -dphi / (2.0 * std::numbers::pi * (hi - lo) / cfg_.sample_rate_hz);
}

std::complex<double> ButterworthLowpass::response_at(double f) const {
  const std::complex<double> z = std::polar(1.0, 2.0 * std::numbers::pi * f / cfg_.sample_rate_hz);
  const std::complex<double> zi = 1.0 / z;
  std::complex<double> h = 1.0;
  for (const Section& s : sections_) {
    h *= (s.b0 + s.b1 * zi + s.b2 * zi * zi) / (1.0 + s.a1 * zi + s.a2 * zi * zi);
  }
  return h;
}

}  // namespace salvor::synth
