#pragma once
// MMSE equalizer design for a fixed target (the Wiener solution) and the joint design of
// an equalizer and a generalized partial-response (GPR) target with a monic constraint.
//
// Literature:
//   Moon & Zeng, "Equalization for maximum likelihood detectors", IEEE Trans. Magn. 31(2),
//   1083-1088, 1995: minimise E[(w'x_k - g'a_k)^2] subject to g_0 = 1. With R = E[x x'],
//   P = E[x a'], A = E[a a']:  w(g) = R^-1 P g,  M = A - P' R^-1 P,
//   g = M^-1 e0 / (e0' M^-1 e0),  MSE_min = 1 / (e0' M^-1 e0).
//   Haykin, Adaptive Filter Theory: the Wiener solution w = R^-1 p for a fixed target,
//   p = P f, MSE = f'(A - P' R^-1 P) f.
//
// Indexing used throughout: the equalizer output for position j is y_j = sum_i w_i x_{j+delay-i}
// (tap i multiplies the sample i places behind the newest one), and the desired value is
// d_j = sum_m f_m a_{j-m}. R is N x N, P is N x L with P(i,m) = E[x_{j+delay-i} a_{j-m}].

#include <cstddef>
#include <cstdint>
#include <span>
#include <vector>

#include "equalize/linalg.hpp"

namespace salvor::equalize {

// Second-order statistics of (equalizer input window, known level window).
struct SecondOrderStats {
  Matrix r;  // N x N, E[x x']
  Matrix p;  // N x L, E[x a']
  Matrix a;  // L x L, E[a a']
  size_t positions = 0;  // how many windows were averaged (0 for a channel model)
  size_t delay = 0;      // the main-tap index the statistics were gathered for
};

struct MmseDesignConfig {
  size_t equalizer_taps = 15;  // N, 5..31
  size_t delay = 7;            // main-tap index: output j lines up with input sample j (< N)
  size_t target_length = 4;    // L for the generalized target, 2..6
  // Diagonal loading of R relative to its mean diagonal (keeps short or narrow-band training
  // data solvable; 0 disables). Common practice, no source.
  double diagonal_loading = 1e-9;
};

struct WienerSolution {
  std::vector<double> taps;  // w, N taps
  double mse = 0.0;          // E[(w'x - f'a)^2] at the optimum, per position
};

struct GprDesign {
  std::vector<double> target;     // g_0 = 1, ..., g_{L-1}
  std::vector<double> equalizer;  // w = R^-1 P g
  double mse = 0.0;               // 1 / (e0' M^-1 e0)
  size_t positions = 0;           // training windows behind the statistics
};

// The statistics implied by a linear channel x_n = sum_k h_k a_{n-k} + v_n with i.i.d. +-1
// levels a and white noise v of variance `noise_variance` (so A = I). `bit_response` is
// h_0.. (the T-spaced response to one NRZ level, first sample at index 0).
SecondOrderStats channel_statistics(std::span<const double> bit_response, double noise_variance,
                                    const MmseDesignConfig& config);

// Wiener (MMSE) equalizer for a fixed target f (length <= L of the statistics).
WienerSolution solve_wiener(const SecondOrderStats& stats, std::span<const double> target,
                            const MmseDesignConfig& config);

// Joint monic-MMSE design of target and equalizer (Moon & Zeng 1995).
GprDesign solve_monic_gpr(const SecondOrderStats& stats, const MmseDesignConfig& config);

// Estimates the statistics from training data: bit-spaced samples and the known written
// levels (+1/-1, 0 = unknown) of the same positions, fed in chunks of any size. Memory is
// O(N^2 + N L), independent of the amount of training data. Windows touching an unknown
// level, an erased sample or the start of the span are skipped.
class MmseStatistics {
 public:
  explicit MmseStatistics(const MmseDesignConfig& config);
  // `levels` and `erasure` (empty = none erased) have the length of `samples`.
  void accumulate(std::span<const float> samples, std::span<const int8_t> levels,
                  std::span<const uint8_t> erasure = {});
  SecondOrderStats stats() const;  // averages; throws salvor::Error(input) with no windows
  size_t positions() const { return positions_; }
  void reset();  // forget everything (a new training set)
  const MmseDesignConfig& config() const { return config_; }

 private:
  MmseDesignConfig config_;
  std::vector<double> x_;        // last N samples, x_[0] newest
  std::vector<uint8_t> x_bad_;   // erasure flags of x_
  std::vector<int8_t> levels_;   // last delay+L levels, levels_[0] newest
  size_t seen_ = 0;              // samples accumulated since reset
  size_t positions_ = 0;         // windows accumulated
  std::vector<double> r_sum_, p_sum_, a_sum_;  // row-major sums of x x', x a', a a'
};

}  // namespace salvor::equalize
