// Welch periodogram with FFTW (single precision r2c) and FIR magnitude responses.
// Welch, IEEE Trans. Audio Electroacoust. 15(2), 1967; scaling as scipy.signal.welch.

#include "plot/spectra.hpp"

#include <fftw3.h>

#include <cmath>
#include <complex>
#include <numbers>
#include <string>

#include "common/error.hpp"

namespace salvor::plot {

struct WelchEstimator::Fft {
  float* in = nullptr;
  fftwf_complex* out = nullptr;
  fftwf_plan plan = nullptr;
};

WelchEstimator::WelchEstimator(const WelchConfig& config) : cfg_(config) {
  const size_t n = cfg_.segment;
  if (n < 16 || n > 65536 || (n & (n - 1)) != 0)
    throw_usage("welch", "segment " + std::to_string(n) + " is not a power of two in 16..65536");
  if (!(cfg_.sample_rate_hz > 0) || !std::isfinite(cfg_.sample_rate_hz))
    throw_usage("welch", "sample rate " + std::to_string(cfg_.sample_rate_hz) + " Hz is not positive");
  window_.resize(n);
  // Periodic Hann (the window scipy.signal.get_window('hann', n) returns).
  for (size_t i = 0; i < n; ++i) {
    window_[i] = 0.5 - 0.5 * std::cos(2 * std::numbers::pi * static_cast<double>(i) / static_cast<double>(n));
    window_power_ += window_[i] * window_[i];
  }
  sum_.assign(n / 2 + 1, 0.0);
  pending_.reserve(n);
  fft_ = new Fft;
  fft_->in = fftwf_alloc_real(n);
  fft_->out = fftwf_alloc_complex(n / 2 + 1);
  if (!fft_->in || !fft_->out) throw_internal("welch: FFTW could not allocate " + std::to_string(n) + " points");
  // FFTW_ESTIMATE: no timing runs, so planning is quick and deterministic.
  fft_->plan = fftwf_plan_dft_r2c_1d(static_cast<int>(n), fft_->in, fft_->out, FFTW_ESTIMATE);
  if (!fft_->plan) throw_internal("welch: FFTW could not plan a transform of " + std::to_string(n) + " points");
}

WelchEstimator::~WelchEstimator() {
  if (!fft_) return;
  if (fft_->plan) fftwf_destroy_plan(fft_->plan);
  fftwf_free(fft_->in);
  fftwf_free(fft_->out);
  delete fft_;
}

void WelchEstimator::reset() {
  pending_.clear();
  std::fill(sum_.begin(), sum_.end(), 0.0);
  segments_ = 0;
}

void WelchEstimator::transform_segment() {
  const size_t n = cfg_.segment;
  double mean = 0;
  for (float v : pending_) mean += v;
  mean /= static_cast<double>(n);
  for (size_t i = 0; i < n; ++i) fft_->in[i] = static_cast<float>((pending_[i] - mean) * window_[i]);
  fftwf_execute(fft_->plan);
  for (size_t k = 0; k <= n / 2; ++k) {
    double re = fft_->out[k][0], im = fft_->out[k][1];
    sum_[k] += re * re + im * im;
  }
  ++segments_;
  // 50 % overlap: keep the second half as the start of the next segment.
  pending_.erase(pending_.begin(), pending_.begin() + static_cast<long>(n / 2));
}

void WelchEstimator::process(std::span<const float> in) {
  size_t i = 0;
  while (i < in.size()) {
    size_t take = std::min(cfg_.segment - pending_.size(), in.size() - i);
    pending_.insert(pending_.end(), in.begin() + static_cast<long>(i), in.begin() + static_cast<long>(i + take));
    i += take;
    if (pending_.size() == cfg_.segment) transform_segment();
  }
}

Periodogram WelchEstimator::result() const {
  Periodogram p;
  p.segments = segments_;
  const size_t n = cfg_.segment, bins = n / 2 + 1;
  p.frequency_hz.resize(bins);
  for (size_t k = 0; k < bins; ++k) p.frequency_hz[k] = cfg_.sample_rate_hz * static_cast<double>(k) / static_cast<double>(n);
  if (segments_ == 0) return p;
  p.psd.resize(bins);
  const double scale = 1.0 / (cfg_.sample_rate_hz * window_power_ * static_cast<double>(segments_));
  for (size_t k = 0; k < bins; ++k) {
    // One-sided: every bin but DC and Nyquist carries the power of its negative twin.
    double twice = (k == 0 || k == n / 2) ? 1.0 : 2.0;
    p.psd[k] = sum_[k] * scale * twice;
  }
  return p;
}

std::vector<double> fir_magnitude(std::span<const double> taps, std::span<const double> frequencies) {
  std::vector<double> out;
  out.reserve(frequencies.size());
  for (double f : frequencies) {
    std::complex<double> h = 0;
    for (size_t k = 0; k < taps.size(); ++k) h += taps[k] * std::polar(1.0, -2 * std::numbers::pi * f * static_cast<double>(k));
    out.push_back(std::abs(h));
  }
  return out;
}

std::vector<double> fir_magnitude_db(std::span<const double> taps, std::span<const double> frequencies, double floor_db) {
  std::vector<double> m = fir_magnitude(taps, frequencies);
  for (double& v : m) v = std::max(floor_db, 20 * std::log10(std::max(v, 1e-300)));
  return m;
}

std::vector<double> linspace(double a, double b, size_t n) {
  std::vector<double> v(n);
  for (size_t i = 0; i < n; ++i) v[i] = n == 1 ? a : a + (b - a) * static_cast<double>(i) / static_cast<double>(n - 1);
  return v;
}

}  // namespace salvor::plot
