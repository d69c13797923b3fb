#include "resample/resampler.hpp"

#include <algorithm>
#include <array>
#include <cfloat>
#include <cmath>
#include <complex>
#include <cstring>
#include <limits>
#include <sstream>

#include "common/error.hpp"

// SIMD kernels: this file is compiled once per Highway target (foreach_target.h includes
// it again); everything outside the kernels sits under HWY_ONCE.
#undef HWY_TARGET_INCLUDE
#define HWY_TARGET_INCLUDE "resample/resampler.cpp"
#include <hwy/foreach_target.h>  // must precede highway.h
#include <hwy/aligned_allocator.h>
#include <hwy/highway.h>

HWY_BEFORE_NAMESPACE();
namespace salvor {
namespace resampler_kernels {
namespace HWY_NAMESPACE {
namespace hn = hwy::HWY_NAMESPACE;

// The kernels' arithmetic is that of the scalar reference (see the HWY_ONCE section):
// 16 partial sums, tap j into sum j mod 16, reduced by a fixed pairwise tree. A target
// with N lanes holds the 16 sums in 16 / N vectors.
using D = hn::CappedTag<float, 16>;
using V = hn::Vec<D>;
constexpr size_t kLanes = hn::MaxLanes(D());
constexpr size_t kVecs = 16 / kLanes;

#if HWY_TARGET != HWY_SCALAR
static_assert(kLanes == 4 || kLanes == 8 || kLanes == 16, "16 partial sums in whole vectors");
using D4 = hn::FixedTag<float, 4>;

// The first two levels of the tree (16 -> 4 lanes) of one output.
template <class VV>  // a template so that only the branch for this target's width is instantiated
HWY_INLINE hn::Vec<D4> reduce16_to4(const VV* acc) {
  using DV = hn::DFromV<VV>;
  if constexpr (kLanes == 16) {
    const hn::Half<DV> d8;
    const hn::Half<decltype(d8)> d4;
    const auto s8 = hn::Add(hn::LowerHalf(d8, acc[0]), hn::UpperHalf(d8, acc[0]));
    return hn::Add(hn::LowerHalf(d4, s8), hn::UpperHalf(d4, s8));
  } else if constexpr (kLanes == 8) {
    const hn::Half<DV> d4;
    const auto s8 = hn::Add(acc[0], acc[1]);
    return hn::Add(hn::LowerHalf(d4, s8), hn::UpperHalf(d4, s8));
  } else {
    return hn::Add(hn::Add(acc[0], acc[2]), hn::Add(acc[1], acc[3]));
  }
}

// The last two levels of one output.
HWY_INLINE float reduce_last4(hn::Vec<D4> s4) {
  const auto s2 = hn::Add(s4, hn::Shuffle1032(s4));  // lanes l + l+2
  const auto s1 = hn::Add(s2, hn::Shuffle2301(s2));  // lanes 0 + 1
  return hn::GetLane(s1);
}
#endif

HWY_INLINE float reduce16(const V* acc) {
#if HWY_TARGET != HWY_SCALAR
  return reduce_last4(reduce16_to4(acc));
#else
  HWY_ALIGN float l[16];
  for (size_t v = 0; v < kVecs; ++v) hn::Store(acc[v], D(), l + v * kLanes);
  float s8[8], s4[4];
  for (int i = 0; i < 8; ++i) s8[i] = l[i] + l[i + 8];
  for (int i = 0; i < 4; ++i) s4[i] = s8[i] + s8[i + 4];
  return (s4[0] + s4[2]) + (s4[1] + s4[3]);
#endif
}

#if HWY_TARGET != HWY_SCALAR
// The last two levels for four outputs at once (a 4 x 4 transpose folded into the adds);
// lane o of the result is output o.
HWY_INLINE hn::Vec<D4> reduce4x4(hn::Vec<D4> a, hn::Vec<D4> b, hn::Vec<D4> c, hn::Vec<D4> e) {
  const D4 d4;
  const auto ab = hn::Add(hn::InterleaveLower(d4, a, b), hn::InterleaveUpper(d4, a, b));  // l + l+2
  const auto ce = hn::Add(hn::InterleaveLower(d4, c, e), hn::InterleaveUpper(d4, c, e));
  return hn::Add(hn::ConcatLowerLower(d4, ce, ab), hn::ConcatUpperUpper(d4, ce, ab));      // 0 + 1
}
#endif

// sum_j (h0[j] + frac d[j]) x[j] for `kOut` outputs; a row holds, per block of 16 taps,
// 16 values of h0 then 16 of d (next phase minus this one).
template <size_t kOut>
HWY_INLINE void dot_interpolated(const float* const* x, const float* const* row, const float* frac,
                                 size_t blocks, float* HWY_RESTRICT out) {
  const D d;
  V a[kOut], acc[kOut][kVecs];
  for (size_t o = 0; o < kOut; ++o) {
    a[o] = hn::Set(d, frac[o]);
    for (size_t v = 0; v < kVecs; ++v) acc[o][v] = hn::Zero(d);
  }
  for (size_t b = 0; b < blocks; ++b)
    for (size_t o = 0; o < kOut; ++o)
      for (size_t v = 0; v < kVecs; ++v) {
        const V h0 = hn::Load(d, row[o] + 32 * b + v * kLanes);
        const V dh = hn::Load(d, row[o] + 32 * b + 16 + v * kLanes);
        acc[o][v] = hn::MulAdd(hn::MulAdd(a[o], dh, h0), hn::LoadU(d, x[o] + 16 * b + v * kLanes), acc[o][v]);
      }
#if HWY_TARGET != HWY_SCALAR
  if constexpr (kOut == 4) {
    hn::StoreU(reduce4x4(reduce16_to4(acc[0]), reduce16_to4(acc[1]), reduce16_to4(acc[2]), reduce16_to4(acc[3])),
               D4(), out);
    return;
  }
#endif
  for (size_t o = 0; o < kOut; ++o) out[o] = reduce16(acc[o]);
}

template <size_t kOut>
HWY_INLINE void dot_exact(const float* const* x, const float* const* row, size_t blocks, float* HWY_RESTRICT out) {
  const D d;
  V acc[kOut][kVecs];
  for (size_t o = 0; o < kOut; ++o)
    for (size_t v = 0; v < kVecs; ++v) acc[o][v] = hn::Zero(d);
  for (size_t b = 0; b < blocks; ++b)
    for (size_t o = 0; o < kOut; ++o)
      for (size_t v = 0; v < kVecs; ++v)
        acc[o][v] = hn::MulAdd(hn::Load(d, row[o] + 16 * b + v * kLanes), hn::LoadU(d, x[o] + 16 * b + v * kLanes),
                               acc[o][v]);
#if HWY_TARGET != HWY_SCALAR
  if constexpr (kOut == 4) {
    hn::StoreU(reduce4x4(reduce16_to4(acc[0]), reduce16_to4(acc[1]), reduce16_to4(acc[2]), reduce16_to4(acc[3])),
               D4(), out);
    return;
  }
#endif
  for (size_t o = 0; o < kOut; ++o) out[o] = reduce16(acc[o]);
}

// Outputs n0 .. n0 + count - 1 of the interpolated path; x[i0 + x_offset] is the first tap
// of an output whose t_n has integer part i0. Same placement as Resampler::base_index.
void interpolated_run(const float* HWY_RESTRICT x, int64_t x_offset, double first, double ratio, uint64_t n0,
                      size_t count, int phases, const float* HWY_RESTRICT table, size_t row_stride, size_t blocks,
                      float* HWY_RESTRICT out) {
  const float* xs[4];
  const float* rows[4];
  float fracs[4];
  for (size_t i = 0; i < count;) {
    const size_t group = count - i >= 4 ? 4 : 1;
    for (size_t o = 0; o < group; ++o) {
      const double t = first + static_cast<double>(n0 + i + o) * ratio;
      const int64_t i0 = static_cast<int64_t>(t);
      const double scaled = (t - static_cast<double>(i0)) * phases;
      int p = static_cast<int>(scaled);
      if (p >= phases) p = phases - 1;
      xs[o] = x + (i0 + x_offset);
      rows[o] = table + static_cast<size_t>(p) * row_stride;
      fracs[o] = static_cast<float>(scaled - p);
    }
    if (group == 4)
      dot_interpolated<4>(xs, rows, fracs, blocks, out + i);
    else
      dot_interpolated<1>(xs, rows, fracs, blocks, out + i);
    i += group;
  }
}

// Outputs of the exact path, n = n0 + i = b Q + k: first tap at x[off + b P + rel[k]], row rows[k];
// `off` is the value for n0's period.
void exact_run(const float* HWY_RESTRICT x, int64_t off, uint64_t k0, size_t count, const int32_t* HWY_RESTRICT rel,
               const float* const* HWY_RESTRICT phase_rows, uint64_t q, int64_t p, size_t blocks,
               float* HWY_RESTRICT out) {
  uint64_t k = k0;
  const float* xs[4];
  const float* rows[4];
  for (size_t i = 0; i < count;) {
    const size_t group = count - i >= 4 ? 4 : 1;
    for (size_t o = 0; o < group; ++o) {
      xs[o] = x + (off + rel[k]);
      rows[o] = phase_rows[k];
      if (++k == q) {
        k = 0;
        off += p;
      }
    }
    if (group == 4)
      dot_exact<4>(xs, rows, blocks, out + i);
    else
      dot_exact<1>(xs, rows, blocks, out + i);
    i += group;
  }
}

// Filter design: out[j] = sum_{k=0..terms} prod_{i<=k} q[j] inv_squares[i], the I0 power
// series at (x/2)^2 = q[j]. Four vectors per pass keep independent products in flight. The
// operations per value are those of a scalar loop in the same order, so every target
// designs bit-identical tables.
void i0_series(const double* HWY_RESTRICT q, size_t n, int terms, const double* HWY_RESTRICT inv_squares,
               double* HWY_RESTRICT out) {
  const hn::ScalableTag<double> d;
  const size_t lanes = hn::Lanes(d);
  size_t j = 0;
  for (; j + 4 * lanes <= n; j += 4 * lanes) {
    auto q0 = hn::LoadU(d, q + j), q1 = hn::LoadU(d, q + j + lanes);
    auto q2 = hn::LoadU(d, q + j + 2 * lanes), q3 = hn::LoadU(d, q + j + 3 * lanes);
    auto t0 = hn::Set(d, 1.0), t1 = t0, t2 = t0, t3 = t0;
    auto s0 = t0, s1 = t0, s2 = t0, s3 = t0;
    for (int k = 1; k <= terms; ++k) {
      const auto inv = hn::Set(d, inv_squares[k]);
      t0 = hn::Mul(t0, hn::Mul(q0, inv));
      t1 = hn::Mul(t1, hn::Mul(q1, inv));
      t2 = hn::Mul(t2, hn::Mul(q2, inv));
      t3 = hn::Mul(t3, hn::Mul(q3, inv));
      s0 = hn::Add(s0, t0);
      s1 = hn::Add(s1, t1);
      s2 = hn::Add(s2, t2);
      s3 = hn::Add(s3, t3);
    }
    hn::StoreU(s0, d, out + j);
    hn::StoreU(s1, d, out + j + lanes);
    hn::StoreU(s2, d, out + j + 2 * lanes);
    hn::StoreU(s3, d, out + j + 3 * lanes);
  }
  for (; j + lanes <= n; j += lanes) {
    const auto qv = hn::LoadU(d, q + j);
    auto t = hn::Set(d, 1.0), sum = t;
    for (int k = 1; k <= terms; ++k) {
      t = hn::Mul(t, hn::Mul(qv, hn::Set(d, inv_squares[k])));
      sum = hn::Add(sum, t);
    }
    hn::StoreU(sum, d, out + j);
  }
  for (; j < n; ++j) {
    double t = 1.0, sum = 1.0;
    for (int k = 1; k <= terms; ++k) {
      t = t * (q[j] * inv_squares[k]);
      sum = sum + t;
    }
    out[j] = sum;
  }
}

}  // namespace HWY_NAMESPACE
}  // namespace resampler_kernels
}  // namespace salvor
HWY_AFTER_NAMESPACE();

