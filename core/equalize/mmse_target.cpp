#include "equalize/mmse_target.hpp"

#include <algorithm>
#include <cmath>
#include <string>

#include "common/error.hpp"

namespace salvor::equalize {

namespace {

void validate(const MmseDesignConfig& c) {
  if (c.equalizer_taps < 5 || c.equalizer_taps > 31) {
    throw_usage("equalizer_taps", "value " + std::to_string(c.equalizer_taps) + " is outside 5..31");
  }
  if (c.delay >= c.equalizer_taps) {
    throw_usage("delay", "value " + std::to_string(c.delay) + " must be below equalizer_taps " +
                             std::to_string(c.equalizer_taps));
  }
  if (c.target_length < 2 || c.target_length > 6) {
    throw_usage("target_length", "value " + std::to_string(c.target_length) + " is outside 2..6");
  }
  if (!(c.diagonal_loading >= 0.0) || !std::isfinite(c.diagonal_loading)) {
    throw_usage("diagonal_loading", "value must be finite and >= 0");
  }
}

Matrix loaded(const Matrix& r, double loading) {
  Matrix out = r;
  double mean_diag = 0.0;
  for (size_t i = 0; i < r.rows; ++i) mean_diag += r(i, i);
  mean_diag /= static_cast<double>(r.rows);
  for (size_t i = 0; i < r.rows; ++i) out(i, i) += loading * mean_diag;
  return out;
}

void check_shapes(const SecondOrderStats& s, const MmseDesignConfig& c) {
  if (s.r.rows != c.equalizer_taps || s.r.cols != c.equalizer_taps || s.p.rows != c.equalizer_taps ||
      s.p.cols != s.a.rows || s.a.rows != s.a.cols || s.delay != c.delay) {
    throw_internal("mmse design: statistics do not match the configuration");
  }
}

}  // namespace

SecondOrderStats channel_statistics(std::span<const double> h, double noise_variance,
                                    const MmseDesignConfig& c) {
  validate(c);
  if (h.empty()) throw_usage("bit_response", "is empty");
  if (!(noise_variance >= 0.0)) throw_usage("noise_variance", "must be >= 0");
  const size_t n = c.equalizer_taps, l = c.target_length;
  auto tap = [&](long k) { return (k >= 0 && k < static_cast<long>(h.size())) ? h[k] : 0.0; };
  SecondOrderStats s{Matrix(n, n), Matrix(n, l), Matrix(l, l), 0, c.delay};
  // R(i,k) = E[x_{t-i} x_{t-k}] = sum_m h_m h_{m+i-k} + sigma^2 delta_ik (i.i.d. levels).
  for (size_t i = 0; i < n; ++i) {
    for (size_t k = 0; k < n; ++k) {
      double acc = 0.0;
      const long lag = static_cast<long>(i) - static_cast<long>(k);
      for (long m = 0; m < static_cast<long>(h.size()); ++m) acc += h[m] * tap(m + lag);
      s.r(i, k) = acc + (i == k ? noise_variance : 0.0);
    }
  }
  // P(i,m) = E[x_{j+delay-i} a_{j-m}] = h_{delay-i+m}.
  for (size_t i = 0; i < n; ++i) {
    for (size_t m = 0; m < l; ++m) {
      s.p(i, m) = tap(static_cast<long>(c.delay) - static_cast<long>(i) + static_cast<long>(m));
    }
  }
  for (size_t m = 0; m < l; ++m) s.a(m, m) = 1.0;
  return s;
}

WienerSolution solve_wiener(const SecondOrderStats& s, std::span<const double> f,
                            const MmseDesignConfig& c) {
  validate(c);
  check_shapes(s, c);
  if (f.empty() || f.size() > s.a.rows) {
    throw_usage("target", "length " + std::to_string(f.size()) + " does not fit statistics of " +
                              std::to_string(s.a.rows) + " levels");
  }
  const size_t n = s.r.rows;
  std::vector<double> pf(n, 0.0);
  for (size_t i = 0; i < n; ++i)
    for (size_t m = 0; m < f.size(); ++m) pf[i] += s.p(i, m) * f[m];
  WienerSolution out;
  out.taps = solve_spd(loaded(s.r, c.diagonal_loading), pf, "wiener equalizer statistics");
  // MSE = f'Af - 2 w'Pf + w'Rw, evaluated directly (also right with diagonal loading).
  double faf = 0.0, wpf = 0.0, wrw = 0.0;
  for (size_t m = 0; m < f.size(); ++m)
    for (size_t q = 0; q < f.size(); ++q) faf += f[m] * s.a(m, q) * f[q];
  for (size_t i = 0; i < n; ++i) {
    wpf += out.taps[i] * pf[i];
    for (size_t k = 0; k < n; ++k) wrw += out.taps[i] * s.r(i, k) * out.taps[k];
  }
  out.mse = std::max(0.0, faf - 2.0 * wpf + wrw);
  return out;
}

GprDesign solve_monic_gpr(const SecondOrderStats& s, const MmseDesignConfig& c) {
  validate(c);
  check_shapes(s, c);
  const size_t n = s.r.rows, l = c.target_length;
  if (s.a.rows < l) throw_internal("mmse design: statistics hold fewer levels than the target length");
  Matrix p(n, l), a(l, l);
  for (size_t i = 0; i < n; ++i)
    for (size_t m = 0; m < l; ++m) p(i, m) = s.p(i, m);
  for (size_t m = 0; m < l; ++m)
    for (size_t q = 0; q < l; ++q) a(m, q) = s.a(m, q);

  const Matrix rinv_p = solve_spd(loaded(s.r, c.diagonal_loading), p, "gpr design: equalizer statistics");
  Matrix m(l, l);  // M = A - P' R^-1 P
  for (size_t u = 0; u < l; ++u) {
    for (size_t v = 0; v < l; ++v) {
      double acc = 0.0;
      for (size_t i = 0; i < n; ++i) acc += p(i, u) * rinv_p(i, v);
      m(u, v) = a(u, v) - acc;
    }
  }
  // Symmetrise against rounding before the Cholesky solve.
  for (size_t u = 0; u < l; ++u)
    for (size_t v = 0; v < u; ++v) m(u, v) = m(v, u) = 0.5 * (m(u, v) + m(v, u));
  std::vector<double> e0(l, 0.0);
  e0[0] = 1.0;
  const std::vector<double> minv_e0 = solve_spd(m, e0, "gpr design: target statistics");
  GprDesign out;
  out.positions = s.positions;
  out.target.resize(l);
  for (size_t u = 0; u < l; ++u) out.target[u] = minv_e0[u] / minv_e0[0];
  out.mse = 1.0 / minv_e0[0];
  out.equalizer.assign(n, 0.0);
  for (size_t i = 0; i < n; ++i)
    for (size_t u = 0; u < l; ++u) out.equalizer[i] += rinv_p(i, u) * out.target[u];
  return out;
}

MmseStatistics::MmseStatistics(const MmseDesignConfig& config) : config_(config) {
  validate(config_);
  reset();
}

void MmseStatistics::reset() {
  const size_t n = config_.equalizer_taps, l = config_.target_length;
  x_.assign(n, 0.0);
  x_bad_.assign(n, 1);
  levels_.assign(config_.delay + l, 0);
  seen_ = 0;
  positions_ = 0;
  r_sum_.assign(n * n, 0.0);
  p_sum_.assign(n * l, 0.0);
  a_sum_.assign(l * l, 0.0);
}

void MmseStatistics::accumulate(std::span<const float> samples, std::span<const int8_t> levels,
                                std::span<const uint8_t> erasure) {
  if (levels.size() != samples.size()) {
    throw_usage("training levels", std::to_string(levels.size()) + " levels for " +
                                       std::to_string(samples.size()) + " samples");
  }
  if (!erasure.empty() && erasure.size() != samples.size()) {
    throw_usage("training erasure flags", std::to_string(erasure.size()) + " flags for " +
                                              std::to_string(samples.size()) + " samples");
  }
  const size_t n = config_.equalizer_taps, l = config_.target_length, d = config_.delay;
  for (size_t t = 0; t < samples.size(); ++t) {
    const int8_t lv = levels[t];
    if (lv != 1 && lv != -1 && lv != 0) {
      throw_usage("training levels", "value " + std::to_string(lv) + " at " + std::to_string(t) +
                                         " is not +1, -1 or 0");
    }
    // Shift the windows by one (N <= 31: a plain move is cheap and keeps state obvious).
    std::move_backward(x_.begin(), x_.end() - 1, x_.end());
    std::move_backward(x_bad_.begin(), x_bad_.end() - 1, x_bad_.end());
    std::move_backward(levels_.begin(), levels_.end() - 1, levels_.end());
    const float v = samples[t];
    x_[0] = std::isfinite(v) ? v : 0.0;
    x_bad_[0] = (!erasure.empty() && erasure[t]) || !std::isfinite(v);
    levels_[0] = lv;
    ++seen_;
    if (seen_ < n) continue;  // the window is not full yet
    // Position j = newest - delay: its levels a_{j-m} sit at levels_[d + m].
    bool usable = true;
    for (size_t i = 0; i < n && usable; ++i) usable = !x_bad_[i];
    for (size_t m = 0; m < l && usable; ++m) usable = levels_[d + m] != 0;
    if (!usable) continue;
    for (size_t i = 0; i < n; ++i) {
      for (size_t k = 0; k <= i; ++k) r_sum_[i * n + k] += x_[i] * x_[k];
      for (size_t m = 0; m < l; ++m) p_sum_[i * l + m] += x_[i] * levels_[d + m];
    }
    for (size_t m = 0; m < l; ++m)
      for (size_t q = 0; q < l; ++q) a_sum_[m * l + q] += static_cast<double>(levels_[d + m] * levels_[d + q]);
    ++positions_;
  }
}

SecondOrderStats MmseStatistics::stats() const {
  const size_t n = config_.equalizer_taps, l = config_.target_length;
  if (positions_ == 0) {
    throw_input("training data", "no usable training window (need at least " + std::to_string(n) +
                                     " consecutive samples with known levels)");
  }
  const double inv = 1.0 / static_cast<double>(positions_);
  SecondOrderStats s{Matrix(n, n), Matrix(n, l), Matrix(l, l), positions_, config_.delay};
  for (size_t i = 0; i < n; ++i) {
    for (size_t k = 0; k <= i; ++k) s.r(i, k) = s.r(k, i) = r_sum_[i * n + k] * inv;
    for (size_t m = 0; m < l; ++m) s.p(i, m) = p_sum_[i * l + m] * inv;
  }
  for (size_t m = 0; m < l * l; ++m) s.a.data[m] = a_sum_[m] * inv;
  return s;
}

}  // namespace salvor::equalize
