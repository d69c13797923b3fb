#pragma once
// Test stimulus (no simulator needed): Lorentzian readback h(t) = 1/(1 + (2t/PW50)^2)
// (Bertram 1994; Bergmans 1996) of NRZI channel bits laid out as sectors (2T preamble of
// channel bits 0101..., a sync mark, random data, a gap), sampled at a nominal number of
// samples per bit with a speed offset, an optional sinusoidal speed drift, dropouts and a
// timing jump, plus white Gaussian noise. SNR here: 20 log10(isolated-transition peak /
// rms noise in |f| < 1/(2T)); white noise of variance s^2 per sample at spb samples per bit
// has s^2 / spb in that band.

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <random>
#include <vector>

namespace salvor::testsig {

struct Dropout {
  size_t first_bit = 0, end_bit = 0;  // amplitude scaled by `gain` over these bits
  double gain = 0.01;
};

struct TrackSpec {
  double spb = 2.0;              // nominal samples per bit
  double pw50_bits = 2.2;
  double rate_offset = 0.0;      // bits faster than nominal by this fraction
  double drift_amplitude = 0.0;  // relative rate deviation amplitude
  double drift_period_bits = 20000;
  double snr_db = 24;
  double amplitude = 1.0;        // isolated-transition peak
  uint32_t seed = 1;
  int sectors = 4;
  int lead_in_bits = 300;
  int preamble_bits = 96;   // as in tf1 (corpora/formats/tf1-512.toml)
  int data_bits = 2000;
  int gap_bits = 100;
  std::vector<uint8_t> sync = {1,1,0,1,0,0,0,1, 1,1,1,0,0,1,0,1, 0,0,1,1,0,1,1,0, 1,0,0,0,1,1,1,1};
  std::vector<Dropout> dropouts;
  size_t jump_bit = 0;           // timing jump (bits later) starting at this bit, 0 = none
  double jump_bits = 0.0;
  double jump_ramp_bits = 20;
  double start_offset_samples = 3.3;  // time of bit 0
};

struct Track {
  std::vector<uint8_t> bits;       // channel bits
  std::vector<double> bit_time;    // sample time of each bit's transition instant
  std::vector<size_t> sync_bit;    // first bit of each sync mark
  std::vector<float> samples;
  double true_spb = 0;             // samples per bit at the mean rate
};

inline Track make_track(const TrackSpec& s) {
  Track tr;
  std::mt19937 rng(s.seed);
  std::bernoulli_distribution coin(0.5);
  auto put = [&](uint8_t b) { tr.bits.push_back(b); };
  for (int i = 0; i < s.lead_in_bits; ++i) put(coin(rng));
  for (int sec = 0; sec < s.sectors; ++sec) {
    for (int i = 0; i < s.preamble_bits; ++i) put(uint8_t(i & 1));
    tr.sync_bit.push_back(tr.bits.size());
    for (uint8_t b : s.sync) put(b);
    for (int i = 0; i < s.data_bits; ++i) put(coin(rng));
    for (int i = 0; i < s.gap_bits; ++i) put(coin(rng));
  }
  const size_t n_bits = tr.bits.size();
  tr.true_spb = s.spb / (1.0 + s.rate_offset);
  tr.bit_time.resize(n_bits);
  double t = s.start_offset_samples;
  const double two_pi = 6.283185307179586;
  for (size_t k = 0; k < n_bits; ++k) {
    double jump = 0;
    if (s.jump_bit && k >= s.jump_bit) {
      const double x = std::min(1.0, double(k - s.jump_bit) / s.jump_ramp_bits);
      jump = s.jump_bits * s.spb * x * x * (3 - 2 * x);  // smoothstep
    }
    tr.bit_time[k] = t + jump;
    const double rate = 1.0 + s.rate_offset + s.drift_amplitude * std::sin(two_pi * double(k) / s.drift_period_bits);
    t += s.spb / rate;
  }
  const size_t n_samples = size_t(tr.bit_time.back() + 40 * s.spb);
  tr.samples.assign(n_samples, 0.0f);
  const double pw50_samples = s.pw50_bits * tr.true_spb;
  // transitions with alternating sign (NRZI: a 1 reverses the write current)
  double sign = 1;
  const double reach = 48 * s.spb;
  for (size_t k = 0; k < n_bits; ++k) {
    if (!tr.bits[k]) continue;
    double gain = s.amplitude * sign;
    sign = -sign;
    for (const auto& d : s.dropouts)
      if (k >= d.first_bit && k < d.end_bit) gain *= d.gain;
    const double tk = tr.bit_time[k];
    const size_t lo = size_t(std::max(0.0, std::ceil(tk - reach)));
    const size_t hi = std::min(n_samples, size_t(tk + reach));
    for (size_t n = lo; n < hi; ++n) {
      const double u = 2.0 * (double(n) - tk) / pw50_samples;
      tr.samples[n] += float(gain / (1.0 + u * u));
    }
  }
  std::normal_distribution<double> gauss(0.0, 1.0);
  const double sigma = s.amplitude * std::sqrt(s.spb) * std::pow(10.0, -s.snr_db / 20.0);
  for (size_t n = 0; n < n_samples; ++n) tr.samples[n] += float(sigma * gauss(rng));
  return tr;
}

// Timing error (bits) of an output at capture position p against the nearest true bit time.
inline double timing_error_bits(const Track& tr, double p) {
  auto it = std::lower_bound(tr.bit_time.begin(), tr.bit_time.end(), p);
  size_t k = size_t(it - tr.bit_time.begin());
  if (k >= tr.bit_time.size()) k = tr.bit_time.size() - 1;
  if (k > 0 && std::fabs(tr.bit_time[k - 1] - p) < std::fabs(tr.bit_time[k] - p)) --k;
  const size_t k2 = k + 1 < tr.bit_time.size() ? k + 1 : k - 1;
  const double period = std::fabs(tr.bit_time[k2] - tr.bit_time[k]);
  return (p - tr.bit_time[k]) / period;
}

}  // namespace salvor::testsig
