#pragma once
// The stand-in capture both benchmark programs stream: a Lorentzian readback of random
// NRZI data, header-only so that bench_stages and bench_reference time the same input.

#include <algorithm>
#include <cstdint>
#include <random>
#include <vector>

namespace salvor::bench {

// A Lorentzian readback (PW50 = 2.3 bits) of random NRZI data with a 128-bit 2T preamble
// every 5000 bits, at `spb` samples per bit, plus white noise (rms 0.05 of the isolated
// pulse peak): a stand-in capture.
inline std::vector<float> readback(size_t samples, double spb, uint32_t seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> noise(0.0, 0.05);
  const size_t bits = static_cast<size_t>(samples / spb) + 64;
  std::vector<int> level(bits);
  int l = -1;
  for (size_t k = 0; k < bits; ++k) {
    const bool t = (k % 5000) < 128 ? (k % 2 == 1) : (rng() & 1);
    if (t) l = -l;
    level[k] = l;
  }
  const double pw = 2.3;
  std::vector<float> x(samples);
  for (size_t n = 0; n < samples; ++n) {
    const double t = n / spb;
    double v = 0;
    const long k0 = static_cast<long>(t) - 20, k1 = static_cast<long>(t) + 20;
    for (long k = std::max(1L, k0); k <= k1 && k < static_cast<long>(bits); ++k) {
      const double b = 0.5 * (level[static_cast<size_t>(k)] - level[static_cast<size_t>(k - 1)]);
      if (b == 0) continue;
      const double u = 2.0 * (t - k) / pw;
      v += b / (1.0 + u * u);
    }
    x[n] = static_cast<float>(v + noise(rng));
  }
  return x;
}

}  // namespace salvor::bench
