#pragma once
// Test signals shared by the condition and resample suites: a Lorentzian readback of an
// NRZ sequence sampled at an arbitrary rate, 2T preambles, tones, and a Python-oracle
// runner. The Lorentzian model and the bit/transition conventions are those of
// Bergmans, Digital Baseband Transmission and Recording (1996) [memory]:
// r(t) = sum_k b_k h(t - kT), b_k = (a_k - a_{k-1})/2, h(t) = A / (1 + (2t/PW50)^2).

#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <random>
#include <span>
#include <stdexcept>
#include <string>
#include <vector>

namespace salvor::testing {

constexpr double pi = 3.14159265358979323846;

struct ReadbackSpec {
  double bit_rate_hz = 100e6;
  double sample_rate_hz = 250e6;
  double pw50_bits = 2.5;     // PW50 / T
  double amplitude = 1.0;     // isolated-transition peak
  double first_bit_time_s = 0.0;  // time of bit 0's transition cell
  int truncate_bits = 64;     // pulse tails beyond this many bits are dropped
};

// r(t_i) at t_i = i / sample_rate for i = 0 .. n_samples-1.
inline std::vector<float> lorentzian_readback(const std::vector<int8_t>& nrz, const ReadbackSpec& s,
                                              size_t n_samples) {
  std::vector<double> b(nrz.size(), 0.0);
  for (size_t k = 1; k < nrz.size(); ++k) b[k] = 0.5 * (nrz[k] - nrz[k - 1]);
  const double T = 1.0 / s.bit_rate_hz;
  const double pw50 = s.pw50_bits * T;
  std::vector<float> r(n_samples, 0.0f);
  for (size_t i = 0; i < n_samples; ++i) {
    const double t = static_cast<double>(i) / s.sample_rate_hz - s.first_bit_time_s;
    const long kc = static_cast<long>(std::floor(t / T));
    double acc = 0.0;
    for (long k = kc - s.truncate_bits; k <= kc + s.truncate_bits; ++k) {
      if (k < 1 || k >= static_cast<long>(b.size()) || b[k] == 0.0) continue;
      const double u = 2.0 * (t - k * T) / pw50;
      acc += b[k] / (1.0 + u * u);
    }
    r[i] = static_cast<float>(s.amplitude * acc);
  }
  return r;
}

// Sectors of [gap of random bits][preamble of ++-- repeated][random data], repeated.
inline std::vector<int8_t> preamble_sectors(size_t sectors, size_t preamble_bits, size_t data_bits,
                                            uint32_t seed) {
  std::mt19937 rng(seed);
  std::vector<int8_t> a;
  for (size_t s = 0; s < sectors; ++s) {
    for (size_t k = 0; k < preamble_bits; ++k) a.push_back(((k / 2) % 2) == 0 ? 1 : -1);
    for (size_t k = 0; k < data_bits; ++k) a.push_back((rng() & 1u) ? 1 : -1);
  }
  return a;
}

inline std::vector<int8_t> random_nrz(size_t bits, uint32_t seed) {
  std::mt19937 rng(seed);
  std::vector<int8_t> a(bits);
  for (auto& v : a) v = (rng() & 1u) ? 1 : -1;
  return a;
}

inline std::vector<float> tone(size_t n, double cycles_per_sample, double amplitude, double phase) {
  std::vector<float> x(n);
  for (size_t i = 0; i < n; ++i)
    x[i] = static_cast<float>(amplitude * std::cos(2.0 * pi * cycles_per_sample * static_cast<double>(i) + phase));
  return x;
}

inline double rms(std::span<const float> x) {
  double s = 0.0;
  for (float v : x) s += static_cast<double>(v) * v;
  return x.empty() ? 0.0 : std::sqrt(s / static_cast<double>(x.size()));
}

// Least-squares fit of a*cos(w t) + b*sin(w t) at given times; returns {amplitude, phase,
// residual rms} with the model amplitude*cos(w t + phase).
struct SineFit { double amplitude, phase, residual_rms; };
inline SineFit fit_sine(std::span<const float> y, std::span<const double> t, double w) {
  double cc = 0, ss = 0, cs = 0, yc = 0, ys = 0;
  for (size_t i = 0; i < y.size(); ++i) {
    const double c = std::cos(w * t[i]), s = std::sin(w * t[i]);
    cc += c * c; ss += s * s; cs += c * s; yc += y[i] * c; ys += y[i] * s;
  }
  const double det = cc * ss - cs * cs;
  const double a = (yc * ss - ys * cs) / det;
  const double b = (ys * cc - yc * cs) / det;
  double res = 0.0;
  for (size_t i = 0; i < y.size(); ++i) {
    const double e = y[i] - (a * std::cos(w * t[i]) + b * std::sin(w * t[i]));
    res += e * e;
  }
  return {std::hypot(a, b), std::atan2(-b, a), std::sqrt(res / static_cast<double>(y.size()))};
}

inline std::filesystem::path scratch_dir(const std::string& name) {
  auto p = std::filesystem::temp_directory_path() / ("salvor-test-" + name + "-" + std::to_string(::getpid()));
  std::filesystem::create_directories(p);
  return p;
}

inline void write_f32(const std::filesystem::path& p, std::span<const float> x) {
  std::ofstream f(p, std::ios::binary);
  f.write(reinterpret_cast<const char*>(x.data()), static_cast<std::streamsize>(x.size() * sizeof(float)));
  if (!f) throw std::runtime_error("cannot write " + p.string());
}

inline std::vector<float> read_f32(const std::filesystem::path& p) {
  std::ifstream f(p, std::ios::binary | std::ios::ate);
  if (!f) throw std::runtime_error("cannot read " + p.string());
  const auto n = static_cast<size_t>(f.tellg()) / sizeof(float);
  std::vector<float> x(n);
  f.seekg(0);
  f.read(reinterpret_cast<char*>(x.data()), static_cast<std::streamsize>(n * sizeof(float)));
  return x;
}

// Runs Debian's python (SALVOR_ORACLE_PYTHON) on a script with arguments; returns exit status.
inline int run_oracle(const std::string& script, const std::vector<std::string>& args) {
  std::string cmd = std::string(SALVOR_ORACLE_PYTHON) + " '" + script + "'";
  for (const auto& a : args) cmd += " '" + a + "'";
  return std::system(cmd.c_str());
}

}  // namespace salvor::testing
