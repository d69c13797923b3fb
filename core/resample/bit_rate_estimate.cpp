#include "resample/bit_rate_estimate.hpp"

#include <fftw3.h>

#include <algorithm>
#include <cmath>
#include <cstring>

#include "common/error.hpp"

namespace salvor {
namespace {

constexpr double pi = 3.14159265358979323846;
constexpr double two_pi = 2.0 * pi;

bool is_power_of_two(int n) { return n > 0 && (n & (n - 1)) == 0; }

}  // namespace

// ---------------------------------------------------------------------------------------
// LineSpectrum

LineSpectrum::LineSpectrum(int segment_samples, int zero_pad) {
  if (!is_power_of_two(segment_samples) || segment_samples < 64 || segment_samples > 65536)
    throw_usage("bit_rate_estimate.segment_samples",
                "must be a power of two in [64, 65536], got " + std::to_string(segment_samples));
  if (zero_pad < 1 || zero_pad > 16)
    throw_usage("bit_rate_estimate.zero_pad", "must be in [1, 16], got " + std::to_string(zero_pad));
  segment_ = static_cast<size_t>(segment_samples);
  fft_size_ = segment_ * static_cast<size_t>(zero_pad);
  window_.resize(segment_);
  for (size_t i = 0; i < segment_; ++i)  // periodic Hann: 50 % overlap sums to a constant
    window_[i] = static_cast<float>(0.5 - 0.5 * std::cos(two_pi * static_cast<double>(i) / segment_));
  pending_.assign(segment_, 0.0f);
  stat_.assign(fft_size_ / 2 + 1, 0.0);
  fft_in_ = fftwf_alloc_real(fft_size_);
  auto* out = fftwf_alloc_complex(fft_size_ / 2 + 1);
  fft_out_ = out;
  if (!fft_in_ || !out) throw_internal("bit_rate_estimate: fftw allocation failed");
  plan_ = fftwf_plan_dft_r2c_1d(static_cast<int>(fft_size_), fft_in_, out, FFTW_ESTIMATE);
  if (!plan_) throw_internal("bit_rate_estimate: fftw plan creation failed");
}

LineSpectrum::~LineSpectrum() {
  if (plan_) fftwf_destroy_plan(static_cast<fftwf_plan>(plan_));
  fftwf_free(fft_in_);
  fftwf_free(fft_out_);
}

void LineSpectrum::reset() {
  pending_size_ = 0;
  std::fill(stat_.begin(), stat_.end(), 0.0);
  segments_ = 0;
}

void LineSpectrum::process(std::span<const float> in) {
  size_t pos = 0;
  while (pos < in.size()) {
    const size_t n = std::min(in.size() - pos, segment_ - pending_size_);
    std::memcpy(pending_.data() + pending_size_, in.data() + pos, n * sizeof(float));
    pending_size_ += n;
    pos += n;
    if (pending_size_ == segment_) {
      add_segment();
      const size_t half = segment_ / 2;
      std::memmove(pending_.data(), pending_.data() + half, half * sizeof(float));
      pending_size_ = half;
    }
  }
}

void LineSpectrum::add_segment() {
  for (size_t i = 0; i < segment_; ++i) fft_in_[i] = pending_[i] * window_[i];
  std::fill(fft_in_ + segment_, fft_in_ + fft_size_, 0.0f);
  fftwf_execute(static_cast<fftwf_plan>(plan_));
  const auto* out = static_cast<const fftwf_complex*>(fft_out_);
  double energy = 0.0;
  const size_t bins = fft_size_ / 2 + 1;
  for (size_t k = 0; k < bins; ++k) energy += static_cast<double>(out[k][0]) * out[k][0] + static_cast<double>(out[k][1]) * out[k][1];
  if (!(energy > 0.0)) return;
  for (size_t k = 0; k < bins; ++k) {
    const double p = (static_cast<double>(out[k][0]) * out[k][0] + static_cast<double>(out[k][1]) * out[k][1]) / energy;
    stat_[k] += p * p;
  }
  ++segments_;
}

LineSpectrum::Line LineSpectrum::find_line(double lo, double hi, double floor_lo, double floor_hi) const {
  const double n = static_cast<double>(fft_size_);
  const size_t last = stat_.size() - 1;
  auto bin = [&](double f, bool up) {
    const double b = up ? std::ceil(f * n) : std::floor(f * n);
    return static_cast<size_t>(std::clamp(b, 1.0, static_cast<double>(last - 1)));
  };
  const size_t k_lo = bin(lo, true), k_hi = std::max(k_lo, bin(hi, false));
  size_t k_max = k_lo;
  for (size_t k = k_lo; k <= k_hi; ++k)
    if (stat_[k] > stat_[k_max]) k_max = k;
  Line line;
  const double tiny = 1e-300;
  const double a = std::log(stat_[k_max - 1] + tiny), b = std::log(stat_[k_max] + tiny),
               c = std::log(stat_[k_max + 1] + tiny);
  const double den = a - 2.0 * b + c;
  double delta = den < 0.0 ? 0.5 * (a - c) / den : 0.0;
  delta = std::clamp(delta, -0.5, 0.5);
  line.cycles_per_sample = (static_cast<double>(k_max) + delta) / n;
  std::vector<double> band(stat_.begin() + static_cast<ptrdiff_t>(bin(floor_lo, true)),
                           stat_.begin() + static_cast<ptrdiff_t>(std::max(bin(floor_lo, true), bin(floor_hi, false)) + 1));
  std::nth_element(band.begin(), band.begin() + static_cast<ptrdiff_t>(band.size() / 2), band.end());
  const double floor = band[band.size() / 2];
  line.line_to_floor_db = 10.0 * std::log10((stat_[k_max] + tiny) / (floor + tiny));
  return line;
}

// ---------------------------------------------------------------------------------------
// PreambleToneFit

PreambleToneFit::PreambleToneFit(double f0, double min_preamble_bits, double threshold) {
  if (!(f0 > 0.0 && f0 < 0.5))
    throw_usage("bit_rate_estimate.line", "demodulation frequency must be in (0, 0.5) cycles per sample, got " +
                                               std::to_string(f0));
  if (!(min_preamble_bits >= 4.0))
    throw_usage("bit_rate_estimate.min_preamble_bits", "must be >= 4, got " + std::to_string(min_preamble_bits));
  if (!(threshold > 0.0 && threshold < 0.5))
    throw_usage("bit_rate_estimate.narrowband_threshold", "must be in (0, 0.5), got " + std::to_string(threshold));
  f0_ = f0;
  window_ = std::max<size_t>(4, static_cast<size_t>(std::lround(4.0 / f0)));
  trim_ = window_ / 2;
  const double samples_per_bit = 1.0 / (4.0 * f0);
  min_run_ = static_cast<size_t>(std::ceil(min_preamble_bits * samples_per_bit));
  min_run_ = std::max(min_run_, 2 * trim_ + 8);
  threshold_ = threshold;
  ring_re_.assign(window_, 0.0f);
  ring_im_.assign(window_, 0.0f);
  ring_pow_.assign(window_, 0.0f);
  tail_.assign(std::max<size_t>(1, trim_), 0.0);
  reset();
}

void PreambleToneFit::reset() {
  std::fill(ring_re_.begin(), ring_re_.end(), 0.0f);
  std::fill(ring_im_.begin(), ring_im_.end(), 0.0f);
  std::fill(ring_pow_.begin(), ring_pow_.end(), 0.0f);
  ring_pos_ = ring_fill_ = 0;
  sum_re_ = sum_im_ = sum_pow_ = 0.0;
  n_ = 0;
  in_run_ = false;
  run_len_ = 0;
  s_n_ = s_nn_ = s_p_ = s_np_ = 0.0;
  s_count_ = 0;
  pool_sxy_ = pool_sxx_ = 0.0;
  seg_f_sum_ = seg_f_sum2_ = 0.0;
  seg_count_ = 0;
  seg_samples_ = 0;
}

void PreambleToneFit::close_run() {
  in_run_ = false;
  if (run_len_ >= min_run_ && s_count_ >= 8) {
    const double c = static_cast<double>(s_count_);
    const double sxx = s_nn_ - s_n_ * s_n_ / c;
    const double sxy = s_np_ - s_n_ * s_p_ / c;
    if (sxx > 0.0) {
      pool_sxx_ += sxx;
      pool_sxy_ += sxy;
      const double f = f0_ + (sxy / sxx) / two_pi;
      seg_f_sum_ += f;
      seg_f_sum2_ += f * f;
      ++seg_count_;
      seg_samples_ += s_count_;
    }
  }
  run_len_ = 0;
  s_n_ = s_nn_ = s_p_ = s_np_ = 0.0;
  s_count_ = 0;
}

void PreambleToneFit::process(std::span<const float> in) {
  const double inv_w = 1.0 / static_cast<double>(window_);
  for (float x : in) {
    const double ph = two_pi * (f0_ * static_cast<double>(n_) - std::floor(f0_ * static_cast<double>(n_)));
    const float re = static_cast<float>(x * std::cos(ph));
    const float im = static_cast<float>(-x * std::sin(ph));
    const float pw = x * x;
    sum_re_ += re - ring_re_[ring_pos_];
    sum_im_ += im - ring_im_[ring_pos_];
    sum_pow_ += pw - ring_pow_[ring_pos_];
    ring_re_[ring_pos_] = re;
    ring_im_[ring_pos_] = im;
    ring_pow_[ring_pos_] = pw;
    if (++ring_pos_ == window_) {
      ring_pos_ = 0;  // recompute the sums once per window so rounding cannot accumulate
      sum_re_ = sum_im_ = sum_pow_ = 0.0;
      for (size_t i = 0; i < window_; ++i) {
        sum_re_ += ring_re_[i];
        sum_im_ += ring_im_[i];
        sum_pow_ += ring_pow_[i];
      }
    }
    ring_fill_ = std::min(ring_fill_ + 1, window_);
    ++n_;
    if (ring_fill_ < window_) continue;
    const double mag2 = sum_re_ * sum_re_ + sum_im_ * sum_im_;
    const bool narrow = sum_pow_ > 0.0 && mag2 * inv_w > threshold_ * sum_pow_;
    if (!narrow) {
      if (in_run_) close_run();
      continue;
    }
    const double phase = std::atan2(sum_im_, sum_re_);
    if (!in_run_) {
      in_run_ = true;
      run_len_ = 0;
      unwrap_ = phase;
    } else {
      unwrap_ += std::remainder(phase - prev_phase_, two_pi);
    }
    prev_phase_ = phase;
    // The run's phases pass through a trim_-long delay: the newest trim_ are held back
    // (dropped if the run ends), the first trim_ to come out are skipped.
    const size_t slot = static_cast<size_t>(run_len_ % tail_.size());
    if (run_len_ >= trim_) {
      const double old = tail_[slot];
      const uint64_t idx = run_len_ - trim_;  // position in the run of the sample leaving
      if (idx >= trim_) {
        const double t = static_cast<double>(idx);
        s_n_ += t;
        s_nn_ += t * t;
        s_p_ += old;
        s_np_ += t * old;
        ++s_count_;
      }
    }
    tail_[slot] = unwrap_;
    ++run_len_;
  }
}

void PreambleToneFit::finish() {
  if (in_run_) close_run();
}

double PreambleToneFit::line_cycles_per_sample() const {
  if (seg_count_ == 0 || !(pool_sxx_ > 0.0)) return f0_;
  return f0_ + (pool_sxy_ / pool_sxx_) / two_pi;
}

double PreambleToneFit::relative_std() const {
  if (seg_count_ < 2) return 0.0;
  const double k = static_cast<double>(seg_count_);
  const double mean = seg_f_sum_ / k;
  const double var = std::max(0.0, (seg_f_sum2_ - k * mean * mean) / (k - 1.0));
  return std::sqrt(var / k) / mean;
}

// ---------------------------------------------------------------------------------------

BitRateEstimate estimate_bit_rate(std::span<const float> samples, const BitRateEstimateConfig& c) {
  const std::string where = "bit_rate_estimate";
  if (!(c.sample_rate_hz > 0.0) || !std::isfinite(c.sample_rate_hz))
    throw_usage(where + ".sample_rate_hz", "must be a positive finite rate, got " + std::to_string(c.sample_rate_hz));
  if (!(c.nominal_bit_rate_hz >= 0.0) || !std::isfinite(c.nominal_bit_rate_hz))
    throw_usage(where + ".nominal_bit_rate_hz", "must be 0 (unknown) or a positive rate, got " +
                                                    std::to_string(c.nominal_bit_rate_hz));
  if (!(c.search_fraction > 0.0 && c.search_fraction <= 0.5))
    throw_usage(where + ".search_fraction", "must be in (0, 0.5], got " + std::to_string(c.search_fraction));
  if (!(c.min_samples_per_bit >= 1.2 && c.max_samples_per_bit > c.min_samples_per_bit && c.max_samples_per_bit <= 64.0))
    throw_usage(where + ".min_samples_per_bit", "need 1.2 <= min < max <= 64, got " +
                                                    std::to_string(c.min_samples_per_bit) + ", " +
                                                    std::to_string(c.max_samples_per_bit));
  for (size_t i = 0; i < samples.size(); ++i)
    if (!std::isfinite(samples[i]))
      throw_input(where, "sample " + std::to_string(i) + " is not finite (" + std::to_string(samples[i]) + ")");
  double lo, hi;
  if (c.nominal_bit_rate_hz > 0.0) {
    lo = c.nominal_bit_rate_hz * (1.0 - c.search_fraction) / (4.0 * c.sample_rate_hz);
    hi = c.nominal_bit_rate_hz * (1.0 + c.search_fraction) / (4.0 * c.sample_rate_hz);
    if (hi * 4.0 * 1.2 > 1.0)
      throw_usage(where + ".nominal_bit_rate_hz", "bit rate " + std::to_string(c.nominal_bit_rate_hz) +
                                                      " needs fewer than 1.2 samples per bit at " +
                                                      std::to_string(c.sample_rate_hz) + " Hz");
  } else {
    lo = 1.0 / (4.0 * c.max_samples_per_bit);
    hi = 1.0 / (4.0 * c.min_samples_per_bit);
  }
  const double floor_lo = 0.5 * lo, floor_hi = std::min(0.49, 1.5 * hi);

  BitRateEstimate r;
  LineSpectrum spectrum(c.segment_samples, c.zero_pad);
  if (samples.size() < static_cast<size_t>(c.segment_samples))
    throw_usage(where, "needs at least " + std::to_string(c.segment_samples) + " samples, got " +
                           std::to_string(samples.size()));
  spectrum.process(samples);
  const auto line = spectrum.find_line(lo, hi, floor_lo, floor_hi);
  r.coarse_bit_rate_hz = 4.0 * line.cycles_per_sample * c.sample_rate_hz;
  r.line_to_floor_db = line.line_to_floor_db;
  r.bit_rate_hz = r.coarse_bit_rate_hz;

  double f = line.cycles_per_sample;
  for (int pass = 0; pass < 2; ++pass) {
    PreambleToneFit fit(f, c.min_preamble_bits, c.narrowband_threshold);
    fit.process(samples);
    fit.finish();
    if (fit.segments() == 0) break;
    f = fit.line_cycles_per_sample();
    r.bit_rate_hz = 4.0 * f * c.sample_rate_hz;
    r.preamble_segments = fit.segments();
    r.preamble_samples = fit.segment_samples();
    r.relative_std = fit.relative_std();
  }
  return r;
}

double refine_bit_rate(double bit_rate_hz, double correction) {
  if (!(bit_rate_hz > 0.0) || !std::isfinite(bit_rate_hz))
    throw_usage("refine_bit_rate.bit_rate_hz", "must be a positive rate, got " + std::to_string(bit_rate_hz));
  if (!(std::abs(correction) < 0.1))
    throw_usage("refine_bit_rate.relative_frequency_correction",
                "must be within +-0.1, got " + std::to_string(correction));
  return bit_rate_hz * (1.0 + correction);
}

}  // namespace salvor
