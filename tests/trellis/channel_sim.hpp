#pragma once
// Synthetic channels for the trellis detector tests: random NRZI data, the 1/(1+D)
// precoder to NRZ levels, ideal partial-response channels with white Gaussian noise,
// and a Lorentzian readback channel (h(t) = 1/(1 + (2t/PW50)^2), references §1; Bergmans,
// "Digital Baseband Transmission and Recording", 1996 [from memory]) with transition
// jitter and additive white noise, equalized by a least-squares FIR.

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <random>
#include <span>
#include <stdexcept>
#include <vector>

namespace trellis_test {

using Bits = std::vector<uint8_t>;

// Q(x) = P(N(0,1) > x) = erfc(x / sqrt 2) / 2.
inline double q_function(double x) { return 0.5 * std::erfc(x / std::sqrt(2.0)); }

inline Bits random_bits(size_t n, std::mt19937_64& rng) {
  Bits b(n);
  for (auto& v : b) v = static_cast<uint8_t>(rng() & 1);
  return b;
}

// NRZ levels from NRZI bits: x_k = x_(k-1) * (-1)^(a_k), x_(-1) = level_before.
inline std::vector<double> levels_from_nrzi(const Bits& a, double level_before = -1.0) {
  std::vector<double> x(a.size());
  double cur = level_before;
  for (size_t k = 0; k < a.size(); ++k) {
    if (a[k]) cur = -cur;
    x[k] = cur;
  }
  return x;
}

// y_k = sum_i f_i x_(k-i), levels before the block = level_before.
inline std::vector<double> pr_channel(const std::vector<double>& x, std::span<const double> f,
                                      double level_before = -1.0) {
  std::vector<double> y(x.size());
  for (size_t k = 0; k < x.size(); ++k) {
    double acc = 0.0;
    for (size_t i = 0; i < f.size(); ++i) acc += f[i] * (k >= i ? x[k - i] : level_before);
    y[k] = acc;
  }
  return y;
}

inline std::vector<float> add_noise(const std::vector<double>& y, double sigma,
                                    std::mt19937_64& rng) {
  std::normal_distribution<double> g(0.0, sigma);
  std::vector<float> out(y.size());
  for (size_t k = 0; k < y.size(); ++k) out[k] = static_cast<float>(y[k] + g(rng));
  return out;
}

struct ErrorCount {
  size_t bits = 0;    // compared
  size_t errors = 0;  // differing bits
  size_t events = 0;  // clusters of errors closer than `gap` bits
  double rate() const { return bits ? static_cast<double>(errors) / bits : 0.0; }
};

// Compares decided[k] with truth[k] for k in [skip, size - tail).
inline ErrorCount count_errors(const Bits& truth, const Bits& decided, size_t skip, size_t tail,
                               size_t gap = 12) {
  if (truth.size() != decided.size()) throw std::runtime_error("count_errors: length mismatch");
  ErrorCount c;
  long last = -1000000;
  for (size_t k = skip; k + tail < truth.size(); ++k) {
    ++c.bits;
    if (truth[k] != decided[k]) {
      ++c.errors;
      if (static_cast<long>(k) - last > static_cast<long>(gap)) ++c.events;
      last = static_cast<long>(k);
    }
  }
  return c;
}

// Solves A w = b (n x n, row-major) by Gaussian elimination with partial pivoting.
inline std::vector<double> solve_linear(std::vector<double> A, std::vector<double> b) {
  const size_t n = b.size();
  for (size_t c = 0; c < n; ++c) {
    size_t piv = c;
    for (size_t r = c + 1; r < n; ++r)
      if (std::abs(A[r * n + c]) > std::abs(A[piv * n + c])) piv = r;
    if (A[piv * n + c] == 0.0) throw std::runtime_error("solve_linear: singular");
    if (piv != c) {
      for (size_t k = 0; k < n; ++k) std::swap(A[c * n + k], A[piv * n + k]);
      std::swap(b[c], b[piv]);
    }
    for (size_t r = c + 1; r < n; ++r) {
      const double f = A[r * n + c] / A[c * n + c];
      for (size_t k = c; k < n; ++k) A[r * n + k] -= f * A[c * n + k];
      b[r] -= f * b[c];
    }
  }
  std::vector<double> w(n);
  for (size_t r = n; r-- > 0;) {
    double acc = b[r];
    for (size_t k = r + 1; k < n; ++k) acc -= A[r * n + k] * w[k];
    w[r] = acc / A[r * n + r];
  }
  return w;
}

// Lorentzian readback sampled once per bit: r_k = sum_j b_j h(kT - jT - jitter_j) + noise,
// with transitions b_j = (x_j - x_(j-1))/2 in {0, +-1} (x_(-1) = -1), transition jitter
// ~ N(0, jitter_sigma^2) in bit periods, white Gaussian noise of rms noise_sigma per sample.
struct LorentzianChannel {
  double density = 2.5;       // PW50 / T
  double jitter_sigma = 0.0;  // in T
  double noise_sigma = 0.0;   // per sample, before the equalizer
  int span = 64;              // bits either side a transition reaches (truncation)