#if HWY_ONCE
namespace salvor {
namespace resampler_kernels {
HWY_EXPORT(interpolated_run);
HWY_EXPORT(exact_run);
HWY_EXPORT(i0_series);

// The scalar reference: the arithmetic every SIMD target implements.
float reduce16_reference(const float* acc) {
  float s8[8], s4[4];
  for (int i = 0; i < 8; ++i) s8[i] = acc[i] + acc[i + 8];
  for (int i = 0; i < 4; ++i) s4[i] = s8[i] + s8[i + 4];
  return (s4[0] + s4[2]) + (s4[1] + s4[3]);
}

float dot_interpolated_reference(const float* x, const float* row, float frac, size_t blocks) {
  float acc[16] = {};
  for (size_t b = 0; b < blocks; ++b)
    for (size_t l = 0; l < 16; ++l)
      acc[l] = std::fma(std::fma(frac, row[32 * b + 16 + l], row[32 * b + l]), x[16 * b + l], acc[l]);
  return reduce16_reference(acc);
}

float dot_exact_reference(const float* x, const float* row, size_t blocks) {
  float acc[16] = {};
  for (size_t b = 0; b < blocks; ++b)
    for (size_t l = 0; l < 16; ++l) acc[l] = std::fma(row[16 * b + l], x[16 * b + l], acc[l]);
  return reduce16_reference(acc);
}

void interpolated_run_reference(const float* x, int64_t x_offset, double first, double ratio, uint64_t n0,
                                size_t count, int phases, const float* table, size_t row_stride, size_t blocks,
                                float* out) {
  for (size_t i = 0; i < count; ++i) {
    const double t = first + static_cast<double>(n0 + i) * ratio;
    const int64_t i0 = static_cast<int64_t>(t);
    const double scaled = (t - static_cast<double>(i0)) * phases;
    int p = static_cast<int>(scaled);
    if (p >= phases) p = phases - 1;
    out[i] = dot_interpolated_reference(x + (i0 + x_offset), table + static_cast<size_t>(p) * row_stride,
                                        static_cast<float>(scaled - p), blocks);
  }
}

void exact_run_reference(const float* x, int64_t off, uint64_t k0, size_t count, const int32_t* rel,
                         const float* const* rows, uint64_t q, int64_t p, size_t blocks, float* out) {
  uint64_t k = k0;
  for (size_t i = 0; i < count; ++i) {
    out[i] = dot_exact_reference(x + (off + rel[k]), rows[k], blocks);
    if (++k == q) {
      k = 0;
      off += p;
    }
  }
}

}  // namespace resampler_kernels

namespace {

constexpr double pi = 3.14159265358979323846;
constexpr size_t block_samples = 4096;  // input appended per refill beyond the taps
constexpr size_t tap_block = 16;        // kernel tap granularity (the reference's partial sums)

// 1 / k^2, so the I0 series multiplies instead of dividing (the series needs k <~ 60
// for the betas a [40, 160] dB design gives).
constexpr std::array<double, 128> inverse_squares = [] {
  std::array<double, 128> a{};
  for (size_t k = 1; k < a.size(); ++k) a[k] = 1.0 / (static_cast<double>(k) * static_cast<double>(k));
  return a;
}();

void validate(const ResamplerConfig& c) {
  const std::string where = "resampler";
  if (!(c.input_rate_hz > 0.0) || !std::isfinite(c.input_rate_hz))
    throw_usage(where + ".input_rate_hz", "must be a positive finite rate, got " + std::to_string(c.input_rate_hz));
  if (!(c.output_rate_hz > 0.0) || !std::isfinite(c.output_rate_hz))
    throw_usage(where + ".output_rate_hz", "must be a positive finite rate, got " + std::to_string(c.output_rate_hz));
  const double ratio = c.input_rate_hz / c.output_rate_hz;
  if (ratio > 256.0 || ratio < 1.0 / 256.0)
    throw_usage(where + ".output_rate_hz", "ratio input/output " + std::to_string(ratio) + " is outside [1/256, 256]");
  if (!(c.passband_edge > 0.0) || !(c.passband_edge < c.stopband_edge))
    throw_usage(where + ".passband_edge", "must be in (0, stopband_edge), got " + std::to_string(c.passband_edge));
  if (!(c.stopband_edge <= 1.0))
    throw_usage(where + ".stopband_edge", "must be <= 1.0 of the lower Nyquist, got " + std::to_string(c.stopband_edge));
  if (!(c.stopband_attenuation_db >= 40.0 && c.stopband_attenuation_db <= 160.0))
    throw_usage(where + ".stopband_attenuation_db", "must be in [40, 160], got " + std::to_string(c.stopband_attenuation_db));
  if (c.phases < 16 || c.phases > 8192)
    throw_usage(where + ".phases", "must be in [16, 8192], got " + std::to_string(c.phases));
  if (!(c.first_output_position >= 0.0) || !std::isfinite(c.first_output_position))
    throw_usage(where + ".first_output_position", "must be >= 0, got " + std::to_string(c.first_output_position));
  if (!std::isfinite(c.flag_reach))
    throw_usage(where + ".flag_reach", "must be finite");
}

// Terms of the I0 power series (see bessel_i0) that reach relative 1e-17 for every
// argument up to x: the terms of smaller arguments fall faster.
int i0_series_terms(double x) {
  double sum = 1.0, term = 1.0;
  const double q = x * x / 4.0;
  for (int k = 1; k < static_cast<int>(inverse_squares.size()); ++k) {
    term *= q * inverse_squares[static_cast<size_t>(k)];
    sum += term;
    if (term < sum * 1e-17) return k;
  }
  return static_cast<int>(inverse_squares.size()) - 1;
}

// Kaiser-windowed sinc centred at mu in [0, 1]: row[jj] = h(mu - j), j = jj - half + 1,
// h(d) = 2 fc sinc(2 fc d) w(d), w the Kaiser window over |d| <= half; scaled to unit sum
// so that every phase passes DC exactly (the sums differ from 1 only by the stopband ripple).
// The window's I0 series runs a fixed number of terms across all taps at once, in SIMD
// (construction cost: the decoder makes resamplers often).
void design_row(double mu, int taps, double cutoff, double beta, double i0_beta, int i0_terms, double* row,
                std::vector<double>& scratch) {
  const int half = taps / 2;
  scratch.resize(static_cast<size_t>(taps));
  double* q = scratch.data();
  const double q_max = beta * beta / 4.0;  // (x/2)^2 with x = beta sqrt(1 - r^2)
  for (int jj = 0; jj < taps; ++jj) {
    const double r = (mu - (jj - half + 1)) / half;
    q[jj] = std::abs(r) >= 1.0 ? 0.0 : q_max * (1.0 - r * r);
  }
  HWY_DYNAMIC_DISPATCH(resampler_kernels::i0_series)(q, static_cast<size_t>(taps), i0_terms, inverse_squares.data(),
                                                     row);
  // sin(2 pi fc dist) by rotation as dist steps down by 1 per tap (rounding grows by about
  // 1e-16 per step: below 1e-13 over any tap count allowed).
  const double step = 2.0 * pi * cutoff;
  const double cos_step = std::cos(step), sin_step = std::sin(step);
  const double dist0 = mu + half - 1;
  double sn = std::sin(step * dist0), cs = std::cos(step * dist0);
  double sum = 0.0;
  for (int jj = 0; jj < taps; ++jj) {
    const double dist = mu - (jj - half + 1);
    const double w = std::abs(dist / half) >= 1.0 ? 0.0 : row[jj] / i0_beta;
    const double sinc_value = dist == 0.0 ? 1.0 : sn / (pi * 2.0 * cutoff * dist);
    row[jj] = 2.0 * cutoff * sinc_value * w;
    sum += row[jj];
    const double next_sn = sn * cos_step - cs * sin_step;
    cs = cs * cos_step + sn * sin_step;
    sn = next_sn;
  }
  for (int jj = 0; jj < taps; ++jj) row[jj] /= sum;
}

// Smallest Q <= max_q with ratio == P / Q to double precision (0 if none).
int exact_denominator(double ratio, int max_q, int64_t* p_out) {
  for (int q = 1; q <= max_q; ++q) {
    const double pq = std::round(ratio * q);
    if (pq < 1.0) continue;
    if (std::abs(pq / q - ratio) <= 2.0 * DBL_EPSILON * ratio) {
      *p_out = static_cast<int64_t>(pq);
      return q;
    }
  }
  return 0;
}

}  // namespace

double bessel_i0(double x) {
  // Power series sum_k ((x/2)^k / k!)^2; converges for all x, terms fall fast past k > x.
  double sum = 1.0, term = 1.0;
  const double q = x * x / 4.0;
  for (int k = 1; k < 500; ++k) {
    term *= k < static_cast<int>(inverse_squares.size()) ? q * inverse_squares[static_cast<size_t>(k)]
                                                         : q / (static_cast<double>(k) * k);
    sum += term;
    if (term < sum * 1e-17) break;
  }
  return sum;
}

double kaiser_beta(double a) {
  if (a > 50.0) return 0.1102 * (a - 8.7);
  if (a >= 21.0) return 0.5842 * std::pow(a - 21.0, 0.4) + 0.07886 * (a - 21.0);
  return 0.0;
}

ResamplerConfig ResamplerConfig::for_bit_rate(double input_rate_hz, double bit_rate_hz,
                                              double samples_per_bit) {
  if (!(bit_rate_hz > 0.0) || !std::isfinite(bit_rate_hz))
    throw_usage("resampler.bit_rate_hz", "must be a positive finite rate, got " + std::to_string(bit_rate_hz));
  if (!(samples_per_bit >= 1.0 && samples_per_bit <= 64.0))
    throw_usage("resampler.samples_per_bit", "must be in [1, 64], got " + std::to_string(samples_per_bit));
  ResamplerConfig c;
  c.input_rate_hz = input_rate_hz;
  c.output_rate_hz = samples_per_bit * bit_rate_hz;
  return c;
}

struct Resampler::Filter {
  int taps = 0;
  int half = 0;
  size_t blocks = 0;      // taps padded to blocks * tap_block (padding coefficients are 0)
  bool exact = false;
  int rows = 0;           // exact: Q phases; interpolated: table phases
  size_t row_stride = 0;  // floats per row
  hwy::AlignedFreeUniquePtr<float[]> coef;
  // Exact polyphase, ratio = p / q: output n = b q + k has t_n = first + b p + k p / q, so
  // floor(t_n) = first_floor + b p + rel[k], and phase_rows[k] is designed at frac(t_n)
  // (integers throughout but for frac(first)).
  int64_t p = 0, q = 0;
  int64_t first_floor = 0;
  std::vector<int32_t> rel;
  std::vector<const float*> phase_rows;

