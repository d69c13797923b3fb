// Measured noise and timing of rendered captures against the configured parameters.
#include <gtest/gtest.h>

#include <cmath>
#include <fftw3.h>
#include <numeric>
#include <numbers>

#include "synth/renderer.hpp"
#include "synth_test_util.hpp"

using namespace salvor::synth;
using namespace salvor::synth::testing;

namespace {

// Power of x within |f| < band (band and rate in the same unit), by FFT and Parseval.
double band_power(const std::vector<double>& x, double band, double rate) {
  const int n = static_cast<int>(x.size());
  std::vector<float> in(x.begin(), x.end());
  fftwf_complex* out = fftwf_alloc_complex(n / 2 + 1);
  fftwf_plan p = fftwf_plan_dft_r2c_1d(n, in.data(), out, FFTW_ESTIMATE);
  fftwf_execute(p);
  double sum = 0;
  for (int k = 0; k <= n / 2; ++k) {
    const double f = static_cast<double>(k) * rate / n;
    if (f >= band) break;
    const double m2 = double(out[k][0]) * out[k][0] + double(out[k][1]) * out[k][1];
    sum += (k == 0 ? 1.0 : 2.0) * m2;  // negative frequencies mirror the positive ones
  }
  fftwf_destroy_plan(p);
  fftwf_free(out);
  return sum / (static_cast<double>(n) * n);
}

std::vector<double> peak_times_near(const std::vector<double>& y, const std::vector<size_t>& bits_at,
                                    double samples_per_bit, double (*to_bits)(double, double)) {
  std::vector<double> t;
  for (size_t n : bits_at) {
    const long c = std::lround(static_cast<double>(n) * samples_per_bit);
    const long w = static_cast<long>(2 * samples_per_bit);
    long best = c;
    for (long i = c - w; i <= c + w; ++i)
      if (std::abs(y[static_cast<size_t>(i)]) > std::abs(y[static_cast<size_t>(best)])) best = i;
    std::vector<double> a(y.begin() + best - 1, y.begin() + best + 2);
    for (double& v : a) v = std::abs(v);
    t.push_back(to_bits(parabolic_peak(a, 1) - 1 + static_cast<double>(best), samples_per_bit));
  }
  return t;
}

double samples_to_bits(double s, double spb) { return s / spb; }

}  // namespace

// SNR definition (renderer.hpp): 20 log10(A / sigma_n), sigma_n the rms electronic noise in
// |f| < 1/(2T). The noise is isolated by rendering the same track with and without it, and
// its power is measured in that band by FFT. 2^17 samples at 2.5 samples/bit give about
// 52000 independent in-band values: the estimate's standard deviation is ~0.03 dB, so 0.2 dB
// is a > 6 sigma bound.
TEST(SynthNoise, MeasuredElectronicSnrMatchesConfigured) {
  std::vector<uint8_t> bits(53000);
  RandomStream rng(21);
  for (auto& b : bits) b = rng.uniform() < 0.45;
  const WrittenTrack w = write_track(bits, {0.03, 0.02}, 5);
  for (double snr : {12.0, 21.0, 30.0}) {
    for (double amp : {1.0, 0.8}) {
      auto cfg = plain_config(2.3, 2.5);
      cfg.amplitude = amp;
      cfg.noise_seed = 77;
      Renderer quiet(cfg, w, nullptr);
      cfg.noise.snr_db = snr;
      Renderer noisy(cfg, w, nullptr);
      const auto a = render_all(quiet), b = render_all(noisy);
      std::vector<double> noise(1 << 17);
      for (size_t i = 0; i < noise.size(); ++i) noise[i] = b[i] - a[i];
      const double p = band_power(noise, 0.5, 2.5);  // band |f| < f0/2, rate fs = 2.5 f0
      const double measured_db = 20 * std::log10(amp) - 10 * std::log10(p);
      EXPECT_NEAR(measured_db, snr, 0.2) << "amplitude " << amp;
      // White: the whole band carries fs T = 2.5 times the in-band power.
      const double total = std::inner_product(noise.begin(), noise.end(), noise.begin(), 0.0) / noise.size();
      EXPECT_NEAR(10 * std::log10(total / p), 10 * std::log10(2.5), 0.1);
    }
  }
}

