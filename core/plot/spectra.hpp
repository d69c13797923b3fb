#pragma once
// What the report plots in frequency:
//  - Welch's averaged periodogram (P. D. Welch, "The use of fast Fourier transform for
//    the estimation of power spectra", IEEE Trans. Audio Electroacoust. 15(2), 1967):
//    periodic Hann window, 50 % overlap, each segment's mean removed, one-sided power
//    spectral density (units^2/Hz), scaled as scipy.signal.welch's defaults
//    (scaling="density", detrend="constant") so that function can check it.
//  - the magnitude response of an FIR filter, |H(e^jw)| = |sum_k h_k e^{-jwk}|.

#include <cstddef>
#include <cstdint>
#include <span>
#include <vector>

namespace salvor::plot {

struct WelchConfig {
  size_t segment = 4096;       // samples per segment (FFT length), power of two 16..65536
  double sample_rate_hz = 1;   // > 0: sets the frequency axis and the density scale
};

struct Periodogram {
  std::vector<double> frequency_hz;  // segment/2 + 1 bins, 0..fs/2
  std::vector<double> psd;           // one-sided PSD per bin (units^2 / Hz)
  uint64_t segments = 0;             // segments averaged
};

// Streaming: memory is one segment plus the FFT plan, whatever the input length.
// Holds an FFTW plan, so it is move-only.
class WelchEstimator {
 public:
  explicit WelchEstimator(const WelchConfig& config);  // throws salvor::Error(usage)
  ~WelchEstimator();
  WelchEstimator(const WelchEstimator&) = delete;
  WelchEstimator& operator=(const WelchEstimator&) = delete;
  void process(std::span<const float> in);
  // The average so far (empty psd if not one whole segment was seen).
  Periodogram result() const;
  void reset();

 private:
  void transform_segment();
  WelchConfig cfg_;
  std::vector<double> window_;
  double window_power_ = 0;     // sum of w^2
  std::vector<float> pending_;  // the current segment being filled
  std::vector<double> sum_;     // accumulated |X_k|^2
  uint64_t segments_ = 0;
  struct Fft;
  Fft* fft_ = nullptr;
};

// |H| of an FIR filter at normalized frequencies f (cycles per sample, 0..0.5).
std::vector<double> fir_magnitude(std::span<const double> taps, std::span<const double> frequencies);
// 20 log10 of the above, floored at `floor_db`.
std::vector<double> fir_magnitude_db(std::span<const double> taps, std::span<const double> frequencies,
                                     double floor_db = -80);
// n points evenly spaced over [a, b] inclusive.
std::vector<double> linspace(double a, double b, size_t n);

}  // namespace salvor::plot
