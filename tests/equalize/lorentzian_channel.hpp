#pragma once
// Test helper: a bit-spaced longitudinal readback channel. Isolated transition response
// h(t) = 1/(1 + (2t/PW50)^2) (Lorentzian; read-channel references section 1, e.g. Bergmans
// 1996), bit response g(t) = [h(t) - h(t-T)]/2 sampled at the bit rate, written levels a_k
// = +-1, white Gaussian noise. Deterministic for a seed.

#include <cmath>
#include <cstdint>
#include <random>
#include <vector>

namespace salvor::testing {

// g_k = [h(k - K) - h(k - K - 1)] / 2 for k = 0 .. 2K+1 (time origin at index K), T = 1.
inline std::vector<double> lorentzian_bit_response(double density, int half_span) {
  auto h = [&](double t) { return 1.0 / (1.0 + (2.0 * t / density) * (2.0 * t / density)); };
  std::vector<double> g;
  for (int k = -half_span; k <= half_span + 1; ++k) g.push_back(0.5 * (h(k) - h(k - 1)));
  return g;
}

inline std::vector<int8_t> random_levels(size_t n, uint32_t seed) {
  std::mt19937 rng(seed);
  std::vector<int8_t> a(n);
  for (auto& v : a) v = (rng() & 1u) ? 1 : -1;
  return a;
}

// x_n = sum_m h_m a_{n-m} + noise (levels before the start taken as -1, a DC-free erased track).
inline std::vector<float> convolve_levels(const std::vector<double>& h, const std::vector<int8_t>& a, double sigma,
                                          uint32_t seed, double gain = 1.0) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> noise(0.0, sigma);
  std::vector<float> x(a.size());
  for (size_t n = 0; n < a.size(); ++n) {
    double acc = 0.0;
    for (size_t m = 0; m < h.size(); ++m) acc += h[m] * (n >= m ? a[n - m] : -1);
    x[n] = static_cast<float>(gain * acc + (sigma > 0 ? noise(rng) : 0.0));
  }
  return x;
}

// NRZI channel bits of a level sequence: bit k = 1 when a_k != a_{k-1} (a_{-1} = level_before).
inline std::vector<uint8_t> nrzi_bits(const std::vector<int8_t>& a, int8_t level_before = -1) {
  std::vector<uint8_t> b(a.size());
  int8_t prev = level_before;
  for (size_t k = 0; k < a.size(); ++k) {
    b[k] = a[k] != prev ? 1 : 0;
    prev = a[k];
  }
  return b;
}

}  // namespace salvor::testing