// Transition jitter: isolated transitions (every 40 bits, PW50 = 2 T) rendered without
// electronic noise at 12 samples per bit; each peak located by a parabola through the three
// largest samples. Without jitter the located peaks sit on the bit positions within 2e-3 T
// (the parabola's own bias); with sigma_j = 0.08 T their rms deviation matches within 6 %
// (2000 transitions: the rms estimate's relative standard deviation is 1/sqrt(2N) = 1.6 %).
TEST(SynthTiming, MeasuredJitterMatchesConfigured) {
  const size_t L = 80000, spacing = 40;
  const auto bits = sparse_bits(L, spacing, 20);
  std::vector<size_t> at;
  for (size_t n = 20; n < L; n += spacing) at.push_back(n);
  at.erase(at.begin());  // skip transitions within 2 bits of the capture start
  at.pop_back();
  const double spb = 12;
  for (double sigma : {0.0, 0.08}) {
    const WrittenTrack w = write_track(bits, {sigma, 0.0}, 1234);
    auto cfg = plain_config(2.0, spb);
    cfg.span_widths = 12;
    Renderer r(cfg, w, nullptr);
    const auto y = render_all(r);
    const auto t = peak_times_near(y, at, spb, samples_to_bits);
    double s = 0, s2 = 0, max_dev = 0;
    for (size_t i = 0; i < t.size(); ++i) {
      const double d = t[i] - static_cast<double>(at[i]);
      s += d;
      s2 += d * d;
      max_dev = std::max(max_dev, std::abs(d));
    }
    const double n = static_cast<double>(t.size());
    if (sigma == 0.0) {
      EXPECT_LT(max_dev, 2e-3);
    } else {
      EXPECT_NEAR(std::sqrt(s2 / n), sigma, 0.06 * sigma);
      EXPECT_NEAR(s / n, 0.0, 4 * sigma / std::sqrt(n));
    }
  }
}