  const float* row(size_t r) const { return coef.get() + r * row_stride; }
};

Resampler::Resampler(const ResamplerConfig& config) {
  validate(config);
  if (config.max_exact_denominator < 0 || config.max_exact_denominator > 4096)
    throw_usage("resampler.max_exact_denominator",
                "must be in [0, 4096], got " + std::to_string(config.max_exact_denominator));
  spec_.ratio = config.input_rate_hz / config.output_rate_hz;
  const double lower_nyquist = 0.5 / std::max(1.0, spec_.ratio);  // cycles per input sample
  spec_.passband_edge = config.passband_edge * lower_nyquist;
  spec_.stopband_edge = config.stopband_edge * lower_nyquist;
  spec_.cutoff = 0.5 * (spec_.passband_edge + spec_.stopband_edge);
  spec_.kaiser_beta = kaiser_beta(config.stopband_attenuation_db);
  const double dw = 2.0 * pi * (spec_.stopband_edge - spec_.passband_edge);
  const double order = (config.stopband_attenuation_db - 8.0) / (2.285 * dw);
  int taps = static_cast<int>(std::ceil(order)) + 1;
  taps += taps % 2;
  spec_.taps = taps;
  spec_.phases = config.phases;
  first_position_ = config.first_output_position;
  scalar_reference_ = config.scalar_reference;
  const int half = taps / 2;
  flag_reach_ = config.flag_reach < 0.0 ? std::max(1.0, spec_.ratio) : config.flag_reach;
  flag_reach_ = std::min(flag_reach_, static_cast<double>(half - 1));

  auto f = std::make_shared<Filter>();
  f->taps = taps;
  f->half = half;
  f->blocks = (static_cast<size_t>(taps) + tap_block - 1) / tap_block;
  const size_t padded = f->blocks * tap_block;
  const double i0_beta = bessel_i0(spec_.kaiser_beta);
  const int i0_terms = i0_series_terms(spec_.kaiser_beta);
  std::vector<double> row(taps), scratch;
  int64_t p_num = 0;
  const int q_den = exact_denominator(spec_.ratio, config.max_exact_denominator, &p_num);
  if (q_den > 0) {
    f->exact = true;
    f->p = p_num;
    f->q = q_den;
    f->rows = q_den;
    f->row_stride = padded;
    f->coef = hwy::AllocateAligned<float>(static_cast<size_t>(q_den) * padded);
    std::fill_n(f->coef.get(), static_cast<size_t>(q_den) * padded, 0.0f);
    const double first_floor = std::floor(first_position_);
    f->first_floor = static_cast<int64_t>(first_floor);
    const double phi = first_position_ - first_floor;
    f->rel.resize(static_cast<size_t>(q_den));
    f->phase_rows.resize(static_cast<size_t>(q_den));
    for (int k = 0; k < q_den; ++k) {
      const int64_t whole = k * p_num / q_den, r = k * p_num % q_den;
      double mu = phi + static_cast<double>(r) / q_den;
      const int carry = mu >= 1.0 ? 1 : 0;
      mu -= carry;
      f->rel[static_cast<size_t>(k)] = static_cast<int32_t>(whole + carry);
      f->phase_rows[static_cast<size_t>(k)] = f->coef.get() + static_cast<size_t>(k) * padded;
      design_row(mu, taps, spec_.cutoff, spec_.kaiser_beta, i0_beta, i0_terms, row.data(), scratch);
      float* dst = f->coef.get() + static_cast<size_t>(k) * padded;
      for (int jj = 0; jj < taps; ++jj) dst[jj] = static_cast<float>(row[static_cast<size_t>(jj)]);
    }
    spec_.exact_phases = q_den;
  } else {
    // Table row p holds h(p / phases - j); row phases - p is row p reversed (h is even),
    // so only half the rows are designed.
    const int phases = config.phases;
    std::vector<float> table(static_cast<size_t>(phases + 1) * taps);
    for (int p = 0; p <= phases / 2; ++p) {
      design_row(static_cast<double>(p) / phases, taps, spec_.cutoff, spec_.kaiser_beta, i0_beta, i0_terms, row.data(),
                 scratch);
      float* fwd = table.data() + static_cast<size_t>(p) * taps;
      float* mirror = table.data() + static_cast<size_t>(phases - p) * taps;
      for (int jj = 0; jj < taps; ++jj) {
        fwd[jj] = static_cast<float>(row[static_cast<size_t>(jj)]);
        mirror[taps - 1 - jj] = fwd[jj];
      }
    }
    f->rows = phases;
    f->row_stride = 2 * padded;
    f->coef = hwy::AllocateAligned<float>(static_cast<size_t>(phases) * f->row_stride);
    std::fill_n(f->coef.get(), static_cast<size_t>(phases) * f->row_stride, 0.0f);
    for (int p = 0; p < phases; ++p) {
      const float* h0 = table.data() + static_cast<size_t>(p) * taps;
      const float* h1 = h0 + taps;
      float* dst = f->coef.get() + static_cast<size_t>(p) * f->row_stride;
      for (int jj = 0; jj < taps; ++jj) {
        const size_t b = static_cast<size_t>(jj) / tap_block, l = static_cast<size_t>(jj) % tap_block;
        dst[2 * tap_block * b + l] = h0[jj];
        dst[2 * tap_block * b + tap_block + l] = h1[jj] - h0[jj];
      }
    }
  }
  filter_ = std::move(f);

  capacity_ = static_cast<size_t>(taps) + block_samples;
  buf_.assign(capacity_ + tap_block, 0.0f);
  flag_buf_.assign(capacity_, 0);
  reset();
}

int64_t Resampler::base_index(uint64_t n) const {
  const Filter& f = *filter_;
  if (f.exact) {
    const uint64_t q = static_cast<uint64_t>(f.q);
    return f.first_floor + static_cast<int64_t>(n / q) * f.p + f.rel[n % q];
  }
  return static_cast<int64_t>(input_position(n));  // t >= 0: truncation is floor
}

size_t Resampler::outputs_within(int64_t last, size_t room) const {
  // base_index is non-decreasing in n: binary search for the first output that does not fit.
  const int64_t limit = last - filter_->half;
  size_t lo = 0, hi = room;  // outputs [0, lo) fit; [hi, room) do not
  while (lo < hi) {
    const size_t mid = lo + (hi - lo) / 2;
    if (base_index(next_out_ + mid) <= limit)
      lo = mid + 1;
    else
      hi = mid;
  }
  return lo;
}

void Resampler::compute(uint64_t n0, size_t count, float* out) const {
  const Filter& f = *filter_;
  const float* x = buf_.data();
  const int64_t x_offset = -f.half + 1 - buf_start_;  // x[i0 + x_offset]: first tap
  if (f.exact) {
    const uint64_t q = static_cast<uint64_t>(f.q);
    const int64_t off = f.first_floor + static_cast<int64_t>(n0 / q) * f.p + x_offset;
    if (scalar_reference_)
      resampler_kernels::exact_run_reference(x, off, n0 % q, count, f.rel.data(), f.phase_rows.data(), q, f.p,
                                             f.blocks, out);
    else
      HWY_DYNAMIC_DISPATCH(resampler_kernels::exact_run)(x, off, n0 % q, count, f.rel.data(), f.phase_rows.data(),
                                                         q, f.p, f.blocks, out);
  } else {
    if (scalar_reference_)
      resampler_kernels::interpolated_run_reference(x, x_offset, first_position_, spec_.ratio, n0, count, f.rows,
                                                    f.coef.get(), f.row_stride, f.blocks, out);
    else
      HWY_DYNAMIC_DISPATCH(resampler_kernels::interpolated_run)(x, x_offset, first_position_, spec_.ratio, n0, count,
                                                                f.rows, f.coef.get(), f.row_stride, f.blocks, out);
  }
}

void Resampler::reset() {
  const int half = spec_.taps / 2;
  const int64_t first_needed = static_cast<int64_t>(std::floor(first_position_)) - half + 1;
  in_index_ = 0;
  next_out_ = 0;
  last_flagged_ = std::numeric_limits<int64_t>::min() / 4;
  zeros_padded_ = 0;
  flushed_ = false;
  if (first_needed < 0) {
    buf_start_ = first_needed;
    size_ = static_cast<size_t>(-first_needed);
    std::fill(buf_.begin(), buf_.begin() + static_cast<ptrdiff_t>(size_), 0.0f);
    std::fill(flag_buf_.begin(), flag_buf_.begin() + static_cast<ptrdiff_t>(size_), 0);
  } else {
    buf_start_ = 0;
    size_ = 0;
  }
}

std::string Resampler::describe() const {
  std::ostringstream s;
  s << "resampler: ratio " << spec_.ratio << " input/output, Kaiser-windowed sinc " << spec_.taps << " taps x ";
  if (spec_.exact_phases > 0)
    s << spec_.exact_phases << " exact phases (ratio " << filter_->p << "/" << filter_->q << ")";
  else
    s << spec_.phases << " phases (linear between phases)";
  s << ", beta " << spec_.kaiser_beta << ", passband " << spec_.passband_edge << " stopband "
    << spec_.stopband_edge << " cycles/input sample, output 0 at input " << first_position_ << ", flag reach "
    << flag_reach_ << (scalar_reference_ ? ", scalar reference kernel" : "");
  return s.str();
}

void Resampler::compact(int64_t first_needed) {
  if (first_needed <= buf_start_ || size_ == 0) return;
  const size_t drop = static_cast<size_t>(std::min<int64_t>(static_cast<int64_t>(size_), first_needed - buf_start_));
  std::memmove(buf_.data(), buf_.data() + drop, (size_ - drop) * sizeof(float));
  std::memmove(flag_buf_.data(), flag_buf_.data() + drop, size_ - drop);
  size_ -= drop;
  buf_start_ += static_cast<int64_t>(drop);
}

template <bool with_flags>
Progress Resampler::run(std::span<const float> in, std::span<const uint8_t> in_flags,
                        std::span<float> out, std::span<uint8_t> out_flags, bool flushing) {
  const int half = filter_->half;
  size_t consumed = 0, produced = 0;
  for (;;) {
    while (produced < out.size() && !flushed_) {
      size_t room = out.size() - produced;
      if (flushing) {
        // Only outputs with t_n < inputs consumed remain (t_n is non-decreasing in n).
        size_t lo = 0, hi = room;
        while (lo < hi) {
          const size_t mid = lo + (hi - lo) / 2;
          if (input_position(next_out_ + mid) < static_cast<double>(in_index_))
            lo = mid + 1;
          else
            hi = mid;
        }
        if (lo == 0) {
          flushed_ = true;
          break;
        }
        room = lo;
      }
      const int64_t buf_end = buf_start_ + static_cast<int64_t>(size_);
      const size_t m = outputs_within(buf_end - 1, room);
      if (m == 0) {
        if (!flushing) break;  // needs more input
        // Flush: input beyond the end counts as zero; pad for as many outputs as fit.
        compact(base_index(next_out_) - half + 1);
        const int64_t end = buf_start_ + static_cast<int64_t>(size_);
        const int64_t want = base_index(next_out_ + room - 1) + half + 1 - end;
        const int64_t need = std::min<int64_t>(want, static_cast<int64_t>(capacity_ - size_));
        std::fill_n(buf_.begin() + static_cast<ptrdiff_t>(size_), need, 0.0f);
        std::fill_n(flag_buf_.begin() + static_cast<ptrdiff_t>(size_), need, 0);
        size_ += static_cast<size_t>(need);
        zeros_padded_ += need;
        continue;
      }
      // The kernels read whole 16-tap blocks; the padding coefficients meet these zeros.
      std::fill_n(buf_.data() + size_, tap_block, 0.0f);
      compute(next_out_, m, out.data() + produced);
      if constexpr (with_flags) {
        uint8_t* fo = out_flags.data() + produced;
        // A flag window lies within its output's taps: nothing flagged since the first
        // output's taps began means all zero.
        if (last_flagged_ < base_index(next_out_) - half) {
          std::memset(fo, 0, m);
        } else {
          for (size_t i = 0; i < m; ++i) {
            uint8_t fl = 0;
            const uint64_t n = next_out_ + i;
            if (last_flagged_ >= base_index(n) - half) {
              const double t = input_position(n);
              const int64_t k_lo = std::max(static_cast<int64_t>(std::ceil(t - flag_reach_)), buf_start_);
              const int64_t k_hi = std::min(static_cast<int64_t>(std::floor(t + flag_reach_)), buf_end - 1);
              for (int64_t k = k_lo; k <= k_hi; ++k) fl |= flag_buf_[static_cast<size_t>(k - buf_start_)];
            }
            fo[i] = fl;
          }
        }
      }
      produced += m;
      next_out_ += m;
    }
    if (flushed_) return {consumed, produced};
    if (produced == out.size() || consumed == in.size() || flushing) break;
    const int64_t first_needed = base_index(next_out_) - half + 1;
    compact(first_needed);
    while (consumed < in.size() && size_ < capacity_) {
      const size_t remaining = in.size() - consumed;
      if (size_ == 0 && static_cast<int64_t>(in_index_) < first_needed) {
        // Input entirely before the first output's reach: consumed, never needed.
        const size_t skip = static_cast<size_t>(std::min<int64_t>(static_cast<int64_t>(remaining),
                                                                 first_needed - static_cast<int64_t>(in_index_)));
        consumed += skip;
        in_index_ += skip;
        buf_start_ = static_cast<int64_t>(in_index_);
        continue;
      }
      const size_t n = std::min(remaining, capacity_ - size_);
      const float* src = in.data() + consumed;
      // Exponent all ones = NaN or infinity; a branch-free test the compiler vectorizes.
      uint32_t non_finite = 0;
      for (size_t k = 0; k < n; ++k) {
        uint32_t u;
        std::memcpy(&u, src + k, sizeof u);
        non_finite |= static_cast<uint32_t>((u & 0x7f800000u) == 0x7f800000u);
      }
      if (non_finite)
        for (size_t k = 0; k < n; ++k)
          if (!std::isfinite(src[k]))
            throw_input("resampler", "input sample " + std::to_string(in_index_ + k) + " is not finite (" +
                                         std::to_string(src[k]) + ")");
      std::memcpy(buf_.data() + size_, src, n * sizeof(float));
      if constexpr (with_flags) {
        const uint8_t* fsrc = in_flags.data() + consumed;
        std::memcpy(flag_buf_.data() + size_, fsrc, n);
        uint8_t any = 0;
        for (size_t k = 0; k < n; ++k) any |= fsrc[k];
        if (any)
          for (size_t k = n; k-- > 0;)
            if (fsrc[k]) {
              last_flagged_ = static_cast<int64_t>(in_index_ + k);
              break;
            }
      }
      size_ += n;
      consumed += n;
      in_index_ += n;
    }
  }
  return {consumed, produced};
}

Progress Resampler::process(std::span<const float> in, std::span<float> out) {
  if (flushed_ && !in.empty()) throw_usage("resampler", "process() after flush(): call reset() first");
  return run<false>(in, {}, out, {}, false);
}

Progress Resampler::process(std::span<const float> in, std::span<const uint8_t> in_flags,
                            std::span<float> out, std::span<uint8_t> out_flags) {
  if (in_flags.size() != in.size() || out_flags.size() != out.size())
    throw_usage("resampler", "flag spans must have the sizes of the sample spans (in " +
                                 std::to_string(in.size()) + "/" + std::to_string(in_flags.size()) + ", out " +
                                 std::to_string(out.size()) + "/" + std::to_string(out_flags.size()) + ")");
  if (flushed_ && !in.empty()) throw_usage("resampler", "process() after flush(): call reset() first");
  return run<true>(in, in_flags, out, out_flags, false);
}

Progress Resampler::flush(std::span<float> out) { return run<false>({}, {}, out, {}, true); }

Progress Resampler::flush(std::span<float> out, std::span<uint8_t> out_flags) {
  if (out_flags.size() != out.size())
    throw_usage("resampler", "flag span must have the size of the sample span");
  return run<true>({}, {}, out, out_flags, true);
}

double Resampler::response(double f, double mu) const {
  const Filter& fl = *filter_;
  const int taps = spec_.taps;
  std::vector<double> c(static_cast<size_t>(taps));
  if (fl.exact) {
    // The exact path designs each of its phases with this same function.
    std::vector<double> scratch;
    design_row(std::clamp(mu, 0.0, 1.0), taps, spec_.cutoff, spec_.kaiser_beta, bessel_i0(spec_.kaiser_beta),
               i0_series_terms(spec_.kaiser_beta), c.data(), scratch);
  } else {
    const double scaled = std::clamp(mu, 0.0, 1.0) * spec_.phases;
    const int p = std::min(static_cast<int>(scaled), spec_.phases - 1);
    const double a = scaled - p;
    const float* row = fl.row(static_cast<size_t>(p));
    for (int jj = 0; jj < taps; ++jj) {
      const size_t b = static_cast<size_t>(jj) / tap_block, l = static_cast<size_t>(jj) % tap_block;
      c[static_cast<size_t>(jj)] = row[2 * tap_block * b + l] + a * row[2 * tap_block * b + tap_block + l];
    }
  }
  std::complex<double> acc = 0.0;
  for (int jj = 0; jj < taps; ++jj) acc += c[static_cast<size_t>(jj)] * std::polar(1.0, 2.0 * pi * f * (jj - taps / 2 + 1));
  return std::abs(acc);
}

FlagSpan map_span_to_output(const FlagSpan& span, double first_output_position, double ratio,
                            double reach) {
  if (!(ratio > 0.0)) throw_usage("map_span_to_output.ratio", "must be > 0");
  FlagSpan r{0, 0, span.kind};
  if (span.end <= span.start) return r;
  const double lo = (static_cast<double>(span.start) - reach - first_output_position) / ratio;
  const double hi = (static_cast<double>(span.end - 1) + reach - first_output_position) / ratio;
  const double n_lo = std::max(0.0, std::ceil(lo));
  const double n_hi = std::floor(hi);
  r.start = static_cast<uint64_t>(n_lo);
  r.end = n_hi < n_lo ? r.start : static_cast<uint64_t>(n_hi) + 1;
  return r;
}

}  // namespace salvor
#endif  // HWY_ONCE
