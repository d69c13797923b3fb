#pragma once
// The analog-style front-end low-pass of the rig, in discrete time at the sample rate:
// a Butterworth low-pass of order N mapped by the bilinear transform with the corner
// prewarped, realised as cascaded second-order sections (direct form II transposed).
// Its magnitude response is exactly
//     |H(f)|^2 = 1 / (1 + (tan(pi f/fs) / tan(pi fc/fs))^(2N))
// (Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed. 2010, sec. 7.1 and 7.2;
// Butterworth, "On the theory of filter amplifiers", Wireless Engineer 7, 1930).

#include <complex>
#include <span>
#include <string>
#include <vector>

namespace salvor::synth {

struct ButterworthConfig {
  int order = 4;           // 1..12
  double corner_hz = 0;    // -3 dB corner; must be below sample_rate_hz / 2
  double sample_rate_hz = 0;
};

class ButterworthLowpass {
 public:
  explicit ButterworthLowpass(const ButterworthConfig& cfg);
  // In place, any chunking gives the same result.
  void process(std::span<double> samples);
  void reset();
  std::string describe() const;
  // |H| at frequency f from the designed coefficients (for tests and the sidecar).
  double magnitude_at(double f_hz) const;
  // Group delay -d(phase)/d(omega) at frequency f, in sample periods (numerical derivative).
  double group_delay_samples(double f_hz) const;

 private:
  std::complex<double> response_at(double f_hz) const;
  struct Section {
    double b0, b1, b2, a1, a2;  // a0 = 1
    double s1 = 0, s2 = 0;      // transposed direct form II state
  };
  ButterworthConfig cfg_;
  std::vector<Section> sections_;
};

}  // namespace salvor::synth