// Speed offset: a spindle faster by 400 ppm shortens the bit period by 400e-6
// (renderer.hpp: local period T0 (1 - eps)). The located transition times over 80000 bits
// fit a line of slope 1 - 400e-6 within 0.2 ppm; a 150 ppm sinusoidal drift shows up as the
// configured extremes of the local period measured over 4000-bit stretches.
TEST(SynthTiming, TransitionTimesFollowConfiguredSpeed) {
  const size_t L = 80000, spacing = 40;
  const auto bits = sparse_bits(L, spacing, 20);
  const double spb = 8;
  const WrittenTrack w = write_track(bits, {}, 1);
  {
    auto cfg = plain_config(2.0, spb);
    cfg.spindle.offset = 400e-6;
    Renderer r(cfg, w, nullptr);
    const auto y = render_all(r);
    std::vector<size_t> at;
    for (size_t n = 60; n + 40 < L; n += spacing) at.push_back(n);
    // Peaks appear earlier by the offset: look near n (1 - 400e-6).
    std::vector<double> t;
    for (size_t n : at) {
      const long c = std::lround(static_cast<double>(n) * (1 - 400e-6) * spb);
      long best = c;
      for (long i = c - 16; i <= c + 16; ++i)
        if (std::abs(y[static_cast<size_t>(i)]) > std::abs(y[static_cast<size_t>(best)])) best = i;
      std::vector<double> a = {std::abs(y[best - 1]), std::abs(y[best]), std::abs(y[best + 1])};
      t.push_back((parabolic_peak(a, 1) - 1 + best) / spb);
    }
    double sx = 0, sy = 0, sxx = 0, sxy = 0;
    const double n = static_cast<double>(t.size());
    for (size_t i = 0; i < t.size(); ++i) {
      const double x = static_cast<double>(at[i]);
      sx += x; sy += t[i]; sxx += x * x; sxy += x * t[i];
    }
    const double slope = (n * sxy - sx * sy) / (n * sxx - sx * sx);
    EXPECT_NEAR((1 - slope) * 1e6, 400.0, 0.2);
    EXPECT_NEAR(r.index_sample(), 0.0, 1e-12);
  }
  {
    auto cfg = plain_config(2.0, spb);
    cfg.spindle = {0.0, 150e-6, 40000, 0.0};  // one drift period every 40000 bits
    Renderer r(cfg, w, nullptr);
    const auto y = render_all(r);
    auto peak_at = [&](size_t bit) {
      const double guess = cfg.spindle.time_at(static_cast<double>(bit)) * spb;
      const long c = std::lround(guess);
      long best = c;
      for (long i = c - 4; i <= c + 4; ++i)
        if (std::abs(y[static_cast<size_t>(i)]) > std::abs(y[static_cast<size_t>(best)])) best = i;
      std::vector<double> a = {std::abs(y[best - 1]), std::abs(y[best]), std::abs(y[best + 1])};
      return (parabolic_peak(a, 1) - 1 + best) / spb;
    };
    // eps(x) = 150e-6 sin(2 pi x / 40000): fastest around x = 10000, slowest around 30000.
    // Mean period over [8020, 12020] and [28020, 32020], averaged sine = 0.9897 of the peak.
    const double avg = std::sin(std::numbers::pi * 4000 / 40000) / (std::numbers::pi * 4000 / 40000);
    const double fast = (peak_at(12020) - peak_at(8020)) / 4000;
    const double slow = (peak_at(32020) - peak_at(28020)) / 4000;
    EXPECT_NEAR((1 - fast) * 1e6, 150 * avg, 1.0);
    EXPECT_NEAR((1 - slow) * 1e6, -150 * avg, 1.0);
  }
}

// Width variation: the FWHM of each isolated pulse varies with the configured sigma_w.
TEST(SynthTiming, MeasuredWidthVariationMatchesConfigured) {
  const size_t L = 40000, spacing = 40;
  const auto bits = sparse_bits(L, spacing, 20);
  const double spb = 16, sigma_w = 0.05, d = 2.0;
  const WrittenTrack w = write_track(bits, {0.0, sigma_w}, 99);
  auto cfg = plain_config(d, spb);
  cfg.span_widths = 12;
  Renderer r(cfg, w, nullptr);
  const auto y = render_all(r);
  double s = 0, s2 = 0;
  int n = 0;
  for (size_t bit = 60; bit + 40 < L; bit += spacing, ++n) {
    const size_t pk = bit * static_cast<size_t>(spb);
    const double top = std::abs(y[pk]);
    auto cross = [&](int dir) {
      size_t i = pk;
      while (std::abs(y[i]) > 0.5 * top) i = dir > 0 ? i + 1 : i - 1;
      const size_t j = dir > 0 ? i - 1 : i + 1;
      const double f = (std::abs(y[j]) - 0.5 * top) / (std::abs(y[j]) - std::abs(y[i]));
      return static_cast<double>(j) + f * (static_cast<double>(i) - static_cast<double>(j));
    };
    const double rel = (cross(1) - cross(-1)) / spb / d - 1.0;
    s += rel;
    s2 += rel * rel;
  }
  const double mean = s / n, sd = std::sqrt(s2 / n - mean * mean);
  EXPECT_NEAR(sd, sigma_w, 0.08 * sigma_w);  // ~1000 pulses: 1/sqrt(2N) = 2.2 %
  EXPECT_NEAR(mean, 0.0, 4 * sigma_w / std::sqrt(n) + 2e-3);
}