  double pulse(double t) const {
    const double u = 2.0 * t / density;
    return 1.0 / (1.0 + u * u);
  }

  std::vector<double> readback(const std::vector<double>& x, std::mt19937_64& rng) const {
    std::vector<double> r(x.size(), 0.0);
    std::normal_distribution<double> jit(0.0, 1.0);
    const long n = static_cast<long>(x.size());
    double prev = -1.0;
    for (long j = 0; j < n; ++j) {
      const double b = (x[j] - prev) / 2.0;
      prev = x[j];
      if (b == 0.0) continue;
      const double d = jitter_sigma > 0.0 ? jitter_sigma * jit(rng) : 0.0;
      for (long k = std::max(0L, j - span); k < std::min(n, j + span + 1); ++k)
        r[k] += b * pulse(static_cast<double>(k - j) - d);
    }
    if (noise_sigma > 0.0) {
      std::normal_distribution<double> g(0.0, noise_sigma);
      for (auto& v : r) v += g(rng);
    }
    return r;
  }
};

// Least-squares FIR w (taps, with `delay`): sum_i w_i r_(k+delay-i) ~ d_k over the block.
struct Fir {
  std::vector<double> w;
  int delay = 0;
  double mse = 0.0;
  std::vector<double> apply(const std::vector<double>& r) const {
    std::vector<double> out(r.size(), 0.0);
    const long n = static_cast<long>(r.size());
    for (long k = 0; k < n; ++k) {
      double acc = 0.0;
      for (size_t i = 0; i < w.size(); ++i) {
        const long idx = k + delay - static_cast<long>(i);
        if (idx >= 0 && idx < n) acc += w[i] * r[idx];
      }
      out[k] = acc;
    }
    return out;
  }
};

inline Fir design_ls_fir(const std::vector<double>& r, const std::vector<double>& d, int taps,
                         int delay) {
  const size_t n = static_cast<size_t>(taps);
  std::vector<double> A(n * n, 0.0), b(n, 0.0);
  const long N = static_cast<long>(r.size());
  std::vector<double> z(n);
  for (long k = 64; k < N - 64; ++k) {
    for (size_t i = 0; i < n; ++i) z[i] = r[k + delay - static_cast<long>(i)];
    for (size_t i = 0; i < n; ++i) {
      b[i] += z[i] * d[k];
      for (size_t j = 0; j < n; ++j) A[i * n + j] += z[i] * z[j];
    }
  }
  Fir f;
  f.w = solve_linear(A, b);
  f.delay = delay;
  std::vector<double> e = f.apply(r);
  double s = 0.0;
  size_t c = 0;
  for (long k = 64; k < N - 64; ++k, ++c) s += (e[k] - d[k]) * (e[k] - d[k]);
  f.mse = s / static_cast<double>(c);
  return f;
}

// The best-delay least-squares FIR from a training block.
inline Fir best_ls_fir(const std::vector<double>& r, const std::vector<double>& d, int taps) {
  Fir best;
  best.mse = INFINITY;
  for (int delay = taps / 2 - 3; delay <= taps / 2 + 3; ++delay) {
    Fir f = design_ls_fir(r, d, taps, delay);
    if (f.mse < best.mse) best = f;
  }
  return best;
}

inline std::vector<float> to_float(const std::vector<double>& v) {
  return std::vector<float>(v.begin(), v.end());
}

}  // namespace trellis_test
